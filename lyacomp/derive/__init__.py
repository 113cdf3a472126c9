"""Stage 2: symbolic derivation."""

from .derivatives import Derivatives, derive
from .sensitivity import SensitivityDerivatives, derive_sensitivity

__all__ = ["Derivatives", "SensitivityDerivatives", "derive", "derive_sensitivity"]
