"""Picture of a simulation check: time series per state and a phase portrait."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from lyacomp.studies.verify import SimulationCheck

#: Our own colour choices: blue and orange stay distinct under the common colour-vision
#: deficiencies; the prediction is drawn in black dashes so it never relies on hue.
RUN_COLOURS = {"inside": "#1f5fa8", "outside": "#d9730d"}
PREDICTION_COLOUR = "#000000"
MAX_STATE_ROWS = 4

_RUN_WORDS = {
    ("supercritical", "inside"): "simulation (started inside the predicted cycle)",
    ("subcritical", "inside"): "started just inside the predicted unstable cycle",
    ("subcritical", "outside"): "started just outside the predicted unstable cycle",
}


def plot_simulation_check(check: SimulationCheck, path: str | Path) -> Path:
    """Write a PNG with the time series of the (up to four) most active states, each with
    its predicted amplitude band, and a phase portrait with the predicted cycle."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    order = np.argsort(-check.predicted_amplitude)
    shown = order[:MAX_STATE_ROWS]
    plane = order[:2]
    rows = len(shown)
    fig = plt.figure(figsize=(11, 2.1 * rows + 1.6), layout="constrained")
    grid = fig.add_gridspec(rows, 2, width_ratios=[1.6, 1])
    axes = [fig.add_subplot(grid[i, 0]) for i in range(rows)]
    for ax in axes[1:]:
        ax.sharex(axes[0])
    phase = fig.add_subplot(grid[:, 1])

    for row, j in enumerate(shown):
        ax = axes[row]
        for run in check.runs:
            ax.plot(
                run.t,
                run.x[:, j] - check.equilibrium[j],
                color=RUN_COLOURS[run.label],
                lw=0.6,
                label=_RUN_WORDS[(check.criticality, run.label)],
            )
        amp = check.predicted_amplitude[j]
        for sign in (1, -1):
            ax.axhline(
                sign * amp,
                color=PREDICTION_COLOUR,
                ls="--",
                lw=1.0,
                label="predicted amplitude" if sign == 1 else None,
            )
        ax.set_ylabel(f"{check.state_names[j]} - equilibrium")
    axes[-1].set_xlabel("time")
    axes[0].legend(loc="upper right", fontsize=8, framealpha=0.9)

    for run in check.runs:
        phase.plot(
            run.x[:, plane[0]],
            run.x[:, plane[1]],
            color=RUN_COLOURS[run.label],
            lw=0.5,
            label=_RUN_WORDS[(check.criticality, run.label)],
        )
    phase.plot(
        check.predicted_cycle[:, plane[0]],
        check.predicted_cycle[:, plane[1]],
        color=PREDICTION_COLOUR,
        ls="--",
        lw=1.4,
        label="predicted cycle (normal form)",
    )
    phase.plot(
        check.equilibrium[plane[0]],
        check.equilibrium[plane[1]],
        "kx",
        ms=8,
        label="equilibrium",
    )
    phase.set_xlabel(check.state_names[plane[0]])
    phase.set_ylabel(check.state_names[plane[1]])
    phase.set_title("phase portrait", fontsize=10)
    phase.legend(loc="lower right", fontsize=7, framealpha=0.9)

    fig.suptitle(_title(check), fontsize=10)
    path = Path(path)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def _title(check: SimulationCheck) -> str:
    head = (
        f"{check.model}: {check.criticality} onset, simulated at "
        f"{check.bifurcation} = {check.value:.6g} (onset {check.critical_value:.6g})"
    )
    if check.measured is not None:
        j = int(np.argmax(check.predicted_amplitude))
        measured = check.measured.amplitude[j]
        return (
            f"{head}\n{check.state_names[j]} amplitude: measured {measured:.4g}, "
            f"predicted {check.predicted_amplitude[j]:.4g}; period: measured "
            f"{check.measured.period:.4g}, predicted {check.predicted_period:.4g}"
        )
    outcomes = ", ".join(f"{run.label}: {run.outcome} at t = {run.t_end:.3g}" for run in check.runs)
    return f"{head}\n{outcomes}"
