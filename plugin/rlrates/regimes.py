"""Data regimes: where a check's samples come from, and the exact answers of each logged-data setting.

=============  ==============================================  =====================
``data=``      one batch                                       n counts
=============  ==============================================  =====================
generative     n next states for every (s, a)                  samples per pair
transitions    n i.i.d. (s, a, s'), (s, a) ~ mu (the           transitions in all
               behaviour's discounted occupancy)
trajectories   n // L episodes of L steps from ``initial``     transitions in all
               under the behaviour policy
=============  ==============================================  =====================

A logged-data check runs one *setting* per (discount, behaviour level): level 0
is the behaviour given (or :func:`rlrates.occupancy.default_behaviour`); a
coverage claim adds the levels of :func:`rlrates.occupancy.graded_behaviours`.
Each setting's truth carries a :class:`rlrates.targets.DataSpec` with its data
distribution and concentrability coefficient C, computed exactly.

The target of ``"value"`` is ``J(pi) = sum_s initial(s) V^pi(s)`` for
transitions; for trajectories it is the discounted value of an episode of the
stated length, ``sum_{t < L} gamma^t E[r_t]``, which is what an estimator from
L-step episodes can be consistent for (both exact). The Q targets stay the
infinite-horizon Q^pi and Q*.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

import numpy as np

from .budgets import Budget
from .claims import Claim
from .exact import validate_policy
from .logged import LoggedKernel
from .mdp import TabularMDP
from .occupancy import (concentrability, default_behaviour, default_episode_length, discounted_occupancy,
                        episode_occupancy, episode_value, graded_behaviours, uniform_initial)
from .sampling import SupportKernel
from .targets import DataSpec, Truth
from .vocabulary import DATA_REGIMES

__all__ = ["validate_data", "regime_design", "logged_n_grid", "logged_truths", "logged_kernel", "plan_logged",
           "coverage_map", "smallest_probability", "logged_notes", "COVERAGE_LEVELS", "VALUE_REPLICATES"]

#: Behaviour policies a coverage claim is fitted over (C doubling from one to the next).
COVERAGE_LEVELS = 4

#: The "value" target's replicates, as a multiple of the budget's (see :func:`regime_design`).
VALUE_REPLICATES = 4

#: Targets a logged-data check can have (a model or an optimal policy from logged data is the
#: generative regime's business).
LOGGED_TARGETS = ("q_pi", "value")


def validate_data(data: object, target: str, behaviour: Any, episode_length: object, coverage_claimed: bool) -> str:
    """The data regime, checked against the other arguments (errors name the argument)."""
    if data not in DATA_REGIMES:
        raise ValueError(f"unknown `data` {data!r}; choose one of {', '.join(DATA_REGIMES)}")
    regime = str(data)
    if regime == "generative":
        for name, value in (("behaviour", behaviour), ("episode_length", episode_length)):
            if value is not None:
                raise ValueError(f"`{name}` needs logged data: pass data='transitions' or data='trajectories'")
        if coverage_claimed:
            raise ValueError("a `coverage` claim needs logged data (data='transitions' or 'trajectories'): "
                             "a generative model covers every pair alike")
        return regime
    if target not in LOGGED_TARGETS:
        raise ValueError(f"target {target!r} is not available with data={regime!r}; choose one of "
                         f"{', '.join(LOGGED_TARGETS)}")
    if episode_length is not None:
        if regime != "trajectories":
            raise ValueError("`episode_length` needs data='trajectories'")
        if isinstance(episode_length, bool) or not isinstance(episode_length, (int, np.integer)) or episode_length < 1:
            raise ValueError(f"`episode_length` must be a positive integer, got {episode_length!r}")
    return regime


def regime_design(design: Budget, target: str, regime: str, claim: Claim, own_replicates: bool,
                  own_gammas: bool) -> Budget:
    """The design changes a target or regime needs (kept as given where the caller set them).

    The "value" target gets ``VALUE_REPLICATES`` times the replicates: one scalar's
    absolute error is a folded normal (relative sd 0.76, against about 0.3 for a
    sup-norm over pairs), so this gives its fits the precision of the others. A
    coverage claim without an H-claim is fitted at one discount (the budget's first).
    """
    if target == "value" and not own_replicates:
        design = replace(design, replicates=VALUE_REPLICATES * design.replicates)
    if regime != "generative" and claim.coverage is not None and claim.horizon is None and not own_gammas:
        design = replace(design, gammas=design.gammas[:1])
    return design


def logged_n_grid(n_grid: tuple[int, ...], mdp: TabularMDP) -> tuple[int, ...]:
    """The default logged grid: the budget's samples per pair times S A transitions (the same data per pair on average)."""
    return tuple(int(n) * mdp.states * mdp.actions for n in n_grid)


def _behaviour_for(behaviour: Any, mdp: TabularMDP) -> np.ndarray:
    if behaviour is None:
        return default_behaviour(mdp)
    chosen = behaviour(mdp) if callable(behaviour) else behaviour
    pi = validate_policy(mdp, chosen, name="behaviour")
    if pi.ndim != 2:  # deterministic actions: as a one-hot matrix
        pi = np.eye(mdp.actions)[pi]
    return np.asarray(pi, dtype=float)


def logged_truths(truth: Truth, regime: str, behaviour: Any, episode_length: int | None,
                  levels: int) -> list[Truth]:
    """The settings of one discount: one truth per behaviour level, each with its exact data distribution and C."""
    mdp, gamma = truth.mdp, truth.gamma
    initial = uniform_initial(mdp)
    length = None if regime == "transitions" else int(episode_length or default_episode_length(gamma))
    target_occupancy = discounted_occupancy(mdp, gamma, truth.policy, initial)

    def distribution(policy: np.ndarray) -> np.ndarray:
        if length is None:
            return discounted_occupancy(mdp, gamma, policy, initial)
        return episode_occupancy(mdp, policy, initial, length)

    def coverage_of(policy: np.ndarray) -> float:
        return concentrability(target_occupancy, distribution(policy))

    base = _behaviour_for(behaviour, mdp)
    family = graded_behaviours(coverage_of, base, truth.policy, levels) if levels > 1 else [(base, coverage_of(base))]
    truth_value = truth.value  # Q^pi, or J(pi) from the same uniform initial distribution
    if truth.target == "value" and length is not None:
        truth_value = np.asarray(episode_value(mdp, gamma, truth.policy, initial, length))
    settings = []
    for level, (policy, coverage) in enumerate(family):
        if not math.isfinite(coverage):
            raise ValueError(f"the behaviour policy{' (level ' + str(level) + ')' if level else ''} never visits a "
                             f"state-action pair that the evaluation policy visits in {mdp.name} (gamma={gamma:g}): the "
                             "concentrability coefficient is infinite and no amount of such data identifies the target")
        spec = DataSpec(regime, policy, initial, length, distribution(policy), coverage, level)
        settings.append(Truth(mdp, gamma, truth.target, truth.policy, truth_value, truth.scale, data=spec))
    return settings


def logged_kernel(truth: Truth, successors: SupportKernel) -> LoggedKernel:
    """The sampler of one logged-data setting."""
    spec = truth.data
    assert spec is not None
    return LoggedKernel.build(spec.regime, successors, spec.distribution, spec.initial, spec.behaviour,
                              spec.episode_length or 1, np.asarray(truth.mdp.R, dtype=float))


def plan_logged(truths: dict[float, Truth], kernels: dict[float, SupportKernel], regime: str, behaviour: Any,
                episode_length: int | None, levels: int) -> tuple[dict[tuple[float, int], Truth],
                                                               dict[tuple[float, int], LoggedKernel]]:
    """Every (discount, behaviour level) setting of a logged-data check, with its sampler."""
    settings: dict[tuple[float, int], Truth] = {}
    samplers: dict[tuple[float, int], LoggedKernel] = {}
    for gamma, truth in truths.items():
        for setting in logged_truths(truth, regime, behaviour, episode_length, levels):
            key = (gamma, setting.level)
            settings[key] = setting
            samplers[key] = logged_kernel(setting, kernels[gamma])
    return settings, samplers


def coverage_map(settings: dict[tuple[float, int], Truth]) -> dict[tuple[float, int], float]:
    """(gamma, level) -> the concentrability coefficient C of that setting's data."""
    return {key: truth.data.coverage for key, truth in settings.items() if truth.data is not None}


def smallest_probability(settings: dict[tuple[float, int], Truth]) -> dict[tuple[float, int], float]:
    """(gamma, level) -> the smallest probability of a logged pair (its n times this is the least-visited pair's mean count)."""
    return {key: float(truth.data.distribution.min()) for key, truth in settings.items() if truth.data is not None}


def logged_notes(settings: dict[tuple[float, int], Truth], default_behaviour_used: bool) -> list[str]:
    """What a logged check's notes say of its data: the regime, the behaviours and their C, the episode length."""
    first = next(iter(settings.values())).data
    assert first is not None
    parts = [f"data: {first.regime} from a behaviour policy"
             + (" (random stochastic rows seeded by the MDP's fingerprint, rlrates.occupancy.default_behaviour)"
                if default_behaviour_used else " (the one given)")]
    if first.episode_length is not None:
        lengths = sorted({t.data.episode_length for t in settings.values()
                          if t.data is not None and t.data.episode_length is not None})
        parts.append("episode length " + ", ".join(str(L) for L in lengths) + " steps, from a uniform initial "
                     "distribution")
        if next(iter(settings.values())).target == "value":
            parts.append("the value target is the discounted value of one episode of that length "
                         "(problem.episode_length), not the infinite-horizon value")
    by_gamma: dict[float, list[str]] = {}
    for (gamma, level), truth in sorted(settings.items()):
        assert truth.data is not None
        by_gamma.setdefault(gamma, []).append(f"{truth.data.coverage:.3g}")
    parts.append("concentrability C per behaviour: " + "; ".join(
        f"gamma={g:g}: " + ", ".join(cs) for g, cs in by_gamma.items()))
    return ["; ".join(parts)]
