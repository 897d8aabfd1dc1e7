"""TSQR: the R factor of [X | y] built from batches keeps QR's accuracy and gives every tier.

Check values: NIST StRD "Longley" certified values (Longley 1967, JASA 62:819–841; certified
by NIST ITL), as listed in /work/shared/references.md; independent computations by
numpy.linalg.lstsq and numpy.linalg.qr (reference libraries).
"""

import numpy as np
import pytest

from compiler.qr import triangular_inverse
from compiler.tsqr import TsqrAccumulator, square, tsqr_combine, tsqr_map

# NIST StRD Longley certified values: (estimate, standard deviation), intercept first.
LONGLEY_CERTIFIED = [
    (-3482258.63459582, 890420.383607373),   # intercept
    (15.0618722713733, 84.9149257747669),    # GNPDEFL
    (-0.0358191792925910, 0.0334910077722432),  # GNP
    (-2.02022980381683, 0.488399681651699),  # UNEMP
    (-1.03322686717359, 0.214274163161675),  # ARMED
    (-0.0511041056535807, 0.226073200069370),  # POP
    (1829.15146461355, 455.478499142212),    # YEAR
]
LONGLEY_RSS = 836424.055505915  # NIST certified residual sum of squares, df 9


def log_relative_error(estimate, certified):
    """NIST's LRE = −log10(|est − cert| / |cert|), capped at 15 digits for an exact match."""
    error = abs(estimate - certified) / abs(certified)
    return 15.0 if error == 0 else -np.log10(error)


def longley_augmented():
    from statsmodels.datasets import longley

    data = longley.load_pandas()
    x = np.column_stack([np.ones(len(data.endog)), data.exog.to_numpy(dtype=float)])
    return np.column_stack([x, data.endog.to_numpy(dtype=float)])


def batched_r(a, rows):
    accumulator = TsqrAccumulator(a.shape[1])
    for start in range(0, len(a), rows):
        accumulator.add(a[start:start + rows])
    return accumulator.r


def fit_from_r(r, width, n):
    """Coefficients, standard errors and RSS of the first ``width`` columns, from R alone."""
    r_inv = triangular_inverse(r[:width, :width])
    beta = r_inv @ r[:width, -1]
    rss = float(np.sum(r[width:, -1] ** 2))
    sigma = np.sqrt(rss / (n - width))
    return beta, sigma * np.linalg.norm(r_inv, axis=1), rss


def test_longley_in_batches_of_four_rows_keeps_ten_digits_on_every_coefficient_and_se():
    a = longley_augmented()
    beta, se, rss = fit_from_r(batched_r(a, 4), 7, len(a))
    for j, (cert_b, cert_se) in enumerate(LONGLEY_CERTIFIED):
        assert log_relative_error(beta[j], cert_b) >= 10, j
        assert log_relative_error(se[j], cert_se) >= 10, j
    assert log_relative_error(rss, LONGLEY_RSS) >= 10


def test_short_batches_fewer_rows_than_columns_combine_to_the_full_r():
    a = longley_augmented()  # 16 × 8; batches of 3 rows are shorter than they are wide
    partials = [tsqr_map(a[s:s + 3]) for s in range(0, 16, 3)]
    assert partials[0].shape == (3, 8)
    full = np.linalg.qr(a, mode="r")
    combined = square(tsqr_combine(partials))
    # R is unique up to the signs of its rows (numpy.linalg.qr as the reference)
    np.testing.assert_allclose(np.abs(combined), np.abs(full), rtol=1e-9, atol=1e-6)


def test_combine_is_independent_of_grouping_and_order():
    rng = np.random.default_rng(7)
    a = rng.normal(size=(500, 6))
    parts = [tsqr_map(a[s:s + 50]) for s in range(0, 500, 50)]
    one = tsqr_combine(parts)
    two = tsqr_combine([tsqr_combine(parts[:3]), tsqr_combine(parts[3:][::-1])])
    np.testing.assert_allclose(np.abs(one), np.abs(two), rtol=1e-12, atol=1e-12)


def test_fewer_rows_than_columns_overall_pads_with_exact_zero_rows():
    rng = np.random.default_rng(1)
    a = rng.normal(size=(3, 5))
    r = batched_r(a, 2)
    assert r.shape == (5, 5)
    assert np.all(r[3:] == 0)
    np.testing.assert_allclose(r.T @ r, a.T @ a, atol=1e-12)


@pytest.mark.parametrize("rows", [1, 7, 64, 1000])
def test_every_tier_from_one_streamed_r_matches_lstsq(rows):
    rng = np.random.default_rng(11)
    n, p = 1000, 6
    x = np.column_stack([np.ones(n), rng.normal(size=(n, p - 1))])
    y = x @ rng.normal(size=p) + rng.normal(size=n)
    r = batched_r(np.column_stack([x, y]), rows)
    for width in (1, 3, 6):  # nested tiers are the leading blocks of R (prefix property)
        beta, _, rss = fit_from_r(r, width, n)
        reference, residual, *_ = np.linalg.lstsq(x[:, :width], y, rcond=None)
        np.testing.assert_allclose(beta, reference, rtol=1e-11, atol=1e-13)
        assert rss == pytest.approx(float(residual[0]), rel=1e-11)
