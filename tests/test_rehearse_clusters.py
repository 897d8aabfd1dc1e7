"""A clustered plan rehearses on clustered data, and scrambling moves whole clusters.

The defect: synthetic data gave every row its own cluster (2,636 df and SE 0.52 against 29 df
and SE 1.22 on the real data), and --scramble permuted rows, not clusters. Fixtures are plans
built in code (tests/rehearsekit.py); reference computations are statsmodels and numpy.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm

from compiler import design
from compiler.bound import Table
from compiler.pipeline import analyse
from compiler.plan import Covariance, Variable
from compiler.rehearse import scrambled_table, synthetic_table
from rehearsekit import VARIABLES, analysis, complete_sample, make_plan

SCHOOL = Variable("school", "identifier")


def clustered_plan(family="gaussian", outcome="score", **covariance):
    a = replace(analysis(family, outcome, population=None),
                covariance=Covariance("cluster", "school", **covariance))
    return make_plan(analyses=[a], populations=(), variables=VARIABLES + (SCHOOL,)), a


def _groups(values: np.ndarray) -> dict:
    out: dict = {}
    for key, value in zip(values, range(len(values))):
        out.setdefault(key, []).append(value)
    return out


def test_synthetic_data_hold_30_clusters_of_uneven_realistic_size_by_default():
    plan, _ = clustered_plan()
    school = synthetic_table(plan, seed=1, rows=3000).columns["school"]
    sizes = np.array([len(rows) for rows in _groups(school).values()])
    assert len(sizes) == 30 and sizes.sum() == 3000 and sizes.min() >= 1
    # gamma(4) shares: coefficient of variation near 0.5 (not equal sizes, not one row each)
    assert 0.25 < sizes.std() / sizes.mean() < 0.8


def test_a_declared_number_of_clusters_is_honoured():
    plan, _ = clustered_plan(clusters=12)
    assert len(set(synthetic_table(plan, seed=2, rows=600).columns["school"])) == 12


def test_the_exposure_is_assigned_to_whole_clusters_at_even_shares():
    plan, _ = clustered_plan()
    table = synthetic_table(plan, seed=3, rows=1500)
    arms = {tuple(sorted(set(table.columns["arm"][rows])))
            for rows in _groups(table.columns["school"]).values()}
    assert all(len(levels) == 1 for levels in arms)
    per_level = [sum(1 for rows in _groups(table.columns["school"]).values()
                     if table.columns["arm"][rows[0]] == level) for level in ("control", "low", "high")]
    assert per_level == [10, 10, 10]


def test_within_cluster_assignment_leaves_the_exposure_varying_inside_clusters():
    plan, _ = clustered_plan(assigned="within-cluster")
    table = synthetic_table(plan, seed=3, rows=1500)
    assert any(len(set(table.columns["arm"][rows])) > 1
               for rows in _groups(table.columns["school"]).values())


def _anova_icc(y: np.ndarray, groups: np.ndarray) -> float:
    """The one-way ANOVA estimator of the intra-cluster correlation (Donner 1986; any
    cluster-trial textbook): (MSB − MSW) / (MSB + (m₀ − 1) MSW)."""
    keys, codes = np.unique(groups, return_inverse=True)
    n, k = len(y), len(keys)
    sizes = np.bincount(codes)
    means = np.bincount(codes, weights=y) / sizes
    msb = np.sum(sizes * (means - y.mean()) ** 2) / (k - 1)
    msw = np.sum((y - means[codes]) ** 2) / (n - k)
    m0 = (n - np.sum(sizes ** 2) / n) / (k - 1)
    return (msb - msw) / (msb + (m0 - 1) * msw)


def test_the_gaussian_outcome_carries_the_declared_intra_cluster_correlation():
    # The outcome's total noise variance is split icc : 1 − icc between clusters and rows;
    # covariate effects (0.2 noise sd per sd each) add a little row-level variance. Fit the
    # planted model's residuals by OLS (statsmodels) and estimate the icc on them.
    plan, a = clustered_plan(icc=0.3, clusters=60)
    estimates = []
    for seed in range(5):
        table = synthetic_table(plan, seed=seed, rows=3000)
        built = design.design(plan, a, complete_sample(plan, a, table))
        residuals = sm.OLS(built.y, np.asarray(built.x)).fit().resid
        rows = complete_sample(plan, a, table).samples[0].rows
        estimates.append(_anova_icc(residuals, table.columns["school"][rows]))
    assert abs(np.mean(estimates) - 0.3) < 0.06


def test_clustered_standard_errors_and_df_look_like_a_cluster_design():
    # Kish's design effect 1 + (m − 1)·icc (Kish 1965, textbook) for a cluster-level
    # exposure: with the default icc 0.05 and clusters of about 100 rows it is near 6, so the
    # cluster-robust SE is about √6 ≈ 2.4 times the classical one, on 30 − 1 = 29 df.
    plan, a = clustered_plan()
    ratios = []
    for seed in range(6):
        table = synthetic_table(plan, seed=seed, rows=3000)
        fit = analyse(plan, None, table=table).fits[0]
        inference = fit.tiers[-1].exposure[0]
        assert inference.covariance == "clustered by school" and inference.df == 29
        built = design.design(plan, a, complete_sample(plan, a, table))
        classical = sm.OLS(built.y, np.asarray(built.x)).fit().bse[1:3]
        ratios += [c.standard_error / s for c, s in zip(inference.columns, classical)]
    m = 3000 / 30
    assert 0.6 * math.sqrt(1 + (m - 1) * 0.05) < np.median(ratios) < 1.4 * math.sqrt(
        1 + (m - 1) * 0.05)


@pytest.mark.parametrize("family, outcome", [("binomial", "cured"), ("poisson", "events")])
def test_glm_outcomes_are_clustered_too(family, outcome):
    # Between-cluster spread of the cluster means beyond what independent rows would give:
    # the ANOVA icc of the outcome itself is clearly above 0 (it is 0 ± 0.01 for
    # independent rows with 30 clusters of 100).
    plan, _ = clustered_plan(family, outcome, icc=0.2)
    table = synthetic_table(plan, seed=4, rows=3000)
    assert _anova_icc(table.columns[outcome], table.columns["school"]) > 0.04


# --- scrambling by cluster ------------------------------------------------------------------

def _real(constant: bool) -> Table:
    rng = np.random.default_rng(8)
    school = np.repeat([f"S{k}" for k in range(20)], rng.integers(5, 30, 20))
    n = len(school)
    if constant:
        per_school = {s: lvl for s, lvl in zip(sorted(set(school)),
                                               np.resize(["control", "low", "high"], 20))}
        arm = np.asarray([per_school[s] for s in school], dtype=object)
    else:
        arm = np.asarray(rng.choice(["control", "low", "high"], n), dtype=object)
    columns = {"pid": np.asarray([f"P{i}" for i in range(n)], dtype=object),
               "arm": arm, "school": np.asarray(school, dtype=object),
               "age": rng.uniform(18, 80, n)}
    return Table("data/final.csv", "csv", "ab" * 32, 1234, n, columns)


def test_scrambling_a_cluster_level_exposure_permutes_whole_clusters():
    plan, _ = clustered_plan()
    real = _real(constant=True)
    before = {s: real.columns["arm"][rows[0]] for s, rows in _groups(real.columns["school"]).items()}
    moved = 0
    for seed in range(3):
        scrambled = scrambled_table(plan, real, "arm", seed=seed)
        after = _groups(scrambled.columns["school"])
        assert all(len(set(scrambled.columns["arm"][rows])) == 1 for rows in after.values())
        now = {s: scrambled.columns["arm"][rows[0]] for s, rows in after.items()}
        moved += sum(now[s] != before[s] for s in now)
        assert scrambled.columns["school"] is real.columns["school"]
    assert moved > 0


def test_scrambling_a_within_cluster_exposure_keeps_each_clusters_mix():
    plan, _ = clustered_plan(assigned="within-cluster")
    real = _real(constant=False)
    scrambled = scrambled_table(plan, real, "arm", seed=4)
    for rows in _groups(real.columns["school"]).values():
        assert sorted(scrambled.columns["arm"][rows]) == sorted(real.columns["arm"][rows])
    assert list(scrambled.columns["arm"]) != list(real.columns["arm"])


# --- the plan language ----------------------------------------------------------------------

DEMO = __import__("pathlib").Path(__file__).resolve().parents[1] / "plans" / "dusk-sleep.yaml"
PRIMARY = "    report_tier: full\n    confidence: 0.95\n"


def _demo_with(tmp_path, covariance: str):
    import bundlekit

    plan = tmp_path / "plan.yaml"
    plan.write_text(DEMO.read_text(encoding="utf-8"), encoding="utf-8")
    bundlekit.edit(plan, "  sleeper_id:        {kind: identifier, label: Participant code}\n",
                   "  sleeper_id:        {kind: identifier, label: Participant code}\n"
                   "  school: {kind: identifier}\n")
    bundlekit.edit(plan, PRIMARY, PRIMARY + f"    covariance: {covariance}\n")
    return plan


def test_a_plan_declares_the_rehearsals_icc_and_clusters_beside_the_cluster(tmp_path):
    from compiler.pipeline import compile_plan

    plan = compile_plan(_demo_with(tmp_path, "{cluster: school, icc: 0.1, clusters: 24}"))
    assert plan.analysis("primary").covariance == Covariance("cluster", "school", 0.1, 24)
    table = synthetic_table(plan, seed=1, rows=600)
    assert len(set(table.columns["school"])) == 24
    fit = next(f for f in analyse(plan, None, table=table).fits if f.analysis == "primary")
    assert fit.tiers[-1].exposure[0].df == 23


def test_more_clusters_than_a_categorical_cluster_variable_has_levels_is_refused(tmp_path):
    from compiler.pipeline import compile_plan
    from compiler.problems import Stop

    with pytest.raises(Stop) as caught:
        compile_plan(_demo_with(tmp_path, "{cluster: district, clusters: 9}"))
    (problem,) = caught.value.problems
    assert "clusters: 9, but the cluster variable `district` has 4 levels" in problem.message
    assert problem.place.line > 0
