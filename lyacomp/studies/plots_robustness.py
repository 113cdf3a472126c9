"""Pictures of a robustness study: the spread of l1 and what drives it.

Drawn on a bare Agg canvas (no pyplot), so a user's interactive backend is left
alone. Blue for soft onset and orange for hard onset differ in hue and in
lightness, which keeps them apart for the common forms of colour blindness.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from lyacomp.errors import StudyError
from lyacomp.studies.robustness import RobustnessResult

SOFT = "#1d5f8a"
HARD = "#d9822b"
HARD_SHADE = "#f7e0c6"
NEUTRAL = "#4d4d4d"
_MAX_POINTS = 20_000  # more points only blacken the scatter panel


def plot_robustness(result: RobustnessResult, path: str | Path) -> Path:
    """Write a PNG: histogram of l1 with the hard-onset side shaded, and l1 against
    the top-ranked uncertain parameter. Returns the path written."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise StudyError(
            "plots need matplotlib; install it with `pip install lyacomp[studies]`"
        ) from exc
    path = Path(path)
    if not path.parent.is_dir():
        raise StudyError(f"cannot write '{path}': folder '{path.parent}' does not exist")

    fig = Figure(figsize=(11, 4.4), layout="constrained")
    FigureCanvasAgg(fig)
    ax_hist, ax_scatter = fig.subplots(1, 2)
    l1 = result.kept.get("l1", np.empty(0))
    l1 = l1[np.isfinite(l1)]
    if len(l1) == 0:
        for ax in (ax_hist, ax_scatter):
            ax.text(
                0.5,
                0.5,
                "no sample had a usable Hopf point",
                ha="center",
                va="center",
                transform=ax.transAxes,
            )
            ax.set_axis_off()
    else:
        _histogram(ax_hist, l1, result)
        _scatter(ax_scatter, result)
    lo, hi = result.interval
    note = " (interrupted)" if result.interrupted else ""
    fig.suptitle(
        f"{result.model}: P(hard onset) = {result.probability_subcritical:.3g}"
        f"  [{lo:.3g}, {hi:.3g}] ({100 * result.confidence:g}% Wilson),"
        f" {result.ok} of {result.samples} samples with a Hopf point{note}"
    )
    fig.savefig(path, dpi=120)
    return path


def _histogram(ax, l1: np.ndarray, result: RobustnessResult) -> None:
    lo, hi = np.quantile(l1, [0.001, 0.999])
    lo, hi = min(lo, 0.0), max(hi, 0.0)
    # Bin edges on a grid through 0, so no bar mixes the two sides.
    width = (hi - lo) / 80 or 1.0
    bins = np.arange(np.floor(lo / width) - 1, np.ceil(hi / width) + 2) * width
    ax.axvspan(
        0.0, bins[-1], color=HARD_SHADE, zorder=0, label="hard-onset side (l1 > 0, subcritical)"
    )
    ax.hist(l1[l1 <= 0.0], bins=bins, color=SOFT, label="soft onset (l1 < 0, supercritical)")
    ax.hist(l1[l1 > 0.0], bins=bins, color=HARD, label="hard onset (l1 > 0, subcritical)")
    ax.axvline(0.0, color=NEUTRAL, linewidth=1.0)
    ax.set_xlim(bins[0], bins[-1])
    ax.set_xlabel("first Lyapunov coefficient l1")
    ax.set_ylabel("number of samples")
    shown = "" if result.quantile_basis == result.ok else f" (random subset of {len(l1)})"
    ax.set_title(f"Spread of l1{shown}")
    ax.set_ylim(0.0, 1.45 * ax.get_ylim()[1])  # room for the legend above the bars
    ax.legend(loc="upper left", fontsize="small")


def _scatter(ax, result: RobustnessResult) -> None:
    top = result.ranking[0].name if result.ranking else result.uncertain[0]
    column = top if top in result.kept else f"input_{top}"
    x, l1 = result.kept[column], result.kept["l1"]
    if len(x) > _MAX_POINTS:
        # Every kept sample is already a uniform random pick, so the first ones will do.
        x, l1 = x[:_MAX_POINTS], l1[:_MAX_POINTS]
    hard = l1 > 0.0
    style = {"s": 4, "alpha": 0.5, "linewidths": 0, "rasterized": True}
    ax.scatter(x[~hard], l1[~hard], color=SOFT, label="soft onset (supercritical)", **style)
    ax.scatter(x[hard], l1[hard], color=HARD, label="hard onset (subcritical)", **style)
    ax.axhline(0.0, color=NEUTRAL, linewidth=1.0)
    ax.set_xlabel(f"{top} (top-ranked uncertain parameter)")
    ax.set_ylabel("first Lyapunov coefficient l1")
    driver = next((d for d in result.ranking if d.name == top), None)
    if driver is not None:
        ax.set_title(f"l1 against {top}: rank correlation {driver.spearman:+.2f}")
    low, high = ax.get_ylim()
    ax.set_ylim(low, high + 0.3 * (high - low))  # room for the legend
    ax.legend(loc="upper left", fontsize="small", markerscale=3)
