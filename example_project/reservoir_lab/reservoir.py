"""The Lakeside district reservoir as a tabular MDP, built from the district's own numbers.

Storage is counted in whole units (one unit = 50,000 m^3), from empty (0) to full
(``CAPACITY``). Each season the operator chooses a release of 0 to 3 units; the
release cannot exceed what is stored. Then the season's inflow arrives (a
distribution estimated from the district's gauge records) and anything above
capacity spills.

The reward values delivered water against a demand of ``DEMAND`` units, charges for
spilled water (flood damage downstream) and for running the reservoir empty (pumps
run dry). Raw rewards are rescaled affinely to [0, 1], the range the rate bounds
assume; ``REWARD_OFFSET`` and ``REWARD_SCALE`` undo it.
"""

from __future__ import annotations

import numpy as np

import rlrates

CAPACITY = 8
RELEASES = (0, 1, 2, 3)
INFLOW = np.array([0.15, 0.30, 0.30, 0.15, 0.10])  # P(inflow = 0, 1, 2, 3, 4 units per season)
DEMAND = 2
VALUE_PER_UNIT = 0.35      # delivered water up to the demand
SURPLUS_VALUE = 0.05       # water released beyond the demand
SPILL_COST = 0.10          # per unit spilled
EMPTY_COST = 0.30          # reservoir drawn down to zero

_RAW = None


def _raw_model() -> tuple[np.ndarray, np.ndarray]:
    states = CAPACITY + 1
    P = np.zeros((states, len(RELEASES), states))
    R = np.zeros((states, len(RELEASES)))
    for storage in range(states):
        for a, wanted in enumerate(RELEASES):
            released = min(wanted, storage)
            left = storage - released
            delivered = VALUE_PER_UNIT * min(released, DEMAND) + SURPLUS_VALUE * max(released - DEMAND, 0)
            reward = delivered - (EMPTY_COST if left == 0 else 0.0)
            for inflow, prob in enumerate(INFLOW):
                level = left + inflow
                spill = max(level - CAPACITY, 0)
                P[storage, a, min(level, CAPACITY)] += prob
                reward -= prob * SPILL_COST * spill
            R[storage, a] = reward
    return P, R


def build() -> rlrates.TabularMDP:
    """The reservoir MDP with rewards rescaled to [0, 1]."""
    P, R = _raw_model()
    low, high = float(R.min()), float(R.max())
    return rlrates.TabularMDP(
        P, (R - low) / (high - low), name="lakeside-reservoir",
        metadata={"family": "reservoir", "capacity": CAPACITY, "releases": list(RELEASES),
                  "inflow": INFLOW.tolist(), "reward_offset": low, "reward_scale": high - low},
    )


def historical_rule() -> np.ndarray:
    """The district's historical operating rule, as logged: mostly release the demand, hedge when low.

    An (S, A) behaviour policy: at each storage level the operators released 2 units
    (the demand) with probability 0.55 when they could, otherwise 1 unit, with some
    0- and 3-unit seasons; every release was tried at every level now and then.
    """
    policy = np.full((CAPACITY + 1, len(RELEASES)), 0.05)
    for storage in range(CAPACITY + 1):
        policy[storage, 2 if storage >= 2 else 1] += 0.55
        policy[storage, 1] += 0.2
    return policy / policy.sum(axis=1, keepdims=True)


def proposed_rule() -> np.ndarray:
    """The rule the lab proposes: release the demand, more when nearly full, less when nearly empty."""
    policy = np.zeros((CAPACITY + 1, len(RELEASES)))
    for storage in range(CAPACITY + 1):
        release = 3 if storage >= CAPACITY - 1 else 2 if storage >= 3 else 1
        policy[storage, release] = 1.0
    return policy
