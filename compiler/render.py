"""The render pass: results document → report.html (one self-contained file) → report.pdf.

The view model (:mod:`compiler.viewmodel`) formats every value; the jinja2 templates in
``templates/`` only lay it out. The PDF is WeasyPrint's rendering of the same HTML under the
sheet's print rules; its dates and file identifier come from ``epoch`` (the plan's freeze
time, or SOURCE_DATE_EPOCH), so the same inputs give the same bytes.
"""

from __future__ import annotations

import hashlib
import re
from datetime import datetime, timezone
from functools import lru_cache

from . import viewmodel
from .resources import templates_dir


def render_html(results: dict, plots: dict, *, results_sha256: str) -> str:
    """The report as one HTML document: CSS inlined, plots as inline SVG, no scripts.

    ``plots`` maps analysis id → the report tier's :class:`~compiler.plots.ResidualSample`;
    an analysis without an entry gets a note instead of plots.
    """
    view = viewmodel.build(results, plots, results_sha256=results_sha256)
    env = _environment()
    css = (templates_dir() / "report.css").read_text(encoding="utf-8")
    from markupsafe import Markup

    html = env.get_template("report.html").render(v=view, css=Markup(css))
    return html


def render_pdf(html: str, *, epoch: int) -> bytes:
    """The same HTML through WeasyPrint, with creation and modification dates at ``epoch``
    (seconds since 1970, UTC) and a file identifier derived from the HTML and the epoch."""
    load_weasyprint()
    from weasyprint import HTML
    from weasyprint.urls import URLFetcher, URLFetcherResponse

    page, plots = _plots_as_images(html)

    class PlotFetcher(URLFetcher):
        """Serves the plots and the data: URLs inside them (their rasterised points); the
        report is self-contained, so nothing else is fetched."""

        def fetch(self, url, headers=None):
            if url.startswith("data:"):
                return super().fetch(url, headers)
            if not url.startswith(_PLOT_SCHEME):
                raise ValueError(f"the report fetches nothing: {url}")
            return URLFetcherResponse(url, plots[int(url[len(_PLOT_SCHEME):])],
                                      headers={"Content-Type": "image/svg+xml"})

    document = HTML(string=page, base_url=str(templates_dir()),
                    url_fetcher=PlotFetcher()).render()
    stamp = datetime.fromtimestamp(epoch, tz=timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    document.metadata.created = stamp
    document.metadata.modified = stamp
    identifier = hashlib.sha256(html.encode("utf-8") + str(epoch).encode()).hexdigest()[:32]
    return document.write_pdf(pdf_identifier=identifier.encode("ascii"))


def load_weasyprint() -> None:
    """Import WeasyPrint without the compiler runs of its library search.

    WeasyPrint tries several names for each of its seven libraries (Pango, HarfBuzz, …), the
    Windows and macOS ones first; cffi hands each name that does not load to
    ``ctypes.util.find_library``, which on Linux asks ldconfig's cache and, when the cache does
    not know the name, runs gcc and ld to look for it: some twenty compiler runs, 0.3 s of an
    import of about a second. The names that do load are found in the cache or loaded by
    their soname (the dynamic loader's own search, LD_LIBRARY_PATH included), so the import
    first runs with the lookup confined to the cache; should that fail (a library that only
    the compiler's search finds), it runs again with the full lookup.
    """
    import sys

    if "weasyprint" in sys.modules:
        return
    import contextlib
    import ctypes.util
    import io

    from_cache = getattr(ctypes.util, "_findSoname_ldconfig", None)
    if from_cache is not None:
        full = ctypes.util.find_library
        ctypes.util.find_library = from_cache
        try:
            with contextlib.redirect_stdout(io.StringIO()):  # its advice on failure: not ours
                import weasyprint  # noqa: F401
            return
        except OSError:
            for name in [m for m in sys.modules if m == "weasyprint" or
                         m.startswith("weasyprint.")]:
                del sys.modules[name]
        finally:
            ctypes.util.find_library = full
    import weasyprint  # noqa: F401, F811


_INLINE_SVG = re.compile(r"<svg class=\"plot-svg\".*?</svg>", re.S)
_PLOT_SCHEME = "prespec-plot:"


def _plots_as_images(html: str) -> tuple[str, list[bytes]]:
    """The HTML with each inline plot replaced by an <img> of the same SVG, and those SVGs.

    The plots are three quarters of the HTML's bytes; inline, WeasyPrint's HTML parser reads
    them character by character and its cascade styles every SVG element, about a third of
    the PDF's time. As images they go straight to its SVG renderer, which draws the same.
    """
    plots: list[bytes] = []

    def as_image(match: re.Match) -> str:
        plots.append(match.group(0).encode("utf-8"))
        return f'<img class="plot-svg" alt="" src="{_PLOT_SCHEME}{len(plots) - 1}">'

    return _INLINE_SVG.sub(as_image, html), plots


@lru_cache(maxsize=1)
def _environment():
    from jinja2 import Environment, FileSystemLoader, StrictUndefined

    return Environment(loader=FileSystemLoader(str(templates_dir())), autoescape=True,
                       undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True,
                       keep_trailing_newline=True)
