"""Small plans and fits built in code, for testing the decide pass without fitting anything.

Coefficients get their statistic, p-value and interval from scipy's t or normal reference,
so a test can state an estimate and a standard error and let the reference library do the
rest. The plan: outcome ``latency`` (gaussian) or ``settled`` (binomial) or ``awakenings``
(poisson), exposure ``guidance`` with levels none (reference), leaflet, coached, and tiers
crude → baseline (adds age) → full (adds shift).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from scipy import stats

from compiler.fitted import (AnalysisFit, Coefficient, Comparison, Diagnostics,
                             ExposureInference, JointTest, TierFit)
from compiler.plan import (Analysis, Assumption, Covariance, DataSource, Decision,
                           MinimumInformation, Multiplicity, Plan, Study, Term, Tier, Variable)

OUTCOME = {"gaussian": "latency", "binomial": "settled", "poisson": "awakenings"}
TIERS = ("crude", "baseline", "full")


def _reference(df: float | None):
    return stats.norm if df is None else stats.t(df)


def coefficient(term: str, estimate: float | None, standard_error: float | None,
                df: float | None = None, confidence: float = 0.95) -> Coefficient:
    if estimate is None or standard_error is None:
        return Coefficient(term, estimate, standard_error, None, None, None, None,
                           reason="not computable in this fixture")
    ref = _reference(df)
    statistic = estimate / standard_error
    q = float(ref.ppf(0.5 + confidence / 2))
    return Coefficient(term, estimate, standard_error, statistic, float(2 * ref.sf(abs(statistic))),
                       estimate - q * standard_error, estimate + q * standard_error)


def inference(effects: dict[str, tuple[float | None, float | None]], covariance="classical",
              df: float | None = 100, joint: JointTest | None = None) -> ExposureInference:
    coefs = tuple(coefficient(term, est, se, df) for term, (est, se) in effects.items())
    return ExposureInference(covariance, coefs, df, joint)


def tier_fit(name: str, *inferences: ExposureInference, n: int = 200, n_parameters: int = 3,
             dispersion: float | None = None) -> TierFit:
    return TierFit(name=name, terms_added=(), n=n, n_parameters=n_parameters,
                   residual_df=n - n_parameters, log_likelihood=None, aic=None, bic=None,
                   columns=inferences[0].columns if inferences else (),
                   exposure=tuple(inferences), dispersion=dispersion)


def comparison(reduced: str, larger: str, p_value: float | None) -> Comparison:
    return Comparison(reduced, larger, "F", 1, None if p_value is None else 1.0, p_value,
                      reason=None if p_value is not None else "not computable in this fixture")


def diagnostics(tier: str, breusch_pagan_p: float | None) -> Diagnostics:
    return Diagnostics(tier=tier, vif=(), normality_test=None, normality_statistic=None,
                       normality_p=None, breusch_pagan_statistic=None,
                       breusch_pagan_p=breusch_pagan_p, influential=(),
                       fitted=np.zeros(0), residuals=np.zeros(0),
                       reason=None if breusch_pagan_p is not None else "fixture: not computed")


def analysis_fit(*tiers: TierFit, comparisons=(), family="gaussian", analysis="primary",
                 breusch_pagan_p: float | None = None, events: int | None = None,
                 n: int = 200) -> AnalysisFit:
    report = tiers[-1].name
    return AnalysisFit(analysis=analysis, family=family, n=n, tiers=tuple(tiers),
                       comparisons=tuple(comparisons), exposure=(),
                       diagnostics=diagnostics(report, breusch_pagan_p), events=events)


def same_exposure_fit(effects: dict[str, tuple[float, float]], *, df: float | None = 100,
                      family="gaussian", **fit_args) -> AnalysisFit:
    """All three tiers carry the same exposure inference (classical only)."""
    tiers = [tier_fit(name, inference(effects, df=df), n_parameters=3 + k)
             for k, name in enumerate(TIERS)]
    return analysis_fit(*tiers, family=family, **fit_args)


def decision(id: str, test: str = "superiority", tier: str = "full", **fields) -> Decision:
    return Decision(id=id, analysis="primary", test=test, tier=tier, **fields)


def plan_with(*decisions: Decision, family: str = "gaussian",
              levels: tuple[str, ...] = ("none", "leaflet", "coached"),
              assumptions: tuple[Assumption, ...] = (),
              multiplicity: tuple[Multiplicity, ...] = (),
              minimum_information: MinimumInformation = MinimumInformation(),
              exposure_kind: str = "categorical") -> Plan:
    outcome = OUTCOME[family]
    outcome_kind = {"gaussian": "continuous", "binomial": "binary", "poisson": "count"}[family]
    exposure = (Variable("guidance", "categorical", levels=levels, reference=levels[0])
                if exposure_kind == "categorical" else Variable("guidance", exposure_kind))
    variables = (Variable(outcome, outcome_kind, unit="minutes" if family == "gaussian" else None),
                 exposure, Variable("age", "continuous"), Variable("shift", "binary"))
    base = Term("variable", ("guidance",))
    age, shift = Term("variable", ("age",)), Term("variable", ("shift",))
    tiers = (Tier("crude", (), (base,)), Tier("baseline", (age,), (base, age)),
             Tier("full", (shift,), (base, age, shift)))
    analysis = Analysis(id="primary", outcome=outcome, family=family, exposure="guidance",
                        tiers=tiers, report_tier="full", covariance=Covariance(),
                        minimum_information=minimum_information)
    return Plan(language=1, study=Study("fixture"), data=DataSource(None, None),
                variables=variables, populations=(), analyses=(analysis,),
                decisions=tuple(decisions), assumptions=tuple(assumptions),
                multiplicity=tuple(multiplicity))


def with_report_tier(plan: Plan, report_tier: str) -> Plan:
    analysis = replace(plan.analyses[0], report_tier=report_tier)
    return replace(plan, analyses=(analysis,))
