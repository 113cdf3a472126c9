"""Tables (markdown, printed), target checks, JSON and the scaling plot."""

from __future__ import annotations

import json
import math
from pathlib import Path


def _num(x: float | None, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "-"
    if x == 0:
        return "0"
    if abs(x) >= 1e5 or abs(x) < 1e-2:
        return f"{x:.{digits - 1}e}"
    return f"{x:.{digits}g}"


def _ratio(x: float | None) -> str:
    return "-" if x is None else f"{x:,.1f}x"


def _table(header: list[str], rows: list[list[str]]) -> str:
    lines = ["| " + " | ".join(header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(r) + " |" for r in rows]
    return "\n".join(lines)


def throughput_table(models: dict) -> str:
    """Evaluations per second, ratios, compile times and agreement for M1..M3 and M4-n."""
    rows = []
    for label, m in models.items():
        agree = m.get("agreement", {})
        rows.append(
            [
                label,
                str(m["states"]),
                _num(m["compiled_1t"]["rate"]),
                _num(m["compiled_all"]["rate"]),
                _num(m["b1"]["rate"]),
                _num(m["b2"]["rate"]),
                _ratio(m["ratios"]["compiled_1t_over_b1"]),
                _ratio(m["ratios"]["compiled_1t_over_b2"]),
                _ratio(m["ratios"].get("fresh_outputs_over_b1")),
                f"{_ratio(m['ratios']['all_over_1t'])} ({m['compiled_all']['cores_used']:.1f})",
                _num(m["compile"]["cold_s"]),
                _num(m["compile"]["warm_s"]),
                f"{_num(agree.get('b1_max_err'), 2)} / {_num(agree.get('b2_max_err'), 2)}",
            ]
        )
    header = [
        "model",
        "n",
        "compiled 1 thr [1/s]",
        "compiled all thr [1/s]",
        "B1 numpy [1/s]",
        "B2 loop [1/s]",
        "1 thr / B1",
        "1 thr / B2",
        "1 thr, fresh outputs / B1",
        "all / 1 thr (cores got)",
        "cold compile [s]",
        "cache hit [s]",
        "max err vs B1 / B2",
    ]
    return _table(header, rows)


def latency_table(latency: dict) -> str:
    def cell(t: dict) -> str:
        return f"{_num(t['median'] * 1e6)} / {_num(t['min'] * 1e6)}" if "median" in t else "-"

    rows = [
        [
            label,
            cell(v["python"]),
            cell(v["raw_c"]),
            _num(v["batch_1t_per_sample"] * 1e6),
        ]
        for label, v in latency.items()
    ]
    header = [
        "model",
        "ev(**params) median / min [us]",
        "raw C call via cffi median / min [us]",
        "batch, 1 thr [us/sample]",
    ]
    return _table(header, rows)


def scaling_table(scaling: dict) -> str:
    per_n = scaling["per_n"]
    fit = scaling["fit"]
    ns = list(per_n)
    slopes = [""] + [f"{x:.2f}" for x in fit["compiled_local"]]
    rows = [
        [
            n,
            _num(per_n[n]["compiled_1t_s"] * 1e6),
            slope,
            _num(per_n[n]["b1_s"] * 1e6),
            _num(per_n[n]["b2_s"] * 1e6),
            _num(per_n[n]["cold_compile_s"]),
        ]
        for n, slope in zip(ns, slopes)
    ]
    rows.append(
        [
            "fitted exponent",
            f"{fit['compiled']:.2f} (3 largest n: {fit['compiled_top3']:.2f})",
            "",
            f"{fit['b1']:.2f}",
            f"{fit['b2']:.2f}",
            "",
        ]
    )
    header = [
        "n",
        "compiled 1 thr [us/sample]",
        "slope from previous n",
        "B1 [us/sample]",
        "B2 [us/sample]",
        "cold compile [s]",
    ]
    return _table(header, rows)


def targets_table(targets: list[dict]) -> str:
    rows = [[t["target"], t["measured"], "met" if t["met"] else "MISSED"] for t in targets]
    return _table(["target (issues 4 and 11)", "measured", ""], rows)


def markdown(results: dict, agree_tol: float) -> str:
    """The whole report of one run, in markdown."""
    out: list[str] = []
    mach = results["machine"]
    pk, fl, mem = results["peak"], results["flops"], results["memory"]
    cores = mach["cores"]
    out.append(f"# lyacomp benchmark ({results['command']})\n")
    out.append(
        f"Machine: {mach['cpu']}, {cores} cores, Python {mach['python']}, numpy "
        f"{mach['numpy']}; load average at start {results['load_average_start'][0]:.2f}, "
        f"at end {results['load_average_end'][0]:.2f}.\n"
    )
    if results["templates_digest_start"] != results["templates_digest_end"]:
        out.append("WARNING: the C templates changed during this run; models may mix versions.\n")
    out.append("## Throughput (evaluations per second, median of repeats)\n")
    out.append(throughput_table(results["models"]) + "\n")
    bad = [k for k, m in results["models"].items() if not m["agreement"]["ok"]]
    check = results["baseline_check"]["rel_err"]
    out.append(
        "B1 and B2 reproduce the planar formula for l1 (Guckenheimer & Holmes 1983) to "
        f"{max(check.values()):.1e} relative before any timing.\n"
    )
    out.append(
        "Agreement of lyacomp with B1 and B2 on the same samples: "
        + ("all within " if not bad else f"NOT within tolerance for {', '.join(bad)}; ")
        + f"max |a - b| / (1 + |b|) <= {agree_tol:g} over l1, omega, critical value, "
        "transversality, equilibrium, amplitude.\n"
    )
    out.append("## Call latency (median)\n")
    out.append(latency_table(results["latency"]) + "\n")
    out.append("## Scaling with n (M4, ring of n stages; CPU seconds per sample, 1 thread)\n")
    out.append(scaling_table(results["scaling"]) + "\n")
    prof = results["scaling"].get("profile", {})
    if prof.get("top"):
        out.append(
            f"Where one thread spends its time at n = {results['scaling']['profile_n']} "
            "(perf, share of time inside compiled code and C libraries):\n"
        )
        for row in prof["top"][:8]:
            out.append(
                f"- {row['symbol']} ({Path(row['object']).name.split('.')[0]}): "
                f"{100 * row['share_of_kernel']:.1f} %"
            )
        out.append("")
    out.append("## Closeness to the machine's limit (M1)\n")
    calls = ", ".join(f"{k} {v:.1f}" for k, v in fl["libm_calls_per_sample"].items()) or "none"
    out.append(
        f"- FMA peak ({' '.join(pk['flags'])}; flags from {pk['flags_from']}): "
        f"{pk['gflops_1t']:.1f} GFLOP/s on 1 thread, {pk[f'gflops_{cores}t']:.1f} on {cores}."
    )
    out.append(
        f"- M1 batch (the lane path the rates above ran, counted one lane wide): "
        f"{fl['flops_per_sample']:.0f} flops per sample "
        f"({fl['vector_flops_per_sample']:.0f} in SIMD instructions), "
        f"{fl['divisions_per_sample']:.1f} divisions, {fl['sqrt_per_sample']:.1f} square roots; "
        f"library calls per sample: {calls}."
    )
    out.append(
        f"- Achieved: {fl['gflops_1t']:.2f} GFLOP/s on 1 thread "
        f"({100 * fl['fraction_of_peak_1t']:.1f} % of peak), {fl['gflops_all']:.2f} GFLOP/s on "
        f"all threads ({100 * fl['fraction_of_peak_all']:.1f} % of peak)."
    )
    out.append(
        f"- Per CPU second actually received (robust to other users' load): "
        f"{fl['gflops_per_cpu_second']:.2f} GFLOP/s against a core peak of "
        f"{pk['gflops_per_cpu_second_1t']:.1f} ({100 * fl['fraction_of_core_peak']:.1f} %)."
    )
    ops = results["op_costs_ns"]
    costs = ", ".join(
        f"{k} {ops[k]:.1f}" for k in ("division", "sqrt", "cabs", "hypot", "fmax") if k in ops
    )
    out.append(
        f"- What bounds it: one sample takes {fl['time_per_sample_ns']:.0f} ns of CPU. Its "
        f"divisions, square roots and libm calls alone need {fl['slow_ops_floor_ns']:.0f} ns "
        f"at full throughput (ns per operation, measured here: {costs}; one after the other, "
        f"a division takes {ops['division_latency']:.1f} ns and a cabs "
        f"{ops['cabs_latency']:.1f} ns); the other flops need "
        f"{fl['other_flops_at_peak_ns']:.0f} ns at FMA peak. The rest is latency of dependent "
        "scalar operations, branches, loads and stores."
        + (f" Not timed: {', '.join(fl['slow_ops_untimed'])}." if fl["slow_ops_untimed"] else "")
        + "\n"
    )
    out.append("## Streamed robustness run (M1)\n")
    out.append(
        f"{mem['samples']:.0e} samples in {mem['seconds']:.0f} s through "
        f"lyacomp.studies.robustness.run_robustness (chunks of {mem['chunk_size']}, "
        f"keeps {mem['keep']} rows): peak RSS {mem['peak_rss_mib']:.0f} MiB "
        f"({mem['peak_rss_before_mib']:.0f} MiB before the run).\n"
    )
    out.append("## Targets\n")
    out.append(targets_table(results["targets"]) + "\n")
    return "\n".join(out) + "\n"


def write_json(path: Path, results: dict) -> None:
    path.write_text(json.dumps(results, indent=2, default=float) + "\n")


def plot_scaling(path: Path, scaling: dict) -> None:
    """Per-sample cost against n (log-log) for the compiled evaluator and both baselines."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import matplotlib.ticker

    ns = [int(n) for n in scaling["per_n"]]
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    series = [
        ("compiled_1t_s", "lyacomp, 1 thread", "o-"),
        ("b1_s", "B1 vectorized numpy", "s--"),
        ("b2_s", "B2 per-sample scipy loop", "^:"),
    ]
    for key, label, style in series:
        ax.loglog(ns, [scaling["per_n"][str(n)][key] for n in ns], style, label=label)
    first = scaling["per_n"][str(ns[0])]["compiled_1t_s"]
    ax.loglog(ns, [first * (n / ns[0]) ** 3 for n in ns], "k-", lw=0.6, label="n^3 reference")
    ax.set_xlabel("ring stages n (M4)")
    ax.set_ylabel("CPU seconds per sample (1 thread)")
    fit = scaling["fit"]["compiled"]
    ax.set_title(f"Per-sample cost against n (fitted exponent {fit:.2f})")
    ax.set_xticks(ns, [str(n) for n in ns])
    ax.xaxis.set_minor_formatter(matplotlib.ticker.NullFormatter())
    ax.grid(True, which="both", alpha=0.3)
    ax.legend()
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
