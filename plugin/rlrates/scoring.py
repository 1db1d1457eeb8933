"""Scoring a cell's estimates: their errors against the exact answer, in replicate order.

Plain float64 Q-value arrays under the sup-norm are copied into one block and
scored together when the cell ends (one subtraction and one maximum per cell, the
same numbers as one per call); any other estimate is scored on the spot, after the
ones queued before it. An error that is not finite sends its estimate through the
full validation (:func:`rlrates.targets.scored_error`), which names the bad entry;
the first invalid estimate is the cell's failure, and the rows before it are kept.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .result import CellFailure
from .targets import EstimateError, Truth, scored_error

__all__ = ["CellScorer"]


_FLOAT64 = np.dtype(np.float64)


class CellScorer:
    """Appends ``(replicate, error, seconds)`` to ``rows``; ``add`` and ``flush`` return the failure, if any."""

    def __init__(self, truth: Truth, norm: str, n: int, replicates: int, rows: list[tuple[int, float, float]],
                 behaviour: int | None = None) -> None:
        self.truth, self.norm, self.n, self.rows, self.behaviour = truth, norm, n, rows, behaviour
        self.shape = np.shape(truth.value)
        fast = norm == "sup" and truth.target in ("q_pi", "q_star")
        self.block = np.empty((replicates, *self.shape)) if fast else None
        self.pending: list[tuple[int, float]] = []  # (replicate, seconds) of the estimates in the block

    def add(self, replicate: int, estimate: Any, seconds: float) -> CellFailure | None:
        """Score (or queue) one estimate; the failure when it, or one queued before it, was invalid."""
        # a float64 ndarray of the right shape is queued (other float64 dtype objects, say with
        # metadata, take the full validation below and get the same number)
        if (type(estimate) is np.ndarray and estimate.dtype is _FLOAT64 and estimate.shape == self.shape
                and self.block is not None):
            self.block[len(self.pending)] = estimate
            self.pending.append((replicate, seconds))
            return None
        return self.flush() or self._one(replicate, estimate, seconds)

    def flush(self) -> CellFailure | None:
        """Score the queued estimates; the failure of the first invalid one (the rows before it are kept)."""
        if not self.pending:
            return None
        queued, self.pending = self.pending, []
        assert self.block is not None
        gaps = np.subtract(self.block[: len(queued)], self.truth.value)
        np.abs(gaps, out=gaps)
        errors = np.maximum.reduce(gaps.reshape(len(queued), -1), axis=1)  # each estimate's largest gap
        # the usual case, every queued estimate scores: a finite sum (a NaN or inf error, or a sum that
        # overflows, takes the row-by-row path below, which scores the finite ones alike)
        if math.isfinite(float(np.add.reduce(errors))):
            self.rows.extend((replicate, error, seconds) for (replicate, seconds), error in zip(queued, errors.tolist()))
            return None
        for index, ((replicate, seconds), error) in enumerate(zip(queued, errors.tolist())):
            if math.isfinite(error):
                self.rows.append((replicate, error, seconds))
                continue
            failure = self._one(replicate, self.block[index], seconds)
            if failure is not None:
                return failure
        return None

    def _one(self, replicate: int, estimate: Any, seconds: float) -> CellFailure | None:
        try:
            error = scored_error(estimate, self.truth, self.norm)
        except EstimateError as exc:
            return CellFailure(self.truth.gamma, self.n, replicate, "invalid", str(exc), "", self.behaviour)
        self.rows.append((replicate, error, seconds))
        return None
