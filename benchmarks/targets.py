"""The targets of issues 4 and 11 (where issue 11 raised a figure, its figure), checked
against one run's results."""

from __future__ import annotations


def check_targets(results: dict) -> list[dict]:
    """Each target with the measured figure."""
    models, out = results["models"], []

    def add(target: str, measured: str, met: bool) -> None:
        out.append({"target": target, "measured": measured, "met": bool(met)})

    for label, need_b1, need_b2 in (("M1", 30, None), ("M2", 30, 4000), ("M3", 25, 2500)):
        r = models[label]["ratios"]
        add(
            f"{label}: 1 thread >= {need_b1}x B1",
            f"{r['compiled_1t_over_b1']:.1f}x ({r['compiled_1t_over_b1_cpu']:.1f}x by CPU time)",
            r["compiled_1t_over_b1"] >= need_b1,
        )
        if need_b2:
            add(
                f"{label}: 1 thread >= {need_b2}x B2",
                f"{r['compiled_1t_over_b2']:.0f}x "
                f"({r['compiled_1t_over_b2_cpu']:.0f}x by CPU time)",
                r["compiled_1t_over_b2"] >= need_b2,
            )
    cores = results["machine"]["cores"]
    for label in ("M1", "M2", "M3"):
        m = models[label]
        projected = cores * m["ratios"]["all_over_1t_per_cpu_second"]
        add(
            f"{label}: all threads >= 1.8x 1 thread ({m['compiled_1t']['samples']} samples)",
            f"{m['ratios']['all_over_1t']:.2f}x (the run got {m['compiled_all']['cores_used']:.1f}"
            f" cores, 1 thread got {m['compiled_1t']['cores_used']:.1f}; work per CPU second "
            f"projects {projected:.2f}x on {cores} free cores)",
            m["ratios"]["all_over_1t"] >= 1.8,
        )
    lat = results["latency"]["M1"]["python"]["median"] * 1e6
    add("M1: scalar ev(**params) <= 3 us median", f"{lat:.2f} us", lat <= 3.0)
    for label in ("M1", "M2", "M3"):
        cold = models[label]["compile"]["cold_s"]
        add(f"{label}: cold compile <= 2.5 s", f"{cold:.2f} s", cold <= 2.5)
    if "M4-32" in models:
        cold = models["M4-32"]["compile"]["cold_s"]
        add("M4 n=32: cold compile <= 20 s", f"{cold:.2f} s", cold <= 20.0)
    warm = max(m["compile"]["warm_s"] for m in models.values())
    add("cache hit <= 0.2 s (worst model, fresh process)", f"{warm:.3f} s", warm <= 0.2)
    fit = results["scaling"]["fit"]
    slopes = ", ".join(f"{x:.1f}" for x in fit["compiled_local"])
    add(
        "M4: per-sample cost grows no faster than n^3 (fit over the 3 largest n)",
        f"n^{fit['compiled_top3']:.2f}; all n: n^{fit['compiled']:.2f}; "
        f"slope per doubling: {slopes}",
        fit["compiled_top3"] <= 3.0,
    )
    for label, lane in results.get("lane_flops", {}).items():
        add(
            f"{label}: batch (lanes) >= 20 % of the FMA peak, per CPU second of 1 thread",
            f"{100 * lane['fraction_of_core_peak']:.1f} % ({lane['flops_per_sample']:.0f} flops "
            f"per sample counted by {lane['counted_by']})",
            lane["fraction_of_core_peak"] >= 0.20,
        )
    fl = results["flops"]
    add(
        "M1 all threads >= 25 % of FMA peak",
        f"{100 * fl['fraction_of_peak_all']:.1f} %",
        fl["fraction_of_peak_all"] >= 0.25,
    )
    return out
