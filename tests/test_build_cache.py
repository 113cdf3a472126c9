"""Stage 5: the build cache (hits, keys, concurrent builds, torn entries, no compiler)."""

from __future__ import annotations

import json
import os
import pickle
import subprocess
import sys
import textwrap
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

import lyacomp
from lyacomp import pipeline
from lyacomp.config import BuildConfig
from lyacomp.errors import CompilerNotFoundError


def _model(cubic: str = "-1", name: str = "cache probe") -> lyacomp.Model:
    return lyacomp.Model(
        name=name,
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.1},
        equations={"x": f"mu*x - y + ({cubic})*x**3", "y": "x + mu*y"},
        bifurcation="mu",
    )


def test_second_compile_is_a_cache_hit(tmp_path, monkeypatch):
    config = BuildConfig(cache_dir=tmp_path)
    first = pipeline.compile_model(_model(), config=config)

    def no_generation(*args, **kwargs):
        raise AssertionError("a cache hit must not derive or generate code")

    monkeypatch.setattr(pipeline, "generate", no_generation)
    second = pipeline.compile_model(_model(), config=config)
    assert second.key == first.key
    meta = json.loads((tmp_path / first.key[:2] / first.key / "meta.json").read_text())
    assert meta["model"] == "cache probe" and meta["compile_seconds"] > 0


def test_library_is_the_model_and_a_light_wrapper_linked(tmp_path):
    # Common practice, no source: a cffi API-mode module exports only its PyInit_ function,
    # and the model file in the entry is the one `lyacomp emit` writes.
    config = BuildConfig(cache_dir=tmp_path)
    ev = pipeline.compile_model(_model(), config=config)
    entry = tmp_path / ev.key[:2] / ev.key
    meta = json.loads((entry / "meta.json").read_text())
    assert "-O3" in meta["flags"] and "-fvisibility=hidden" in meta["flags"]
    assert "-O1" in meta["wrapper_flags"] and "-O3" not in meta["wrapper_flags"]
    assert (entry / "model.c").read_text() == lyacomp.generate(
        _model(), ev.key, variant="plain"
    ).standalone
    assert not list(entry.glob("*.o"))  # objects are not kept in the cache
    if sys.platform == "linux":
        out = subprocess.run(
            ["nm", "-D", "--defined-only", str(entry / meta["library"])],
            capture_output=True,
            text=True,
            check=False,
        )
        if out.returncode == 0:
            exported = [line.split()[-1] for line in out.stdout.splitlines() if line.strip()]
            assert exported == [f"PyInit_{meta['module']}"]
    assert ev().ok


def test_key_changes_with_any_equation_and_with_flags(tmp_path):
    config = BuildConfig(cache_dir=tmp_path)
    base = pipeline.model_key(_model("-1"), config)
    assert pipeline.model_key(_model("-1"), config) == base
    assert pipeline.model_key(_model("-2"), config) != base
    assert pipeline.model_key(_model("-1", name="other"), config) != base
    changed = _model().replace(equations={"x": "mu*x - y - x**3", "y": "x + mu*y + 0*x"})
    assert pipeline.model_key(changed, config) == base  # same mathematics, same key
    flagged = BuildConfig(cache_dir=tmp_path, extra_flags=("-DLYACOMP_PROBE=1",))
    assert pipeline.model_key(_model("-1"), flagged) != base


def test_unfinished_entry_is_rebuilt(tmp_path):
    config = BuildConfig(cache_dir=tmp_path)
    ev = pipeline.compile_model(_model("-3"), config=config)
    entry = tmp_path / ev.key[:2] / ev.key
    (entry / "meta.json").unlink()  # as if a build had crashed before committing
    again = pipeline.compile_model(_model("-3"), config=config)
    assert (entry / "meta.json").is_file()
    assert again().l1 == ev().l1


def test_two_processes_compile_the_same_new_model(tmp_path):
    script = textwrap.dedent("""
        import sys, lyacomp
        m = lyacomp.Model(name="race", states={"x": 0.0, "y": 0.0}, parameters={"mu": 0.1},
                          equations={"x": "mu*x - y - 7*x**3", "y": "x + mu*y"},
                          bifurcation="mu")
        print(repr(lyacomp.compile(m)().l1))
    """)
    env = {**os.environ, "LYACOMP_CACHE_DIR": str(tmp_path)}
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", script],
            env=env,
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for _ in range(2)
    ]
    outputs = [p.communicate(timeout=300) for p in procs]
    for proc, (_out, err) in zip(procs, outputs):
        assert proc.returncode == 0, err
    # Normal form with cubic coefficient -7 in x only: l1 = 2*a/omega with
    # 16 a = f_xxx = -42 (Guckenheimer & Holmes 1983, eq. 3.4.11, number from memory).
    assert float(outputs[0][0]) == float(outputs[1][0]) == pytest.approx(2 * (-42 / 16))
    assert len(list(Path(tmp_path).glob("??/*/meta.json"))) == 1


def test_l2_degenerate_point_and_derivatives_come_from_one_twin_built_once(tmp_path, monkeypatch):
    # Common practice, no source: the plain build leaves out the l2, degenerate-point and
    # derivative stages; the first call that needs one of them builds the extended twin
    # (its own cache entry) once, even from several threads at the same time.
    config = BuildConfig(cache_dir=tmp_path)
    model = _model("-5", name="twin probe")
    ev = pipeline.compile_model(model, config=config)
    for name in ("second_coefficient", "degenerate_point", "evaluate_derivatives"):
        assert not hasattr(ev.lib, f"lyc_{name}")
    twin_key = pipeline.model_key(model, config, "extended")
    assert twin_key != ev.key == pipeline.model_key(model, config)
    builds = []
    real_build = pipeline._build

    def counted(*args):
        builds.append(args[-1])
        return real_build(*args)

    monkeypatch.setattr(pipeline, "_build", counted)
    with ThreadPoolExecutor(4) as pool:
        results = list(pool.map(lambda _: ev(l2=True), range(8)))
    assert builds == ["extended"]
    meta = json.loads((tmp_path / twin_key[:2] / twin_key / "meta.json").read_text())
    assert meta["variant"] == "extended"
    eager = pipeline.compile_model(model, config=config, derivatives=True)
    assert eager.key == twin_key and builds == ["extended"]  # a cache hit
    # x' = mu x - y - 5 x^3, y' = x + mu y: l1 = 2 a / omega with 16 a = f_xxx = -30
    # (Guckenheimer & Holmes 1983, eq. 3.4.11, number from memory); l2 fetched through the
    # plain evaluator equals the extended library's own.
    assert [r.l1 for r in results] == pytest.approx([2 * (-30 / 16)] * 8)
    assert {r.l2 for r in results} == {eager(l2=True).l2}
    assert ev(derivatives=True).derivatives is not None
    # An unpickled evaluator (as on a worker) starts plain and builds or loads its twin
    # lazily, with the receiver's cache.
    monkeypatch.setenv("LYACOMP_CACHE_DIR", str(tmp_path))
    copy = pickle.loads(pickle.dumps(ev))
    assert not hasattr(copy.lib, "lyc_second_coefficient")
    assert copy(l2=True).l2 == results[0].l2 and builds == ["extended"]


def test_missing_compiler_is_reported_with_install_hint(tmp_path):
    config = BuildConfig(cache_dir=tmp_path, compiler="/nonexistent/cc")
    with pytest.raises(CompilerNotFoundError, match="apt-get install gcc"):
        pipeline.compile_model(_model(), config=config)


def test_environment_controls_the_cache_location(tmp_path, monkeypatch):
    monkeypatch.setenv("LYACOMP_CACHE_DIR", str(tmp_path / "here"))
    assert BuildConfig.from_environment().cache_dir == tmp_path / "here"
    monkeypatch.delenv("LYACOMP_CACHE_DIR")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    assert BuildConfig.from_environment().cache_dir == tmp_path / "xdg" / "lyacomp"
