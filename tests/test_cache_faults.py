"""Stage 5 under faults: damaged entries, unsafe --clear, stale keys, pickled settings.

Each test reproduces a defect of issue 7 (items 2, 3, 7, 8, 10, 13).
"""

from __future__ import annotations

import ast
import importlib
import json
import logging
import os
import pickle
import shutil
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

import lyacomp
from lyacomp import pipeline
from lyacomp.build import cache, check_entry, clear_cache, compiler, key_lock
from lyacomp.cli import main
from lyacomp.config import BuildConfig
from lyacomp.errors import BuildError, CacheLockTimeout, LyacompError

render = importlib.import_module("lyacomp.codegen.render")  # the module, not the function

# Normal form x' = mu x - y + c x^3, y' = x + mu y: l1 = 2 a / omega with 16 a = f_xxx = 6 c
# and omega = 1 (Guckenheimer & Holmes 1983, eq. 3.4.11, number from memory).


def _model(c: int = -1, name: str = "fault probe") -> lyacomp.Model:
    return lyacomp.Model(
        name=name,
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.1},
        equations={"x": f"mu*x - y + ({c})*x**3", "y": "x + mu*y"},
        bifurcation="mu",
    )


def _l1(c: int) -> float:
    return 2 * (6 * c / 16)


def _entry(config: BuildConfig, key: str) -> Path:
    return config.cache_dir / key[:2] / key


# -- item 2: --clear removes only what lyacomp created --------------------------------
def test_clear_refuses_a_directory_that_is_not_a_cache(tmp_path, monkeypatch, capsys):
    (tmp_path / "thesis.txt").write_text("months of work")
    monkeypatch.setenv("LYACOMP_CACHE_DIR", str(tmp_path))
    assert main(["cache"]) == 0
    assert main(["cache", "--clear"]) == 2
    assert "not a lyacomp cache" in capsys.readouterr().err
    assert (tmp_path / "thesis.txt").read_text() == "months of work"


def test_clear_refuses_a_regular_file(tmp_path):
    target = tmp_path / "file"
    target.write_text("data")
    with pytest.raises(LyacompError, match="not a directory"):
        clear_cache(target)
    assert target.read_text() == "data"


def test_clear_removes_builds_and_keeps_unrelated_files(tmp_path, monkeypatch, capsys):
    config = BuildConfig(cache_dir=tmp_path)
    ev = pipeline.compile_model(_model(-2), config=config)
    entry = _entry(config, ev.key)
    unrelated = [
        tmp_path / "notes.txt",
        entry.parent / "notes.txt",
        tmp_path / "locks" / "readme",
        tmp_path / "tmp" / "mine.txt",
        tmp_path / "toolchains" / "mine.json",
        tmp_path / "ab" / "not-a-key",
    ]
    for path in unrelated:
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text("keep")
    monkeypatch.setenv("LYACOMP_CACHE_DIR", str(tmp_path))
    assert main(["cache", "--clear"]) == 0
    assert "1 build(s) removed" in capsys.readouterr().out
    assert not entry.exists()
    assert not list((tmp_path / "locks").glob("*.lock"))
    assert not (tmp_path / cache.MARKER_NAME).exists()
    assert all(path.read_text() == "keep" for path in unrelated)
    # an emptied cache leaves nothing behind
    pipeline.compile_model(_model(-2), config=BuildConfig(cache_dir=tmp_path / "fresh"))
    assert clear_cache(tmp_path / "fresh") == 1
    assert not (tmp_path / "fresh").exists()


# -- items 3 and 7: damaged entries are detected before loading and rebuilt -----------
def _truncate(entry: Path, meta: dict) -> None:
    lib = entry / meta["library"]
    lib.write_bytes(lib.read_bytes()[: meta["library_size"] // 2])


def _flip_byte(entry: Path, meta: dict) -> None:
    lib = entry / meta["library"]
    data = bytearray(lib.read_bytes())
    data[len(data) // 3] ^= 0xFF
    lib.write_bytes(bytes(data))


def _meta_list(entry: Path, meta: dict) -> None:
    (entry / "meta.json").write_text(json.dumps([meta]))


def _meta_without_module(entry: Path, meta: dict) -> None:
    (entry / "meta.json").write_text(json.dumps({k: v for k, v in meta.items() if k != "module"}))


def _meta_torn(entry: Path, meta: dict) -> None:
    (entry / "meta.json").write_text(json.dumps(meta)[:20])


def _entry_is_a_file(entry: Path, meta: dict) -> None:
    shutil.rmtree(entry)
    entry.write_text("not a folder")


def _library_gone(entry: Path, meta: dict) -> None:
    (entry / meta["library"]).unlink()


DAMAGE = [
    _truncate,
    _flip_byte,
    _meta_list,
    _meta_without_module,
    _meta_torn,
    _entry_is_a_file,
    _library_gone,
]


@pytest.mark.parametrize("damage", DAMAGE, ids=lambda f: f.__name__.strip("_"))
def test_damaged_entry_is_rebuilt_with_one_warning(tmp_path, caplog, damage):
    config = BuildConfig(cache_dir=tmp_path)
    ev = pipeline.compile_model(_model(-3), config=config)
    entry = _entry(config, ev.key)
    found, _ = check_entry(tmp_path, ev.key)
    damage(entry, found.meta)
    assert check_entry(tmp_path, ev.key)[0] is None
    with caplog.at_level(logging.WARNING, logger="lyacomp"):
        again = pipeline.compile_model(_model(-3), config=config)
    warnings = [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]
    assert len(warnings) == 1 and "damaged" in warnings[0] and "\n" not in warnings[0]
    assert check_entry(tmp_path, ev.key)[0] is not None
    assert again().l1 == pytest.approx(_l1(-3))


def test_truncated_library_in_a_new_process_is_rebuilt_not_mapped(tmp_path):
    # The defect: a library cut to half its size killed a fresh process with SIGBUS.
    script = textwrap.dedent("""
        import lyacomp
        m = lyacomp.Model(name="cut", states={"x": 0.0, "y": 0.0}, parameters={"mu": 0.1},
                          equations={"x": "mu*x - y - 5*x**3", "y": "x + mu*y"},
                          bifurcation="mu")
        print(repr(lyacomp.compile(m)().l1))
    """)
    env = {**os.environ, "LYACOMP_CACHE_DIR": str(tmp_path)}
    run = [sys.executable, "-c", script]
    first = subprocess.run(run, env=env, capture_output=True, text=True, timeout=300)
    assert first.returncode == 0, first.stderr
    (meta_path,) = tmp_path.glob("??/*/meta.json")
    _truncate(meta_path.parent, json.loads(meta_path.read_text()))
    second = subprocess.run(run, env=env, capture_output=True, text=True, timeout=300)
    assert second.returncode == 0, second.stderr
    assert "damaged" in second.stderr
    assert float(second.stdout) == float(first.stdout) == pytest.approx(_l1(-5))


def test_cache_without_a_usable_lock_place_gives_a_clear_message(tmp_path):
    # Stands in for a read-only cache (the tests may run as root, where chmod does not
    # stop writes): the lock folder cannot be used and there is no entry of this model.
    config = BuildConfig(cache_dir=tmp_path)
    (tmp_path / "locks").write_text("in the way")
    with pytest.raises(LyacompError, match="LYACOMP_CACHE_DIR to a writable directory"):
        pipeline.compile_model(_model(-4), config=config)


def test_toolchain_record_with_a_bad_flag_is_probed_again(tmp_path):
    config = BuildConfig(cache_dir=tmp_path)
    pipeline.compile_model(_model(-1), config=config)
    (record,) = (tmp_path / "toolchains").glob("*.json")
    data = json.loads(record.read_text())
    data["compile_flags"].append("-fno-such-flag-anywhere")
    record.write_text(json.dumps(data))
    compiler.toolchain.cache_clear()
    ev = pipeline.compile_model(_model(-6), config=config)  # failed: unknown flag
    assert ev().l1 == pytest.approx(_l1(-6))
    assert "-fno-such-flag-anywhere" not in " ".join(compiler.toolchain(config).compile_flags)
    assert "-fno-such-flag-anywhere" not in record.read_text()
    compiler.toolchain.cache_clear()
    record.write_text("[1, 2]")
    assert not compiler.toolchain(config).remembered


def test_build_failure_with_remembered_flags_probes_once_more(tmp_path, monkeypatch):
    config = BuildConfig(cache_dir=tmp_path)
    pipeline.compile_model(_model(-1), config=config)
    compiler.toolchain.cache_clear()
    assert compiler.toolchain(config).remembered
    seen = []
    real_build = pipeline._build

    def build(model, config, tc, key, variant):
        seen.append(tc.remembered)
        if tc.remembered:
            raise BuildError("as if the remembered flags no longer worked")
        return real_build(model, config, tc, key, variant)

    monkeypatch.setattr(pipeline, "_build", build)
    ev = pipeline.compile_model(_model(-7), config=config)
    assert seen == [True, False]
    assert ev().l1 == pytest.approx(_l1(-7))


def test_stale_temporary_folders_are_swept_at_build_time(tmp_path):
    tmp_root = tmp_path / "tmp"
    old = tmp_root / "0123456789abcdef-99-1"
    fresh = tmp_root / "0123456789abcdef-99-2"
    unrelated = tmp_root / "someone-elses"
    for path in (old, fresh, unrelated):
        path.mkdir(parents=True)
        (path / "model.c").write_text("/* */")
    two_days_ago = time.time() - 2 * 24 * 3600
    for path in (old, unrelated):
        os.utime(path, (two_days_ago, two_days_ago))
    pipeline.compile_model(_model(-8), config=BuildConfig(cache_dir=tmp_path))
    assert not old.exists()
    assert fresh.exists() and unrelated.exists()


# -- item 8: a pickled evaluator uses the receiver's cache ----------------------------
def test_unpickled_evaluator_uses_the_receivers_cache(tmp_path, monkeypatch):
    sender = BuildConfig(cache_dir=tmp_path / "sender", native=False)
    ev = pipeline.compile_model(_model(-9), config=sender)
    data = pickle.dumps(ev)
    shutil.rmtree(tmp_path / "sender")
    (tmp_path / "sender").write_text("unusable on the receiving side")
    monkeypatch.setenv("LYACOMP_CACHE_DIR", str(tmp_path / "receiver"))
    got = pickle.loads(data)
    assert got._build_config.cache_dir == tmp_path / "receiver"
    assert got._build_config.native is False  # a choice that shapes the binary travels
    assert list((tmp_path / "receiver").glob("??/*/meta.json"))
    assert got().l1 == ev().l1 == pytest.approx(_l1(-9))


def test_runtime_does_not_import_the_pipeline():
    # Layers stay one-way: the pipeline registers its rebuild hook with the runtime.
    source = (Path(lyacomp.__file__).parent / "runtime" / "evaluator.py").read_text()
    imported = [
        node.module or ""
        for node in ast.walk(ast.parse(source))
        if isinstance(node, ast.ImportFrom)
    ]
    assert not [name for name in imported if "pipeline" in name]


# -- item 10: every input of the generator is in the key ------------------------------
def test_key_changes_with_generator_code_templates_and_version(tmp_path, monkeypatch):
    config = BuildConfig(cache_dir=tmp_path)
    base = pipeline.model_key(_model(), config)
    copy = tmp_path / "pkg"
    shutil.copytree(pipeline.PACKAGE_ROOT, copy, ignore=shutil.ignore_patterns("__pycache__"))
    monkeypatch.setattr(pipeline, "PACKAGE_ROOT", copy)
    assert pipeline.model_key(_model(), config) == base  # same bytes elsewhere: same key
    keys = {base}
    for module in ("codegen/lower.py", "derive/__init__.py", "model/expr_parser.py", "status.py"):
        path = copy / module
        original = path.read_bytes()
        path.write_bytes(original + b"\n# changed\n")
        pipeline.generator_digest_input.cache_clear()
        keys.add(pipeline.model_key(_model(), config))
        path.write_bytes(original)
    pipeline.generator_digest_input.cache_clear()
    assert len(keys) == 5
    monkeypatch.undo()

    templates = tmp_path / "templates"
    shutil.copytree(render.templates_dir(), templates)
    before = render.templates_digest_input()
    hopf = templates / "stage_lyapunov.c.j2"
    hopf.write_text(hopf.read_text() + "\n")
    monkeypatch.setattr(render, "templates_dir", lambda: templates)
    assert render.templates_digest_input() != before
    assert pipeline.model_key(_model(), config) != base
    monkeypatch.undo()

    monkeypatch.setattr(lyacomp._version, "__version__", "0.0.0-probe")
    assert pipeline.model_key(_model(), config) != base


# -- item 13: the lock timeout message -----------------------------------------------
def test_lock_timeout_names_the_model_and_never_advises_deleting(tmp_path):
    key = "ab" * 32
    with key_lock(tmp_path, key, 1.0, "holder"):
        with pytest.raises(CacheLockTimeout) as info:
            with key_lock(tmp_path, key, 0.2, "rotor"):
                pass
    message = str(info.value)
    assert "'rotor'" in message and "0.2 s" in message and "LYACOMP_LOCK_TIMEOUT" in message
    assert "delete" not in message and "remove" not in message
    with key_lock(tmp_path, key, 0.2, "rotor"):  # released when the holder closed it
        pass
