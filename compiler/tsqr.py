"""Tall-skinny QR: the R factor of a matrix too tall to hold, one batch of rows at a time.

For A = [A₁; A₂; …] with QR factors Aᵢ = QᵢRᵢ, the stacked [R₁; R₂; …] has the same R factor
as A (up to the signs of its rows), because AᵀA = Σ RᵢᵀRᵢ and the stacked R factors carry
that Gram matrix without ever forming it (Demmel, Grigori, Hoemmen & Langou 2012, SIAM J Sci
Comput 34:A206–A239). Each step is a Householder QR, so the result keeps QR's accuracy: the
normal equations are never formed.

The pass is written as a reduction so that a distributed engine can run it unchanged:
``tsqr_map`` on each partition, ``tsqr_combine`` on any grouping of the partials, in any
order. :class:`TsqrAccumulator` is the same reduction run on one machine, folding batches
in as they arrive so that memory stays at a few R factors.
"""

from __future__ import annotations

from typing import Iterable

import numpy as np

from .qr import column_scales

PIECE_ROWS = 8192  # as compiler/qr.py's CHUNK_ROWS: a piece of a batch fits in cache


def tsqr_map(block: np.ndarray) -> np.ndarray:
    """The R factor of one batch of rows: min(rows, p) × p, upper trapezoidal.

    A batch with fewer rows than columns gives a short R; the combine step stacks it with the
    others, so no padding is needed."""
    block = np.asarray(block, dtype=np.float64)
    if block.shape[0] == 0:
        return np.zeros((0, block.shape[1]))
    return np.linalg.qr(block, mode="r")


def tsqr_combine(partials: Iterable[np.ndarray]) -> np.ndarray:
    """The R factor of the rows whose partial R factors are given (any grouping, any order)."""
    stacked = [np.asarray(r, dtype=np.float64) for r in partials]
    if not stacked:
        raise ValueError("tsqr_combine needs at least one partial")
    return tsqr_map(np.vstack(stacked))


def square(r: np.ndarray) -> np.ndarray:
    """R as p × p: zero rows appended when fewer rows than columns were seen."""
    rows, p = r.shape
    if rows >= p:
        return r[:p]
    return np.vstack([r, np.zeros((p - rows, p))])


class TsqrAccumulator:
    """Folds batches into a running R factor: ``add`` per batch, ``r`` at the end.

    Batches are combined pairwise through a small stack (a binary-counter tree), so each row
    passes through about log₂(batches) small QRs of 2p × p, and rounding grows with the depth
    of the tree rather than with the number of batches.
    """

    def __init__(self, width: int, equilibrate: bool = False):
        self.width = width
        self.rows = 0
        self._levels: list[np.ndarray | None] = []
        # equilibrate: R is that of the block's columns over ``scales`` (qr.column_scales of
        # every row so far); a held R is rescaled, exactly, when a batch raises a scale
        self.scales = np.ones(width)
        self._maxima = np.zeros(width) if equilibrate else None

    def add(self, block: np.ndarray) -> None:
        if block.shape[1] != self.width:
            raise ValueError(f"batch has {block.shape[1]} columns, expected {self.width}")
        self.rows += block.shape[0]
        if self._maxima is not None:
            np.maximum(self._maxima, np.max(np.abs(block), axis=0, initial=0.0),
                       out=self._maxima)
            wanted = column_scales(self._maxima)
            if np.any(wanted != self.scales):
                ratio = self.scales / wanted
                self._levels = [None if held is None else held * ratio
                                for held in self._levels]
                self.scales = wanted
            if np.any(self.scales != 1.0):
                block = block / self.scales
        # a large batch in cache-sized pieces: Householder QR is memory-bound on tall blocks
        for start in range(0, max(block.shape[0], 1), PIECE_ROWS):
            self.add_partial(tsqr_map(block[start:start + PIECE_ROWS]))

    def add_partial(self, partial: np.ndarray) -> None:
        carry = partial
        for level, held in enumerate(self._levels):
            if held is None:
                self._levels[level] = carry
                return
            carry = tsqr_combine([held, carry])
            self._levels[level] = None
        self._levels.append(carry)

    @property
    def r(self) -> np.ndarray:
        """The p × p R factor of every row added so far."""
        held = [r for r in self._levels if r is not None]
        if not held:
            return np.zeros((self.width, self.width))
        return square(tsqr_combine(held) if len(held) > 1 else held[0])
