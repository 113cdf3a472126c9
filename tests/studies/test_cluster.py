"""Robustness studies and maps on a Dask LocalCluster of two worker processes: the same
JSON, bit for bit, as the local run, also when a worker dies during the run."""

from __future__ import annotations

import json
import os
import pickle
import signal
import sys
import threading
import time

import numpy as np
import pytest

pytest.importorskip("scipy")

import lyacomp  # noqa: E402
from lyacomp.cli import main  # noqa: E402
from lyacomp.errors import CompilerNotFoundError  # noqa: E402
from lyacomp.studies.maps import Axis, parameter_map  # noqa: E402
from lyacomp.studies.robustness import run_robustness  # noqa: E402

try:
    import distributed
except ImportError:
    distributed = None
needs_dask = pytest.mark.skipif(distributed is None, reason="dask/distributed not installed")

# Hopf normal form with a tilt (invented for these tests): x' = mu x - w y + s x r^2 +
# a x y, y' = w x + mu y + s y r^2 + b y^2 ... only the sign pattern of l1 matters here;
# the values themselves are checked in test_robustness.py / test_maps.py.
MODEL = dict(
    name="tilted form",
    states={"x": 0.0, "y": 0.0},
    parameters={"mu": 0.0, "s": -0.4, "a": 0.5, "b": 0.5},
    equations={
        "x": "mu*x - 1.5*y + s*x*(x**2 + y**2) + a*x*y",
        "y": "1.5*x + mu*y + s*y*(x**2 + y**2) + b*y**2",
    },
    bifurcation="mu",
)
MODEL_TOML = """
name = "tilted_form"
[states]
x = 0.0
y = 0.0
[parameters]
mu = 0.0
s = -0.1
a = 0.5
b = 0.5
[equations]
x = "mu*x - 1.5*y + s*x*(x**2 + y**2) + a*x*y"
y = "1.5*x + mu*y + s*y*(x**2 + y**2) + b*y**2"
[bifurcation]
parameter = "mu"
[uncertainty]
s = { distribution = "normal", mean = -0.1, sd = 0.3 }
"""
TABLE = {
    "s": {"distribution": "normal", "mean": -0.1, "sd": 0.3},
    "a": {"distribution": "uniform", "low": -1.0, "high": 1.0},
}


@pytest.fixture(scope="module")
def ev():
    return lyacomp.compile(lyacomp.Model(**MODEL))


@pytest.fixture(scope="module")
def client():
    if distributed is None:
        pytest.skip("dask/distributed not installed")
    with (
        distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
        ) as cluster,
        distributed.Client(cluster) as c,
    ):
        yield c


def study(ev, **kw):
    return run_robustness(
        ev, 6000, seed=31, uncertainty=TABLE, chunk_size=500, keep=2500, progress=False, **kw
    )


def dump(result):
    return json.dumps(result.to_dict(), sort_keys=True)


def test_robustness_on_cluster_is_bit_identical(ev, client):
    local = study(ev)
    remote = study(ev, client=client)
    assert dump(remote) == dump(local)
    for name, values in local.kept.items():
        assert np.array_equal(remote.kept[name], values, equal_nan=True), name
    for name, values in local.hard_samples.items():
        assert np.array_equal(remote.hard_samples[name], values, equal_nan=True), name
    assert len(local.hard_samples["s"]) == local.subcritical > 0
    # a study that must fail if chunks were dropped or counted twice
    assert remote.samples == 6000 and sum(remote.status_counts.values()) == 6000


def test_map_on_cluster_is_bit_identical(ev, client):
    x, y = Axis.parse("a:-2:2:23"), Axis.parse("b:-2:2:17")
    local = parameter_map(ev, x, y)
    remote = parameter_map(ev, x, y, client=client)
    assert json.dumps(remote.summary()) == json.dumps(local.summary())
    for name in ("classes", "status", "l1", "critical_value", "omega", "curve"):
        assert np.array_equal(getattr(remote, name), getattr(local, name), equal_nan=True), name


def test_ctrl_c_on_cluster_cancels_and_reports_the_partial_result(ev, client):
    def interrupt_when_busy():
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline and not any(client.processing().values()):
            time.sleep(0.01)
        time.sleep(0.5)
        os.kill(os.getpid(), signal.SIGINT)

    study(ev, client=client)  # every worker has the evaluator loaded before the clock runs
    before = signal.getsignal(signal.SIGINT)
    threading.Thread(target=interrupt_when_busy, daemon=True).start()
    result = run_robustness(
        ev, 400_000, seed=9, uncertainty=TABLE, chunk_size=500, progress=False, client=client
    )
    assert result.interrupted and 0 < result.samples < result.requested
    assert result.samples % 500 == 0 and sum(result.status_counts.values()) == result.samples
    assert "INTERRUPTED" in result.summary()
    assert signal.getsignal(signal.SIGINT) is before
    deadline = time.monotonic() + 30  # the outstanding futures were cancelled
    while time.monotonic() < deadline and any(client.processing().values()):
        time.sleep(0.05)
    assert not any(client.processing().values())


def test_map_on_cluster_shows_progress_on_a_terminal(ev, client, monkeypatch):
    pytest.importorskip("tqdm")
    import io

    import lyacomp.studies.cluster as cluster_mod

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    term, bars = Terminal(), []
    make_bar = cluster_mod._rows_bar
    monkeypatch.setattr(cluster_mod.sys, "stderr", term)
    monkeypatch.setattr(
        cluster_mod, "_rows_bar", lambda rows: bars.append(make_bar(rows)) or bars[-1]
    )
    parameter_map(ev, Axis.parse("a:-1:1:5"), Axis.parse("b:-1:1:4"), client=client)
    assert "map rows (cluster)" in term.getvalue()
    assert len(bars) == 1 and bars[0].n == bars[0].total == 4


def test_killed_worker_leaves_the_result_unchanged(ev, client):
    local = run_robustness(
        ev, 20_000, seed=5, uncertainty=TABLE, chunk_size=250, keep=3000, progress=False
    )
    out = {}

    def run():
        out["result"] = run_robustness(
            ev,
            20_000,
            seed=5,
            uncertainty=TABLE,
            chunk_size=250,
            keep=3000,
            progress=False,
            client=client,
        )

    worker = threading.Thread(target=run)
    worker.start()
    # kill one worker process while chunks are in flight (its nanny restarts it and the
    # scheduler reschedules the chunks it held)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and not any(client.processing().values()):
        time.sleep(0.01)
    pids = client.run(os.getpid)
    running_at_kill = worker.is_alive()
    os.kill(next(iter(pids.values())), signal.SIGKILL)
    worker.join(120)
    assert running_at_kill and not worker.is_alive()
    assert dump(out["result"]) == dump(local)


def test_design_statistic_on_cluster_is_bit_identical(ev, client):
    from lyacomp.studies.cluster import BATCH_BLOCK, batch_on_cluster
    from lyacomp.studies.optimize import DesignSpace, RobustStatistic

    space = DesignSpace(ev, ["a", "b"], {"a": 0.3, "b": -0.2})
    table = {"s": TABLE["s"]}
    # more samples per stencil than one cluster block, so several tasks make one call
    kw = dict(samples=BATCH_BLOCK // 2 + 17, seed=8, uncertainty=table, smoothing=0.05)
    local = RobustStatistic(space, **kw)
    remote = RobustStatistic(space, client=client, **kw)
    x = np.array([0.3, -0.2])
    assert remote(x) == local(x)
    assert np.array_equal(remote.jac(x), local.jac(x))
    assert 0.0 < local(x) < 1.0
    with pytest.raises(lyacomp.StudyError, match="input array"):
        batch_on_cluster(client, ev, {"a": 0.1, "s": -0.1}, ("l1",))


@pytest.mark.parametrize("option", [["--workers", "2"], ["--scheduler", "tcp://127.0.0.1:1"]])
def test_without_dask_the_cluster_options_say_how_to_install_it(
    option, tmp_path, monkeypatch, capsys
):
    path = tmp_path / "m.toml"
    path.write_text(MODEL_TOML)
    monkeypatch.setitem(sys.modules, "distributed", None)  # import now raises ImportError
    code = main(["robustness", str(path), "--samples", "10", "--seed", "1", *option])
    err = capsys.readouterr().err.strip()
    assert code != 0
    assert "pip install 'lyacomp[cluster]'" in err and len(err.splitlines()) == 1


@needs_dask
def test_cli_workers_gives_the_local_json(tmp_path, capsys):
    path = tmp_path / "m.toml"
    path.write_text(MODEL_TOML)
    args = ["robustness", str(path), "--samples", "3000", "--seed", "4", "--chunk-size", "700"]
    assert main([*args, "--json"]) == 0
    local = json.loads(capsys.readouterr().out)
    assert main([*args, "--json", "--workers", "2"]) == 0
    assert json.loads(capsys.readouterr().out) == local


def _no_compiler():
    raise CompilerNotFoundError("no C compiler (cc, gcc or clang) on PATH")


class _NeedsCompiler:
    def __reduce__(self):
        return (_no_compiler, ())


def test_a_worker_without_compiler_is_named_in_the_error():
    from lyacomp.studies.cluster import _worker_evaluator

    with pytest.raises(CompilerNotFoundError, match=r"on Dask worker .*: no C compiler"):
        _worker_evaluator(pickle.dumps(_NeedsCompiler()), "digest-of-a-test-payload")
