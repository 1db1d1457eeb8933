"""Up-front checks of ``rlrates.check``'s optional arguments: one clear error naming the argument and what is valid.

:func:`check_arguments` runs before anything is built, so a mistyped override
(``replicates=4.9``, ``gammas=0.9``, ``n_grid=128``, ``executor=object()``) is a
``TypeError`` or ``ValueError`` that names the argument, the value received and
an example of a valid one, rather than an error from deep inside numpy or the
budget. It only checks types and ranges the budget cannot; the budget still
checks the grid itself (three distinct n, discounts in (0, 1)).
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable
from typing import Any

__all__ = ["check_arguments", "N_LIMIT"]

#: Sample sizes are drawn as int64 counts, so n must stay below 2**63.
N_LIMIT = 2**63 - 1


def _sequence(name: str, value: object, example: str) -> list[Any]:
    """``value`` as a list, refusing a bare number or a string (both are easy mistakes for a one-element grid)."""
    if isinstance(value, (str, bytes)) or not isinstance(value, Iterable):
        raise TypeError(f"`{name}` must be a sequence such as {example}, got {type(value).__name__} {value!r}")
    return list(value)


def _replicates(value: object) -> None:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        shown = f"{type(value).__name__} {value!r}"
        raise TypeError(f"`replicates` must be a whole number of replicates per cell (an integer >= 4, e.g. 24), got {shown}")


def _n_grid(value: object) -> None:
    for n in _sequence("n_grid", value, "(128, 256, 512)"):
        if isinstance(n, bool) or not isinstance(n, numbers.Integral) or int(n) < 1:
            raise ValueError(f"`n_grid` must hold positive integers, got {n!r} (n is the samples per state-action pair)")
        if int(n) > N_LIMIT:
            raise ValueError(f"`n_grid` values must lie in 1 .. 2**63 - 1 (n is drawn as int64 counts), got {n!r}")


def _gammas(value: object) -> None:
    for gamma in _sequence("gammas", value, "(0.5, 0.9)"):
        if isinstance(gamma, bool) or not isinstance(gamma, numbers.Real):
            raise TypeError(f"`gammas` must hold numbers in (0, 1), got {type(gamma).__name__} {gamma!r}")
        if not math.isfinite(float(gamma)) or not 0.0 < float(gamma) < 1.0:
            raise ValueError(f"`gammas` must lie in (0, 1), got {gamma!r}")


def _executor(value: object) -> None:
    if not callable(getattr(value, "submit", None)):
        raise TypeError(
            "`executor` must be a concurrent.futures.Executor (a ThreadPoolExecutor, a ProcessPoolExecutor, a dask "
            f"client's get_executor()), or None to run serially; got {type(value).__name__}, which has no submit()"
        )


def check_arguments(*, n_grid: object = None, gammas: object = None, replicates: object = None,
                    executor: object = None, target: object = "q_pi", policy: object = None) -> None:
    """Raise ``TypeError`` / ``ValueError`` naming the first optional argument of ``check`` that cannot be right."""
    if replicates is not None:
        _replicates(replicates)
    if n_grid is not None:
        _n_grid(n_grid)
    if gammas is not None:
        _gammas(gammas)
    if executor is not None:
        _executor(executor)
    if policy is not None and target not in ("q_pi", "value"):
        raise ValueError(
            f"`policy` is the evaluation policy of targets 'q_pi' and 'value' and is not used with target "
            f"{target!r}; leave it out, or use target='q_pi'"
        )
