"""Tests of the validated, immutable TabularMDP and of the MDP families.

Expected values here are worked out by hand from the definitions (each one is
explained beside its check); none is a number printed by the code under test.
"""

from __future__ import annotations

import math
import re
import pickle

import numpy as np
import pytest

import rlrates
from rlrates import RewardRangeWarning, TabularMDP
from rlrates.exact import v_pi


def _two_state() -> tuple[np.ndarray, np.ndarray]:
    """A valid 2-state, 2-action model with rewards in [0, 1]."""
    P = np.array(
        [
            [[0.5, 0.5], [1.0, 0.0]],
            [[0.25, 0.75], [0.0, 1.0]],
        ]
    )
    R = np.array([[0.0, 1.0], [0.5, 0.25]])
    return P, R


# --------------------------------------------------------------------------- validation


class TestValidation:
    def test_valid_model_is_accepted(self) -> None:
        P, R = _two_state()
        mdp = TabularMDP(P, R)
        assert (mdp.states, mdp.actions) == (2, 2)
        np.testing.assert_array_equal(mdp.P, P)
        np.testing.assert_array_equal(mdp.R, R)

    @pytest.mark.parametrize("P", [np.ones((2, 2)) / 2, np.ones((2, 2, 2, 2)) / 2, np.float64(1.0)])
    def test_P_wrong_ndim(self, P: np.ndarray) -> None:
        with pytest.raises(ValueError, match=r"`P` must have 3 dimensions"):
            TabularMDP(P, np.zeros((2, 2)))

    def test_R_wrong_ndim(self) -> None:
        P, _ = _two_state()
        with pytest.raises(ValueError, match=r"`R` must have 2 dimensions"):
            TabularMDP(P, np.zeros(4))

    def test_P_not_square_in_states(self) -> None:
        P = np.full((2, 2, 3), 1.0 / 3.0)
        with pytest.raises(ValueError, match=r"same S on both ends, got \(2, 2, 3\)"):
            TabularMDP(P, np.zeros((2, 2)))

    @pytest.mark.parametrize("shape", [(2, 3), (3, 2), (1, 2)])
    def test_R_shape_must_match_P(self, shape: tuple[int, int]) -> None:
        P, _ = _two_state()
        with pytest.raises(ValueError, match=r"`R` must have shape \(S, A\) = \(2, 2\)"):
            TabularMDP(P, np.zeros(shape))

    @pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
    def test_non_finite_P_names_entry(self, bad: float) -> None:
        P, R = _two_state()
        P[1, 0, 1] = bad
        with pytest.raises(ValueError, match=r"non-finite entry P\[1, 0, 1\]"):
            TabularMDP(P, R)

    @pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
    def test_non_finite_R_names_entry(self, bad: float) -> None:
        P, R = _two_state()
        R[0, 1] = bad
        with pytest.raises(ValueError, match=r"non-finite entry R\[0, 1\]"):
            TabularMDP(P, R)

    def test_negative_probability_names_entry(self) -> None:
        P, R = _two_state()
        P[1, 1] = [-0.25, 1.25]  # row still sums to 1, so only the sign is wrong
        with pytest.raises(ValueError, match=r"negative probability P\[1, 1, 0\] = -0.25"):
            TabularMDP(P, R)

    def test_row_sum_names_row_and_sum(self) -> None:
        P, R = _two_state()
        P[1, 0] = [0.25, 0.5]  # sums to 0.75
        with pytest.raises(ValueError, match=r"row \(s=1, a=0\) sums to 0\.75, not 1"):
            TabularMDP(P, R)

    def test_row_sum_just_outside_tolerance(self) -> None:
        P, R = _two_state()
        P[0, 1] = [1.0 + 1e-6, 0.0]
        with pytest.raises(ValueError, match=r"row \(s=0, a=1\) sums to 1\.000001"):
            TabularMDP(P, R)

    def test_row_sum_within_tolerance_accepted(self) -> None:
        P, R = _two_state()
        P[0, 1] = [1.0 + 1e-12, 0.0]
        TabularMDP(P, R)

    def test_no_states(self) -> None:
        with pytest.raises(ValueError, match=r"no states"):
            TabularMDP(np.zeros((0, 2, 0)), np.zeros((0, 2)))

    def test_no_actions(self) -> None:
        with pytest.raises(ValueError, match=r"no actions"):
            TabularMDP(np.zeros((2, 0, 2)), np.zeros((2, 0)))

    @pytest.mark.parametrize(
        "P",
        [
            [[["a", "b"], ["c", "d"]]],
            [[[0.5, 0.5], [1.0]]],  # ragged
            {"P": 1},
            np.full((1, 1, 1), 1.0 + 0.5j),  # complex: casting would drop the imaginary part
        ],
        ids=["strings", "ragged", "dict", "complex"],
    )
    def test_non_numeric_P(self, P: object) -> None:
        with pytest.raises(ValueError, match=r"`P` must be a numeric array"):
            TabularMDP(P, np.zeros((1, 1)))

    def test_non_numeric_R(self) -> None:
        with pytest.raises(ValueError, match=r"`R` must be a numeric array"):
            TabularMDP(np.ones((1, 1, 1)), [["x"]])

    def test_nested_lists_accepted(self) -> None:
        mdp = TabularMDP([[[1.0]]], [[0.5]])
        assert mdp.P.dtype == np.float64 and mdp.R.dtype == np.float64

    @pytest.mark.parametrize("reward", [-0.5, 1.5])
    def test_reward_outside_unit_interval_warns(self, reward: float) -> None:
        P, R = _two_state()
        R[1, 1] = reward
        with pytest.warns(RewardRangeWarning, match=r"outside \[0, 1\]"):
            TabularMDP(P, R)

    def test_reward_on_unit_interval_edges_does_not_warn(self) -> None:
        # filterwarnings = error in pyproject: any warning here would fail the test
        P, R = _two_state()
        R[:] = [[0.0, 1.0], [1.0, 0.0]]
        TabularMDP(P, R)


# --------------------------------------------------------------------------- immutability


class TestImmutability:
    def test_arrays_are_read_only(self) -> None:
        mdp = TabularMDP(*_two_state())
        with pytest.raises(ValueError, match="read-only"):
            mdp.P[0, 0, 0] = 0.0
        with pytest.raises(ValueError, match="read-only"):
            mdp.R[0, 0] = 0.0

    def test_input_arrays_are_copied(self) -> None:
        P, R = _two_state()
        mdp = TabularMDP(P, R)
        P[0, 0] = [0.0, 1.0]
        R[0, 0] = 0.9
        assert mdp.P[0, 0, 0] == 0.5
        assert mdp.R[0, 0] == 0.0

    @pytest.mark.parametrize("attribute", ["P", "R", "name", "fingerprint", "states", "new_attribute", "_P"])
    def test_attributes_cannot_be_set(self, attribute: str) -> None:
        mdp = TabularMDP(*_two_state())
        with pytest.raises(AttributeError):
            setattr(mdp, attribute, 1)

    def test_metadata_is_a_copy(self) -> None:
        mdp = TabularMDP(*_two_state(), metadata={"family": "hand"})
        mdp.metadata["family"] = "changed"
        assert mdp.metadata == {"family": "hand"}


# --------------------------------------------------------------------------- fingerprint


class TestFingerprint:
    def test_equal_constructions_share_fingerprint(self) -> None:
        a = TabularMDP(*_two_state(), name="a", metadata={"x": 1})
        b = TabularMDP(*_two_state(), name="b")
        assert a.fingerprint == b.fingerprint
        assert a == b and hash(a) == hash(b)

    def test_fingerprint_is_a_hex_digest(self) -> None:
        fp = TabularMDP(*_two_state()).fingerprint
        assert len(fp) == 32 and int(fp, 16) >= 0

    def test_negative_zero_does_not_change_fingerprint(self) -> None:
        # -0.0 == 0.0 numerically; the models are equal, so their fingerprints must be
        P, R = _two_state()
        R_neg = R.copy()
        R_neg[0, 0] = -0.0
        assert TabularMDP(P, R).fingerprint == TabularMDP(P, R_neg).fingerprint

    @pytest.mark.parametrize("which", ["P", "R"])
    def test_one_entry_changes_fingerprint(self, which: str) -> None:
        P, R = _two_state()
        base = TabularMDP(P, R).fingerprint
        if which == "P":
            P[1, 1] = [1e-9, 1.0 - 1e-9]
        else:
            R[1, 0] = np.nextafter(R[1, 0], 1.0)  # smallest possible change
        changed = TabularMDP(P, R)
        assert changed.fingerprint != base
        assert changed != TabularMDP(*_two_state())

    def test_pickle_round_trip(self) -> None:
        mdp = TabularMDP(*_two_state(), name="hand", metadata={"family": "hand", "k": [1, 2]})
        back = pickle.loads(pickle.dumps(mdp))
        assert back.fingerprint == mdp.fingerprint
        assert back.name == "hand" and back.metadata == mdp.metadata
        assert not back.P.flags.writeable and not back.R.flags.writeable

    def test_pickle_round_trip_out_of_range_rewards_is_silent(self) -> None:
        P, R = _two_state()
        R[0, 0] = 5.0
        with pytest.warns(RewardRangeWarning):
            mdp = TabularMDP(P, R)
        back = pickle.loads(pickle.dumps(mdp))  # a warning here would be an error
        assert back.fingerprint == mdp.fingerprint


# --------------------------------------------------------------------------- families


def _assert_valid_kernel(mdp: TabularMDP) -> None:
    assert np.all(mdp.P >= 0)
    np.testing.assert_allclose(mdp.P.sum(axis=2), 1.0, rtol=0, atol=1e-12)
    assert np.all((mdp.R >= 0) & (mdp.R <= 1))


class TestGarnet:
    @pytest.mark.parametrize(("states", "actions", "branching"), [(10, 3, 4), (7, 2, 1), (6, 4, 6), (50, 5, 10)])
    def test_structure(self, states: int, actions: int, branching: int) -> None:
        mdp = rlrates.garnet(states, actions, branching, seed=3)
        assert mdp.P.shape == (states, actions, states)
        # exactly `branching` successors with positive probability in every row
        np.testing.assert_array_equal((mdp.P > 0).sum(axis=2), branching)
        _assert_valid_kernel(mdp)
        assert mdp.metadata["family"] == "garnet" and mdp.metadata["branching"] == branching

    def test_rewards_spread_over_unit_interval(self) -> None:
        # Uniform rewards (Archibald et al. 1995): with 500 of them, a mean far from 1/2
        # would mean they are not uniform. sd of the mean = sqrt(1/12/500) ~ 0.013; the
        # 0.07 band is > 5 sd (false-alarm rate < 1e-6 for a fresh seed; here seeded).
        R = rlrates.garnet(100, 5, 3, seed=0).R
        assert abs(R.mean() - 0.5) < 0.07
        assert R.min() < 0.05 and R.max() > 0.95

    def test_same_seed_same_fingerprint(self) -> None:
        assert rlrates.garnet(12, 3, 4, seed=5).fingerprint == rlrates.garnet(12, 3, 4, seed=5).fingerprint

    def test_different_seed_different_fingerprint(self) -> None:
        prints = {rlrates.garnet(12, 3, 4, seed=s).fingerprint for s in range(5)}
        assert len(prints) == 5

    @pytest.mark.parametrize(
        ("kwargs", "param"),
        [
            ({"states": 0, "actions": 2, "branching": 1}, "states"),
            ({"states": 2.5, "actions": 2, "branching": 1}, "states"),
            ({"states": 5, "actions": 0, "branching": 1}, "actions"),
            ({"states": 5, "actions": True, "branching": 1}, "actions"),
            ({"states": 5, "actions": 2, "branching": 0}, "branching"),
            ({"states": 5, "actions": 2, "branching": 6}, "branching"),
        ],
    )
    def test_bad_parameters_are_named(self, kwargs: dict[str, object], param: str) -> None:
        with pytest.raises(ValueError, match=f"`{param}`"):
            rlrates.garnet(**kwargs)  # type: ignore[arg-type]


class TestOtherFamilies:
    def test_gridworld_structure(self) -> None:
        mdp = rlrates.gridworld(width=5, height=5, slip=0.2)
        assert mdp.states == 25 - 3  # three default walls are not states
        assert mdp.actions == 4
        _assert_valid_kernel(mdp)
        # Top-left cell (state 0), action up: up and left both hit the edge and stay,
        # so P(stay) = (1 - slip) + 2 * slip / 4 = 0.8 + 0.1 (worked by hand).
        assert mdp.P[0, 0, 0] == pytest.approx(0.9, abs=1e-15)
        # reward 1 only in the goal (default: bottom-right cell, the last state)
        np.testing.assert_array_equal(mdp.R[-1], 1.0)
        assert mdp.R[:-1].sum() == 0.0

    def test_gridworld_walls_block(self) -> None:
        # no slip; cell (0, 1) moving down would enter the wall (1, 1), so it stays
        mdp = rlrates.gridworld(width=3, height=3, slip=0.0, walls=((1, 1),))
        cells = [(r, c) for r in range(3) for c in range(3) if (r, c) != (1, 1)]
        s = cells.index((0, 1))
        assert mdp.P[s, 2, s] == 1.0
        assert np.all(mdp.P[:, :, :].max(axis=2) == 1.0)  # slip 0: deterministic

    @pytest.mark.parametrize(
        ("kwargs", "message"),
        [
            ({"slip": 1.5}, "`slip`"),
            ({"slip": -0.1}, "`slip`"),
            ({"width": 0}, "`width`"),
            ({"height": 0}, "`height`"),
            ({"width": 1, "height": 1, "walls": ((0, 0),)}, "`walls`"),
            ({"goal": (1, 1)}, "`goal`"),
        ],
    )
    def test_gridworld_bad_parameters(self, kwargs: dict[str, object], message: str) -> None:
        with pytest.raises(ValueError, match=message):
            rlrates.gridworld(**kwargs)  # type: ignore[arg-type]

    def test_chain_structure(self) -> None:
        mdp = rlrates.chain(states=6, slip=0.1)
        _assert_valid_kernel(mdp)
        # interior state 2: left moves to 1 w.p. 0.9, reverses to 3 w.p. 0.1 (by definition)
        assert mdp.P[2, 0, 1] == pytest.approx(0.9) and mdp.P[2, 0, 3] == pytest.approx(0.1)
        # left end, action left: both "left" and "stay" land in state 0
        assert mdp.P[0, 0, 0] == pytest.approx(0.9) and mdp.P[0, 0, 1] == pytest.approx(0.1)
        assert mdp.R[-1, 0] == 1.0 and mdp.R[0, 0] == pytest.approx(0.1)

    @pytest.mark.parametrize(("kwargs", "param"), [({"states": 1}, "states"), ({"slip": 2.0}, "slip")])
    def test_chain_bad_parameters(self, kwargs: dict[str, object], param: str) -> None:
        with pytest.raises(ValueError, match=f"`{param}`"):
            rlrates.chain(**kwargs)  # type: ignore[arg-type]

    def test_ring_structure(self) -> None:
        mdp = rlrates.ring(states=9, slip=0.3, seed=1)
        _assert_valid_kernel(mdp)
        # each (s, a) reaches exactly {s, s+1, s-1}; P(intended) = 0.7 + 0.3 / 3
        np.testing.assert_array_equal((mdp.P > 0).sum(axis=2), 3)
        assert mdp.P[4, 1, 5] == pytest.approx(0.8)
        assert mdp.P[0, 2, 8] == pytest.approx(0.8)  # wraps around

    @pytest.mark.parametrize(("kwargs", "param"), [({"states": 2}, "states"), ({"slip": "x"}, "slip")])
    def test_ring_bad_parameters(self, kwargs: dict[str, object], param: str) -> None:
        with pytest.raises(ValueError, match=f"`{param}`"):
            rlrates.ring(**kwargs)  # type: ignore[arg-type]

    def test_deterministic_rows_one_hot(self) -> None:
        mdp = rlrates.deterministic(states=9, actions=4, seed=2)
        _assert_valid_kernel(mdp)
        assert set(np.unique(mdp.P)) == {0.0, 1.0}
        np.testing.assert_array_equal((mdp.P == 1.0).sum(axis=2), 1)

    @pytest.mark.parametrize(("kwargs", "param"), [({"states": 0}, "states"), ({"actions": -1}, "actions")])
    def test_deterministic_bad_parameters(self, kwargs: dict[str, object], param: str) -> None:
        with pytest.raises(ValueError, match=f"`{param}`"):
            rlrates.deterministic(**kwargs)  # type: ignore[arg-type]


class TestHorizonHard:
    @pytest.mark.parametrize("gamma", [0.3, 0.5, 0.9, 0.99, 0.999])
    def test_loop_probability(self, gamma: float) -> None:
        mdp = rlrates.horizon_hard(actions=3)(gamma)
        p = (4 * gamma - 1) / (3 * gamma)  # Azar, Munos and Kappen (2013), lower-bound MDP
        for k in (1, 2, 3):
            np.testing.assert_allclose(mdp.P[k, :, k], p, rtol=1e-15)
            np.testing.assert_allclose(mdp.P[k, :, 4], 1 - p, rtol=1e-12)
        _assert_valid_kernel(mdp)
        # decision state: action a leads to loop state 1 + a
        np.testing.assert_array_equal(mdp.P[0, :, 1:4], np.eye(3))
        assert mdp.metadata["loop_probability"] == pytest.approx(p, rel=1e-15)

    @pytest.mark.parametrize("gamma", [0.3, 0.9, 0.99, 0.999])
    def test_loop_value_is_three_quarters_horizon(self, gamma: float) -> None:
        # V = 1 / (1 - gamma p) and 1 - gamma p = 4 (1 - gamma) / 3, so V = 3 H / 4
        # (Azar, Munos and Kappen 2013); the sink is absorbing with reward 0.
        H = 1.0 / (1.0 - gamma)
        values = v_pi(rlrates.horizon_hard()(gamma), gamma)
        assert values[1] == pytest.approx(0.75 * H, rel=1e-12)
        assert values[2] == pytest.approx(0.75 * H, rel=1e-12)
        assert values[3] == 0.0
        assert values[0] == pytest.approx(gamma * 0.75 * H, rel=1e-12)

    @pytest.mark.parametrize("gamma", [0.25, 0.2, 0.01])
    def test_small_gamma_raises(self, gamma: float) -> None:
        with pytest.raises(ValueError, match=r"gamma > 1/4"):
            rlrates.horizon_hard()(gamma)

    def test_invalid_gamma_raises(self) -> None:
        with pytest.raises(ValueError, match=r"`gamma` must lie in \(0, 1\)"):
            rlrates.horizon_hard()(1.0)

    def test_bad_actions(self) -> None:
        with pytest.raises(ValueError, match="`actions`"):
            rlrates.horizon_hard(actions=0)

    def test_family_is_deterministic_in_gamma(self) -> None:
        family = rlrates.horizon_hard()
        assert family(0.9) == family(0.9)
        assert family(0.9) != family(0.95)
        assert math.isclose(family(0.9).P[1, 0, 1], (4 * 0.9 - 1) / 2.7)


# --------------------------------------------------------------------------- sparse storage


def _sparse_rows(P: np.ndarray):  # type: ignore[no-untyped-def]
    from scipy import sparse

    return sparse.csr_array(P.reshape(P.shape[0] * P.shape[1], P.shape[2]))


def test_a_sparse_P_is_kept_sparse_read_only_and_canonical() -> None:
    from scipy import sparse

    P, R = _two_state()
    # rows s * A + a of the (S*A, S) layout, given as COO with a duplicate entry split in two
    # halves and an explicit zero: scipy sums duplicates and the MDP drops the zero (common practice)
    coo = sparse.coo_array(([0.5, 0.25, 0.25, 1.0, 0.25, 0.75, 1.0, 0.0], ([0, 0, 0, 1, 2, 2, 3, 3], [0, 1, 1, 0, 0, 1, 1, 0])),
                           shape=(4, 2))
    mdp = TabularMDP(coo, R)
    assert mdp.is_sparse and (mdp.states, mdp.actions) == (2, 2)
    assert sparse.issparse(mdp.P) and mdp.P.format == "csr" and mdp.P.shape == (4, 2)
    assert mdp.P.nnz == 6  # the explicit zero is gone, the duplicate summed
    np.testing.assert_array_equal(mdp.P.toarray().reshape(2, 2, 2), P)
    with pytest.raises(ValueError, match="read-only"):
        mdp.P.data[0] = 0.9
    assert mdp.transition_rows is mdp.P
    assert "sparse" in repr(mdp)


def test_a_sparse_fingerprint_is_stable_and_survives_pickling() -> None:
    P, R = _two_state()
    first = TabularMDP(_sparse_rows(P), R)
    again = TabularMDP(_sparse_rows(P).tocoo(), R)  # another format of the same model
    assert first.fingerprint == again.fingerprint
    assert first.fingerprint != TabularMDP(P, R).fingerprint  # the storage is part of the key (documented)
    restored = pickle.loads(pickle.dumps(first))
    assert restored.is_sparse and restored.fingerprint == first.fingerprint
    np.testing.assert_array_equal(restored.P.toarray(), first.P.toarray())
    with pytest.raises(ValueError, match="read-only"):
        restored.P.data[0] = 0.9


def test_a_sparse_P_is_validated_like_a_dense_one() -> None:
    P, R = _two_state()
    bad = np.array(P)
    bad[1, 0] = [0.5, 0.6]  # row s=1, a=0 sums to 1.1
    with pytest.raises(ValueError, match=r"row \(s=1, a=0\) sums to 1.1"):
        TabularMDP(_sparse_rows(bad), R)
    bad = np.array(P)
    bad[0, 1] = [1.5, -0.5]
    with pytest.raises(ValueError, match=r"negative probability P\[0, 1, 1\]"):
        TabularMDP(_sparse_rows(bad), R)
    bad = np.array(P)
    bad[1, 1, 1] = np.inf
    with pytest.raises(ValueError, match=r"non-finite entry P\[1, 1, 1\]"):
        TabularMDP(_sparse_rows(bad), R)
    with pytest.raises(ValueError, match=r"`R` must have shape \(S, A\) = \(2, 2\)"):
        TabularMDP(_sparse_rows(P), np.zeros((2, 3)))


@pytest.mark.parametrize(
    ("family", "kwargs"),
    [
        (rlrates.garnet, {"states": 15, "actions": 3, "branching": 4, "seed": 5}),
        (rlrates.garnet, {"states": 6, "actions": 2, "branching": 6, "seed": 1}),
        (rlrates.chain, {"states": 7, "slip": 0.3}),
        (rlrates.ring, {"states": 5, "slip": 0.2}),
        (rlrates.gridworld, {"width": 4, "height": 3, "slip": 0.2}),
        (rlrates.gridworld, {"width": 1, "height": 1, "walls": ()}),
    ],
    ids=["garnet", "garnet-full", "chain", "ring", "gridworld", "gridworld-one-cell"],
)
def test_a_family_built_sparse_is_the_same_model(family, kwargs) -> None:  # type: ignore[no-untyped-def]
    # the dense members are checked by hand above; the sparse build must hold the same probabilities
    dense = family(**kwargs)
    held = family(**kwargs, sparse=True)
    assert held.is_sparse and not dense.is_sparse
    np.testing.assert_allclose(held.P.toarray(), dense.P.reshape(-1, dense.states), rtol=0, atol=1e-15)
    np.testing.assert_array_equal(held.R, dense.R)
    assert held.metadata == {**dense.metadata, "sparse": True}


def test_a_sparse_garnet_draws_the_same_successors_bit_for_bit() -> None:
    # chunked partition of the same uniform keys (a Generator fills arrays in C order)
    dense = rlrates.garnet(60, 3, 5, seed=11)
    held = rlrates.garnet(60, 3, 5, seed=11, sparse=True)
    np.testing.assert_array_equal(held.P.toarray(), dense.P.reshape(180, 60))


def test_families_go_sparse_on_their_own_only_when_dense_would_not_fit() -> None:
    from rlrates.mdp import DENSE_LIMIT_BYTES, dense_fits

    assert DENSE_LIMIT_BYTES == 2**30
    # 8 bytes * S * A * S: chain(8192) is exactly 1 GiB dense, chain(8193) just over
    assert dense_fits(8192, 2) and not dense_fits(8193, 2)
    assert not rlrates.chain(5).is_sparse
    big = rlrates.chain(8193)
    # two successors per row, left and right (at an end one of them is the state itself)
    assert big.is_sparse and big.P.shape == (2 * 8193, 8193) and big.P.nnz == 4 * 8193
    assert not rlrates.chain(5, sparse=False).is_sparse and rlrates.chain(5, sparse=True).is_sparse


# --------------------------------------------------------------------------- notes and memory refusals


def test_a_family_that_goes_sparse_on_its_own_says_so_in_its_notes() -> None:
    # ring(20000): a dense P would be 20000 * 3 * 20000 * 8 bytes = 8.94 GiB, over the 1 GiB DENSE_LIMIT_BYTES
    auto = rlrates.ring(20_000)
    assert auto.is_sparse
    (note,) = auto.notes
    assert "sparse P automatically" in note and "8.94 GiB" in note and "sparse=False" in note
    assert pickle.loads(pickle.dumps(auto)).notes == auto.notes
    # asked for (or small enough to stay dense): nothing to say
    assert rlrates.ring(20_000, sparse=True).notes == ()
    assert rlrates.ring(20).notes == () and rlrates.garnet(10, 2, 3).notes == ()


def test_notes_do_not_change_the_fingerprint_and_must_be_strings() -> None:
    P, R = _two_state()
    assert TabularMDP(P, R, notes=("built by hand",)).fingerprint == TabularMDP(P, R).fingerprint
    assert TabularMDP(P, R, notes=["built by hand"]).notes == ("built by hand",)
    with pytest.raises(TypeError, match=r"`notes` must be a sequence of strings, got 'built by hand'"):
        TabularMDP(P, R, notes="built by hand")  # type: ignore[arg-type]


@pytest.mark.parametrize("build, expected", [
    # expected GiB worked out from rlrates.costs' per-entry rules: sparse 100 bytes per stored entry + 128 MiB,
    # dense 48 bytes per (s, a, s') entry
    (lambda: rlrates.garnet(20_000, 4, 10, sparse=True), (20_000 * 4 * 10 * 100 + 128 * 2**20) / 2**30),
    (lambda: rlrates.garnet(2_000, 4, 10, sparse=False), 2_000 * 4 * 2_000 * 48 / 2**30),
    (lambda: rlrates.chain(1_000_000), (1_000_000 * 2 * 2 * 100 + 128 * 2**20) / 2**30),
    (lambda: rlrates.ring(2_000, sparse=False), 2_000 * 3 * 2_000 * 48 / 2**30),
    (lambda: rlrates.gridworld(400, 400, walls=()), None),
    (lambda: rlrates.deterministic(2_000, 4), 2_000 * 4 * 2_000 * 48 / 2**30),
    (lambda: rlrates.horizon_hard(2_000), 2_002 * 2_000 * 2_002 * 48 / 2**30),
], ids=["garnet-sparse", "garnet-dense", "chain-auto-sparse", "ring-dense", "gridworld", "deterministic", "horizon-hard"])
def test_every_family_refuses_before_allocating_what_the_machine_cannot_hold(monkeypatch, build, expected) -> None:  # type: ignore[no-untyped-def]
    from rlrates import costs

    monkeypatch.setattr(costs, "machine_memory", lambda: 50 * 2**20)  # a 50 MiB machine
    with pytest.raises(costs.TooLargeError, match=r"needs about ([0-9.,]+) GiB .*more than the 0.0488 GiB") as raised:
        build()
    if expected is not None:
        found = float(re.search(r"needs about ([0-9.,]+) GiB", str(raised.value)).group(1).replace(",", ""))  # type: ignore[union-attr]
        assert found == pytest.approx(expected, rel=5e-3)
    assert isinstance(raised.value, ValueError)


def test_a_dense_P_too_large_to_validate_is_refused_before_it_is_copied(monkeypatch) -> None:  # type: ignore[no-untyped-def]
    from rlrates import costs

    monkeypatch.setattr(costs, "machine_memory", lambda: 2**30)
    S = 5_000  # a broadcast view of 5000 * 2 * 5000 entries takes no memory; its validated copy would take 400 MB
    P = np.broadcast_to(np.full(1, 1.0 / S), (S, 2, S))
    # needs the 400 MB the array claims plus 18 bytes per entry (copy, two masks, fingerprint copy): 1.3e9 bytes, 1.21 GiB
    with pytest.raises(costs.TooLargeError, match=r"validating `P` needs about 1.21 GiB \(shape \(5000, 2, 5000\)"):
        TabularMDP(P, np.zeros((S, 2)))
