"""ONNX in and out (optional extra: pip install 'sheetnet[onnx]'): graph_in reads a graph's network as
plain data, convert makes it a model, graph_out writes a model as a graph."""
