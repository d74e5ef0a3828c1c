"""sheetnet: small feed-forward networks as live spreadsheet formulas.

Train with the numpy reference trainer, write an .xlsx whose every weighted sum, activation,
delta, gradient and update is a cell formula, re-evaluate it independently, and audit edits.
"""

from sheetnet.errors import SheetNetError
from sheetnet.interop import from_sklearn
from sheetnet.net.activations import Activation
from sheetnet.net.model import Layer, Model, Scaling, load_model
from sheetnet.net.train import TrainSettings

__version__ = "0.1.0"

__all__ = ["Activation", "Layer", "Model", "Scaling", "SheetNetError", "TrainSettings", "__version__", "from_sklearn",
           "load_model"]
