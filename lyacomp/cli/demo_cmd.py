"""`lyacomp demo`: the whole job on the bundled scenario, written to one folder."""

from __future__ import annotations

import argparse

EXAMPLE = """example:
  lyacomp demo lyacomp_demo
  (then look at lyacomp_demo/map.png, simulation.png, robustness.png, demo_report.json)"""


def register(subparsers: argparse._SubParsersAction) -> None:
    from ..studies.demo import DEMO_SAMPLES, DEMO_SEED

    parser = subparsers.add_parser(
        "demo",
        help="run compile, robustness, map and simulation check on a bundled scenario",
        description="Run lyacomp end to end on a bundled scenario of our own (an invented tank "
        "oscillator): compile, nominal evaluation, a Monte Carlo robustness study, a "
        "parameter-plane map, a simulation check. Writes the PNGs and demo_report.json into DIR "
        "and prints a short summary.",
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "dir",
        nargs="?",
        default="lyacomp_demo",
        metavar="DIR",
        help="output folder (default: lyacomp_demo)",
    )
    parser.add_argument(
        "--samples",
        type=int,
        default=DEMO_SAMPLES,
        help=f"Monte Carlo samples (default {DEMO_SAMPLES})",
    )
    parser.add_argument("--seed", type=int, default=DEMO_SEED, help="random seed")
    parser.add_argument("--threads", type=int, default=None, help="threads for the batches")
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from ..studies.demo import run_demo

    report = run_demo(args.dir, samples=args.samples, seed=args.seed, threads=args.threads)
    return 0 if report["simulation"]["agrees"] else 1
