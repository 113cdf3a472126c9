"""Stage 1: the model and its parsing."""

from .delays import delayed
from .model import Model, SymbolicModel
from .toml_loader import load_model, model_from_dict

__all__ = ["Model", "SymbolicModel", "delayed", "load_model", "model_from_dict"]
