"""Picture of a simulation check: time series per state and a phase portrait, for every
simulated offset."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from lyacomp.studies.verify import OUTCOME_WORDS, OffsetRun, SimulationCheck, SimulationRun

#: Our own colour choices: blue and orange stay distinct under the common colour-vision
#: deficiencies; the prediction is drawn in black (dashed at the farther offset, dotted at
#: the closer one) so it never relies on hue.
FAR_COLOUR = "#1f5fa8"
NEAR_COLOUR = "#d9730d"
RUN_COLOURS = {"inside": FAR_COLOUR, "outside": NEAR_COLOUR}
PREDICTION_COLOUR = "#000000"
#: Line styles of the predictions at the farther and at the closer offset.
OFFSET_STYLES = ("--", ":")
MAX_STATE_ROWS = 4

_RUN_WORDS = {
    ("subcritical", "inside"): "started just inside the predicted unstable cycle",
    ("subcritical", "outside"): "started just outside the predicted unstable cycle",
}


@dataclass(frozen=True)
class _Trace:
    """One run as drawn: its samples, colour, legend text, and the offset it belongs to
    (its equilibrium and predictions)."""

    run: SimulationRun
    colour: str
    words: str
    where: OffsetRun
    style: str


def _offsets(check: SimulationCheck) -> list[OffsetRun]:
    """The simulated offsets, the farther first."""
    return [check.far] + ([check.closer] if check.closer is not None else [])


def _traces(check: SimulationCheck) -> list[_Trace]:
    """Every run of the check; the closer offset's run (supercritical) after the farther."""
    if check.criticality == "subcritical":
        return [
            _Trace(
                run,
                RUN_COLOURS[run.label],
                _RUN_WORDS[("subcritical", run.label)],
                check.far,
                "--",
            )
            for run in check.runs
        ]
    traces = []
    for where, colour, style, words in zip(
        _offsets(check),
        (FAR_COLOUR, NEAR_COLOUR),
        OFFSET_STYLES,
        ("", " (closer to onset)"),
        strict=False,
    ):
        traces += [
            _Trace(run, colour, f"simulation at offset {where.offset:+.3g}{words}", where, style)
            for run in where.runs
        ]
    return traces


def plot_simulation_check(check: SimulationCheck, path: str | Path) -> Path:
    """Write a PNG with the time series of the (up to four) most active states, each with
    its predicted amplitude band at every offset, and a phase portrait with the predicted
    cycles."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    order = np.argsort(-check.predicted_amplitude)
    shown = order[:MAX_STATE_ROWS]
    plane = order[:2]
    rows = len(shown)
    traces = _traces(check)
    fig = plt.figure(figsize=(11, 2.1 * rows + 1.9), layout="constrained")
    # one state (a scalar delay equation) has no phase plane: the time series only
    columns = 2 if len(plane) == 2 else 1
    grid = fig.add_gridspec(rows, columns, width_ratios=[1.6, 1][:columns])
    axes = [fig.add_subplot(grid[i, 0]) for i in range(rows)]
    for ax in axes[1:]:
        ax.sharex(axes[0])

    for row, j in enumerate(shown):
        ax = axes[row]
        # drawn last first: the inside run of a subcritical check and the farther offset's
        # (larger) cycle stay visible on top of the longer runs
        for trace in reversed(traces):
            ax.plot(
                trace.run.t,
                trace.run.x[:, j] - trace.where.equilibrium[j],
                color=trace.colour,
                lw=0.6,
                label=trace.words,
            )
        for where, style in zip(_offsets(check), OFFSET_STYLES, strict=False):
            for sign in (1, -1):
                ax.axhline(
                    sign * where.predicted_amplitude[j], color=PREDICTION_COLOUR, ls=style, lw=1.0
                )
        ax.set_ylabel(f"{check.state_names[j]} - equilibrium")
    axes[-1].set_xlabel("time")
    title = "time series (black: predicted amplitude"
    title += ", dashed / dotted: farther / closer offset)" if check.closer else ")"
    axes[0].set_title(title, fontsize=10)
    if columns == 2:
        handles = _phase_portrait(fig.add_subplot(grid[:, 1]), check, traces, plane)
        fig.legend(handles=handles, loc="outside lower center", ncol=2, fontsize=8, frameon=False)
    else:
        fig.legend(loc="outside lower center", ncol=2, fontsize=8, frameon=False)

    fig.suptitle(_title(check), fontsize=10)
    path = Path(path)
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return path


def _phase_portrait(phase, check: SimulationCheck, traces: list[_Trace], plane) -> list:
    """The runs and the predicted cycles in the plane of the two most active states."""
    handles = []
    settled = check.criticality == "supercritical"
    a, b = plane
    for trace in traces:
        run, label = trace.run, trace.words
        if settled:
            # the transient faint, the last period strong: the settled cycle stands out
            phase.plot(run.x[:, a], run.x[:, b], color=trace.colour, lw=0.4, alpha=0.35)
            last = run.t >= run.t[-1] - check.predicted_period
            label += "; bold: last period"
        else:
            last = slice(None)
        (line,) = phase.plot(
            run.x[last, a],
            run.x[last, b],
            color=trace.colour,
            lw=1.8 if settled else 0.6,
            label=label,
        )
        handles.append(line)
        if not settled:
            phase.plot(run.x[-1, a], run.x[-1, b], "o", color=trace.colour, ms=6)
    if not settled:
        handles.append(
            phase.plot([], [], "o", color="#777777", ms=6, label="where the run stopped")[0]
        )
    offsets = _offsets(check)
    for k, (where, style) in enumerate(zip(offsets, OFFSET_STYLES, strict=False)):
        (pred,) = phase.plot(
            where.predicted_cycle[:, a],
            where.predicted_cycle[:, b],
            color=PREDICTION_COLOUR,
            ls=style,
            lw=1.4,
            label=_cycle_words(k, len(offsets)),
        )
        handles.append(pred)
    (eq,) = phase.plot(check.equilibrium[a], check.equilibrium[b], "kx", ms=8, label="equilibrium")
    handles.append(eq)
    phase.set_xlabel(check.state_names[a])
    phase.set_ylabel(check.state_names[b])
    phase.set_title("phase portrait of the two most active states", fontsize=10)
    return handles


def _cycle_words(k: int, count: int) -> str:
    if count == 1:
        return "predicted cycle (normal form)"
    return "predicted cycle (normal form) at the " + ("closer" if k else "farther") + " offset"


def _title(check: SimulationCheck) -> str:
    head = (
        f"{check.model}: {check.criticality} onset at {check.bifurcation} = "
        f"{check.critical_value:.6g}, simulated at {check.value:.6g}"
    )
    if check.closer is not None:
        head += f" and {check.closer.value:.6g}"
    if check.measured is None:
        outcomes = ", ".join(
            f"from {run.label}: {OUTCOME_WORDS[run.outcome]} (t = {run.t_end:.3g})"
            for run in check.runs
        )
        return f"{head}\n{outcomes}"
    j = check.main_state
    name = check.state_names[j]
    measured = check.measured.amplitude[j]
    lines = [
        head,
        f"{name} amplitude at the farther offset: measured {measured:.4g}, predicted "
        f"{check.predicted_amplitude[j]:.4g}; period: measured {check.measured.period:.4g}, "
        f"predicted {check.predicted_period:.4g}",
    ]
    if check.onset is not None:
        lines.append(
            f"{name} amplitude coefficient extrapolated to onset: K = "
            f"{check.onset.coefficient[j]:.5g}, predicted {check.predicted_coefficient[j]:.5g} "
            f"({100 * check.onset_amplitude_error[j]:+.2f}%)"
        )
    return "\n".join(lines)
