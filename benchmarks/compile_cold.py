"""Cold compile times (issue 11): ``python benchmarks/compile_cold.py [--repeat K] [--ring N]``.

Every measurement runs in a fresh process with a fresh, empty cache directory, so it pays
for everything a first ``lyacomp.compile`` pays: the compiler probe, the symbolic work,
rendering and the C compiler. It reports wall and CPU time (this process plus its
children, i.e. the C compiler) of the whole ``compile`` for M1, M2, M3 and the ring of
``--ring`` states (M4), then of the first call that needs the twin library (l2, the
degenerate point and the exact derivatives: ``ev(derivatives=True)``). The machine is
shared: the CPU column is the one to compare; the load average is printed.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent


def _cpu() -> float:
    """CPU seconds of this process and its finished children (the C compiler runs)."""
    own = resource.getrusage(resource.RUSAGE_SELF)
    kids = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + kids.ru_utime + kids.ru_stime


def _timed(fn):
    wall, cpu = time.perf_counter(), _cpu()
    value = fn()
    return value, time.perf_counter() - wall, _cpu() - cpu


_PHASES = {
    "derive": ("derive", "derive_higher", "derive_sensitivity"),
    "lower": ("lower", "lower_higher", "lower_sensitivity"),
    "render": ("render",),
    "cc": ("build_extension",),
}
"""Where the time of a compile goes: the pipeline's stage functions, timed by wrapping
them (``cc`` is cffi's wrapper and the C compiler runs, the compiler's CPU included)."""


def _time_phases(pipeline) -> dict:
    """Wrap the stage functions the pipeline calls; returns the totals they fill in."""
    totals = {name: [0.0, 0.0] for name in _PHASES}

    def timed(phase, fn):
        def wrapper(*args, **kwargs):
            value, wall, cpu = _timed(lambda: fn(*args, **kwargs))
            totals[phase][0] += wall
            totals[phase][1] += cpu
            return value

        return wrapper

    for phase, names in _PHASES.items():
        for name in names:
            setattr(pipeline, name, timed(phase, getattr(pipeline, name)))
    return totals


def child(path: str) -> None:
    """One cold compile (run in a fresh process, LYACOMP_CACHE_DIR set by the parent)."""
    sys.path.insert(0, str(ROOT))
    import lyacomp
    from lyacomp import pipeline
    from lyacomp.build import toolchain
    from lyacomp.config import BuildConfig

    model = lyacomp.load_model(path)
    phases = _time_phases(pipeline)
    _, probe_wall, probe_cpu = _timed(lambda: toolchain(BuildConfig.from_environment()))
    ev, wall, cpu = _timed(lambda: lyacomp.compile(model))
    plain = {name: list(value) for name, value in phases.items()}
    ok = bool(ev().ok)
    twin_wall = twin_cpu = None
    if ev.bifurcation is not None:
        _, twin_wall, twin_cpu = _timed(lambda: ev(derivatives=True))
    twin = {name: [t - p for t, p in zip(phases[name], plain[name])] for name in phases}
    print(
        json.dumps(
            {
                "probe_wall": probe_wall,
                "probe_cpu": probe_cpu,
                # the whole compile, probe included (lyacomp.compile would run it)
                "compile_wall": probe_wall + wall,
                "compile_cpu": probe_cpu + cpu,
                "twin_wall": twin_wall,
                "twin_cpu": twin_cpu,
                "nominal_ok": ok,
                "phases": plain,
                "twin_phases": twin,
            }
        )
    )


def _one(path: Path) -> dict:
    with tempfile.TemporaryDirectory(prefix="lyacomp-cold-") as cache:
        env = {**os.environ, "LYACOMP_CACHE_DIR": cache}
        out = subprocess.run(
            [sys.executable, __file__, "--child", str(path)],
            env=env,
            capture_output=True,
            text=True,
            check=False,
        )
        if out.returncode != 0:
            raise SystemExit(f"cold compile of {path} failed:\n{out.stderr[-3000:]}")
        return json.loads(out.stdout.strip().splitlines()[-1])


def _unit_cpu(cmd: list[str], cwd: Path) -> float:
    """CPU seconds of one compiler run (run alone, so the figure is its own)."""
    before = _cpu()
    subprocess.run(cmd, cwd=cwd, check=True, capture_output=True)
    return _cpu() - before


def _units(path: Path, repeat: int) -> dict:
    """The C compiler's CPU per translation unit of the plain library of ``path``.

    The library's units are compiled again one at a time from a kept build (least CPU of
    ``repeat`` runs each), beside the whole ``model.c`` as one unit (what a build compiled
    before the split): on a machine with two free cores the compiler's wall time is about
    the largest unit plus what queues behind it, whatever the load at measuring time.
    """
    with tempfile.TemporaryDirectory(prefix="lyacomp-units-") as cache:
        env = {**os.environ, "LYACOMP_CACHE_DIR": cache, "LYACOMP_KEEP_BUILD": "1"}
        subprocess.run(
            [sys.executable, __file__, "--child", str(path)],
            env=env,
            check=True,
            capture_output=True,
        )
        for meta_path in Path(cache).glob("*/*/meta.json"):
            meta = json.loads(meta_path.read_text())
            if meta.get("variant") == "plain":
                break
        entry = meta_path.parent
        parts = sorted(entry.glob("model_*.c"))
        wrapper = entry / f"{meta['module']}.c"
        units = {p.stem: (meta["flags"], p) for p in parts} | {
            "wrapper": (meta["wrapper_flags"], wrapper)
        }
        units["whole model.c"] = (meta["flags"], entry / "model.c")
        out = {}
        for name, (flags, source) in units.items():
            cmd = [*meta["compiler"], *flags, "-c", str(source), "-o", os.devnull]
            out[name] = min(_unit_cpu(cmd, entry) for _ in range(repeat))
        return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=1, help="runs per model (min is shown)")
    parser.add_argument("--ring", type=int, default=32, help="states of the M4 ring (0: skip)")
    parser.add_argument("--only", nargs="*", help="labels to run (M1 M2 M3 M4)")
    parser.add_argument(
        "--units", action="store_true", help="the compiler's CPU per translation unit instead"
    )
    parser.add_argument("--child", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child)
        return
    sys.path.insert(0, str(HERE))
    from bench_models import model_path

    if args.units:
        print(f"load average at start: {os.getloadavg()[0]:.2f}")
        print("| model | unit | compiler CPU s (least of --repeat runs) |")
        print("|---|---|---|")
        with tempfile.TemporaryDirectory(prefix="lyacomp-ring-") as work:
            for label in args.only or ["M1", "M2", "M3"]:
                for name, cpu in _units(model_path(label, Path(work)), args.repeat).items():
                    print(f"| {label} | {name} | {cpu:.2f} |", flush=True)
        print(f"load average at end: {os.getloadavg()[0]:.2f}")
        return

    labels = ["M1", "M2", "M3"] + ([f"M4-{args.ring}"] if args.ring else [])
    if args.only:
        labels = [x for x in labels if x.split("-")[0] in args.only]
    print(f"load average at start: {os.getloadavg()[0]:.2f}")
    sys.path.insert(0, str(ROOT))
    from lyacomp.build.compiler import compile_jobs

    # The model's units (core and lanes for M1-M3) and the wrapper compile side by side:
    # on a busy machine the wall time depends on the cores the compiler runs get.
    print(f"compiler runs at once: at most {compile_jobs()} (the usable cores)")
    print("| model | compile wall s | compile CPU s | its probe CPU s | twin wall s | twin CPU s |")
    print("|---|---|---|---|---|---|")
    shown = []
    with tempfile.TemporaryDirectory(prefix="lyacomp-ring-") as work:
        for label in labels:
            runs = [_one(model_path(label, Path(work))) for _ in range(args.repeat)]
            best = min(runs, key=lambda r: r["compile_cpu"])
            twin = min(runs, key=lambda r: r["twin_cpu"] or 0.0)
            shown.append((label, best, twin))

            def fmt(value):
                return "-" if value is None else f"{value:.2f}"

            print(
                f"| {label} | {fmt(best['compile_wall'])} | {fmt(best['compile_cpu'])} | "
                f"{fmt(best['probe_cpu'])} | {fmt(twin['twin_wall'])} | {fmt(twin['twin_cpu'])} |",
                flush=True,
            )
        print()
        print("Phases, wall / CPU s (of the run shown above; cc: cffi and the C compiler):")
        print()
        print("| model | build | probe | " + " | ".join(_PHASES) + " |")
        print("|---|---|---|" + "---|" * len(_PHASES))
        for label, best, twin in shown:
            for build, key in (("first", "phases"), ("twin", "twin_phases")):
                if build == "twin" and twin["twin_wall"] is None:
                    continue
                probe = (
                    f"{best['probe_wall']:.2f} / {best['probe_cpu']:.2f}"
                    if build == "first"
                    else "-"
                )
                cells = [
                    f"{w:.2f} / {c:.2f}"
                    for w, c in (best if build == "first" else twin)[key].values()
                ]
                print(f"| {label} | {build} | {probe} | " + " | ".join(cells) + " |")
    print()
    print(f"load average at end: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
