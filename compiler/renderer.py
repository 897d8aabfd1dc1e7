"""The render pass in a child process that loads the report's libraries while the run reads.

jinja2, matplotlib and WeasyPrint take more than a second to import, all of it before the
first plot or page. A run on a large file starts this child as soon as its plan file names
the data; it imports them on the other core while the parent checks the plan, reads, binds
and fits, then waits for one job on its stdin: the results document, the report tier's
residual samples and the PDF's epoch. It renders with the same functions the parent would
(compiler/render.py), so the bytes are the same either way (tests/test_renderer.py), and
writes the HTML and PDF back on its stdout.

The child is worth its start-up only when there is reading and fitting to hide the imports
behind and the libraries are not loaded already: ``start_for`` decides. If the child cannot
start, dies or fails, the parent renders in its own process, so a failure is reported from
where it happened, with the usual one-line message (or the traceback under --debug).

The channel is pickle over the child's own pipes: both ends are this program.
"""

from __future__ import annotations

import gc
import os
import pickle
import subprocess
import sys
from pathlib import Path

# Below this size of data file the read and the fits take less than the child's start-up
# and imports, so nothing would be hidden (bench/run.py measures the large case).
WORTHWHILE_BYTES = 32 << 20
RENDER_MODULES = ("jinja2", "markupsafe", "matplotlib.figure",
                  "matplotlib.backends.backend_svg")  # and WeasyPrint: render.load_weasyprint


def render_in_process(document: dict, plots: dict, results_sha256: str,
                      epoch: int) -> tuple[bytes, bytes]:
    """report.html and report.pdf, rendered here."""
    from .render import render_html, render_pdf

    html = render_html(document, plots, results_sha256=results_sha256)
    return html.encode("utf-8"), render_pdf(html, epoch=epoch)


class Renderer:
    """Renders the report here, or in a child started at construction (``child=True``) or
    by ``start_for``."""

    def __init__(self, child: bool = False):
        self._process = _start() if child else None

    @classmethod
    def for_data(cls, data_path) -> "Renderer":
        """A child when the data file is large and the render libraries are not loaded yet."""
        renderer = cls()
        renderer.start_for(data_path)
        return renderer

    def start_for(self, data_path) -> None:
        """Start the child now if none runs, the data file is large and the render libraries
        are not loaded here yet."""
        try:
            large = data_path is not None and Path(data_path).stat().st_size >= WORTHWHILE_BYTES
        except OSError:
            large = False
        if self._process is None and large and "weasyprint" not in sys.modules:
            self._process = _start()

    def render(self, document: dict, plots: dict, results_sha256: str,
               epoch: int) -> tuple[bytes, bytes]:
        process, self._process = self._process, None
        if process is not None:
            done = _ask(process, (document, plots, results_sha256, epoch))
            if done is not None:
                return done
        return render_in_process(document, plots, results_sha256, epoch)

    def close(self) -> None:
        """Stop a child that was never asked (the run stopped before its report)."""
        process, self._process = self._process, None
        if process is not None:
            process.kill()
            process.communicate()

    def __enter__(self) -> "Renderer":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def _start() -> subprocess.Popen | None:
    package_root = str(Path(__file__).resolve().parent.parent)
    env = dict(os.environ)
    env["PYTHONPATH"] = os.pathsep.join(p for p in (package_root, env.get("PYTHONPATH")) if p)
    try:
        return subprocess.Popen([sys.executable, "-m", "compiler.renderer"],
                                stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                stderr=subprocess.DEVNULL, env=env)
    except OSError:
        return None


def _ask(process: subprocess.Popen, job: tuple) -> tuple[bytes, bytes] | None:
    """The child's (html, pdf), or None when it failed in any way."""
    try:
        out, _ = process.communicate(pickle.dumps(job, protocol=pickle.HIGHEST_PROTOCOL))
        answer = pickle.loads(out) if process.returncode == 0 and out else None
    except (OSError, EOFError, pickle.UnpicklingError):
        process.kill()
        process.communicate()
        return None
    return answer if isinstance(answer, tuple) and len(answer) == 2 else None


def _serve() -> int:
    """The child: import and warm up, then render the one job on stdin."""
    # The process does one job and ends, so what it leaves behind goes with it: the cyclic
    # collector stays off. Its passes over the libraries' objects as they load took
    # 0.13-0.2 s of CPU (measured with gc.callbacks), beside the parent's read, for 1-2 MiB
    # of garbage kept; over the render's layout, 0.2 s of the bench report's 2.6 s, for the
    # same peak resident memory. One collection after the warm-up would cost 0.12-0.15 s.
    gc.disable()
    load_libraries()
    try:
        _warm_up()
    except Exception:  # noqa: BLE001 - the real render meets the same fault and reports it
        pass
    job = sys.stdin.buffer.read()
    if not job:
        return 0  # the parent stopped before its report
    document, plots, results_sha256, epoch = pickle.loads(job)
    answer = render_in_process(document, plots, results_sha256, epoch)
    sys.stdout.buffer.write(pickle.dumps(answer, protocol=pickle.HIGHEST_PROTOCOL))
    sys.stdout.buffer.flush()
    return 0


def load_libraries() -> None:
    """Import everything the render needs: the modules above, then WeasyPrint."""
    import importlib

    from .render import load_weasyprint

    for name in RENDER_MODULES:
        importlib.import_module(name)
    load_weasyprint()


def _serve_and_leave() -> None:
    """Serve, then end the process at once: the parent waits for the child's exit, and an
    orderly interpreter shutdown (matplotlib's and WeasyPrint's modules torn down one by
    one) would add a few tenths of a second to every run. Nothing is left to flush."""
    try:
        code = _serve()
    except BaseException:  # the parent sees the non-zero exit and renders itself
        code = 1
    sys.stdout.flush()
    os._exit(code)


def _warm_up() -> None:
    """Pay the costs of first use that do not depend on the job while the parent still
    reads and fits: the templates' compilation, matplotlib's font manager and first figure,
    WeasyPrint's style sheets and the report's fonts. About 0.3 s of the report's time on the
    bench; what is drawn here is thrown away, and each real plot and page is made from its own
    inputs alone (tests/test_renderer.py)."""
    import numpy as np

    from . import plots, render
    from .resources import templates_dir

    render._environment().get_template("report.html")
    # One plot warms what all three use (the figure, text, ticks, the rasterised points, the
    # SVG writer): a forest and a Q–Q plot as well cost 0.13 s more here and took nothing
    # off the job's plots (five fresh processes each way).
    points = np.linspace(-1.0, 1.0, 64)
    plots.residuals_vs_fitted(plots.ResidualSample.of(points, points), key="warm",
                              residual_label="warm")
    css = (templates_dir() / "report.css").read_text(encoding="utf-8")
    render.render_pdf(f"<html><head><style>{css}</style></head><body><h1>warm</h1>"
                      "<p>warm <b>warm</b> <code>warm</code></p><table class=\"grid\"><tr>"
                      "<td class=\"num\">1</td><td class=\"txt term\">x</td></tr></table>"
                      "</body></html>", epoch=0)


if __name__ == "__main__":
    _serve_and_leave()
