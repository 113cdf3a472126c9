"""Stage 6: the runtime shim."""

from .batch_buffers import BatchBuffers
from .evaluator import Evaluator, Tolerances
from .results import CAUTION, BatchResult, HopfResult

__all__ = ["CAUTION", "BatchBuffers", "BatchResult", "Evaluator", "HopfResult", "Tolerances"]
