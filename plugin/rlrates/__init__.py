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
    "Profile": "profiles",
    "PROFILES": "profiles",
    "Problem": "targets",
    "check": "rate_check",
    "CheckResult": "rate_check",
    "RatesWarning": "rate_check",
    "save_mdp": "storage",
    "load_mdp": "storage",
    "from_gymnasium": "gym_import",
}

__all__ = sorted(_EXPORTS) + ["__version__"]

if TYPE_CHECKING:  # pragma: no cover
    from .rate_check import CheckResult, RatesWarning, check
    from .claims import Claim
    from .exact import greedy_policy, model_distance, q_pi, q_star, suboptimality, uniform_policy, v_pi
    from .families import chain, deterministic, garnet, gridworld, horizon_hard, ring
    from .gym_import import from_gymnasium
    from .mdp import RewardRangeWarning, TabularMDP
    from .profiles import PROFILES, Profile
    from .sampling import Batch, draw
    from .storage import load_mdp, save_mdp
    from .targets import Problem


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module 'rlrates' has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__
