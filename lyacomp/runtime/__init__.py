"""Stage 6: the runtime shim."""

from .evaluator import Evaluator, Tolerances
from .results import CAUTION, BatchResult, HopfResult

__all__ = ["CAUTION", "BatchResult", "Evaluator", "HopfResult", "Tolerances"]
