"""Checks of `prespec qualify`: each value prespec gave against its reference, as a record.

A check record (binding keys, shared/design.md "Qualification"): ``{id, source, quantity,
value, reference, lre, tolerance, passed}``, plus ``rule`` (how ``passed`` follows from the
others, so verify can re-derive it), ``measure`` and ``note``:

- rule ``lre``: passed when lre ≥ tolerance. ``measure`` is ``relative`` (NIST's log
  relative error −log10(|value − reference| / |reference|)) or, for a reference of 0,
  ``absolute`` (−log10 |value|, NIST's convention for a certified zero; from memory). An
  exact match counts 15.9, and no LRE is above it.
- rule ``rounded``: a published or tabled value printed to d digits (``reference`` is its
  text); the tolerance is the LRE that half a unit of its last digit allows, so the check
  passes exactly when |value − reference| ≤ half a unit.
- rule ``null``: the reference says the value cannot be computed (the standard errors of an
  exact fit): passed when value is null (its reason in ``note``).
- rule ``equal``: passed when value equals reference (a rejection, true or false).
"""

from __future__ import annotations

import math
from decimal import Decimal

from . import readback
from .qualify_problems import LRE_EXACT, Expected, ReferenceProblem

EXACT_LRE = 15.9


def lre(value, reference) -> tuple[float | None, str]:
    """(LRE, measure) of ``value`` against ``reference``; LRE None when value is None."""
    reference = float(reference)
    measure = "absolute" if reference == 0 else "relative"
    if value is None:
        return None, measure
    error = abs(float(value) - reference) / (1.0 if reference == 0 else abs(reference))
    return (EXACT_LRE if error == 0 else min(EXACT_LRE, -math.log10(error))), measure


def rounded_tolerance(text: str) -> float:
    """The LRE that a value within half a unit of ``text``'s last printed digit reaches."""
    printed = Decimal(text)
    half_unit = Decimal(5).scaleb(printed.as_tuple().exponent - 1)
    return -math.log10(float(half_unit) / abs(float(printed)))


def passed(record: dict) -> bool:
    """Whether a check record passes, from its own fields (verify recomputes this)."""
    rule = record["rule"]
    if rule == "null":
        return record["value"] is None
    if rule == "equal":
        return record["value"] == record["reference"]
    if rule == "rounded":
        if record["value"] is None:
            return False
        printed = Decimal(record["reference"])
        half_unit = Decimal(5).scaleb(printed.as_tuple().exponent - 1)
        return abs(Decimal(repr(float(record["value"]))) - printed) <= half_unit
    return record["lre"] is not None and record["lre"] >= record["tolerance"]


def record(check_id: str, source: str, quantity: str, value, reference, *, rule: str = "lre",
           tolerance: float | None = None, note: str | None = None) -> dict:
    found, measure = (None, None)
    if rule in ("lre", "rounded"):
        found, measure = lre(value, reference)
    if rule == "rounded":
        tolerance = rounded_tolerance(reference)
    out = {"id": check_id, "source": source, "quantity": quantity, "value": value,
           "reference": reference, "lre": None if found is None else round(found, 2),
           "measure": measure, "tolerance": None if tolerance is None else round(tolerance, 2),
           "rule": rule, "note": note}
    out["passed"] = passed(out)
    return out


# ---------------------------------------------------------------------------------------------
# Reading a problem's values back from its results document


_QUANTITY = {"estimate": "estimate", "standard_error": "standard error",
             "r_squared": "R²", "residual_sd": "residual standard deviation",
             "deviance": "deviance"}


def problem_checks(problem: ReferenceProblem, document: dict, labels: tuple[str, ...]) -> list:
    """The check records of one problem: ``labels`` are its report tier's design columns
    (compiler.columns, in design order), ``document`` its results."""
    tier = readback.tier(document, "reference", problem.tier)
    return [_check(problem, e, tier, labels) for e in problem.expected]


def _check(problem: ReferenceProblem, expected: Expected, tier: dict, labels) -> dict:
    kind = expected.reads[0]
    note = None
    if kind == "column":
        _, position, what = expected.reads
        label = labels[position]
        row = readback.column(tier, label)
        value = None if row is None else readback.column_value(row, what)
        quantity = f"{_QUANTITY[what]} of {label}"
        note = readback.column_reason(row) if row is not None and value is None else None
        if row is None:
            note = f"results.json has no column {label}"
    else:
        what = expected.reads[1]
        if what == "residual_sd":
            sigma2 = readback.tier_value(tier, "sigma2")
            value = None if sigma2 is None else math.sqrt(sigma2)
        else:
            value = readback.tier_value(tier, what)
        quantity = _QUANTITY[what]
        note = readback.tier_reason(tier) if value is None else None
    if expected.rule == "rounded":
        quantity += " (as published)"
    return record(f"{problem.id}.{expected.key}", expected.source, quantity, value,
                  expected.reference, rule=expected.rule, tolerance=expected.tolerance,
                  note=note)


def refused(problem: ReferenceProblem, why: str) -> list:
    """The records of a problem prespec refused to fit (its exit and message as the note):
    every value is null, and each check fails unless it expected null."""
    return [record(f"{problem.id}.{e.key}", e.source, f"{e.key.replace('_', ' ')}", None,
                   e.reference, rule=e.rule, tolerance=e.tolerance, note=why)
            for e in problem.expected]


# ---------------------------------------------------------------------------------------------
# Checks of the functions decisions and tests rely on, called as the pipeline calls them


HOLM_SOURCE = ("Holm (1979), Scand J Statist 6:65-70, worked example: p = (0.01, 0.04, "
               "0.03, 0.005) at alpha 0.05")
TABLE_SOURCE = "statistics handbook tables (references.md; checked with scipy.stats)"


def holm_checks() -> list:
    """Holm's worked example through compiler.multiplicity.adjust (what decide calls)."""
    from .multiplicity import adjust

    adjusted = adjust("holm", (0.01, 0.04, 0.03, 0.005), 0.05)
    out = []
    for i, (result, reference, rejected) in enumerate(zip(
            adjusted, (0.03, 0.06, 0.06, 0.02), (True, False, False, True)), start=1):
        out.append(record(f"holm.p_adjusted.{i}", HOLM_SOURCE, f"Holm-adjusted p of hypothesis "
                          f"{i}", result.p_adjusted, reference, tolerance=LRE_EXACT))
        out.append(record(f"holm.rejected.{i}", HOLM_SOURCE, f"hypothesis {i} rejected",
                          result.rejected, rejected, rule="equal"))
    return out


def quantile_checks() -> list:
    """Handbook quantiles: t from compiler.inference.critical_value (the intervals' and
    rules' quantile); F and χ² as the point where the p-value functions the nested
    comparisons use (scipy.special.fdtrc, chdtrc) cross 1 − level, found by bisection."""
    from scipy import special

    from .inference import critical_value

    out = [record("quantile.t.0975.10", TABLE_SOURCE, "t quantile 0.975, 10 df",
                  critical_value(0.95, 10), "2.228", rule="rounded")]
    for level, (df1, df2), text in ((0.95, (1, 10), "4.96"), (0.95, (2, 20), "3.49"),
                                    (0.95, (3, 30), "2.92"), (0.95, (2, 40), "3.23"),
                                    (0.99, (2, 10), "7.56")):
        found = _crossing(lambda f: special.fdtrc(df1, df2, f), 1 - level)
        out.append(record(f"quantile.F.{int(level * 100)}.{df1}.{df2}", TABLE_SOURCE,
                          f"F quantile {level:g}, ({df1}, {df2}) df", found, text,
                          rule="rounded"))
    for df, text in ((1, "3.841"), (2, "5.991")):
        found = _crossing(lambda x: special.chdtrc(df, x), 0.05)
        out.append(record(f"quantile.chi2.95.{df}", TABLE_SOURCE,
                          f"χ² quantile 0.95, {df} df", found, text, rule="rounded"))
    return out


def _crossing(upper_tail, p: float) -> float:
    """The x at which a decreasing upper-tail probability equals p (bisection to the last bit)."""
    low, high = 0.0, 1.0
    while upper_tail(high) > p:
        high *= 2
    for _ in range(200):
        middle = (low + high) / 2
        if middle in (low, high):
            break
        low, high = (middle, high) if upper_tail(middle) > p else (low, middle)
    return high
