"""`lyacomp map`: onset type over a parameter plane, or the switches along one parameter."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np

from ..errors import StudyError
from ..pipeline import compile_model
from ..runtime import CAUTION
from .common import add_model_args, model_from_args, overrides_from_args

EXAMPLE = """examples:
  lyacomp map examples/belt_friction_pad.toml --x c3:0:3:31 --y v_s:0.4:0.6:21 --out map.png
  lyacomp map examples/belt_friction_pad.toml --line c3:0:5:101"""


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "map",
        help="onset type over a parameter plane, with the curve l1 = 0",
        description="Classify every point of a grid over two parameters (supercritical, "
        "subcritical, degenerate, no Hopf point, solver failure, Hopf point on an already "
        "unstable equilibrium, another Hopf branch), each row started from the critical "
        "values of the previous one; locate the curve l1 = 0 by root finding along the grid "
        "lines (grid points at l1 = 0 are on it), and write a PNG and the grid data. "
        "With --line instead, report where along one parameter l1 changes sign. The "
        "bifurcation parameter is solved for at every point and cannot be an axis.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_model_args(parser)
    parser.add_argument("--x", metavar="NAME:LO:HI:N", help="horizontal axis")
    parser.add_argument("--y", metavar="NAME:LO:HI:N", help="vertical axis")
    parser.add_argument(
        "--line", metavar="NAME:LO:HI:N", help="instead of a map: sign changes of l1 along NAME"
    )
    parser.add_argument("--out", metavar="PNG", help="picture (default: MODELNAME_map.png)")
    parser.add_argument(
        "--data",
        metavar="FILE",
        help="grid data, .csv or .npz (default: the picture's name with .csv)",
    )
    parser.add_argument("--threads", type=int, default=None, help="threads for the batch")
    parser.add_argument("--json", action="store_true", help="print one JSON object")
    from ..studies.cluster import add_cluster_args

    add_cluster_args(parser)
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from ..studies.demo import jsonable
    from ..studies.maps import Axis, find_switches, parameter_map

    if args.line is not None:
        if args.x or args.y:
            raise StudyError("give either --line or --x and --y, not both")
    elif not (args.x and args.y):
        raise StudyError("give --x NAME:LO:HI:N and --y NAME:LO:HI:N (or --line NAME:LO:HI:N)")
    model = model_from_args(args)
    fixed = overrides_from_args(args, model)
    if args.line is not None:
        if args.scheduler is not None or args.workers is not None:
            raise StudyError("--line runs here (one small batch); drop --scheduler / --workers")
        axis = Axis.parse(args.line)
        ev = compile_model(model)
        switches = find_switches(
            ev, axis.name, axis.lo, axis.hi, axis.n, fixed, threads=args.threads
        )
        if args.json:
            doc = {"model": model.name, "switches": [s.to_dict() for s in switches]}
            print(json.dumps(jsonable(doc), allow_nan=False))
            return 0
        print(f"{model.name}: sign changes of l1 along {axis.name} in [{axis.lo:g}, {axis.hi:g}]")
        if not switches:
            print("  none found (l1 keeps one sign where a Hopf point was found)")
        for s in switches:
            if not s.resolved:
                print(
                    f"  between {s.parameter} = {s.bracket[0]:.10g} and {s.bracket[1]:.10g}: "
                    f"{s.before} -> {s.after}, but root finding met a point without a Hopf "
                    "point; refine the line"
                )
                continue
            print(
                f"  {s.parameter} = {s.value:.10g}: {s.before} -> {s.after} as {s.parameter} "
                f"increases; critical {ev.bifurcation} = {s.critical_value:.10g}, "
                f"omega = {s.omega:.10g}"
            )
        print("caution: " + CAUTION)
        return 0

    x, y = Axis.parse(args.x), Axis.parse(args.y)
    ev = compile_model(model)
    from ..studies.cluster import open_client

    with open_client(args.scheduler, args.workers) as client:
        pmap = parameter_map(ev, x, y, fixed, threads=args.threads, client=client)
    from ..studies.plots_maps import plot_map

    png = Path(args.out or f"{model.name}_map.png")
    data = Path(args.data) if args.data else png.with_suffix(".csv")
    try:
        values = {**ev.nominal, **fixed}
        mark = (values[x.name], values[y.name])
        picture = plot_map(pmap, png, title=f"{model.name}: onset map", mark=mark)
        written = [picture, *pmap.save(data)]
    except OSError as exc:
        raise StudyError(f"cannot write the map files: {exc}") from None
    if args.json:
        print(
            json.dumps({"model": model.name, **pmap.summary(), "files": [str(p) for p in written]})
        )
        return 0
    print(f"{model.name}: {x.name} x {y.name} grid of {x.n} x {y.n} points")
    for words, count in pmap.counts().items():
        if count:
            print(f"  {words:<28} {count}")
    print(
        f"l1 = 0 located at {len(pmap.curve)} points by root finding"
        + (f" ({pmap.unresolved} brackets left unresolved)" if pmap.unresolved else "")
    )
    if pmap.traced_stops:
        print(
            f"l1 = 0 traced at {int(np.sum(~np.isnan(pmap.traced[:, 0])))} points; ends: "
            + "; ".join(pmap.traced_stops)
        )
    print("wrote " + ", ".join(str(p) for p in written))
    print("caution: " + CAUTION)
    return 0
