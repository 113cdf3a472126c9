"""Picture of a parameter-plane map: onset type per grid point, the located l1 = 0 curve,
and the critical value of the bifurcation parameter."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from lyacomp.studies.maps import ParameterMap, PointClass

#: Our own colour choices. Soft and hard onset are blue and orange, which stay apart
#: under the common colour-vision deficiencies; the other classes are greys, a dark
#: purple, a magenta (another Hopf branch) and a pale teal (Hopf point on an already
#: unstable equilibrium), set apart from both in hue or lightness.
CLASS_COLOURS = {
    PointClass.NO_HOPF: "#e4e4e4",
    PointClass.SUPERCRITICAL: "#2f6db0",
    PointClass.SUBCRITICAL: "#f0a04b",
    PointClass.DEGENERATE: "#5b2a86",
    PointClass.SOLVER_FAILURE: "#555555",
    PointClass.BRANCH_CHANGE: "#d6336c",
    PointClass.UNSTABLE_EQUILIBRIUM: "#9fd8c8",
}
CURVE_COLOUR = "#000000"


def plot_map(
    pmap: ParameterMap,
    path: str | Path,
    title: str | None = None,
    mark: tuple[float, float] | None = None,
) -> Path:
    """Write a PNG: left, the onset type of every grid point with the located l1 = 0
    points; right, the critical value of the bifurcation parameter (where found).
    ``mark`` (x, y) draws the nominal design as a star."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    from matplotlib.colors import BoundaryNorm, ListedColormap
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    xs, ys = pmap.x.values, pmap.y.values
    fig, (left, right) = plt.subplots(1, 2, figsize=(12.5, 5.4), layout="constrained")

    codes = list(PointClass)
    cmap = ListedColormap([CLASS_COLOURS[c] for c in codes])
    norm = BoundaryNorm(np.arange(len(codes) + 1) - 0.5, cmap.N)
    left.pcolormesh(xs, ys, pmap.classes, cmap=cmap, norm=norm, shading="nearest")
    counts = pmap.counts()
    handles = [
        Patch(
            facecolor=CLASS_COLOURS[c], edgecolor="#888888", label=f"{c.words} ({counts[c.words]})"
        )
        for c in codes
        if counts[c.words] > 0
    ]
    if len(pmap.curve):
        for ax in (left, right):
            ax.plot(pmap.curve[:, 0], pmap.curve[:, 1], "o", color=CURVE_COLOUR, ms=2.2, lw=0)
        handles.append(
            Line2D(
                [],
                [],
                color=CURVE_COLOUR,
                marker="o",
                ms=4,
                lw=0,
                label="l1 = 0, located by root finding",
            )
        )
    if len(pmap.traced):
        for ax in (left, right):
            ax.plot(pmap.traced[:, 0], pmap.traced[:, 1], "-", color=CURVE_COLOUR, lw=1.2)
        handles.append(
            Line2D([], [], color=CURVE_COLOUR, lw=1.2, label="l1 = 0, traced (predictor-corrector)")
        )
    if mark is not None:
        for ax in (left, right):
            ax.plot(*mark, marker="*", ms=15, color="#ffffff", mec="#000000", mew=1.2, lw=0)
        handles.append(
            Line2D(
                [],
                [],
                marker="*",
                ms=11,
                color="#ffffff",
                mec="#000000",
                lw=0,
                label="nominal design",
            )
        )
    left.legend(
        handles=handles,
        loc="upper center",
        bbox_to_anchor=(0.5, -0.12),
        ncol=2,
        fontsize=8,
        frameon=False,
    )
    left.set_title("onset type (grid points)", fontsize=10)

    crit = np.ma.masked_invalid(pmap.critical_value)
    if crit.count():
        mesh = right.pcolormesh(xs, ys, crit, cmap="viridis", shading="nearest")
        fig.colorbar(mesh, ax=right, label=f"critical value of {pmap.bifurcation or 'onset'}")
    right.set_title("onset (critical value) where a Hopf point was found", fontsize=10)

    for ax in (left, right):
        ax.set_xlabel(pmap.x.name)
        ax.set_ylabel(pmap.y.name)
        ax.set_xlim(pmap.x.lo - pmap.x.step / 2, pmap.x.hi + pmap.x.step / 2)
        ax.set_ylim(pmap.y.lo - pmap.y.step / 2, pmap.y.hi + pmap.y.step / 2)
    fixed = ", ".join(f"{k} = {v:.4g}" for k, v in pmap.fixed.items())
    heading = title or "onset map"
    fig.suptitle(heading + (f"  ({fixed})" if fixed else ""), fontsize=11)
    path = Path(path)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path
