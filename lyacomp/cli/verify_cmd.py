"""`lyacomp verify`: check the compiled predictions by integrating the model."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from ..errors import StudyError
from ..pipeline import compile_model
from ..runtime import CAUTION
from ..studies.demo import jsonable
from ..studies.verify import (
    DEFAULT_GROWTH,
    OUTCOME_WORDS,
    check_by_simulation,
    compared_numbers,
)
from ..studies.verify_onset import FOLD_NOTE_RANGE
from .common import add_model_args, model_from_args, overrides_from_args

EXAMPLE = """examples:
  lyacomp verify examples/belt_friction_pad.toml --set c3=3 --plot check.png
  lyacomp verify lyacomp/scenarios/tank_exciter.toml --offset 0.004 --json

exit code: 0 when the simulation agrees with the prediction, 1 when it does not."""


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "verify",
        help="check the predictions by simulation (scipy DOP853; delay models: our own "
        "delay integrator)",
        description="Integrate the model just past onset on the side where the cycle is "
        "predicted. Supercritical: measure the cycle amplitude of every state and the period "
        "at the offset and at half of it, report both beside K_j*sqrt(|mu - mu0|) and "
        "2*pi/omega, and extrapolate offset/amplitude^2 (linear in amplitude^2 near onset) to "
        "the onset: the extrapolated K_j and period are what the verdict compares (about three "
        "times the cost of one run). Subcritical: start just inside and "
        "just outside the predicted unstable cycle and report that the first returns to the "
        "equilibrium and the second leaves the neighbourhood. Delay models (x(t - tau) terms) are "
        "integrated by the method of steps (Dormand-Prince 5(4) with its continuous extension) "
        "from the critical eigenfunction, and their extrapolated K must agree within 5% (ODEs: "
        "10%). Writes a time-series and phase-portrait PNG. The predictions are asymptotic: if "
        "the check "
        "disagrees, try a smaller --growth.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_model_args(parser)
    parser.add_argument(
        "--growth",
        type=float,
        default=None,
        metavar="GROWTH",
        help="simulate where the equilibrium's growth rate is GROWTH times the frequency "
        f"(default {DEFAULT_GROWTH:g})",
    )
    parser.add_argument(
        "--offset",
        type=float,
        default=None,
        help="instead: distance |mu - mu0| in units of the bifurcation parameter (a "
        "supercritical check also runs at half of it)",
    )
    parser.add_argument("--plot", metavar="PNG", help="picture (default: MODELNAME_verify.png)")
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from ..studies.plots_verify import plot_simulation_check

    if args.growth is not None and args.offset is not None:
        raise StudyError("give --growth or --offset, not both")
    model = model_from_args(args)
    overrides = overrides_from_args(args, model)
    ev = compile_model(model)
    check = check_by_simulation(
        model,
        overrides,
        growth=DEFAULT_GROWTH if args.growth is None else args.growth,
        offset=args.offset,
        evaluator=ev,
    )
    png = Path(args.plot or f"{model.name}_verify.png")
    try:
        plot_simulation_check(check, png)
    except OSError as exc:
        raise StudyError(f"cannot write {png}: {exc}") from None
    if args.json:
        print(json.dumps(jsonable({**check.to_dict(), "plot": str(png)}), allow_nan=False))
    else:
        print(report(check))
        print(f"wrote {png}")
        print("caution: " + CAUTION)
    return 0 if check.agrees else 1


def report(check) -> str:
    """Predictions beside measurements, as text."""
    mu = check.bifurcation
    head = (
        f"{check.model}: {check.criticality} onset at {mu}_c = {check.critical_value:.10g}; "
        f"simulated at {mu} = {check.value:.10g} (offset {check.offset:+.4g})"
    )
    if check.closer is not None:
        head += f" and {mu} = {check.closer.value:.10g} (offset {check.closer.offset:+.4g})"
    lines = [head]
    if check.measured is not None:
        lines += _raw_table(check)
        if not check.measured.settled:
            lines.append(f"  the amplitude still drifted by {check.measured.drift:.2g} (relative)")
        closer = check.closer.measured if check.closer is not None else None
        if closer is not None and not closer.settled:
            lines.append(
                f"  at the closer offset the amplitude still drifted by {closer.drift:.2g} "
                "(relative)"
            )
        if check.onset is not None:
            lines += _onset_table(check)
    else:
        for run in check.runs:
            lines.append(
                f"  started {run.label} the predicted cycle ({run.start_radius:g} x its radius): "
                f"{OUTCOME_WORDS[run.outcome]} (t = {run.t_end:.4g})"
            )
    verdict = "agrees with the prediction" if check.agrees else "DOES NOT agree with the prediction"
    lines.append(f"result: the simulation {verdict}")
    if not check.agrees:
        lines.append(
            "  the predictions hold asymptotically near onset: repeat with a smaller --offset "
            "(or --growth); agreement that improves as the offset shrinks confirms them, "
            "and the offset where they fail bounds their useful range"
        )
    return "\n".join(lines)


def _raw_table(check) -> list[str]:
    """Predicted and measured amplitudes and periods at each simulated offset."""
    legs = [(check.offset, check.predicted_amplitude, check.measured)]
    if check.closer is not None and check.closer.measured is not None:
        legs.append((check.closer.offset, check.closer.predicted_amplitude, check.closer.measured))
    lines = [
        f"  {'amplitude':<12}"
        + "".join(f"{f'at offset {offset:+.4g}':>38}" for offset, _, _ in legs),
        f"  {'state':<12}" + f"{'predicted':>14}{'measured':>14}{'error':>10}" * len(legs),
    ]
    for j, name in enumerate(check.state_names):
        cells = [_cells(pred[j], meas.amplitude[j]) for _, pred, meas in legs]
        lines.append(f"  {name:<12}" + "".join(cells))
    cells = [_cells(check.predicted_period, meas.period) for _, _, meas in legs]
    lines.append(f"  {'period':<12}" + "".join(cells))
    return lines


def _cells(predicted: float, measured: float) -> str:
    return f"{predicted:>14.6g}{measured:>14.6g}{100 * (measured / predicted - 1):>9.2f}%"


def _at(offset: float) -> str:
    return f"{f'K at {offset:+.3g}':>16}"


def _onset_table(check) -> list[str]:
    """The extrapolated amplitude coefficients and period beside the compiled ones."""
    fit = check.onset
    lines = [
        "  extrapolated to onset (offset / amplitude^2 linear in amplitude^2 through both runs):",
        f"  {'state':<12}{'predicted K':>16}{_at(check.offset)}{_at(check.closer.offset)}"
        f"{'K at onset':>16}{'error':>10}",
    ]
    error = check.onset_amplitude_error
    for j, name in enumerate(check.state_names):
        lines.append(
            f"  {name:<12}{check.predicted_coefficient[j]:>16.6g}{fit.raw[0][j]:>16.6g}"
            f"{fit.raw[1][j]:>16.6g}{fit.coefficient[j]:>16.6g}{100 * error[j]:>9.2f}%"
        )
    lines.append(
        f"  {'period':<12}{check.predicted_period:>16.6g}{check.measured.period:>16.6g}"
        f"{check.closer.measured.period:>16.6g}{fit.period:>16.6g}"
        f"{100 * check.onset_period_error:>9.2f}%"
    )
    lines.append(f"  compared: {compared_numbers(check)}")
    fold = check.fold_offset
    if fold is not None and abs(fold) < FOLD_NOTE_RANGE * abs(check.offset):
        lines.append(
            f"  note: the fitted slope would put a fold of cycles near offset {fold:+.3g} "
            "(an estimate from the truncated normal form; the cycle may jump there)"
        )
    if not fit.valid:
        lines.append(f"  the extrapolation is not valid: {fit.reason}")
    return lines
