"""The words results.json, the report and `check --explain` share (plain Python: `check`
imports this without numpy)."""

from __future__ import annotations

# How a nested comparison or a joint test is made (fitted.Comparison.method and
# JointTest.method hold the keys).
METHOD_WORDS = {"F": "extra sum of squares", "LR": "likelihood ratio", "Wald": "Wald"}

# The scale an exposure estimate is read on, per family: the model scale's exp for a log or
# logit link.
NATURAL_SCALE = {"gaussian": "difference", "binomial": "odds ratio", "poisson": "rate ratio"}

# Which way an estimate moved from the first tier's (compiler.change).
DIRECTIONS = ("away from zero", "toward zero", "sign reversed", "none")


def method_of(family: str, covariance_kind: str) -> str:
    """The nested comparison a fit runs: F (gaussian) or LR (GLM) under the model's own
    variance, Wald under a robust or clustered covariance."""
    if covariance_kind != "classical":
        return "Wald"
    return "F" if family == "gaussian" else "LR"


def test_of(df: float | None, several: bool = False) -> str:
    """The distribution a statistic is referred to: t or z for one column (t on ``df``, z
    when df is None), F or chi2 for several (F on a denominator df, chi2 without)."""
    if several:
        return "chi2" if df is None else "F"
    return "z" if df is None else "t"
