"""Picture of a simulation check: time series per state and a phase portrait."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from lyacomp.studies.verify import OUTCOME_WORDS, SimulationCheck

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
    # one state (a scalar delay equation) has no phase plane: the time series only
    columns = 2 if len(plane) == 2 else 1
    grid = fig.add_gridspec(rows, columns, width_ratios=[1.6, 1][:columns])
    axes = [fig.add_subplot(grid[i, 0]) for i in range(rows)]
    for ax in axes[1:]:
        ax.sharex(axes[0])

    for row, j in enumerate(shown):
        ax = axes[row]
        # the outside run is drawn first: the (smaller) inside run stays visible on top
        for run in reversed(check.runs):
            ax.plot(
                run.t,
                run.x[:, j] - check.equilibrium[j],
                color=RUN_COLOURS[run.label],
                lw=0.6,
                label=_RUN_WORDS[(check.criticality, run.label)],
            )
        amp = check.predicted_amplitude[j]
        for sign in (1, -1):
            ax.axhline(sign * amp, color=PREDICTION_COLOUR, ls="--", lw=1.0)
        ax.set_ylabel(f"{check.state_names[j]} - equilibrium")
    axes[-1].set_xlabel("time")
    axes[0].set_title("time series (dashed: predicted amplitude)", fontsize=10)
    if columns == 2:
        handles = _phase_portrait(fig.add_subplot(grid[:, 1]), check, plane)
        fig.legend(handles=handles, loc="outside lower center", ncol=2, fontsize=8, frameon=False)
    else:
        fig.legend(loc="outside lower center", ncol=2, fontsize=8, frameon=False)

    fig.suptitle(_title(check), fontsize=10)
    path = Path(path)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def _phase_portrait(phase, check: SimulationCheck, plane: np.ndarray) -> list:
    """The runs and the predicted cycle in the plane of the two most active states."""
    handles = []
    settled = check.criticality == "supercritical"
    for run in check.runs:
        colour = RUN_COLOURS[run.label]
        label = _RUN_WORDS[(check.criticality, run.label)]
        if settled:
            # the transient faint, the last period strong: the settled cycle stands out
            phase.plot(run.x[:, plane[0]], run.x[:, plane[1]], color=colour, lw=0.4, alpha=0.35)
            last = run.t >= run.t[-1] - check.predicted_period
            label += "; bold: last period"
        else:
            last = slice(None)
        (line,) = phase.plot(
            run.x[last, plane[0]],
            run.x[last, plane[1]],
            color=colour,
            lw=1.8 if settled else 0.6,
            label=label,
        )
        handles.append(line)
        if not settled:
            phase.plot(run.x[-1, plane[0]], run.x[-1, plane[1]], "o", color=colour, ms=6)
    if not settled:
        handles.append(
            phase.plot([], [], "o", color="#777777", ms=6, label="where the run stopped")[0]
        )
    (pred,) = phase.plot(
        check.predicted_cycle[:, plane[0]],
        check.predicted_cycle[:, plane[1]],
        color=PREDICTION_COLOUR,
        ls="--",
        lw=1.4,
        label="predicted cycle and amplitude (normal form)",
    )
    (eq,) = phase.plot(
        check.equilibrium[plane[0]], check.equilibrium[plane[1]], "kx", ms=8, label="equilibrium"
    )
    handles += [pred, eq]
    phase.set_xlabel(check.state_names[plane[0]])
    phase.set_ylabel(check.state_names[plane[1]])
    phase.set_title("phase portrait of the two most active states", fontsize=10)
    return handles


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
    outcomes = ", ".join(
        f"from {run.label}: {OUTCOME_WORDS[run.outcome]} (t = {run.t_end:.3g})"
        for run in check.runs
    )
    return f"{head}\n{outcomes}"
