"""lyacomp: compile a symbolic model into C that classifies Hopf onsets.

Public API: :func:`load_model`, :class:`Model`, :func:`compile`, :class:`Evaluator`,
:class:`HopfResult`, :class:`BatchResult`, :class:`Status`, :class:`Criticality`.
"""

from ._version import __version__
from .config import BuildConfig
from .errors import (
    BuildError,
    CompilerNotFoundError,
    DelayError,
    EvaluationError,
    LyacompError,
    ModelError,
    StudyError,
)
from .model import Model, delayed, load_model
from .pipeline import compile_model as compile
from .pipeline import generate
from .runtime import CAUTION, BatchBuffers, BatchResult, Evaluator, HopfResult, Tolerances
from .status import Criticality, Status

__all__ = [
    "CAUTION",
    "BatchBuffers",
    "BatchResult",
    "BuildConfig",
    "BuildError",
    "CompilerNotFoundError",
    "Criticality",
    "DelayError",
    "EvaluationError",
    "Evaluator",
    "HopfResult",
    "LyacompError",
    "Model",
    "ModelError",
    "Status",
    "StudyError",
    "Tolerances",
    "__version__",
    "compile",
    "delayed",
    "generate",
    "load_model",
]
