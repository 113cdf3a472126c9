"""The end-to-end demo on the bundled scenario: compile, nominal evaluation, Monte Carlo
robustness, a parameter-plane map and a check by simulation, written to one folder."""

from __future__ import annotations

import json
import math
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

from lyacomp import scenarios
from lyacomp.errors import StudyError

DEMO_SAMPLES = 1_000_000
DEMO_SEED = 20261202
#: Map axes of the demo scenario: the stage bias and the bias-tracking time constant.
DEMO_X = "vb:0.0:1.2:49"
DEMO_Y = "tau:0.5:8.0:31"
#: The 1-D search for criticality switches runs along this axis at nominal values.
DEMO_LINE = ("vb", 0.0, 1.2)
#: The scenario's l1 is small (large amplitude coefficients), so the check runs closer to
#: onset than the command-line default: the amplitude error shrinks in proportion.
DEMO_GROWTH = 0.001

CAUTION = (
    "Caution: a local, near-onset analysis of an invented scenario; it is no substitute "
    "for testing and for the codes and licensed practice of the field."
)


def _timed(step: str, timings: dict[str, float], func: Callable[[], Any]) -> Any:
    start = time.perf_counter()
    out = func()
    timings[step] = round(time.perf_counter() - start, 3)
    return out


def jsonable(value: Any) -> Any:
    """A copy of ``value`` that strict JSON accepts: NaN/inf become null, numpy scalars
    become Python numbers."""
    if isinstance(value, dict):
        return {str(k): jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [jsonable(v) for v in value]
    if hasattr(value, "item") and callable(value.item):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def run_demo(
    out_dir: str | Path,
    *,
    samples: int = DEMO_SAMPLES,
    seed: int = DEMO_SEED,
    threads: int | None = None,
    progress: bool | None = None,
    echo: Callable[[str], None] = print,
) -> dict[str, Any]:
    """Run the demo, write its PNGs and ``demo_report.json`` into ``out_dir`` and return the
    report. ``echo`` receives the short summary, one line at a time."""
    import lyacomp
    from lyacomp.studies.maps import Axis, find_switches, parameter_map
    from lyacomp.studies.plots_maps import plot_map
    from lyacomp.studies.plots_verify import plot_simulation_check
    from lyacomp.studies.robustness import run_robustness
    from lyacomp.studies.verify import check_by_simulation

    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise StudyError(f"cannot create the output folder {out}: {exc}") from None
    timings: dict[str, float] = {}
    files: list[str] = []

    model = lyacomp.load_model(scenarios.path())
    echo(f"lyacomp demo: {model.name} (bundled scenario, invented values)")
    ev = _timed("compile", timings, lambda: lyacomp.compile(model))
    echo(f"  compile        {timings['compile']:.2f} s")

    nominal = _timed("nominal", timings, lambda: ev())
    if not nominal.ok:
        raise StudyError(
            f"the demo scenario has no Hopf point at nominal values ({nominal.status})"
        )
    echo(
        f"  nominal        onset at {ev.bifurcation} = {nominal.critical_value:.5g}, "
        f"omega = {nominal.omega:.4g}, l1 = {nominal.l1:.4g}: {nominal.criticality}"
    )

    robust = _timed(
        "robustness",
        timings,
        lambda: run_robustness(ev, samples, seed=seed, threads=threads, progress=progress),
    )
    lo, hi = robust.interval
    top = robust.ranking[0].name if robust.ranking else "-"
    echo(
        f"  robustness     {robust.samples} samples in {timings['robustness']:.2f} s: "
        f"P(hard onset) = {robust.probability_subcritical:.4f} (95% {lo:.4f}..{hi:.4f}); "
        f"main driver of l1: {top}"
    )
    files += _robustness_plot(robust, out)

    x, y = Axis.parse(DEMO_X), Axis.parse(DEMO_Y)
    pmap = _timed("map", timings, lambda: parameter_map(ev, x, y, threads=threads))
    nominal_point = (ev.nominal[x.name], ev.nominal[y.name])
    title = f"{model.name}: onset map"
    files.append(str(plot_map(pmap, out / "map.png", title=title, mark=nominal_point)))
    files += [str(p) for p in pmap.save(out / "map_grid.npz")]
    name, a, b = DEMO_LINE
    switches = _timed("switches", timings, lambda: find_switches(ev, name, a, b))
    counts = ", ".join(f"{k}: {v}" for k, v in pmap.counts().items() if v)
    echo(
        f"  map            {x.name} x {y.name} ({x.n}x{y.n}) in {timings['map']:.2f} s; {counts}; "
        f"l1 = 0 located at {len(pmap.curve)} points"
    )
    for s in (s for s in switches if s.resolved):
        echo(
            f"  switch         {s.before} -> {s.after} at {s.parameter} = {s.value:.5g} "
            f"({ev.bifurcation} = {s.critical_value:.5g}, omega = {s.omega:.4g})"
        )

    check = _timed(
        "simulation", timings, lambda: check_by_simulation(model, growth=DEMO_GROWTH, evaluator=ev)
    )
    files.append(str(plot_simulation_check(check, out / "simulation.png")))
    echo("  simulation     " + _simulation_line(check, timings["simulation"]))

    report = {
        "model": model.name,
        "scenario_file": str(scenarios.path()),
        "nominal": nominal.to_dict(),
        "robustness": robust.to_dict(),
        "map": pmap.summary(),
        "switches": [s.to_dict() for s in switches],
        "simulation": check.to_dict(),
        "timings_s": timings,
        "files": files,
        "caution": CAUTION,
    }
    report_path = out / "demo_report.json"
    report["files"].append(str(report_path))
    report_path.write_text(
        json.dumps(jsonable(report), indent=2, allow_nan=False) + "\n", encoding="utf-8"
    )
    echo(f"  wrote          {', '.join(Path(f).name for f in files)} in {out}")
    echo(CAUTION)
    return report


def _simulation_line(check: Any, seconds: float) -> str:
    head = f"at {check.bifurcation} = {check.value:.5g} ({seconds:.2f} s): "
    if check.measured is not None:
        j = max(range(len(check.state_names)), key=lambda k: check.predicted_amplitude[k])
        line = (
            f"{check.state_names[j]} amplitude measured {check.measured.amplitude[j]:.4g} vs "
            f"predicted {check.predicted_amplitude[j]:.4g} "
            f"({100 * check.amplitude_error[j]:+.1f}% raw"
        )
        onset_error = check.onset_amplitude_error
        if onset_error is not None:
            # The verdict compares the value extrapolated to onset, so the line shows it too.
            line += f", {100 * onset_error[j]:+.1f}% extrapolated to onset"
        return head + (
            f"{line}); period {check.measured.period:.4g} vs "
            f"{check.predicted_period:.4g}; {'agrees' if check.agrees else 'DOES NOT AGREE'}"
        )
    runs = ", ".join(f"{r.label}: {r.outcome}" for r in check.runs)
    return head + f"{runs}; {'agrees' if check.agrees else 'DOES NOT AGREE'}"


def _robustness_plot(robust: Any, out: Path) -> list[str]:
    from lyacomp.studies import plots_robustness

    return [str(plots_robustness.plot_robustness(robust, out / "robustness.png"))]
