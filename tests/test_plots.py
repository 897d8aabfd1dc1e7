"""Inline SVG plots: same bytes every time, no dates, ids unique to each plot."""

from __future__ import annotations

import re

import numpy as np
import pytest

from compiler import plots

ROWS = [plots.ForestRow("leaflet · crude", -2.6, -5.2, -0.1),
        plots.ForestRow("leaflet · full", -2.5, -4.3, -0.7, emphasis=True),
        plots.ForestRow("coached · full", None, None, None)]


@pytest.fixture(scope="module")
def forest() -> str:
    return plots.forest(ROWS, key="primary-exposure", ratio=False, axis_label="difference")


def test_the_same_rows_give_the_same_svg_bytes(forest):
    assert plots.forest(ROWS, key="primary-exposure", ratio=False,
                        axis_label="difference") == forest


def test_the_svg_carries_no_date_creator_or_prolog(forest):
    assert "<dc:date" not in forest and "Matplotlib" not in forest
    assert forest.startswith("<svg ") and "<?xml" not in forest and "<!DOCTYPE" not in forest


def test_the_svg_sets_no_document_wide_style(forest):
    assert "<style" not in forest


def test_every_id_and_reference_carries_the_plot_key(forest):
    ids = re.findall(r'\bid="([^"]+)"', forest)
    assert ids and all(i.startswith("primary-exposure-") for i in ids)
    refs = re.findall(r'(?:href="#|url\(#)([^")]+)', forest)
    assert set(refs) <= set(ids)


def test_two_plots_share_no_id(forest):
    other = plots.forest(ROWS, key="settled-exposure", ratio=True, axis_label="odds ratio")
    assert not set(re.findall(r'\bid="([^"]+)"', forest)) & set(
        re.findall(r'\bid="([^"]+)"', other))


def test_a_row_without_an_estimate_says_not_estimable(forest):
    assert "not estimable" in forest


def test_a_ratio_axis_labels_round_ratios_and_the_line_of_no_effect():
    ticks = plots._ratio_ticks(0.6, 2.3)
    assert 1.0 in ticks and 2.0 in ticks and len(ticks) <= 7


def test_large_samples_are_thinned_evenly_to_the_first_and_last_row():
    keep = plots.thin(1_000_000)
    assert len(keep) == plots.MAX_POINTS
    assert keep[0] == 0 and keep[-1] == 999_999
    assert np.all(np.diff(keep) > 0)


def test_small_samples_are_drawn_whole():
    assert len(plots.thin(537)) == 537


@pytest.mark.parametrize("n", [1, 2, 5, 537, 5000, 5001, 1_000_000])
def test_a_residual_sample_holds_the_drawn_points_and_the_quartiles_of_all(n):
    # Reference: numpy itself, on the n-long arrays: the points at thin(n) in data order, the
    # sorted residuals (np.sort) at the same positions, and np.quantile's Q1 and Q3.
    rng = np.random.default_rng(n)
    fitted, residuals = rng.normal(size=n), rng.standard_t(5, size=n)
    before = residuals.copy()
    sample = plots.ResidualSample.of(fitted, residuals)
    keep = plots.thin(n)
    assert sample.n == n and len(sample.fitted) == min(n, plots.MAX_POINTS)
    assert sample.fitted.tobytes() == fitted[keep].tobytes()
    assert sample.residuals.tobytes() == residuals[keep].tobytes()
    assert sample.ordered.tobytes() == np.sort(residuals)[keep].tobytes()
    if n >= 2:
        assert [sample.q1, sample.q3] == list(np.quantile(residuals, [0.25, 0.75]))
    else:
        assert sample.q1 is None and sample.q3 is None
    assert residuals.tobytes() == before.tobytes()  # the caller's residuals are not sorted


def test_the_residual_plots_repeat_their_bytes():
    rng = np.random.default_rng(3)
    sample = plots.ResidualSample.of(rng.normal(size=300), rng.normal(size=300))
    again = plots.ResidualSample.of(sample.fitted.copy(), sample.residuals.copy())
    first = plots.normal_quantiles(sample, key="q", residual_label="residual")
    assert plots.normal_quantiles(again, key="q", residual_label="residual") == first
    assert plots.residuals_vs_fitted(sample, key="r", residual_label="residual") \
        == plots.residuals_vs_fitted(again, key="r", residual_label="residual")


def test_the_normal_quantiles_agree_with_scipy_at_blom_positions():
    # The Q–Q plot takes its quantiles from statistics.NormalDist (so the report's process
    # need not import scipy); reference: scipy.special.ndtri, the function scipy.stats.norm.ppf
    # calls. Both implement Wichura's AS 241.
    from statistics import NormalDist

    from scipy.special import ndtri

    n = 100_000
    positions = (np.arange(1, n + 1) - 0.375) / (n + 0.25)
    ours = np.array([NormalDist().inv_cdf(p) for p in positions])
    np.testing.assert_allclose(ours, ndtri(positions), rtol=1e-13, atol=1e-15)


def test_the_report_renders_without_importing_scipy(tmp_path):
    # the render child's import budget (compiler/renderer.py): plots and pages need no scipy
    import subprocess
    import sys

    code = ("import sys, numpy as np; from compiler import plots, renderer; "
            "renderer._warm_up(); r = np.random.default_rng(1).normal(size=20000); "
            "plots.normal_quantiles(plots.ResidualSample.of(r, r), key='q', "
            "residual_label='r'); "
            "print('scipy' in sys.modules)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert done.stdout.strip() == "False"
