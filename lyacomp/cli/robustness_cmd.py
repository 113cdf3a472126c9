"""`lyacomp robustness`: Monte Carlo over the model's declared uncertainty."""

from __future__ import annotations

import argparse
import json
import sys

from lyacomp.cli.common import add_model_args, model_from_args, overrides_from_args

DESCRIPTION = """\
Monte Carlo over the uncertain parameters of a model: the probability of a hard
(subcritical) onset with a 95% Wilson interval, the samples without a usable Hopf
point by status, quantiles of l1, critical value, frequency and amplitude
coefficients, and a ranking of the parameters that drive l1. Beside the Monte
Carlo estimate: the reliability index beta (FORM, from exact derivatives; signed,
negative when the nominal design is already hard), its design point and the
first-order probability Phi(-beta), and the parameters ranked by exact local
sensitivity times their spread.
"""

EXAMPLE = """\
example:
  lyacomp robustness examples/duct_flap.toml --samples 1000000 --seed 7 --plot l1.png
  lyacomp robustness examples/duct_flap.toml --samples 20000 --seed 7 --json --save draws.npz

The uncertain parameters come from the model's [uncertainty] table (keys: see
docs/uncertainty.md). A seed makes the run reproducible to the bit, whatever
--threads is, also on a Dask cluster (--scheduler / --workers). Ctrl-C stops
after the current chunk and reports the samples done so far (exit code 130).
A local, near-onset analysis: no substitute for testing.
"""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the `robustness` subcommand."""
    parser = subparsers.add_parser(
        "robustness",
        help="probability of a hard (subcritical) onset under parameter uncertainty",
        description=DESCRIPTION,
        epilog=EXAMPLE,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    add_model_args(parser)
    parser.add_argument(
        "--samples",
        type=int,
        default=100_000,
        metavar="N",
        help="number of Monte Carlo samples (default 100000)",
    )
    parser.add_argument(
        "--seed",
        type=int,
        default=None,
        metavar="S",
        help="random seed; without one a fresh seed is drawn and reported",
    )
    parser.add_argument(
        "--method",
        choices=("random", "lhs"),
        default="random",
        help="plain random or Latin hypercube sampling (default random)",
    )
    parser.add_argument(
        "--threads",
        type=int,
        default=None,
        metavar="T",
        help="threads for the batch evaluator (default: all cores)",
    )
    parser.add_argument(
        "--chunk-size",
        type=int,
        default=1 << 16,
        metavar="M",
        help="samples evaluated per batch call (default 65536); part of the"
        " reproducibility recipe together with the seed",
    )
    parser.add_argument(
        "--branch-steps",
        type=int,
        default=4,
        metavar="K",
        help="continuation steps from the nominal Hopf point that tell whether each sample's"
        " Hopf point is on the nominal branch (default 4; each costs one more evaluation"
        " per sample; 0 skips the check)",
    )
    parser.add_argument(
        "--json", action="store_true", help="print one JSON object instead of the text summary"
    )
    parser.add_argument(
        "--plot",
        metavar="FILE",
        default=None,
        help="write a PNG: histogram of l1 and l1 against the top driver",
    )
    parser.add_argument(
        "--save", metavar="FILE", default=None, help="write every sample to FILE (.csv or .npz)"
    )
    parser.add_argument(
        "--hard-samples",
        metavar="FILE",
        default=None,
        help="write the hard-onset samples (up to --keep-hard of them, a random subset) to"
        " FILE (.csv or .npz); works on a cluster too",
    )
    parser.add_argument(
        "--keep-hard",
        type=int,
        default=10_000,
        metavar="K",
        help="hard-onset samples kept for --hard-samples and the JSON count (default 10000)",
    )
    parser.add_argument(
        "--no-reliability",
        action="store_true",
        help="skip the FORM reliability index and the local sensitivity ranking",
    )
    from lyacomp.studies.cluster import add_cluster_args

    add_cluster_args(parser)
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Run the study and print its report; 130 if it was interrupted."""
    import lyacomp
    from lyacomp.studies.cluster import open_client
    from lyacomp.studies.robustness import run_robustness

    model = model_from_args(args)
    ev = lyacomp.compile(model)
    with open_client(args.scheduler, args.workers) as client:
        result = run_robustness(
            ev,
            args.samples,
            seed=args.seed,
            method=args.method,
            fixed=overrides_from_args(args, model),
            threads=args.threads,
            chunk_size=args.chunk_size,
            save=args.save,
            keep_hard=args.keep_hard,
            client=client,
            branch_steps=args.branch_steps,
            reliability=not args.no_reliability,
        )
    if args.hard_samples:
        result.write_hard_samples(args.hard_samples)
    if args.plot:
        from lyacomp.studies.plots_robustness import plot_robustness

        plot_robustness(result, args.plot)
    if args.json:
        report = result.to_dict()
        report["plot"] = args.plot
        report["save"] = args.save
        report["hard_samples"] = args.hard_samples
        json.dump(report, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        print(result.summary())
        outputs = (("plot", args.plot), ("samples", args.save), ("hard samples", args.hard_samples))
        for what, path in outputs:
            if path:
                print(f"{what} written to {path}")
    return 130 if result.interrupted else 0
