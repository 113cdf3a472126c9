"""Choosing between the two searches, and the directions of the operating-point search."""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import EvaluationError
from ..model.model import DIRECTIONS

SEARCHES = ("guess", "operating")
"""``search=`` words: Newton from the starting guesses, or the equilibrium followed from a
stable operating value to its first loss of stability."""


def chosen_search(ev: Any, search: str | None, operating: Any) -> str:
    """The search a call runs: ``search`` when given, else "operating" when the call or the
    model gives an operating value, else "guess". Refuses what cannot run."""
    if search is not None and search not in SEARCHES:
        raise EvaluationError(f"search must be one of {list(SEARCHES)}, got {search!r}")
    has_operating = operating is not None or ev.model.operating is not None
    method = search or ("operating" if has_operating else "guess")
    if method == "guess":
        if operating is not None:
            raise EvaluationError(
                "an operating value was given with search='guess'; the guess-based search "
                "does not use it (drop one of them)"
            )
        return method
    if ev.bifurcation is None:
        raise EvaluationError(
            "the operating-point search moves the bifurcation parameter; this model "
            "declares none ([bifurcation] parameter)"
        )
    if ev.model.critical_value is not None:
        raise EvaluationError(
            "this model gives its critical value in closed form; the operating-point search "
            "is not needed (use search='guess')"
        )
    if not has_operating:
        raise EvaluationError(
            "search='operating' needs an operating value: declare [bifurcation] operating "
            "in the model or pass operating=VALUE (lyacomp eval: --operating VALUE)"
        )
    return method


def directions(ev: Any, guess: np.ndarray, operating: np.ndarray) -> np.ndarray:
    """+1/-1 per sample: the model's direction, else toward the parameter's guess."""
    word = ev.model.direction
    if word is not None:
        return np.full(operating.shape, DIRECTIONS[word], dtype=np.int8)
    same = guess == operating
    if same.any():
        where = int(np.flatnonzero(same.reshape(-1))[0])
        raise EvaluationError(
            f"cannot tell which way to move {ev.bifurcation} from the operating value "
            f"{float(operating.reshape(-1)[where]):g}: its guess is the same value"
            + (f" (sample {where})" if operating.size > 1 else "")
            + '; declare [bifurcation] direction = "up" or "down", or give a guess '
            "on the side where stability is lost"
        )
    return np.where(guess > operating, 1, -1).astype(np.int8)


def check_finite(operating: np.ndarray) -> np.ndarray:
    """The operating values, when all are finite."""
    if not np.isfinite(operating).all():
        raise EvaluationError("operating values must be finite numbers")
    return operating


def word(direction: int) -> str:
    """The direction word of +1 / -1."""
    return "up" if direction > 0 else "down"
