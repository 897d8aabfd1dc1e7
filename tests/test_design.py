"""The design pass: columns built by our own code from the resolved terms, in tier order."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy.interpolate import CubicSpline

import fitkit as fk
from compiler.columns import design_labels
from compiler.design import design, natural_spline_columns
from compiler.plan import Covariance, Variable
from compiler.problems import Exit, Stop

LEVELS = ("harbour", "hillside", "market")


def _setup(tiers, *, family="gaussian", offset=None, covariance=Covariance(), reference=None,
           rows=None):
    rng = np.random.default_rng(7)
    n = 40
    columns = {
        "y": rng.normal(size=n),
        "arm": np.asarray(["usual", "walking"] * (n // 2), dtype=object),
        "district": np.asarray([LEVELS[i % 3] for i in range(n)], dtype=object),
        "age": rng.uniform(20, 80, n),
        "income": rng.uniform(1, 5, n),
        "nights": rng.integers(1, 28, n).astype(float),
        "site": np.asarray([f"s{i % 4}" for i in range(n)], dtype=object),
    }
    variables = [
        Variable("y", "continuous"),
        Variable("arm", "categorical", levels=("usual", "walking"), reference="usual"),
        Variable("district", "categorical", levels=LEVELS, reference=reference),
        Variable("age", "continuous"), Variable("income", "continuous"),
        Variable("nights", "count"), Variable("site", "categorical", levels=("s0", "s1", "s2", "s3")),
    ]
    analysis = fk.analysis("y", "arm", tiers, family, offset=offset, covariance=covariance)
    plan = fk.plan(variables, [analysis])
    bound = fk.bound(columns, [analysis], rows=rows)
    return columns, design(plan, analysis, bound), plan, analysis


def test_columns_come_intercept_exposure_then_each_tier_in_order():
    _, d, _, _ = _setup([("crude", []), ("base", ["age"]), ("full", ["district", "income"])])
    assert d.labels == ("intercept", "arm: walking vs usual", "age",
                        "district: hillside vs harbour", "district: market vs harbour", "income")
    assert d.tier_width == (2, 3, 6)
    assert d.exposure_columns == (1,)
    assert np.all(d.x[:, 0] == 1.0)


def test_labels_match_the_plan_only_labelling_of_every_tier():
    _, d, plan, analysis = _setup([("crude", []), ("base", ["age", {"log": "income"}]),
                                   ("full", [{"product": ["district", "age"]}])])
    for labels, width in zip(design_labels(plan, analysis), d.tier_width):
        assert d.labels[:width] == labels


def test_categorical_is_treatment_coded_against_the_declared_reference():
    columns, d, _, _ = _setup([("crude", []), ("full", ["district"])], reference="hillside")
    # reference library: pandas' indicator columns, reference level dropped, declared order
    dummies = pd.get_dummies(pd.Categorical(columns["district"], categories=LEVELS))
    assert d.labels[2:] == ("district: harbour vs hillside", "district: market vs hillside")
    np.testing.assert_array_equal(d.x[:, 2], dummies["harbour"].to_numpy(float))
    np.testing.assert_array_equal(d.x[:, 3], dummies["market"].to_numpy(float))


def test_power_and_log_columns():
    columns, d, _, _ = _setup([("crude", []), ("full", [{"power": "age", "degree": 3},
                                                        {"log": "income"}])])
    assert d.labels[2:] == ("age^3", "log(income)")
    np.testing.assert_allclose(d.x[:, 2], columns["age"] ** 3, rtol=1e-15)
    np.testing.assert_allclose(d.x[:, 3], np.log(columns["income"]), rtol=1e-15)


def test_categorical_by_continuous_product_gives_one_column_per_other_level():
    columns, d, _, _ = _setup([("crude", []), ("full", [{"product": ["district", "age"]}])])
    assert d.labels[2:] == ("district: hillside vs harbour × age",
                            "district: market vs harbour × age")
    expected = (columns["district"] == "market") * columns["age"]
    np.testing.assert_array_equal(d.x[:, 3], expected)


def test_categorical_by_categorical_product_gives_every_pair_of_other_levels():
    columns, d, _, _ = _setup([("crude", []), ("full", [{"product": ["district", "site"]}])])
    assert d.labels[2:] == tuple(f"district: {a} vs harbour × site: {b} vs s0"
                                 for a in ("hillside", "market")
                                 for b in ("s1", "s2", "s3"))
    expected = ((columns["district"] == "market") & (columns["site"] == "s2")).astype(float)
    np.testing.assert_array_equal(d.x[:, 2 + 3 + 1], expected)


def test_spline_has_k_minus_one_columns_spanning_scipys_natural_cubic_spline():
    knots = (25.0, 40.0, 55.0, 70.0)
    x = np.linspace(25.0, 70.0, 200)
    basis = np.column_stack([np.ones_like(x)] + natural_spline_columns(x, knots))
    assert basis.shape[1] == len(knots)  # k − 1 columns besides the intercept
    # reference library: scipy's natural cubic interpolant through arbitrary knot values
    # is a natural cubic spline on these knots, so it must lie in the basis' span
    target = CubicSpline(knots, [1.0, -2.0, 0.5, 3.0], bc_type="natural")(x)
    coef, *_ = np.linalg.lstsq(basis, target, rcond=None)
    np.testing.assert_allclose(basis @ coef, target, atol=1e-9)


def test_spline_is_linear_beyond_the_boundary_knots():
    knots = (25.0, 40.0, 55.0, 70.0)
    outside = np.array([75.0, 85.0, 95.0, 5.0, 12.0, 19.0])  # equally spaced triples
    for column in natural_spline_columns(outside, knots):
        high, low = column[:3], column[3:]
        assert np.diff(high, 2)[0] == pytest.approx(0.0, abs=1e-9)
        assert np.diff(low, 2)[0] == pytest.approx(0.0, abs=1e-9)


def test_spline_columns_are_labelled_in_the_design():
    _, d, _, _ = _setup([("crude", []), ("full", [{"spline": "age", "knots": [30, 50, 70]}])])
    assert d.labels[2:] == ("spline(age) #1", "spline(age) #2")


def test_log_of_non_positive_values_stops_with_the_column_and_rows():
    columns, _, _, _ = _setup([("crude", [])])
    columns["income"][[3, 8]] = [0.0, -1.0]
    variables = [Variable("y", "continuous"),
                 Variable("arm", "categorical", levels=("usual", "walking")),
                 Variable("income", "continuous")]
    analysis = fk.analysis("y", "arm", [("crude", []), ("full", [{"log": "income"}])])
    plan = fk.plan(variables, [analysis])
    with pytest.raises(Stop) as stop:
        design(plan, analysis, fk.bound(columns, [analysis]))
    assert stop.value.exit_code == Exit.DATA_CONTRACT
    problem = stop.value.problems[0]
    assert problem.column == "income"
    assert "2 of 40" in problem.message and "row 4" in problem.message and "row 9" in problem.message


def test_poisson_offset_is_the_log_of_the_offset_variable():
    columns, d, _, _ = _setup([("crude", [])], family="poisson", offset="nights")
    np.testing.assert_allclose(d.offset, np.log(columns["nights"]), rtol=1e-15)


def test_cluster_codes_number_the_clusters():
    columns, d, _, _ = _setup([("crude", [])], covariance=Covariance("cluster", "site"))
    expected = np.asarray([int(s[1]) for s in columns["site"]])  # s0..s3 sort as 0..3
    np.testing.assert_array_equal(d.cluster, expected)


def test_only_the_sample_rows_enter_the_design():
    rows = np.array([0, 2, 5, 9])
    columns, d, _, _ = _setup([("crude", []), ("full", ["age"])], rows=rows)
    np.testing.assert_array_equal(d.y, columns["y"][rows])
    np.testing.assert_array_equal(d.x[:, 2], columns["age"][rows])
    assert list(d.row_ids) == ["1", "3", "6", "10"]


@pytest.mark.parametrize("share", [1.0, 0.8])  # every row (blocks are slices), or a subset
def test_a_gaussian_design_built_on_demand_equals_the_matrix_built_whole(monkeypatch, share):
    # The gaussian design hands out row blocks built when asked (design.DesignRows). Every
    # block, the whole matrix, the fitted values and the fit itself must equal those of the
    # matrix built whole (the GLM path), on a population subset spanning several QR chunks.
    import compiler.design as module
    from compiler.fit import fit
    from compiler.qr import CHUNK_ROWS

    rng = np.random.default_rng(11)
    n = 3 * CHUNK_ROWS + 123
    columns = {"y": rng.normal(size=n),
               "arm": rng.choice(np.asarray(["usual", "walking"], dtype=object), n),
               "district": rng.choice(np.asarray(LEVELS, dtype=object), n),
               "age": rng.uniform(20, 80, n)}
    variables = [Variable("y", "continuous"),
                 Variable("arm", "categorical", levels=("usual", "walking"), reference="usual"),
                 Variable("district", "categorical", levels=LEVELS),
                 Variable("age", "continuous")]
    tiers = [("crude", []), ("base", ["district", {"power": "age", "degree": 2}]),
             ("full", [{"spline": "age", "knots": [30, 50, 70]},
                       {"product": ["district", "age"]}])]
    analysis = fk.analysis("y", "arm", tiers, "gaussian")
    plan = fk.plan(variables, [analysis])
    rows = np.flatnonzero(rng.random(n) < share)  # share < 1: a population that skips rows
    lazy = design(plan, analysis, fk.bound(columns, [analysis], rows=rows))
    monkeypatch.setattr(module, "_rows_on_demand", lambda *_: False)
    whole = design(plan, analysis, fk.bound(columns, [analysis], rows=rows))

    assert isinstance(lazy.x, module.DesignRows) and isinstance(whole.x, np.ndarray)
    assert lazy.x.shape == whole.x.shape
    np.testing.assert_array_equal(np.asarray(lazy.x), whole.x)
    for block in (slice(0, 10), slice(CHUNK_ROWS - 5, CHUNK_ROWS + 5), slice(len(rows) - 3, None)):
        np.testing.assert_array_equal(lazy.x[block], whole.x[block])
    np.testing.assert_array_equal(lazy.x[:, 3], whole.x[:, 3])
    beta = rng.normal(size=4)
    np.testing.assert_allclose(lazy.x[:, :4] @ beta, whole.x[:, :4] @ beta, rtol=1e-14)
    by_rows, by_matrix = fit(plan, analysis, lazy), fit(plan, analysis, whole)
    for a, b in zip(by_rows.tiers, by_matrix.tiers):
        assert [c.estimate for c in a.columns] == [c.estimate for c in b.columns]
        assert [c.standard_error for c in a.columns] == [c.standard_error for c in b.columns]
        assert a.rss == b.rss
