"""Stage 5: a library built from several translation units compiled side by side."""

from __future__ import annotations

import dataclasses
import shlex
import subprocess

import numpy as np
import pytest

import lyacomp
from lyacomp import pipeline
from lyacomp.build import compiler, entry_dir, toolchain
from lyacomp.codegen.parts import IMPORTS_MARKER, link_parts
from lyacomp.config import BuildConfig
from lyacomp.errors import BuildError, CompilerNotFoundError, InternalError


def _lanes_model() -> lyacomp.Model:
    # Two states with a bifurcation parameter and no closed form: the lane stages exist.
    return lyacomp.Model(
        name="units probe",
        states={"x": 0.0, "y": 0.0},
        parameters={"mu": 0.1, "a": 1.0},
        equations={"x": "mu*x - a*y - x**3 + x*y**2", "y": "a*x + mu*y - y**3"},
        bifurcation="mu",
    )


def _samples(ev, count: int = 300) -> dict:
    rng = np.random.default_rng(3)
    return {"a": 1.0 + 0.2 * rng.uniform(-1.0, 1.0, count)}


def _results(ev) -> list[np.ndarray]:
    batch = ev.batch(_samples(ev), threads=1)
    return [batch.status, batch.l1, batch.omega, batch.critical_value, batch.equilibrium]


def test_a_lanes_model_is_built_from_a_core_and_a_lanes_unit():
    sources = lyacomp.generate(_lanes_model(), variant="plain")
    assert [name for name, _ in sources.parts] == ["core", "lanes"]
    whole = set(sources.standalone.splitlines())
    note = "/* From the other translation units of this library. */"
    for name, text in sources.parts:
        assert IMPORTS_MARKER not in text
        for line in text.splitlines():
            # A part adds no text of its own but the note and prototypes copied from the
            # definitions (lines of the whole model, `static` dropped, `;` added).
            bare = line[:-1] if line.endswith(";") else line
            assert line in whole or line == note or {bare, f"static {bare}"} & whole, (name, line)
    core, lanes = (dict(sources.parts)[name] for name in ("core", "lanes"))
    assert "lyc_batch_lanes" in lanes and "lyc_newton_in" not in lanes
    assert "lyc_newton_lanes" not in core
    # A model without lane stages (four states) stays one unit.
    ring = lyacomp.Model(
        name="ring",
        states={f"x{i}": 0.0 for i in range(4)},
        parameters={"mu": 0.1},
        equations={f"x{i}": f"mu*x{i} - x{(i + 1) % 4} - x{i}**3" for i in range(4)},
        bifurcation="mu",
    )
    assert lyacomp.generate(ring, variant="plain").parts == ()


def test_parts_compile_without_warnings(tmp_path):
    # Common practice, no source: -Wall -Wextra -pedantic -Werror on each unit.
    sources = lyacomp.generate(_lanes_model(), variant="plain")
    tc = toolchain(BuildConfig(cache_dir=tmp_path))
    (tmp_path / "model.h").write_text(sources.header)
    objects = []
    for name, text in sources.parts:
        source = tmp_path / f"model_{name}.c"
        source.write_text(text)
        objects.append(str(source.with_suffix(".o")))
        cmd = [*tc.command, *tc.compile_flags, "-fvisibility=hidden", "-Wall", "-Wextra"]
        cmd += ["-pedantic", "-Werror", "-c", str(source), "-o", objects[-1]]
        out = subprocess.run(cmd, capture_output=True, text=True, check=False)
        assert out.returncode == 0, shlex.join(cmd) + "\n" + out.stderr
    library = tmp_path / "model.so"
    link = [*tc.command, *objects, "-o", str(library), *tc.link_flags, "-Wl,--no-undefined"]
    out = subprocess.run(link, capture_output=True, text=True, check=False)
    assert out.returncode == 0, out.stderr


def test_parts_one_job_and_the_whole_unit_give_identical_results(tmp_path, monkeypatch):
    model = _lanes_model()
    split = pipeline.compile_model(model, config=BuildConfig(cache_dir=tmp_path / "split"))
    monkeypatch.setattr(compiler, "compile_jobs", lambda: 1)
    one_job = pipeline.compile_model(model, config=BuildConfig(cache_dir=tmp_path / "one"))
    generate = pipeline.generate

    def whole(*args, **kwargs):
        return dataclasses.replace(generate(*args, **kwargs), parts=())

    monkeypatch.setattr(pipeline, "generate", whole)
    single = pipeline.compile_model(model, config=BuildConfig(cache_dir=tmp_path / "whole"))
    entry = entry_dir(tmp_path / "split", split.key)
    assert (entry / "model_core.c").is_file() and (entry / "model_lanes.c").is_file()
    assert not (entry_dir(tmp_path / "whole", single.key) / "model_core.c").exists()
    assert (_results(split)[0] == 0).any()
    for a, b, c in zip(_results(split), _results(one_job), _results(single)):
        assert a.tobytes() == b.tobytes() == c.tobytes()


def test_a_failing_unit_stops_the_build_and_installs_nothing(tmp_path, monkeypatch):
    generate = pipeline.generate

    def broken(*args, **kwargs):
        sources = generate(*args, **kwargs)
        parts = tuple(
            (name, text + ("\nthis is not C;\n" if name == "lanes" else ""))
            for name, text in sources.parts
        )
        return dataclasses.replace(sources, parts=parts)

    monkeypatch.setattr(pipeline, "generate", broken)
    config = BuildConfig(cache_dir=tmp_path)
    with pytest.raises(BuildError, match="model_lanes.c") as info:
        pipeline.compile_model(_lanes_model(), config=config)
    assert "this is not C" in info.value.output
    key = pipeline.model_key(_lanes_model(), config)
    assert not entry_dir(tmp_path, key).exists()
    assert not list(tmp_path.glob("*/*/*.so"))


def test_a_compiler_gone_before_the_build_is_reported_with_install_hint(tmp_path):
    tc = dataclasses.replace(
        toolchain(BuildConfig(cache_dir=tmp_path)), command=(str(tmp_path / "gone-cc"),)
    )
    source = tmp_path / "unit.c"
    source.write_text("int unit(void) { return 0; }\n")
    job = compiler.Compilation(tc, jobs=2)
    job.add(compiler.Unit(source, tmp_path / "unit.o", tc.compile_flags))
    job.add(compiler.Unit(source, tmp_path / "again.o", tc.compile_flags))
    with pytest.raises(CompilerNotFoundError, match="apt-get install gcc"):
        job.link(tmp_path / "unit.so")
    job.close()
    assert not (tmp_path / "unit.so").exists()


def test_linking_refuses_a_function_defined_in_two_parts():
    marker = IMPORTS_MARKER + "\n"
    text = marker + "static int lyc_twice(void)\n{\n    return 0;\n}\n"
    with pytest.raises(InternalError, match="lyc_twice"):
        link_parts({"one": text, "two": text}, "lyc")
    one = marker + "static int lyc_here(int a)\n{\n    return a;\n}\n"
    two = marker + "static int lyc_there(void)\n{\n    return lyc_here(1);\n}\n"
    linked = link_parts({"one": one, "two": two}, "lyc")
    assert linked["one"].startswith("int lyc_here(int a)\n{")
    assert "int lyc_here(int a);\n" in linked["two"]
    assert "\nstatic int lyc_there(void)" in linked["two"]
