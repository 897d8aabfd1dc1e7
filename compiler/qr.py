"""The least-squares kernel: one Householder QR of the augmented design [X | y].

The R factor of [X | y] holds everything a nested family of least-squares fits needs
(Golub & Van Loan, Matrix Computations, section 5.3): for the first p_k columns,
    R[:p_k, :p_k]                          is that tier's R factor,
    R[:p_k, p]                             is Q_kᵀ y,
    RSS_k = Σ R[p_k:p, p]² + R[p, p]²      is that tier's residual sum of squares,
so one decomposition serves every tier. Rows are taken in chunks, each chunk stacked under
the R of the rows before it and decomposed again (a tall-skinny QR): the same Householder
arithmetic, but each LAPACK call works on a block that fits in cache, and no n × (p + 1)
copy of the data is ever made.
"""

from __future__ import annotations

import contextlib

import numpy as np

CHUNK_ROWS = 8192  # measured in bench/fit_bench.py: 4k–32k rows are all close on 21 columns


def one_blas_thread(rows: int):
    """A context that runs BLAS/LAPACK on one thread when ``rows`` span several chunks: each
    chunk's work is small and sits in cache, so waking threads for every call costs more
    than it saves — on a busy machine, many times more (bench/fit_bench.py). Setting the
    limit itself costs milliseconds, so a single chunk goes without. Libraries loaded
    before entry are covered, so import scipy.linalg first."""
    if rows <= CHUNK_ROWS:
        return contextlib.nullcontext()
    from threadpoolctl import threadpool_limits

    return threadpool_limits(limits=1, user_api="blas")


def augmented_r(x: np.ndarray, y: np.ndarray, weights: np.ndarray | None = None,
                chunk_rows: int = CHUNK_ROWS) -> np.ndarray:
    """The (p + 1) × (p + 1) upper-triangular R of [W½X | W½y] (W = diag(weights))."""
    from scipy.linalg import lapack

    with one_blas_thread(x.shape[0]):
        return _augmented_r(lapack, x, y, weights, chunk_rows)


def equilibrated_r(x: np.ndarray, y: np.ndarray, chunk_rows: int = CHUNK_ROWS
                   ) -> tuple[np.ndarray, np.ndarray]:
    """(R, scales): the R factor of [X | y]·D⁻¹, D = diag(scales), with ``scales`` from
    :func:`column_scales` over every row. The scales are found as the chunks go by: when a
    chunk raises a column's scale, the R of the rows before is rescaled by the ratio, a
    power of 2 and so exact, and the result is that of scaling first. No extra pass."""
    from scipy.linalg import lapack

    scales = np.ones(x.shape[1] + 1)
    with one_blas_thread(x.shape[0]):
        r = _augmented_r(lapack, x, y, None, chunk_rows, scales)
    return r, scales


def column_scales(maxima: np.ndarray) -> np.ndarray:
    """Per column, 1 when its largest magnitude lies in [2^-SAFE, 2^SAFE] (or it is zero),
    else the power of 2 nearest below that magnitude. Householder QR is column-wise
    backward stable, so scaling a column changes nothing of its accuracy, only its range:
    squares of 1e160 overflow and those of 1e-160 fall into subnormals (Higham, Accuracy and
    Stability of Numerical Algorithms, 2nd ed., section 19.3; from memory). A power of 2
    scales exactly, and ordinary columns are left untouched, bit for bit."""
    maxima = np.asarray(maxima, dtype=np.float64)
    safe = (maxima == 0.0) | ((maxima >= 2.0 ** -SAFE) & (maxima <= 2.0 ** SAFE))
    exponents = np.frexp(np.where(safe, 1.0, maxima))[1] - 1
    return np.where(safe, 1.0, np.ldexp(1.0, exponents))


SAFE = 64  # columns within 2^±64 are never scaled: their squares summed stay normal numbers


def _augmented_r(lapack, x, y, weights, chunk_rows, scales=None) -> np.ndarray:
    """``scales`` given (ones, updated in place): the R of the equilibrated [X | y]."""
    n, p = x.shape
    width = p + 1
    r = np.zeros((0, width))
    lwork = None
    root_w = None if weights is None else np.sqrt(weights)
    maxima = np.zeros(width)
    for start in range(0, n, chunk_rows):
        stop = min(n, start + chunk_rows)
        top = r.shape[0]
        rows = top + stop - start
        part = np.empty((rows, width), order="F")  # F-contiguous: LAPACK works in place
        part[:top] = r
        part[top:, :p] = x[start:stop]
        part[top:, p] = y[start:stop]
        if root_w is not None:
            part[top:] *= root_w[start:stop, None]
        if scales is not None:
            np.maximum(maxima, np.max(np.abs(part[top:]), axis=0, initial=0.0), out=maxima)
            wanted = column_scales(maxima)
            part[:top] *= scales / wanted  # the rows before, to the new scales (exact)
            scales[:] = wanted
            part[top:] /= scales
        if lwork is None:
            lwork = max(1, int(lapack.dgeqrf(part, lwork=-1)[2][0]))
        factored, _tau, _work, info = lapack.dgeqrf(part, lwork=lwork, overwrite_a=True)
        if info != 0:
            raise RuntimeError(f"LAPACK dgeqrf failed with info = {info}")
        r = np.triu(factored[:min(rows, width)])
    if r.shape[0] < width:  # fewer rows than columns: pad, the zero rows are exact
        r = np.vstack([r, np.zeros((width - r.shape[0], width))])
    return r


def rank_tolerance(n: int, p: int) -> float:
    """Relative tolerance of the rank test: max(n, p) · ε, the convention of
    numpy.linalg.matrix_rank (Press et al., Numerical Recipes, section 2.6)."""
    return max(n, p) * np.finfo(np.float64).eps


def aliased_columns(r: np.ndarray, n: int) -> list[int]:
    """Design columns that are (to working precision) linear combinations of earlier ones.

    In an unpivoted QR, |R_jj| is the norm of column j orthogonal to the columns before it,
    and the norm of column j itself is ‖R[:j+1, j]‖ (Q keeps norms); column j is aliased when
    |R_jj| ≤ max(n, p) · ε · ‖x_j‖ — scale-free, and it names the column in tier order, i.e.
    the term that brings nothing new given everything entered before it.
    """
    p = r.shape[1]
    tol = rank_tolerance(n, p)
    out = []
    for j in range(p):
        norm = float(np.linalg.norm(r[: j + 1, j]))
        if norm == 0.0 or abs(r[j, j]) <= tol * norm:
            out.append(j)
    return out


def triangular_inverse(r: np.ndarray) -> np.ndarray:
    """R⁻¹ by LAPACK dtrtri (back substitution); its leading blocks are the inverses of R's
    leading blocks."""
    from scipy.linalg import lapack

    inverse, info = lapack.dtrtri(np.asarray(r, dtype=np.float64), lower=0)
    if info != 0:
        raise np.linalg.LinAlgError(f"R is singular at its diagonal entry {info}")
    return np.triu(inverse)


def back_substitute(r: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve R x = b for upper-triangular R (LAPACK dtrtrs)."""
    from scipy.linalg import lapack

    x, info = lapack.dtrtrs(np.asarray(r, dtype=np.float64), np.asarray(b, dtype=np.float64),
                            lower=0)
    if info != 0:
        raise np.linalg.LinAlgError(f"R is singular at its diagonal entry {info}")
    return x


def row_chunks(n: int, chunk_rows: int = CHUNK_ROWS):
    for start in range(0, n, chunk_rows):
        yield slice(start, min(n, start + chunk_rows))
