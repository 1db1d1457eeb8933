"""A small seeded calibration: every fast zoo member gets its expected verdict under a few master seeds.

The full table (hundreds of seeds per member, with confidence intervals) is made by
``benchmarks/calibrate.py`` and kept in ``docs/calibration-quick.md``. This test is
deterministic (fixed seeds). Measured per-check rates (that table) put the chance that
a given seed gives a correct member a "fail" below 1%, so with the 3 seeds x 11 correct
members here, a fresh choice of seeds would fail this test with probability of order
30% x 1% per member at most; the fixed seeds make it reproducible either way.
"""

from __future__ import annotations

import pytest

import rlrates
import zoo

FAST = [m for m in zoo.members() if not m.slow]


@pytest.mark.parametrize("member", FAST, ids=[m.name for m in FAST])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_zoo_member_gets_its_expected_verdict(member: zoo.Member, seed: int) -> None:
    result = rlrates.check(member.estimator, member.mdp, member.claim, target=member.target, seed=seed)
    assert result.status == member.expected, f"{member.name} ({member.source}):\n{result.message}"


@pytest.mark.slow
@pytest.mark.parametrize("member", [m for m in zoo.members() if m.slow], ids=lambda m: m.name)
def test_slow_zoo_member_gets_its_expected_verdict(member: zoo.Member) -> None:
    result = rlrates.check(member.estimator, member.mdp, member.claim, target=member.target, seed=0)
    assert result.status == member.expected, f"{member.name} ({member.source}):\n{result.message}"
