"""Diagnostics of the report tier: collinearity, residual normality, constant variance, and
the most influential rows.

Leverages come from rows of Q = X R⁻¹, computed a chunk of rows at a time, so a million-row
design costs one pass of small matrix products and no n × n hat matrix.
"""

from __future__ import annotations

import numpy as np

from .fitted import Design, Diagnostics, Influential
from .inference import finite_or_none
from .qr import one_blas_thread, row_chunks, triangular_inverse

SHAPIRO_LIMIT = 5000  # scipy's Shapiro–Wilk p-value is stated accurate up to 5000 rows
TOP_INFLUENTIAL = 5


def variance_inflation(r: np.ndarray, width: int, labels) -> tuple[tuple[str, float | None], ...]:
    """VIF_j = 1 / (1 − R²_j), R²_j from regressing column j on all other columns with the
    intercept — from R alone: the trailing block R[1:, 1:] is the R factor of the centred
    columns X̃, so diag((X̃ᵀX̃)⁻¹) is the squared row norms of its inverse and
    VIF_j = ‖row j of R̃⁻¹‖² · ‖x̃_j‖² (the diagonal of the inverse correlation matrix)."""
    if width < 2:
        return ()
    block = r[1:width, 1:width]
    inverse = triangular_inverse(block)
    rows = np.sum(inverse ** 2, axis=1)
    norms = np.sum(block ** 2, axis=0)
    return tuple((labels[j + 1], finite_or_none(rows[j] * norms[j])) for j in range(width - 1))


def _leverage_pass(x: np.ndarray, rinv: np.ndarray, root_w: np.ndarray) -> np.ndarray:
    """Leverages h_i = ‖row i of W½X R⁻¹‖², in one pass over the rows."""
    n = x.shape[0]
    h = np.empty(n)
    with one_blas_thread(n):
        for rows in row_chunks(n):
            q = (x[rows] * root_w[rows, None]) @ rinv
            h[rows] = np.einsum("ij,ij->i", q, q)
    return h


def _gaussian_pass(x: np.ndarray, y: np.ndarray, beta: np.ndarray, rinv: np.ndarray):
    """Fitted values, residuals e, leverages h_i = ‖row i of X R⁻¹‖², and Q[:, 1:]ᵀ·e² for
    Breusch–Pagan, in one pass over the rows: each block of an on-demand design
    (compiler.design.DesignRows) is built once for all four."""
    n = x.shape[0]
    fitted, residuals, h = np.empty(n), np.empty(n), np.empty(n)
    projected = np.zeros(rinv.shape[1] - 1)
    with one_blas_thread(n):
        for rows in row_chunks(n):
            block = x[rows]
            fitted[rows] = block @ beta
            e = np.subtract(y[rows], fitted[rows], out=residuals[rows])
            q = block @ rinv
            h[rows] = np.einsum("ij,ij->i", q, q)
            projected += q[:, 1:].T @ np.square(e)
    return fitted, residuals, h, projected


def _influential(cooks: np.ndarray, row_ids) -> tuple[Influential, ...]:
    """The largest Cook's distances; ties go to the earlier row."""
    finite = np.isfinite(cooks)
    values = cooks if finite.all() else cooks[finite]
    if len(values) > TOP_INFLUENTIAL:  # keep every row tied with the fifth largest
        fifth = np.partition(values, len(values) - TOP_INFLUENTIAL)[-TOP_INFLUENTIAL]
        finite &= cooks >= fifth
    finite = np.flatnonzero(finite)
    order = finite[np.lexsort((finite, -cooks[finite]))][:TOP_INFLUENTIAL]
    ids = row_ids if row_ids is not None else np.arange(1, len(cooks) + 1)
    return tuple(Influential(str(ids[i]), float(cooks[i])) for i in order)


def _normality(residuals: np.ndarray):
    n = len(residuals)
    if n < 3:
        return None, None, None, "normality tests need at least 3 rows"
    if n <= SHAPIRO_LIMIT:
        from scipy import stats

        result = stats.shapiro(residuals)
        return "Shapiro-Wilk", finite_or_none(result.statistic), finite_or_none(result.pvalue), None
    # scipy.stats.normaltest's formulas from the residuals' moments (the streamed run's code),
    # so a large run never imports scipy.stats
    from .stream_diagnostics import CentralMoments, dagostino_pearson

    statistic, p_value = dagostino_pearson(CentralMoments.of(residuals))
    return "D'Agostino-Pearson", finite_or_none(statistic), finite_or_none(p_value), None


def breusch_pagan(n: int, p: int, squares: np.ndarray, projected: np.ndarray):
    """Koenker's studentized Breusch–Pagan LM = n·R² of e² on the tier's columns, on χ²(p − 1)
    (Koenker 1981, J Econometrics 17:107–112; statsmodels' het_breuschpagan default).
    R² from Q: the explained sum of squares is ‖Q[:, 1:]ᵀ e²‖² (``projected``), Q[:, 1:]
    being orthogonal to the intercept."""
    from scipy import special

    centred = float(np.sum((squares - squares.mean()) ** 2))
    if centred <= 0.0 or p < 2:
        return None, None
    lm = n * float(projected @ projected) / centred
    return finite_or_none(lm), finite_or_none(special.chdtrc(p - 1, lm))


def gaussian_diagnostics(design: Design, tier_name: str, r: np.ndarray, width: int,
                         beta: np.ndarray, sigma2: float | None) -> Diagnostics:
    vif = variance_inflation(r, width, design.labels)
    if sigma2 is None or sigma2 <= 0.0:
        return Diagnostics(tier_name, vif, None, None, None, None, None, (),
                           fitted=np.zeros(0), residuals=np.zeros(0),
                           reason="exact fit: zero residual variance; residual diagnostics "
                           "are undefined")
    fitted, residuals, h, projected = _gaussian_pass(
        design.x[:, :width], design.y, beta, triangular_inverse(r[:width, :width]))
    bp, bp_p = breusch_pagan(len(residuals), width, np.square(residuals), projected)
    reasons = []
    # n-long arrays are made in place where the formula allows: on a large sample each is
    # 8 bytes a row, and these are the fit's largest temporaries
    #   studentized = residuals / sqrt(σ² (1 − h)),  cooks = studentized² h / (p (1 − h))
    scale = np.subtract(1.0, h)
    with np.errstate(divide="ignore", invalid="ignore"):
        scale *= sigma2
        np.sqrt(scale, out=scale)
        studentized = residuals / scale
        cooks = np.square(studentized, out=scale)
        cooks *= h
        cooks /= width * (1.0 - h)
    keep = np.isfinite(studentized) & (h < 1.0 - 1e-10)
    every = bool(np.all(keep))
    if not every:
        reasons.append(f"{int(np.sum(~keep))} rows with leverage 1 have no studentized residual "
                       "or Cook's distance and are left out of both")
        cooks[~keep] = np.nan
    del h
    test, statistic, p_value, why = _normality(residuals)
    if why:
        reasons.append(why)
    return Diagnostics(
        tier=tier_name, vif=vif, normality_test=test, normality_statistic=statistic,
        normality_p=p_value, breusch_pagan_statistic=bp, breusch_pagan_p=bp_p,
        influential=_influential(cooks, design.row_ids),
        fitted=fitted if every else fitted[keep],
        residuals=studentized if every else studentized[keep],
        reason="; ".join(reasons) or None)


def glm_diagnostics(design: Design, family: str, tier_name: str, r_unweighted: np.ndarray,
                    width: int, mu: np.ndarray | None, weights: np.ndarray | None,
                    rinv: np.ndarray | None, failure: str | None) -> Diagnostics:
    """VIF from the unweighted design; Cook's distance from the weighted leverages (the
    formula of statsmodels' GLMInfluence, dispersion 1); Pearson residuals for the plots."""
    vif = variance_inflation(r_unweighted, width, design.labels)
    not_applicable = f"residual normality and Breusch–Pagan are not applicable to {family}"
    if failure is not None:
        return Diagnostics(tier_name, vif, None, None, None, None, None, (),
                           fitted=np.zeros(0), residuals=np.zeros(0),
                           reason=f"{not_applicable}; {failure}")
    root_w = np.sqrt(weights)
    h = _leverage_pass(design.x[:, :width], rinv, root_w)
    pearson = (design.y - mu) / root_w
    with np.errstate(divide="ignore", invalid="ignore"):
        cooks = pearson ** 2 * h / (width * (1.0 - h) ** 2)
    keep = np.isfinite(pearson)
    reasons = [not_applicable]
    if not np.all(np.isfinite(cooks)):
        reasons.append(f"{int(np.sum(~np.isfinite(cooks)))} rows with leverage 1 have no "
                       "Cook's distance")
    return Diagnostics(tier_name, vif, None, None, None, None, None,
                       _influential(cooks, design.row_ids), fitted=mu[keep],
                       residuals=pearson[keep], reason="; ".join(reasons))
