"""pytest-rlrates: check the sample-efficiency claims of tabular RL estimators.

The numerical core (MDPs, exact solutions, sampling, sweeps, fits, verdicts)
imports no pytest and works from a notebook::

    import rlrates
    mdp = rlrates.garnet(states=20, actions=4, branching=5, seed=0)
    result = rlrates.check(my_estimator, mdp, rlrates.Claim(n=-0.5, horizon=2.0))

Attributes are imported lazily, so that merely loading the pytest plugin (which
imports this package) does not pay for numpy, scipy and pandas.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

_EXPORTS: dict[str, str] = {
    "TabularMDP": "mdp",
    "RewardRangeWarning": "mdp",
    "garnet": "families",
    "chain": "families",
    "gridworld": "families",
    "ring": "families",
    "deterministic": "families",
    "horizon_hard": "families",
    "q_pi": "exact",
    "v_pi": "exact",
    "q_star": "exact",
    "greedy_policy": "exact",
    "suboptimality": "exact",
    "model_distance": "exact",
    "uniform_policy": "exact",
    "draw": "sampling",
    "Batch": "sampling",
    "Claim": "claims",
    "Budget": "budgets",
    "BUDGETS": "budgets",
    "Problem": "targets",
    "check": "rate_check",
    "RatesWarning": "rate_check",
    "CheckResult": "result",
    "CheckInterrupted": "result",
    "Fit": "result",
    "Estimator": "sweep",
    "save_mdp": "storage",
    "load_mdp": "storage",
    "from_gymnasium": "gym_import",
}

__all__ = sorted(_EXPORTS) + ["__version__"]

if TYPE_CHECKING:  # pragma: no cover  (explicit re-exports for type checkers)
    from .rate_check import RatesWarning as RatesWarning
    from .rate_check import check as check
    from .result import CheckInterrupted as CheckInterrupted
    from .result import CheckResult as CheckResult
    from .result import Fit as Fit
    from .sweep import Estimator as Estimator
    from .claims import Claim as Claim
    from .exact import greedy_policy as greedy_policy
    from .exact import model_distance as model_distance
    from .exact import q_pi as q_pi
    from .exact import q_star as q_star
    from .exact import suboptimality as suboptimality
    from .exact import uniform_policy as uniform_policy
    from .exact import v_pi as v_pi
    from .families import chain as chain
    from .families import deterministic as deterministic
    from .families import garnet as garnet
    from .families import gridworld as gridworld
    from .families import horizon_hard as horizon_hard
    from .families import ring as ring
    from .gym_import import from_gymnasium as from_gymnasium
    from .mdp import RewardRangeWarning as RewardRangeWarning
    from .mdp import TabularMDP as TabularMDP
    from .budgets import BUDGETS as BUDGETS
    from .budgets import Budget as Budget
    from .sampling import Batch as Batch
    from .sampling import draw as draw
    from .storage import load_mdp as load_mdp
    from .storage import save_mdp as save_mdp
    from .targets import Problem as Problem


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'rlrates' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__
