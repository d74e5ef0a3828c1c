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

__version__ = "0.1.0"

try:  # the scikit-learn style estimators need scikit-learn (pip install 'sheetnet[test]' brings it)
    from sheetnet.estimator import SheetNetClassifier, SheetNetRegressor
except ImportError:  # pragma: no cover - depends on the environment
    SheetNetClassifier = SheetNetRegressor = None

__all__ = ["Activation", "Layer", "Model", "Scaling", "SheetNetClassifier", "SheetNetError", "SheetNetRegressor",
           "TrainSettings", "__version__", "audit_workbook", "build_workbook", "compare_learning_rates",
           "extract_model", "from_sklearn", "load_model", "report_html", "score", "settings", "train",
           "verify_workbook"]
