"""ONNX in and out (optional extra: pip install 'sheetnet[onnx]'): graph_in reads a graph's network as
plain data, convert makes it a model, graph_out writes a model as a graph."""

from __future__ import annotations

from sheetnet.errors import UsageError


def require_onnx():
    """The onnx module, or a one-line error saying how to install it."""
    try:
        import onnx  # lazy: onnx is an optional extra, needed only when a graph is read or written
    except ImportError:
        raise UsageError("ONNX support needs the onnx package: pip install 'sheetnet[onnx]'") from None
    return onnx
