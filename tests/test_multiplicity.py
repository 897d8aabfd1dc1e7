"""Multiplicity procedures against a published worked example and a reference library."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from statsmodels.stats.multitest import multipletests

from compiler.multiplicity import adjust, bonferroni, fixed_sequence, hochberg, holm

# Holm (1979), Scand J Statist 6:65–70, worked example as given in references.md.
HOLM_P = (0.01, 0.04, 0.03, 0.005)
HOLM_ADJUSTED = (0.03, 0.06, 0.06, 0.02)

p_vectors = st.lists(st.floats(min_value=1e-6, max_value=1.0, allow_nan=False),
                     min_size=1, max_size=8)
alphas = st.sampled_from([0.01, 0.025, 0.05, 0.1])


def _clear_of_boundary(adjusted, alpha) -> bool:
    """Rejection at exactly adjusted p = α differs by convention (we use p < α, statsmodels
    uses p ≤ α); compare reject flags only away from that boundary."""
    return all(abs(a - alpha) > 1e-12 for a in adjusted)


def test_holm_matches_the_published_worked_example():
    out = holm(HOLM_P, 0.05)
    assert [o.p_adjusted for o in out] == pytest.approx(HOLM_ADJUSTED, abs=1e-12)


def test_holm_rejects_the_first_and_fourth_of_the_worked_example():
    assert [o.rejected for o in holm(HOLM_P, 0.05)] == [True, False, False, True]


def test_holm_holds_each_step_to_alpha_over_remaining_count():
    # ascending order is 0.005, 0.01, 0.03, 0.04 → α/4, α/3, α/2, α/1 (Holm 1979)
    out = holm(HOLM_P, 0.05)
    assert [o.alpha_used for o in out] == pytest.approx([0.05 / 3, 0.05, 0.05 / 2, 0.05 / 4])


# statsmodels' holm path takes ~0.2 s a call here, so fewer examples than the others
@settings(max_examples=15, deadline=None)
@given(p=p_vectors, alpha=alphas)
def test_holm_agrees_with_statsmodels(p, alpha):
    reject, corrected, _, _ = multipletests(p, alpha=alpha, method="holm")
    out = holm(p, alpha)
    assert [o.p_adjusted for o in out] == pytest.approx(list(corrected), rel=1e-12, abs=1e-15)
    if _clear_of_boundary(corrected, alpha):
        assert [o.rejected for o in out] == list(reject)


@settings(max_examples=60, deadline=None)
@given(p=p_vectors, alpha=alphas)
def test_hochberg_agrees_with_statsmodels_simes_hochberg(p, alpha):
    reject, corrected, _, _ = multipletests(p, alpha=alpha, method="simes-hochberg")
    out = hochberg(p, alpha)
    assert [o.p_adjusted for o in out] == pytest.approx(list(corrected), rel=1e-12, abs=1e-15)
    if _clear_of_boundary(corrected, alpha):
        assert [o.rejected for o in out] == list(reject)


@settings(max_examples=60, deadline=None)
@given(p=p_vectors, alpha=alphas)
def test_bonferroni_agrees_with_statsmodels(p, alpha):
    reject, corrected, _, alpha_bonf = multipletests(p, alpha=alpha, method="bonferroni")
    out = bonferroni(p, alpha)
    assert [o.p_adjusted for o in out] == pytest.approx(list(corrected), rel=1e-12, abs=1e-15)
    assert all(o.alpha_used == pytest.approx(alpha_bonf) for o in out)
    if _clear_of_boundary(corrected, alpha):
        assert [o.rejected for o in out] == list(reject)


def test_hochberg_rejects_all_when_the_largest_p_clears_alpha():
    # Hochberg (1988): step-up; p₍₂₎ = 0.04 < α/1 rejects both, though 0.03 > α/2.
    out = hochberg((0.03, 0.04), 0.05)
    assert [o.rejected for o in out] == [True, True]


def test_holm_rejects_neither_in_the_same_case():
    # The step-down counterpart fails at its first step: 0.03 > 0.05/2 (Holm 1979).
    assert [o.rejected for o in holm((0.03, 0.04), 0.05)] == [False, False]


def test_fixed_sequence_stops_at_the_first_failure():
    out = fixed_sequence((0.01, 0.20, 0.001), 0.05)
    assert [o.rejected for o in out] == [True, False, False]
    assert [o.tested for o in out] == [True, True, False]
    assert out[2].stopped_by == 1


def test_fixed_sequence_tests_each_reached_member_at_full_alpha():
    out = fixed_sequence((0.01, 0.04, 0.2), 0.05)
    assert [o.alpha_used for o in out] == [0.05, 0.05, 0.05]
    assert [o.rejected for o in out] == [True, True, False]


def test_fixed_sequence_adjusted_p_is_the_running_maximum():
    # hierarchical procedure: adjusted p = max of the p-values up to and including it
    out = fixed_sequence((0.01, 0.04, 0.02), 0.05)
    assert [o.p_adjusted for o in out] == [0.01, 0.04, 0.04]


def test_missing_p_is_never_rejected_and_still_counts_in_m():
    out = bonferroni((0.001, None), 0.05)
    assert out[1].rejected is False and out[1].p_adjusted is None
    assert out[0].p_adjusted == pytest.approx(0.002)  # m = 2, not 1


def test_missing_p_in_holm_is_treated_as_one():
    # statsmodels reference with the missing member filled in as p = 1
    _, corrected, _, _ = multipletests([0.01, 1.0, 0.02], method="holm")
    out = holm((0.01, None, 0.02), 0.05)
    assert out[0].p_adjusted == pytest.approx(corrected[0])
    assert out[2].p_adjusted == pytest.approx(corrected[2])


def test_missing_p_stops_a_fixed_sequence():
    out = fixed_sequence((0.01, None, 0.001), 0.05)
    assert [o.rejected for o in out] == [True, False, False]
    assert out[2].tested is False and out[2].stopped_by == 1


def test_adjust_dispatches_on_the_plan_method_name():
    assert adjust("holm", HOLM_P, 0.05) == holm(HOLM_P, 0.05)
