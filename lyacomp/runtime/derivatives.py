"""Exact parameter derivatives: from the C structs to Python mappings and numpy arrays."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

SCALAR_QUANTITIES = ("l1", "critical_value", "omega")
"""The scalar results that come with derivatives (besides the equilibrium)."""


def derivatives_of(der: Any, parameters: tuple[str, ...], ev: Any) -> dict[str, dict] | None:
    """``{quantity: {parameter: value}}`` from one C derivatives struct (None if missing).

    ``"equilibrium"`` maps to ``{state: {parameter: value}}``; the bifurcation parameter is
    left out (it is solved for).
    """
    if der.status != 0:
        return None
    keep = [(k, name) for k, name in enumerate(parameters) if name != ev.bifurcation]
    out: dict[str, dict] = {
        q: {name: float(getattr(der, q)[k]) for k, name in keep} for q in SCALAR_QUANTITIES
    }
    n = len(ev.states)
    out["equilibrium"] = {
        state: {name: float(der.equilibrium[k * n + j]) for k, name in keep}
        for j, state in enumerate(ev.states)
    }
    return out


def batch_derivative_struct(ffi: Any, arrays: dict[str, np.ndarray]) -> Any:
    """The C struct on the derivative output arrays (parameter-major, as the driver fills
    them: ``BatchBuffers.derivative_outputs``)."""
    c_der = ffi.new("lyc_batch_derivatives *")
    if arrays["status"].size:
        c_der.status = ffi.cast("int *", ffi.from_buffer(arrays["status"]))
        for key in (*SCALAR_QUANTITIES, "equilibrium"):
            setattr(c_der, key, ffi.cast("double *", ffi.from_buffer(arrays[key])))
    return c_der


def _kept_rows(buffer: np.ndarray, keep: list[int]) -> np.ndarray:
    """The rows ``keep`` of a parameter-major buffer: a view when they are one run (the
    bifurcation parameter first or last), which spares a copy of every output."""
    if keep and keep == list(range(keep[0], keep[0] + len(keep))):
        return buffer[keep[0] : keep[0] + len(keep)]
    return buffer[keep]


def batch_derivatives(
    arrays: dict[str, np.ndarray], keep: list[int], shape: tuple[int, ...]
) -> dict[str, np.ndarray]:
    """Arrays shaped ``shape + (parameters,)`` (``+ (parameters, states)`` for the
    equilibrium) from the parameter-major buffers; NaN where derivatives are missing."""
    missing = arrays["status"] != 0
    out = {}
    for q in SCALAR_QUANTITIES:
        a = _kept_rows(arrays[q], keep).T  # the buffers of this call (fresh or out=)
        a[missing] = math.nan
        out[q] = a.reshape(shape + (len(keep),))
    eq = np.moveaxis(_kept_rows(arrays["equilibrium"], keep), -1, 0)
    eq[missing] = math.nan
    out["equilibrium"] = eq.reshape(shape + eq.shape[1:])
    return out
