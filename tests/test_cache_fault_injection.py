"""Fault injection: eight processes use one model while a ninth damages its cache entry.

Every worker must end with the correct l1 or a clear LyacompError message; none may die
from a signal (a truncated library mapped by dlopen is SIGBUS) or end in a traceback.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap

import pytest

WORKER = textwrap.dedent("""
    import random, sys, time
    import lyacomp
    random.seed(int(sys.argv[1]))
    m = lyacomp.Model(name="faulted", states={"x": 0.0, "y": 0.0}, parameters={"mu": 0.1},
                      equations={"x": "mu*x - y - 5*x**3", "y": "x + mu*y"}, bifurcation="mu")
    time.sleep(random.uniform(0, 2))
    for _ in range(5):
        try:
            print(repr(lyacomp.compile(m)().l1), flush=True)
        except lyacomp.LyacompError as exc:
            print("error: " + str(exc).splitlines()[0], flush=True)
            sys.exit(3)
        time.sleep(random.uniform(0, 1))
""")

INJECTOR = textwrap.dedent("""
    import os, random, shutil, sys, time
    from pathlib import Path
    root, stop = Path(sys.argv[1]), Path(sys.argv[2])
    random.seed(7)
    actions = 0
    while not stop.exists():
        time.sleep(random.uniform(0.05, 0.3))
        entries = [p for p in root.glob("??/*") if len(p.name) == 64]
        if not entries:
            continue
        entry = random.choice(entries)
        kind = random.choice(["truncate", "corrupt", "delete", "meta", "file"])
        try:
            libs = list(entry.glob("*.so")) if entry.is_dir() else []
            if kind == "truncate" and libs:
                with open(libs[0], "r+b") as fh:  # in place, as a half-finished copy
                    fh.truncate(os.path.getsize(libs[0]) // 2)
            elif kind == "corrupt" and libs:
                with open(libs[0], "r+b") as fh:
                    fh.seek(random.randrange(os.path.getsize(libs[0])))
                    fh.write(os.urandom(64))
            elif kind == "delete":
                shutil.rmtree(entry)
            elif kind == "meta" and entry.is_dir():
                (entry / "meta.json").write_text(random.choice(["[]", "{", '{"module": 1}']))
            elif kind == "file":
                shutil.rmtree(entry)
                entry.write_text("in the way")
            else:
                continue
            actions += 1
        except OSError:
            pass  # a worker replaced the entry under our feet: fine
    print(actions)
""")


def test_eight_processes_survive_a_ninth_damaging_the_cache(tmp_path):
    cache = tmp_path / "cache"
    stop = tmp_path / "stop"
    env = {**os.environ, "LYACOMP_CACHE_DIR": str(cache), "LYACOMP_LOCK_TIMEOUT": "120"}
    injector = subprocess.Popen(
        [sys.executable, "-c", INJECTOR, str(cache), str(stop)],
        stdout=subprocess.PIPE,
        text=True,
    )
    workers = [
        subprocess.Popen(
            [sys.executable, "-c", WORKER, str(seed)],
            env=env,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for seed in range(8)
    ]
    outputs = [w.communicate(timeout=240) for w in workers]
    stop.write_text("")
    actions = int(injector.communicate(timeout=30)[0])
    # Normal form with cubic coefficient -5 in x only: l1 = 2 a / omega with 16 a = f_xxx
    # = -30, omega = 1 (Guckenheimer & Holmes 1983, eq. 3.4.11, number from memory).
    expected = 2 * (-30 / 16)
    successes = rebuilds = 0
    for worker, (out, err) in zip(workers, outputs):
        assert worker.returncode >= 0, f"killed by {signal.Signals(-worker.returncode).name}"
        assert "Traceback" not in err, err
        lines = out.split()
        rebuilds += err.count("is damaged")
        if worker.returncode == 0:
            assert len(lines) == 5 and all(float(v) == pytest.approx(expected) for v in lines)
            successes += 1
        else:
            assert worker.returncode == 3 and out.splitlines()[-1].startswith("error: "), out
    # The entry really was damaged while the workers ran, and they noticed.
    assert actions >= 5 and rebuilds >= 1
    assert successes >= 1
