"""Covariance of the coefficients: classical, heteroscedasticity-consistent HC0–HC3, clustered.

All from the R factor, never from an inverted XᵀX. With X̃ = W½X = Q R (W the GLM working
weights, the identity for gaussian), the bread is (X̃ᵀX̃)⁻¹ = R⁻¹R⁻ᵀ and Q = X̃ R⁻¹, so

    sandwich = R⁻¹ [ Σ_i ω_i r_i² q_i q_iᵀ ] R⁻ᵀ,

with q_i the i-th row of Q, r_i the Pearson residual (the raw residual for gaussian) and
h_i = ‖q_i‖² the leverage. The forms (MacKinnon & White 1985, J Econometrics 29:305–325):
    HC0  ω = 1            HC1  ω = n / (n − p)
    HC2  ω = 1 / (1 − h)  HC3  ω = 1 / (1 − h)²
Clustered (Liang & Zeger 1986; the CR1 small-sample factor statsmodels' ``cov_type="cluster"``
uses): meat = G/(G − 1) · (n − 1)/(n − p) · Σ_g s_g s_gᵀ with s_g = Σ_{i∈g} r_i q_i.
The prefix property carries over: for nested gaussian tiers Q_k is the first p_k columns of
Q, so one pass over the rows serves every tier.
Gaussian inference uses t on n − p degrees of freedom, or G − 1 when clustered (the reference
statsmodels uses with ``use_t=True``); GLM inference uses the normal.
"""

from __future__ import annotations

import numpy as np

from .fitted import Reference
from .plan import Covariance
from .qr import one_blas_thread, row_chunks


def reference_df(covariance: Covariance, family: str, residual_df: int,
                 clusters: int | None) -> float | None:
    """Degrees of freedom of the t reference, or None for the normal."""
    if family != "gaussian":
        return None
    if covariance.kind == "cluster":
        return float(clusters - 1) if clusters else None
    return float(residual_df)


def reference_of(covariance: Covariance, family: str, tiers) -> Reference:
    """Which distribution the analysis covariance's t or z statistics are referred to, and
    why (the words the results and the report carry)."""
    if family != "gaussian":
        basis = ("binomial and Poisson inference is large-sample: the dispersion is fixed at 1 "
                 "and nothing is estimated from residual degrees of freedom, so there is no "
                 "t reference with an exact basis")
        if covariance.kind == "cluster":
            basis += ("; with a clustered covariance the normal is the usual large-sample "
                      "reference (statsmodels' for GLMs), and with few clusters its intervals "
                      "are too narrow")
        return Reference("z", None, "z (standard normal), every tier", basis)
    if covariance.kind == "cluster":
        df = tiers[0].exposure[0].df if tiers and tiers[0].exposure else None
        shown = "clusters − 1" if df is None else f"clusters − 1 = {df:g}"
        return Reference("t", df, f"t on {shown} df, every tier",
                         "a clustered covariance is estimated from one score sum per cluster, "
                         "so its precision grows with the clusters, not the rows: t on "
                         "G − 1 degrees of freedom (Cameron & Miller 2015, J Human Resources "
                         "50:317–372; statsmodels' use_t convention), where the normal would "
                         "overstate it when clusters are few")
    if covariance.kind == "classical":
        return Reference("t", None, "t on each tier's residual df (n − p)",
                         "the classical covariance with normal errors: t on the residual "
                         "degrees of freedom is exact")
    return Reference("t", None, "t on each tier's residual df (n − p)",
                     "a heteroscedasticity-consistent covariance is large-sample; t on the "
                     "residual degrees of freedom is the more cautious small-sample reference "
                     "(statsmodels' use_t convention)")


def sandwich_covariances(x: np.ndarray, rinv: np.ndarray, widths, residuals,
                         covariances, cluster: np.ndarray | None = None,
                         root_w: np.ndarray | None = None) -> list[dict[str, np.ndarray]]:
    """Robust covariance matrices of nested fits sharing one R⁻¹ (prefixes of ``rinv``).

    ``widths[k]`` is tier k's number of columns and ``residuals[k]`` its Pearson (gaussian:
    raw) residuals; ``covariances`` are the robust choices wanted. Returns, per tier, a dict
    from covariance label to its p_k × p_k matrix.
    """
    n = x.shape[0]
    kinds = [c for c in covariances if c.kind != "classical"]
    if not kinds:
        return [{} for _ in widths]
    needs_leverage = any(c.kind in ("HC2", "HC3") for c in kinds)
    clustered = any(c.kind == "cluster" for c in kinds)
    groups = int(cluster.max()) + 1 if clustered and cluster is not None and n else 0
    top = max(widths)
    meats = [{c.label: np.zeros((w, w)) for c in kinds if c.kind != "cluster"} for w in widths]
    sums = [np.zeros((groups, w)) for w in widths] if clustered else None
    inverse = rinv[:top, :top]
    # leverage 1 gives ∞ under HC2/HC3; judged (None with a reason) when the table is made
    with np.errstate(divide="ignore", invalid="ignore"), one_blas_thread(n):
        _accumulate(x, inverse, widths, residuals, kinds, cluster, root_w, needs_leverage,
                    meats, sums, groups)
    out = []
    for k, w in enumerate(widths):
        r = rinv[:w, :w]
        found = {}
        for c in kinds:
            if c.kind == "cluster":
                meat = cluster_meat(sums[k], n, w, groups)
            else:
                meat = meats[k][c.label]
                if c.kind == "HC1":
                    meat = meat * (n / (n - w))
            with np.errstate(all="ignore"):
                found[c.label] = r @ meat @ r.T
        out.append(found)
    return out


def cluster_meat(sums: np.ndarray, n: int, width: int, groups: int) -> np.ndarray:
    """The clustered sandwich's meat from each cluster's summed scores (one row a cluster),
    with the small-sample factor G/(G − 1) · (n − 1)/(n − p) (statsmodels' default)."""
    meat = sums.T @ sums
    if groups > 1 and n > width:
        return meat * (groups / (groups - 1.0)) * ((n - 1.0) / (n - width))
    return meat * np.nan  # one cluster: no between-cluster information


def cluster_sums(x, inverse, widths, residuals, cluster, sums, groups, root_w=None) -> None:
    """Add the rows' scores to their clusters' sums (``sums[k]``: groups × widths[k]), for a
    pass that sees the rows a block at a time (a streamed run)."""
    kinds = [Covariance("cluster")]
    with np.errstate(divide="ignore", invalid="ignore"), one_blas_thread(x.shape[0]):
        _accumulate(x, inverse, widths, residuals, kinds, cluster, root_w, False,
                    [{} for _ in widths], sums, groups)


def _accumulate(x, inverse, widths, residuals, kinds, cluster, root_w, needs_leverage,
                meats, sums, groups) -> None:
    top = inverse.shape[0]
    for rows in row_chunks(x.shape[0]):
        xc = x[rows, :top]
        if root_w is not None:
            xc = xc * root_w[rows, None]
        qc = xc @ inverse
        squares = np.cumsum(qc * qc, axis=1) if needs_leverage else None
        for k, w in enumerate(widths):
            qk = qc[:, :w]
            u = qk * residuals[k][rows, None]
            h = squares[:, w - 1] if needs_leverage else None
            for c in kinds:
                if c.kind in ("HC0", "HC1"):
                    meats[k][c.label] += u.T @ u
                elif c.kind == "HC2":
                    meats[k][c.label] += (u / (1.0 - h)[:, None]).T @ u
                elif c.kind == "HC3":
                    meats[k][c.label] += (u / ((1.0 - h) ** 2)[:, None]).T @ u
            if sums is not None:
                codes = cluster[rows]
                for j in range(w):
                    sums[k][:, j] += np.bincount(codes, weights=u[:, j], minlength=groups)


def distinct_covariances(plan, analysis) -> list[Covariance]:
    """The analysis covariance first, then each distinct fallback its assumptions name."""
    found = [analysis.covariance]
    for assumption in plan.assumptions:
        if assumption.analysis == analysis.id and assumption.fallback not in found:
            found.append(assumption.fallback)
    return found
