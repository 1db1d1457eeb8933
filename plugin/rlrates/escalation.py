"""Escalation: what a check runs next when a pass leaves the verdict ambiguous.

Passes: the budget's grid first; then, when the intervals are too wide, more
replicates for every cell (once), and when the curve is not yet asymptotic, one
doubling of the largest n per pass, up to the budget's escalation allowance. Either step is
taken when the other is spent. Only when both are spent, or when the verdict
says no evidence would settle it, is the answer "inconclusive". A frozen :class:`Escalation` is the state between passes;
:meth:`Escalation.next` gives the next state and the cells it adds.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

from .budgets import Budget
from .vocabulary import Need

__all__ = ["Escalation", "Step"]


@dataclass(frozen=True)
class Step:
    """The cells one pass adds: every n in ``n_values``, replicates ``start .. stop - 1``."""

    n_values: tuple[int, ...]
    start: int
    stop: int


@dataclass(frozen=True)
class Escalation:
    """The sweep so far (its n values and replicates) and the escalation allowance left."""

    n_values: tuple[int, ...]
    replicates: int
    more_replicates: int  # factor of the replicate step; 1 once spent (or when the budget skips it)
    doublings_left: int

    @classmethod
    def start(cls, budget: Budget) -> tuple["Escalation", Step]:
        """The first pass: the budget's grid at its replicates."""
        state = cls(tuple(budget.n_grid), budget.replicates, budget.more_replicates, budget.n_doublings)
        return state, Step(state.n_values, 0, state.replicates)

    def next(self, need: Need | None) -> tuple["Escalation", Step] | None:
        """The state after one more escalation step and what that step runs; ``None`` when the budget is spent
        or when no step would settle the question (``need == "nothing"``)."""
        if need == "nothing":
            return None
        replicates_spent = self.more_replicates <= 1
        if self.doublings_left > 0 and (need == "larger_n" or replicates_spent):
            n = max(self.n_values) * 2
            return (replace(self, n_values=(*self.n_values, n), doublings_left=self.doublings_left - 1),
                    Step((n,), 0, self.replicates))
        if not replicates_spent:
            more = self.replicates * self.more_replicates
            return replace(self, replicates=more, more_replicates=1), Step(self.n_values, self.replicates, more)
        return None
