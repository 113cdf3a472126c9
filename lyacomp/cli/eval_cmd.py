"""`lyacomp eval`: classify the Hopf onset of a model at one parameter set."""

from __future__ import annotations

import argparse
import json
import sys

from ..model import Model
from ..pipeline import compile_model
from ..runtime import CAUTION, HopfResult
from ..runtime.operating import SEARCHES
from .common import (
    add_guess_args,
    add_model_args,
    guesses_from_args,
    model_from_args,
    overrides_from_args,
)
from .hopf_scan import scan_for_hopf
from .second_coefficient_text import degenerate_lines, l2_lines

EXAMPLE = (
    "examples:\n  lyacomp eval examples/belt_friction_pad.toml --set c3=3 --json\n"
    "  lyacomp eval examples/duct_flap.toml --operating 0.5   # from a stable flow speed up\n"
    "  lyacomp eval examples/belt_friction_pad.toml --l2 --degenerate-in c3 --json"
)


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "eval",
        help="l1, critical value, frequency, ... at one parameter set",
        description="Compile MODEL (or load it from the cache), locate the Hopf point and report "
        "whether the onset of oscillation is soft (supercritical) or hard (subcritical).",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_model_args(parser)
    add_guess_args(parser)
    parser.add_argument(
        "--operating",
        type=float,
        default=None,
        metavar="VALUE",
        help="a value of the bifurcation parameter where the equilibrium is stable (the "
        "state guesses are the equilibrium there): follow it to its first loss of stability",
    )
    parser.add_argument(
        "--search",
        choices=SEARCHES,
        default=None,
        help="'operating': from the operating value (default when one is given or declared); "
        "'guess': Newton from the starting guesses (faster)",
    )
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    parser.add_argument(
        "--degenerate-tol",
        type=float,
        default=None,
        metavar="ATOL",
        help="call the onset degenerate when |l1| <= ATOL (default: only when l1 vanishes "
        "to rounding)",
    )
    parser.add_argument(
        "--l2",
        action="store_true",
        help="also compute the second Lyapunov coefficient (always done when l1 is degenerate)",
    )
    parser.add_argument(
        "--degenerate-in",
        metavar="NAME",
        default=None,
        help="locate where the onset type switches (l1 = 0) along parameter NAME, starting "
        "from its value in the model or --set; JSON key degenerate_point",
    )
    parser.add_argument(
        "--derivatives",
        action="store_true",
        help="also the exact derivatives of l1, the critical value and omega with respect to "
        "every parameter other than the bifurcation parameter (JSON key 'derivatives')",
    )
    parser.set_defaults(func=run)


def _fmt(value: float) -> str:
    return f"{value:.10g}"


def _operating_line(result: HopfResult) -> str | None:
    """What the operating-point search met, in one sentence (None for other searches)."""
    search, mu = result.search, result.bifurcation_parameter
    if search is None or search.method != "operating":
        return None
    start = f"the equilibrium, stable at {mu} = {_fmt(search.start_value)}"
    if result.ok:
        return f"{start}, first loses stability at {mu}_c = {_fmt(result.critical_value)} " + (
            "through a Hopf point"
        )
    if result.status == "real_eigenvalue_crossing":
        return (
            f"{start}, first loses stability at {mu}_c = {_fmt(search.loss_value)} through "
            "a real eigenvalue (no oscillation onset; l1 not defined)"
        )
    return None


def report(result: HopfResult, model_name: str) -> str:
    """A short human-readable account of one evaluation."""
    lines = [f"model: {model_name}", f"status: {result.status}"]
    operating = _operating_line(result)
    if operating is not None:
        lines.append(f"search: {operating}")
    if not result.ok:
        # the explanation goes to stderr once (run); the report only names the status
        return "\n".join(lines)
    mu = result.bifurcation_parameter
    if result.first_loss_of_stability:
        kind = {
            "supercritical": "SUPERCRITICAL (soft onset: a small stable cycle grows from the "
            "equilibrium)",
            "subcritical": "SUBCRITICAL (hard onset: the state jumps away; expect hysteresis)",
            "degenerate": "DEGENERATE (l1 = 0 to working precision: higher-order terms decide)",
        }[result.criticality]
        lines.append(f"onset: {kind}")
        if mu is not None and result.stable_side is not None:
            lines.append(
                f"  first loss of stability: the equilibrium is stable for {mu} "
                f"{result.stable_side} {mu}_c"
            )
        else:
            lines.append("  the other eigenvalues have negative real part")
    else:
        kind = {
            "supercritical": "supercritical (l1 < 0)",
            "subcritical": "subcritical (l1 > 0)",
            "degenerate": "degenerate (l1 = 0 to working precision)",
        }[result.criticality]
        lines.append(f"Hopf point on an already UNSTABLE equilibrium; criticality: {kind}")
        lines.append(
            f"  {result.unstable_count} further eigenvalue(s) with positive real part on both "
            "sides: the cycle born here is a saddle cycle whatever the sign of l1"
        )
    lines.append(f"  first Lyapunov coefficient l1 = {_fmt(result.l1)}")
    if mu is not None:
        lines.append(f"  critical value of {mu}: {mu}_c = {_fmt(result.critical_value)}")
    lines.append(f"  frequency omega = {_fmt(result.omega)} (period {_fmt(result.period)})")
    eq = ", ".join(f"{k} = {_fmt(v)}" for k, v in result.equilibrium.items())
    lines.append(f"  equilibrium: {eq}")
    if mu is not None:
        lines.append(f"  transversality d = {_fmt(result.transversality)}")
        if result.cycle_side is not None:
            amp = ", ".join(f"{k}: {_fmt(v)}" for k, v in result.amplitude.items())
            lines.append(
                f"  the cycle exists for {mu} {result.cycle_side} {mu}_c; amplitude "
                f"~ K*sqrt(|{mu} - {mu}_c|) with K = {amp}"
            )
    lines += l2_lines(result)
    lines.extend(derivative_lines(result))
    lines.append("caution: " + CAUTION)
    return "\n".join(lines)


def derivative_lines(result: HopfResult) -> list[str]:
    """The exact derivatives as a small table (nothing when they were not asked for)."""
    table = result.derivatives_dict()
    if table is None:
        return []
    mu = result.bifurcation_parameter
    lines = [f"  exact derivatives (the Hopf point followed in {mu}):"]
    width = max(len(p) for p in table["l1"]) if table["l1"] else 0
    lines.append(f"    {'':{width}}  {'d l1':>17} {'d ' + str(mu) + '_c':>17} {'d omega':>17}")
    for name in table["l1"]:
        row = (table[q][name] for q in ("l1", "critical_value", "omega"))
        lines.append(f"    {name:{width}}  " + " ".join(f"{v:17.10g}" for v in row))
    return lines


def _failure_text(result: HopfResult, model: Model) -> str:
    if result.status == "not_critical" and model.critical_value is not None:
        return (
            f"the closed-form critical value of {model.bifurcation} ([bifurcation] "
            "critical_value) does not put the equilibrium at onset: the critical pair is off "
            "the imaginary axis there; check that expression"
        )
    return result.explanation


def run(args: argparse.Namespace) -> int:
    model = model_from_args(args)
    values = overrides_from_args(args, model)
    guesses = guesses_from_args(args, model)
    ev = compile_model(model)
    if guesses:
        ev = ev.with_guess(guesses)
    if args.degenerate_tol is not None:
        ev = ev.with_tolerances(degenerate_atol=args.degenerate_tol)
    if args.derivatives:
        result = ev(
            values, derivatives=True, l2=args.l2, operating=args.operating, search=args.search
        )
    elif args.l2:
        result = ev.evaluate_l2(values, operating=args.operating, search=args.search)
    else:
        result = ev(values, operating=args.operating, search=args.search)
    point = ev.degenerate_point(args.degenerate_in, values) if args.degenerate_in else None
    if args.json:
        out = result.to_dict()
        if args.derivatives:
            out["derivatives"] = result.derivatives_dict()
        if point is not None:
            out["degenerate_point"] = point.to_dict()
        print(json.dumps(out, indent=2))
    else:
        print(report(result, model.name))
        if point is not None:
            print("\n".join(degenerate_lines(point)))
    if not result.ok:
        print(f"lyacomp: {result.status}: {_failure_text(result, model)}", file=sys.stderr)
        if result.status == "no_convergence":
            outcome = scan_for_hopf(ev, values)
            if outcome is not None:
                print(f"lyacomp: {outcome.message()}", file=sys.stderr)
        return 1
    return 0
