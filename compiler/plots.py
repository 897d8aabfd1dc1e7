"""The report's plots as inline SVG text whose bytes repeat from run to run.

matplotlib is imported inside the functions (the report is the only user) and used through
``Figure`` + ``FigureCanvasSVG``, never pyplot, so no global backend is switched. Settings
live in a temporary ``rc_context``. Each plot gets its own id prefix, so several plots can
sit inline in one HTML document without clashing ids, and carries no date or creator.
"""

from __future__ import annotations

import io
import re
import textwrap
from dataclasses import dataclass

import numpy as np

from .order_stats import quartiles

# Above this many points the residual plots show an evenly spaced subset (said in the caption).
MAX_POINTS = 5000
# The residual plots draw their points as one embedded image at this resolution: thousands of
# vector markers would make the PDF slow to build and to open; axes and text stay vector.
RASTER_DPI = 300

_INK = "#222222"
_GREY = "#8a8a8a"
_RC = {
    "svg.fonttype": "none",  # text stays text: small, searchable, drawn in the report's font
    "font.family": "sans-serif",
    "font.sans-serif": ["DejaVu Sans"],
    "font.size": 7.5,
    "axes.linewidth": 0.6,
    "axes.edgecolor": _INK,
    "axes.labelcolor": _INK,
    "xtick.color": _INK,
    "ytick.color": _INK,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "path.simplify": False,
}


@dataclass(frozen=True)
class ForestRow:
    """One dot and whisker: ``label`` on the left, the estimate and its interval."""

    label: str
    estimate: float | None
    low: float | None
    high: float | None
    emphasis: bool = False  # the report tier


def forest(rows: list[ForestRow], *, key: str, ratio: bool, axis_label: str) -> str:
    """Dot-and-whisker plot, one row per entry, top to bottom; a log axis when ``ratio``.

    Rows whose estimate is None keep their place and say "not estimable".
    """
    from matplotlib.figure import Figure
    from matplotlib.ticker import FixedLocator, FuncFormatter, NullLocator

    height = 0.5 + 0.24 * max(len(rows), 1)
    with _settings(key):
        fig = Figure(figsize=(5.6, height))
        ax = fig.add_axes((0.30, 0.55 / height * 0.9 + 0.05, 0.66, 1 - (0.55 / height + 0.1)))
        ax.axvline(1.0 if ratio else 0.0, color=_GREY, linewidth=0.6, linestyle=(0, (3, 2)))
        ys = np.arange(len(rows))[::-1]
        for y, row in zip(ys, rows):
            if row.estimate is None:
                ax.text(0.5, y, "not estimable", transform=ax.get_yaxis_transform(),
                        ha="center", va="center", color=_GREY, fontstyle="italic")
                continue
            if row.low is not None and row.high is not None:
                ax.plot([row.low, row.high], [y, y], color=_INK, linewidth=1.1 if row.emphasis
                        else 0.8, solid_capstyle="butt")
            ax.plot([row.estimate], [y], marker="s" if row.emphasis else "o",
                    markersize=4.2 if row.emphasis else 3.4, color=_INK,
                    markerfacecolor=_INK if row.emphasis else "white", markeredgewidth=0.8)
        ax.set_yticks(ys, [r.label for r in rows])
        ax.set_ylim(-0.6, len(rows) - 0.4)
        if ratio:
            ax.set_xscale("log")
            ax.xaxis.set_major_locator(FixedLocator(_ratio_ticks(*ax.get_xlim())))
            ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
            ax.xaxis.set_minor_locator(NullLocator())
        ax.set_xlabel(axis_label)
        ax.tick_params(axis="y", length=0)
        for side in ("top", "right", "left"):
            ax.spines[side].set_visible(False)
        return _to_svg(fig, key)


# Round ratios for a log axis, coarse to fine; each level adds to the one before.
_RATIO_LEVELS = ((1.0, 2.0, 5.0), (1.5, 3.0, 7.0), (1.1, 1.25, 8.0, 9.0))


def _ratio_ticks(low: float, high: float) -> list[float]:
    """Tick values for a ratio axis over [low, high]: the finest level of round ratios
    (1, 2, 5 per decade; then 1.5, 3, 7; then 1.1, 1.25, 8, 9) with at most seven ticks."""
    chosen: list[float] = []
    steps: set[float] = set()
    for level in _RATIO_LEVELS:
        steps |= set(level)
        ticks = sorted({float(f"{s * 10.0 ** k:.6g}") for s in steps for k in range(-5, 5)})
        inside = [t for t in ticks if low <= t <= high]
        if len(inside) > 7 and len(chosen) >= 2:
            break
        chosen = inside
    return chosen


def thin(n: int) -> np.ndarray:
    """Positions of the points a residual plot draws: all, or MAX_POINTS evenly spaced."""
    if n <= MAX_POINTS:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, MAX_POINTS).round().astype(np.int64))


@dataclass(frozen=True, eq=False)
class ResidualSample:
    """What the two residual plots of n rows draw, and all they need: the fitted values and
    residuals at ``thin(n)`` in data order, the sorted residuals at the same positions, and
    the residuals' quartiles (None below two rows) for the Q–Q plot's reference line.

    Made by the run's process (``of``, in bundle.render), so the render gets a few thousand
    points, not two n-long arrays: on the bench, 16 MB less to pickle to the render child
    and to hold there."""

    n: int
    fitted: np.ndarray
    residuals: np.ndarray
    ordered: np.ndarray
    q1: float | None
    q3: float | None

    @classmethod
    def of(cls, fitted: np.ndarray, residuals: np.ndarray) -> "ResidualSample":
        n = len(residuals)
        keep = thin(n)
        ordered = np.array(residuals, dtype=float)  # a copy: quartiles sorts it in place
        q1 = q3 = None
        if n >= 2:
            q1, _, q3 = (float(q) for q in quartiles(ordered))
        return cls(n, np.asarray(fitted, dtype=float)[keep],
                   np.asarray(residuals, dtype=float)[keep], ordered[keep], q1, q3)


# The residual plots side by side share one frame, with room below for a two-line title.
_PAIR_AXES = (0.2, 0.25, 0.75, 0.70)


def residuals_vs_fitted(sample: ResidualSample, *, key: str, residual_label: str,
                        fitted_label: str = "fitted value") -> str:
    from matplotlib.figure import Figure

    with _settings(key):
        fig = Figure(figsize=(2.9, 2.4))
        ax = fig.add_axes(_PAIR_AXES)
        ax.axhline(0.0, color=_GREY, linewidth=0.6, linestyle=(0, (3, 2)))
        _points(ax, sample.fitted, sample.residuals)
        ax.set_xlabel(textwrap.fill(fitted_label, 42))  # a declared label may be long
        ax.set_ylabel(residual_label)
        _plain_axes(ax)
        return _to_svg(fig, key)


def normal_quantiles(sample: ResidualSample, *, key: str, residual_label: str) -> str:
    """Sorted residuals against standard normal quantiles (Blom's plotting positions).

    The quantiles come from the standard library's NormalDist.inv_cdf (Wichura's AS 241,
    as scipy.special.ndtri), taken only at the drawn positions: the report's process then
    never imports scipy, and a million-row plot computes five thousand of them."""
    from statistics import NormalDist

    from matplotlib.figure import Figure

    quantile = NormalDist().inv_cdf
    n = sample.n
    theoretical = np.array([quantile((i + 1 - 0.375) / (n + 0.25)) for i in thin(n)])
    with _settings(key):
        fig = Figure(figsize=(2.9, 2.4))
        ax = fig.add_axes(_PAIR_AXES)
        if sample.q1 is not None and sample.q3 is not None:
            t1, t3 = quantile(0.25), quantile(0.75)
            slope = (sample.q3 - sample.q1) / (t3 - t1)
            line_x = np.array([theoretical[0], theoretical[-1]])  # thin keeps both ends
            ax.plot(line_x, sample.q1 + slope * (line_x - t1), color=_GREY, linewidth=0.6,
                    linestyle=(0, (3, 2)))
        _points(ax, theoretical, sample.ordered)
        ax.set_xlabel("standard normal quantile")
        ax.set_ylabel(residual_label)
        _plain_axes(ax)
        return _to_svg(fig, key)


def _points(ax, x: np.ndarray, y: np.ndarray) -> None:
    # One Line2D (not a scatter): matplotlib then writes one clip group for all markers.
    ax.plot(x, y, linestyle="none", marker="o", markersize=2.2, markerfacecolor="none",
            markeredgecolor=_INK, markeredgewidth=0.4, rasterized=True)


def _plain_axes(ax) -> None:
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _settings(key: str):
    import matplotlib

    # The salt makes matplotlib's hashed ids depend on the plot, not on the process.
    return matplotlib.rc_context({**_RC, "svg.hashsalt": f"prespec-{key}"})


_ID = re.compile(r'\bid="([^"]+)"')


def _to_svg(fig, key: str) -> str:
    from matplotlib.backends.backend_svg import FigureCanvasSVG

    FigureCanvasSVG(fig)
    buffer = io.StringIO()
    fig.savefig(buffer, format="svg", dpi=RASTER_DPI,
                metadata={"Date": None, "Creator": None, "Format": None, "Type": None})
    text = buffer.getvalue()
    # Inline use: no XML prolog, no document-wide <style>, ids unique to this plot.
    text = text[text.index("<svg"):]
    text = re.sub(r"<style[^>]*>.*?</style>", "", text, flags=re.S)
    text = re.sub(r"<defs>\s*</defs>", "", text)
    prefix = re.sub(r"[^A-Za-z0-9_-]", "-", key)
    for old in sorted(set(_ID.findall(text)), key=len, reverse=True):
        new = f"{prefix}-{old}"
        text = text.replace(f'id="{old}"', f'id="{new}"')
        text = text.replace(f'href="#{old}"', f'href="#{new}"')
        text = text.replace(f"url(#{old})", f"url(#{new})")
    # matplotlib's document style, as inherited presentation attributes on the root
    text = text.replace("<svg ", '<svg class="plot-svg" role="img" stroke-linejoin="round" '
                        'stroke-linecap="butt" ', 1)
    return _as_attributes(_compact_markers(text)).strip() + "\n"


_STYLE = re.compile(r'\bstyle="([^"]*)"')


def _as_attributes(text: str) -> str:
    """style="fill: #222; stroke-width: 0.6" → fill="#222" stroke-width="0.6".

    Inline in HTML, a style attribute on an SVG element also passes through the page's CSS
    engine, which knows no SVG properties (WeasyPrint warns for each); presentation
    attributes mean the same to the SVG renderer and stay out of the page's cascade.
    """
    def attributes(match: re.Match) -> str:
        pairs = (d.split(":", 1) for d in match.group(1).split(";") if ":" in d)
        return " ".join(f'{k.strip()}="{v.strip()}"' for k, v in pairs)

    return _STYLE.sub(attributes, text)


_USE = re.compile(r'^(\s*<use [^>]*?x=")([-0-9.]+)(" y=")([-0-9.]+)(")(?: style="([^"]*)")?(/>)$')


def _compact_markers(text: str) -> str:
    """Hoist the style all markers of a group share onto the group; 2 decimals suffice.

    A residual plot draws thousands of identical markers; without this each repeats its
    style and six decimals, tripling the size of the report.
    """
    lines = text.split("\n")
    out: list[str] = []
    i = 0
    while i < len(lines):
        line = lines[i]
        j = i + 1
        matches = []
        while line.lstrip().startswith("<g clip-path=") and j < len(lines):
            m = _USE.match(lines[j])
            if not m:
                break
            matches.append(m)
            j += 1
        styles = {m.group(6) for m in matches}
        if len(matches) < 20 or len(styles) != 1 or None in styles:
            out.append(line)
            i += 1
            continue
        out.append(line.replace("<g ", f'<g style="{styles.pop()}" ', 1))
        for m in matches:
            x, y = float(m.group(2)), float(m.group(4))
            out.append(f"{m.group(1)}{x:.2f}{m.group(3)}{y:.2f}{m.group(5)}{m.group(7)}")
        i = j
    return "\n".join(out)
