"""Build a :class:`~rlrates.mdp.TabularMDP` from a discrete gymnasium environment's transition table.

Gymnasium's toy-text environments (FrozenLake, Taxi, CliffWalking, ...) expose
their dynamics as ``env.unwrapped.P``: ``P[s][a]`` is a list of
``(probability, next_state, reward, terminated)`` tuples. :func:`from_gymnasium`
turns that table into ``P`` (S', A, S') and ``R`` (S', A) arrays:

* **Duplicate successors add up**: two tuples with the same ``next_state``
  (FrozenLake lists a wall bump once per slip direction) give one entry whose
  probability is their sum.
* **Termination**: when any transition has ``terminated=True``, one absorbing
  state is appended at index ``S`` (the last state, so ``S' = S + 1``). Every
  terminated transition's probability goes to it (the ``next_state`` the table
  names is ignored: gymnasium resets after termination), and every action there
  leads back to it with reward 0. Tables without termination keep ``S' = S``.
* **Rewards** are the expected immediate reward ``R[s, a] = sum prob * reward``
  over the listed tuples (terminated ones included).
* **Rescaling**: the rate bounds this plugin checks assume rewards in [0, 1].
  When the expected rewards (the absorbing state's zeros included) leave that
  range, they are mapped affinely onto it, ``r' = (r - r_min) / (r_max - r_min)``,
  *everywhere, the absorbing state included* (its reward becomes
  ``-r_min / (r_max - r_min)``). Every trajectory then collects the same shift at
  every step forever, so for any discount ``gamma < 1`` and any policy,
  ``Q'(s, a) = (Q(s, a) - r_min / (1 - gamma)) / (r_max - r_min)``: optimal
  policies and value orderings are unchanged, and errors are measured in units
  of the reward range. (Keeping the absorbing reward at 0 instead would change
  the problem: an agent paid a positive reward per step would then prefer never
  to finish.) The rescaling is reported in three places: ``metadata`` gets
  ``"reward_offset": r_min``, ``"reward_scale": r_max - r_min`` and
  ``"rewards_rescaled": True``; the name gets the suffix ``"-rescaled"``. Pass
  ``rescale=False`` to keep the raw rewards (a :class:`~rlrates.mdp.RewardRangeWarning`
  follows, and the absorbing state keeps reward 0, which ``gamma = 1`` episodic
  evaluation with :func:`rlrates.v_pi` needs). If all rewards are equal but
  outside [0, 1], the scale is 1 and every reward becomes 0.

gymnasium itself is never imported here: any object with such a table works
(a wrapper is unwrapped through ``env.unwrapped``). When the object has
``observation_space`` / ``action_space``, both must be discrete (a gymnasium or
gym ``Discrete`` space, starting at 0) and agree with the table.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from .costs import dense_kernel_cost, require_memory
from .mdp import TabularMDP

__all__ = ["from_gymnasium"]


def _describe(env: Any) -> str:
    spec = getattr(env, "spec", None)
    spec_id = getattr(spec, "id", None)
    if isinstance(spec_id, str) and spec_id:
        return spec_id
    return type(env).__name__


def _table(env: Any, label: str) -> Any:
    for holder in (getattr(env, "unwrapped", None), env):
        table = getattr(holder, "P", None) if holder is not None else None
        if table is not None:
            return table
    raise ValueError(
        f"environment {label} has no transition table: expected `env.unwrapped.P` (or `env.P`) with "
        "P[s][a] = [(prob, next_state, reward, terminated), ...], as gymnasium's toy-text environments "
        "(FrozenLake, Taxi, CliffWalking) provide"
    )


def _space_size(space: Any, which: str, label: str) -> int | None:
    """``n`` of a discrete space (None when the environment has no such space)."""
    if space is None:
        return None
    n = getattr(space, "n", None)
    shape = getattr(space, "shape", ())
    discrete = type(space).__name__ == "Discrete" or (n is not None and tuple(shape or ()) == ())
    if not discrete or isinstance(n, bool) or not isinstance(n, (int, np.integer)):
        raise ValueError(
            f"environment {label}: `{which}` must be a Discrete space for a tabular MDP, got {space!r}"
        )
    start = getattr(space, "start", 0)
    if int(start) != 0:
        raise ValueError(f"environment {label}: `{which}` starts at {int(start)}; only Discrete spaces starting at 0 are supported")
    return int(n)


def _rows(table: Any, label: str) -> list[Any]:
    """The table's per-state entries, in state order 0..S-1."""
    if isinstance(table, Mapping):
        keys = list(table.keys())
        if any(isinstance(k, bool) or not isinstance(k, (int, np.integer)) for k in keys) or \
                sorted(int(k) for k in keys) != list(range(len(keys))):
            raise ValueError(
                f"environment {label}: the states of `P` must be the integers 0..S-1, got keys "
                f"{sorted(keys, key=repr)[:5]}{' ...' if len(keys) > 5 else ''}"
            )
        return [table[s] for s in range(len(keys))]
    if isinstance(table, Sequence) and not isinstance(table, (str, bytes)):
        return list(table)
    raise ValueError(f"environment {label}: `P` must be a dict or list indexed by state, got {type(table).__name__}")


def _outcomes(table_row: Any, s: int, label: str) -> list[Any]:
    if isinstance(table_row, Mapping):
        keys = list(table_row.keys())
        if any(isinstance(k, bool) or not isinstance(k, (int, np.integer)) for k in keys) or \
                sorted(int(k) for k in keys) != list(range(len(keys))):
            raise ValueError(f"environment {label}: the actions of P[{s}] must be the integers 0..A-1, got {keys[:6]}")
        return [table_row[a] for a in range(len(keys))]
    if isinstance(table_row, Sequence) and not isinstance(table_row, (str, bytes)):
        return list(table_row)
    raise ValueError(f"environment {label}: P[{s}] must be a dict or list indexed by action, got {type(table_row).__name__}")


def _number(value: Any, what: str, where: str, label: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ValueError(f"environment {label}: {where}: {what} must be a real number, got {value!r}")
    number = float(value)
    if not math.isfinite(number):
        raise ValueError(f"environment {label}: {where}: {what} is {number!r}, not finite")
    return number


def _refuse_too_large(states: int, actions: int, label: str) -> None:
    """Refuse, before allocating, a table whose dense P would exceed :data:`rlrates.storage.MAX_ENTRIES`,
    or need more memory than the machine has (:mod:`rlrates.costs`)."""
    from .storage import MAX_ENTRIES

    entries = states * actions * states
    if entries > MAX_ENTRIES:
        raise ValueError(
            f"environment {label}: a dense P of shape ({states}, {actions}, {states}) has {entries:,} entries "
            f"({entries * 8 / 2**30:.3g} GiB as float64), more than the {MAX_ENTRIES:,} a tabular MDP may hold here; "
            "use a smaller environment (tabular checks need the whole kernel in memory)"
        )
    require_memory(dense_kernel_cost(f"environment {label}", states, actions),
                   "use a smaller environment (tabular checks need the whole kernel in memory)")


def from_gymnasium(env: Any, *, name: str | None = None, rescale: bool = True) -> TabularMDP:
    """The tabular MDP of a discrete environment with a transition table ``P`` (see the module notes).

    ``name`` defaults to the environment's spec id (e.g. ``"FrozenLake-v1"``) or
    its class name, with ``"-rescaled"`` appended when the rewards were rescaled
    (a ``name`` you give is kept as it is; ``metadata`` reports the rescaling either way).
    """
    label = _describe(env)
    table = _table(env, label)
    rows = _rows(table, label)
    states = len(rows)
    if states == 0:
        raise ValueError(f"environment {label}: the transition table `P` is empty")
    per_state = [_outcomes(row, s, label) for s, row in enumerate(rows)]
    actions = len(per_state[0])
    for s, outcomes in enumerate(per_state):
        if len(outcomes) != actions:
            raise ValueError(
                f"environment {label}: state {s} has {len(outcomes)} actions in `P`, state 0 has {actions}; "
                "a tabular MDP needs the same actions in every state"
            )
    if actions == 0:
        raise ValueError(f"environment {label}: the states of `P` have no actions")
    unwrapped = getattr(env, "unwrapped", env)
    for which, size, count in (("observation_space", "states", states), ("action_space", "actions", actions)):
        n = _space_size(getattr(unwrapped, which, None), which, label)
        if n is not None and n != count:
            raise ValueError(f"environment {label}: `{which}` has n={n} but `P` lists {count} {size}")

    _refuse_too_large(states + 1, actions, label)
    P = np.zeros((states + 1, actions, states + 1))
    R = np.zeros((states + 1, actions))
    terminal_transitions = 0
    for s, outcomes in enumerate(per_state):
        for a, listed in enumerate(outcomes):
            if not isinstance(listed, Sequence) or isinstance(listed, (str, bytes)) or len(listed) == 0:
                raise ValueError(f"environment {label}: P[{s}][{a}] must be a non-empty list of (prob, next_state, reward, terminated)")
            for k, outcome in enumerate(listed):
                where = f"P[{s}][{a}][{k}]"
                if not isinstance(outcome, Sequence) or len(outcome) != 4:
                    raise ValueError(
                        f"environment {label}: {where} = {outcome!r} must be a tuple (prob, next_state, reward, terminated)"
                    )
                prob = _number(outcome[0], "the probability", where, label)
                reward = _number(outcome[2], "the reward", where, label)
                nxt = outcome[1]
                if isinstance(nxt, bool) or not isinstance(nxt, (int, np.integer)) or not 0 <= int(nxt) < states:
                    raise ValueError(f"environment {label}: {where}: next_state {nxt!r} is not a state 0..{states - 1}")
                if bool(outcome[3]):
                    P[s, a, states] += prob
                    terminal_transitions += 1
                else:
                    P[s, a, int(nxt)] += prob
                R[s, a] += prob * reward
    absorbing: int | None = None
    if terminal_transitions:
        absorbing = states
        P[states, :, states] = 1.0
    else:
        P, R = P[:states, :, :states], R[:states]

    metadata: dict[str, Any] = {
        "source": "gymnasium",
        "env": label,
        "env_states": states,
        "absorbing_state": absorbing,
        "terminal_transitions": terminal_transitions,
        "rewards_rescaled": False,
    }
    title = label if name is None else str(name)
    r_min, r_max = float(R.min()), float(R.max())
    if rescale and (r_min < 0.0 or r_max > 1.0):
        scale = r_max - r_min if r_max > r_min else 1.0
        R = (R - r_min) / scale
        metadata.update({"rewards_rescaled": True, "reward_offset": r_min, "reward_scale": scale})
        if name is None:
            title = f"{label}-rescaled"
    try:
        return TabularMDP(P, R, name=title, metadata=metadata)
    except ValueError as exc:
        raise ValueError(f"environment {label}: the transition table `P` does not give a valid MDP: {exc}") from None

