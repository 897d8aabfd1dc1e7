"""The render child (compiler/renderer.py) gives the report the parent would render itself.

A run on a large file renders in a child process that imported the report's libraries while
the parent read and fitted; the bundle must not depend on which process rendered it. These
tests run the demo study through both paths and compare the bytes, and check that a child
that fails, is never asked or belongs to a refused run leaves no process behind, and that a
run starts its child as soon as the plan file names its data.
"""

from __future__ import annotations

from pathlib import Path

import bundlekit
import pytest

from compiler import bundle, renderer
from compiler.pipeline import Stamp, analyse, compile_plan
from compiler.plots import ResidualSample


@pytest.fixture(scope="module")
def job(tmp_path_factory):
    plan_path, data = bundlekit.study(tmp_path_factory.mktemp("study"))
    plan = compile_plan(plan_path)
    analysed = analyse(plan, data)
    document = bundle.results_document(analysed, Stamp(preregistered=False),
                                       plan_bytes=plan_path.read_bytes(), state=None,
                                       settings=None)
    plots = {f.analysis: ResidualSample.of(f.diagnostics.fitted, f.diagnostics.residuals)
             for f in analysed.fits if f.diagnostics is not None}
    return document, plots, "ab" * 32, 1_700_000_000


def test_the_child_renders_the_same_bytes_as_the_parent(job):
    with renderer.Renderer(child=True) as child:
        assert child._process is not None  # a child really was started
        from_child = child.render(*job)
    assert from_child == renderer.render_in_process(*job)


def test_a_child_that_fails_leaves_the_parent_to_render(job, monkeypatch):
    # the child runs this module's _serve; a job it cannot unpickle makes it exit non-zero
    with renderer.Renderer(child=True) as child:
        monkeypatch.setattr(renderer.pickle, "dumps", lambda *a, **k: b"not a pickle")
        html, pdf = child.render(*job)
    monkeypatch.undo()
    assert (html, pdf) == renderer.render_in_process(*job)


def test_a_child_never_asked_is_stopped(job):
    child = renderer.Renderer(child=True)
    process = child._process
    child.close()
    assert process.returncode is not None  # reaped: no orphan, no zombie


def test_small_files_and_loaded_libraries_render_in_process(tmp_path, monkeypatch):
    small = tmp_path / "d.csv"
    small.write_text("a\n1\n")
    assert renderer.Renderer.for_data(small)._process is None
    assert renderer.Renderer.for_data(None)._process is None
    big = tmp_path / "big.csv"
    with big.open("wb") as f:
        f.truncate(renderer.WORTHWHILE_BYTES)
    monkeypatch.setitem(__import__("sys").modules, "weasyprint", object())
    assert renderer.Renderer.for_data(big)._process is None  # already loaded here


def test_a_run_starts_the_child_once_the_plan_names_its_data_before_the_checks(tmp_path,
                                                                              monkeypatch):
    from compiler import validate

    plan_path, data = bundlekit.study(tmp_path / "study")
    events = []
    monkeypatch.setattr(renderer.Renderer, "start_for",
                        lambda self, path: events.append(("start the child for", path)))
    checks = validate.check
    monkeypatch.setattr(validate, "check",
                        lambda tree: events.append(("check the plan", None)) or checks(tree))
    bundle.run(plan_path, data=data, out=tmp_path / "out", unlocked=True, progress=False)
    assert events == [("start the child for", data), ("check the plan", None)]


def test_a_run_refused_after_its_child_started_leaves_no_process(tmp_path, monkeypatch):
    from compiler.problems import Stop

    plan_path, data = bundlekit.study(tmp_path / "study")
    started = []
    start = renderer._start
    monkeypatch.setattr(renderer, "_start", lambda: started.append(start()) or started[-1])
    monkeypatch.setattr(renderer, "WORTHWHILE_BYTES", 0)  # the demo's small file is enough
    monkeypatch.delitem(__import__("sys").modules, "weasyprint", raising=False)
    (tmp_path / "out").mkdir()  # bundles are never overwritten: the run refuses
    with pytest.raises(Stop):
        bundle.run(plan_path, data=data, out=tmp_path / "out", unlocked=True, progress=False)
    assert len(started) == 1 and started[0].returncode is not None  # started, then reaped


def test_the_data_a_plan_names_is_found_before_the_plan_is_checked(tmp_path):
    from compiler.load import load
    from compiler.pipeline import named_data_path

    def named(text: str, override=None):
        (tmp_path / "p.yaml").write_text(text)
        return named_data_path(load(tmp_path / "p.yaml"), override)

    assert named("data:\n  path: sub/d.csv\n") == tmp_path / "sub" / "d.csv"
    assert named("data:\n  path: sub/d.csv\n", override="e.csv") == Path("e.csv")
    assert named("study: {id: x}\n") is None  # no data section
    assert named("data:\n  path: 12\n") is None  # not a path; the checks say so later
    assert named("data: [a, b]\n") is None


# WeasyPrint's import, in a fresh interpreter each (in this one it may be loaded already)
_IMPORT = r"""
import ctypes.util, sys
compiler_runs = []
gcc = ctypes.util._findLib_gcc
ctypes.util._findLib_gcc = lambda name: compiler_runs.append(name) or gcc(name)
{prepare}
from compiler import render
render.load_weasyprint()
import weasyprint
print(len(compiler_runs), ctypes.util.find_library.__name__)
"""

# The cache-only attempt fails once, as on a machine whose Pango only the compiler's search
# finds: the import must be retried with the full lookup, and WeasyPrint's printed advice on
# the failed attempt must not reach the run's stdout (it carries --json).
_FAIL_ONCE = r"""
class FailOnce:
    failed = False
    def find_spec(self, name, path=None, target=None):
        if name == "weasyprint.text.ffi" and not FailOnce.failed:
            FailOnce.failed = True
            print("WeasyPrint could not import some external libraries")
            raise OSError("cannot load library 'pango-1.0'")
sys.meta_path.insert(0, FailOnce())
"""


def _import_weasyprint(prepare: str = "") -> list[str]:
    import subprocess
    import sys

    done = subprocess.run([sys.executable, "-c", _IMPORT.format(prepare=prepare)],
                          capture_output=True, text=True, check=True)
    return done.stdout.split()


def test_weasyprint_loads_without_running_the_compiler():
    # only ldconfig's cache is asked; the lookup is restored afterwards
    assert _import_weasyprint() == ["0", "find_library"]


def test_weasyprint_loads_with_the_full_lookup_when_the_cache_is_not_enough():
    runs, restored = _import_weasyprint(_FAIL_ONCE)
    assert restored == "find_library"  # and nothing but this line on stdout
    assert int(runs) > 0  # the second attempt used the compiler's search
