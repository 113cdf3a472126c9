"""Robustness study on a Dask LocalCluster of 2 worker processes against local threads.

    python benchmarks/cluster_bench.py [SAMPLES]     (default 10**7)

Same model, seed and chunk size both ways; prints wall and CPU time of each, their
ratio, and whether the two JSON reports are identical. Needs the cluster extra.
"""

from __future__ import annotations

import json
import os
import resource
import sys
import time
from pathlib import Path

import distributed

import lyacomp
from lyacomp.studies.robustness import run_robustness

MODEL = Path(__file__).resolve().parent.parent / "examples" / "duct_flap.toml"
WORKERS = 2


def _cpu_self() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def _cpu_workers(client: distributed.Client) -> float:
    return sum(client.run(_cpu_self).values())


def main() -> None:
    samples = int(float(sys.argv[1])) if len(sys.argv) > 1 else 10**7
    ev = lyacomp.compile(lyacomp.load_model(MODEL))
    run_robustness(ev, 1000, seed=1, progress=False)  # warm the caches

    cpu0, t0 = _cpu_self(), time.perf_counter()
    local = run_robustness(ev, samples, seed=7, threads=WORKERS, progress=False)
    local_wall, local_cpu = time.perf_counter() - t0, _cpu_self() - cpu0

    with (
        distributed.LocalCluster(
            n_workers=WORKERS, threads_per_worker=1, processes=True, dashboard_address=":0"
        ) as cluster,
        distributed.Client(cluster) as client,
    ):
        run_robustness(ev, 1000, seed=1, progress=False, client=client)  # workers compile
        wcpu0, cpu0, t0 = _cpu_workers(client), _cpu_self(), time.perf_counter()
        remote = run_robustness(ev, samples, seed=7, threads=1, progress=False, client=client)
        wall = time.perf_counter() - t0
        client_cpu, worker_cpu = _cpu_self() - cpu0, _cpu_workers(client) - wcpu0

    same = json.dumps(local.to_dict()) == json.dumps(remote.to_dict())
    print(
        f"samples {samples}, chunk {local.chunk_size}, model {ev.model.name},"
        f" cores {os.cpu_count()}, load {os.getloadavg()[0]:.2f}"
    )
    print(f"local, {WORKERS} threads:   wall {local_wall:8.2f} s   cpu {local_cpu:8.2f} s")
    print(
        f"LocalCluster {WORKERS} procs: wall {wall:8.2f} s   cpu {worker_cpu:8.2f} s workers"
        f" + {client_cpu:.2f} s client"
    )
    print(f"wall ratio cluster/local {wall / local_wall:.3f}; identical JSON: {same}")


if __name__ == "__main__":
    main()
