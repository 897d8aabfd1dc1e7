"""High-precision reference fits (mpmath, 50 digits) of the GLM problems `prespec qualify`
ships: Newton–Raphson for the logistic fit of Spector & Mazzeo (1980), and the closed form of
the Poisson main-effects fit of a balanced two-way table (Dobson 1990). The tests compare the
values shipped in reference/glm_fits.json with these; they were made with them."""

from __future__ import annotations

import mpmath as mp

DIGITS = 50


def _solve_information(rows, weights):
    """(XᵀWX)⁻¹ for design rows and weights, as an mpmath matrix."""
    p = len(rows[0])
    info = mp.matrix(p, p)
    for row, w in zip(rows, weights):
        for a in range(p):
            for b in range(p):
                info[a, b] += w * row[a] * row[b]
    return mp.inverse(info)


def logistic(rows, y, steps: int = 40):
    """Maximum-likelihood logistic coefficients and their standard errors (inverse Fisher
    information), by Newton–Raphson from zero at ``DIGITS`` digits."""
    with mp.workdps(DIGITS):
        rows = [[mp.mpf(v) for v in r] for r in rows]
        y = [mp.mpf(v) for v in y]
        beta = mp.matrix([0] * len(rows[0]))
        for _ in range(steps):
            eta = [sum(r[j] * beta[j] for j in range(len(r))) for r in rows]
            mu = [1 / (1 + mp.exp(-e)) for e in eta]
            inverse = _solve_information(rows, [m * (1 - m) for m in mu])
            score = mp.matrix([sum(r[j] * (yi - m) for r, yi, m in zip(rows, y, mu))
                               for j in range(len(rows[0]))])
            beta = beta + inverse * score
        eta = [sum(r[j] * beta[j] for j in range(len(r))) for r in rows]
        mu = [1 / (1 + mp.exp(-e)) for e in eta]
        inverse = _solve_information(rows, [m * (1 - m) for m in mu])
        return ([beta[j] for j in range(len(beta))],
                [mp.sqrt(inverse[j, j]) for j in range(len(beta))])


def poisson_two_way(rows, y, fitted):
    """Standard errors (inverse Fisher information at the fitted means) and the deviance of
    a Poisson fit whose fitted means are known in closed form."""
    with mp.workdps(DIGITS):
        rows = [[mp.mpf(v) for v in r] for r in rows]
        inverse = _solve_information(rows, fitted)
        deviance = 2 * sum(mp.mpf(yi) * mp.log(mp.mpf(yi) / m) - (mp.mpf(yi) - m)
                           for yi, m in zip(y, fitted))
        return [mp.sqrt(inverse[j, j]) for j in range(len(rows[0]))], deviance
