"""sheetnet: small feed-forward networks as live spreadsheet formulas.

Train with the numpy reference trainer, write an .xlsx whose every weighted sum, activation,
delta, gradient and update is a cell formula, re-evaluate it independently, and audit edits.
"""

from sheetnet.api import (
    audit_workbook,
    build_workbook,
    compare_learning_rates,
    extract_model,
    report_html,
    score,
    settings,
    train,
    verify_workbook,
)
from sheetnet.errors import SheetNetError
from sheetnet.interop import from_sklearn
from sheetnet.net.activations import Activation
from sheetnet.net.model import Layer, Model, Scaling, load_model
from sheetnet.net.train import TrainSettings
from sheetnet.onnxio.convert import from_onnx
from sheetnet.version import __version__

_ESTIMATORS = ("SheetNetClassifier", "SheetNetRegressor")


def __getattr__(name: str):
    """The scikit-learn style estimators load scikit-learn, which takes about a second: they are imported
    on first use, so the command line and the rest of the API start without it (PEP 562)."""
    if name in _ESTIMATORS:
        from sheetnet import estimator

        return getattr(estimator, name)
    raise AttributeError(f"module 'sheetnet' has no attribute {name!r}")

__all__ = ["Activation", "Layer", "Model", "Scaling", "SheetNetClassifier", "SheetNetError", "SheetNetRegressor",
           "TrainSettings", "__version__", "audit_workbook", "build_workbook", "compare_learning_rates",
           "extract_model", "from_onnx", "from_sklearn", "load_model", "report_html", "score", "settings", "train",
           "verify_workbook"]
