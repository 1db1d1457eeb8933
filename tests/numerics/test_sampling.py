"""Tests of generative-model sampling: structure, streams, and distribution.

Statistical checks are seeded, hence deterministic; beside each one is the
probability that it would fail for a correct sampler at a seed picked blindly
(its false-alarm rate).
"""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pytest
from scipy import stats
from scipy.stats import binom, chisquare

import rlrates
from rlrates import TabularMDP
from rlrates.exact import v_pi
from rlrates.sampling import cell_seed, draw, sampling_kernel


@pytest.fixture(scope="module")
def garnet() -> TabularMDP:
    return rlrates.garnet(12, 3, 4, seed=7)


# --------------------------------------------------------------------------- structure


def test_counts_rows_sum_to_n(garnet: TabularMDP) -> None:
    batch = draw(garnet, 37, seed=1)
    assert batch.counts.shape == (12, 3, 12)
    assert batch.counts.dtype == np.int64
    np.testing.assert_array_equal(batch.counts.sum(axis=2), 37)
    assert batch.n == 37 and (batch.states, batch.actions) == (12, 3)


def test_counts_only_on_support(garnet: TabularMDP) -> None:
    counts = draw(garnet, 5000, seed=2).counts
    assert counts[garnet.P == 0].sum() == 0


def test_next_states_agree_with_counts(garnet: TabularMDP) -> None:
    batch = draw(garnet, 50, seed=3)
    seq = batch.next_states
    assert seq.shape == (12, 3, 50) and seq.dtype == np.int64
    assert seq.min() >= 0 and seq.max() < 12
    S, A = 12, 3
    # counts[s, a, t] = #{i : next_states[s, a, i] = t}, all rows at once via an offset bincount
    offset = (np.arange(S * A) * S)[:, None]
    recount = np.bincount((seq.reshape(S * A, -1) + offset).ravel(), minlength=S * A * S).reshape(S, A, S)
    np.testing.assert_array_equal(recount, batch.counts)


def test_next_states_built_once(garnet: TabularMDP) -> None:
    batch = draw(garnet, 20, seed=4)
    assert batch.next_states is batch.next_states


def test_both_views_read_only(garnet: TabularMDP) -> None:
    batch = draw(garnet, 10, seed=5)
    with pytest.raises(ValueError, match="read-only"):
        batch.counts[0, 0, 0] = 1
    with pytest.raises(ValueError, match="read-only"):
        batch.next_states[0, 0, 0] = 1


def test_empirical_P_is_a_fresh_plug_in_model(garnet: TabularMDP) -> None:
    batch = draw(garnet, 40, seed=6)
    emp = batch.empirical_P
    np.testing.assert_allclose(emp.sum(axis=2), 1.0, rtol=0, atol=1e-12)
    np.testing.assert_array_equal(emp * 40, batch.counts)
    emp[0, 0, 0] = -1.0  # writable, and not an alias of the counts
    assert batch.empirical_P[0, 0, 0] >= 0


def test_counts_access_never_builds_next_states(garnet: TabularMDP) -> None:
    batch = draw(garnet, 100_000, seed=7)
    _ = batch.counts, batch.empirical_P, batch.n, repr(batch)
    assert batch._next_states is None


# --------------------------------------------------------------------------- seeds and streams


def test_same_seed_identical(garnet: TabularMDP) -> None:
    a, b = draw(garnet, 30, seed=11), draw(garnet, 30, seed=11)
    np.testing.assert_array_equal(a.counts, b.counts)
    np.testing.assert_array_equal(a.next_states, b.next_states)


def test_different_seed_differs(garnet: TabularMDP) -> None:
    assert not np.array_equal(draw(garnet, 30, seed=11).counts, draw(garnet, 30, seed=12).counts)


def test_reused_seed_sequence_repeats_the_draw(garnet: TabularMDP) -> None:
    # A SeedSequence object used twice must give the same batch (spawning from it
    # would advance its internal counter and silently change the second draw).
    seq = np.random.SeedSequence(2024)
    a, b = draw(garnet, 30, seed=seq), draw(garnet, 30, seed=seq)
    np.testing.assert_array_equal(a.counts, b.counts)
    np.testing.assert_array_equal(a.next_states, b.next_states)
    fresh = draw(garnet, 30, seed=np.random.SeedSequence(2024))
    np.testing.assert_array_equal(a.counts, fresh.counts)
    np.testing.assert_array_equal(fresh.counts, draw(garnet, 30, seed=2024).counts)


def test_kernel_argument_gives_same_draw(garnet: TabularMDP) -> None:
    kernel = sampling_kernel(garnet)
    np.testing.assert_array_equal(draw(garnet, 30, seed=3, kernel=kernel).counts, draw(garnet, 30, seed=3).counts)


def test_cell_seeds_reproducible_and_order_independent(garnet: TabularMDP) -> None:
    cells = [("test_a::garnet", 0.9, 100, 0), ("test_a::garnet", 0.9, 100, 1), ("test_b::chain", 0.99, 400, 0)]

    def run(order: list[int]) -> dict[int, np.ndarray]:
        return {i: draw(garnet, cells[i][2], cell_seed(5, *cells[i])).counts for i in order}

    forward, backward = run([0, 1, 2]), run([2, 1, 0])
    for i in range(3):
        np.testing.assert_array_equal(forward[i], backward[i])
    # distinct cells give distinct draws
    assert not np.array_equal(forward[0], forward[1])
    other_master = draw(garnet, 100, cell_seed(6, *cells[0])).counts
    assert not np.array_equal(forward[0], other_master)


def test_cell_seed_distinguishes_every_field() -> None:
    base = ("ctx", 0.9, 100, 0)
    states = {tuple(cell_seed(0, *base).generate_state(4))}
    for changed in [("ctx2", 0.9, 100, 0), ("ctx", 0.99, 100, 0), ("ctx", 0.9, 101, 0), ("ctx", 0.9, 100, 1)]:
        states.add(tuple(cell_seed(0, *changed).generate_state(4)))
    states.add(tuple(cell_seed(1, *base).generate_state(4)))
    assert len(states) == 6


def test_cell_seed_independent_of_hash_randomisation() -> None:
    # A cell must be re-drawable in another process: the seed may not depend on
    # Python's per-process string hashing (common practice: PYTHONHASHSEED varies).
    code = (
        "from rlrates.sampling import cell_seed;"
        "print(cell_seed(3, 'test_x::mdp', 0.95, 200, 7).generate_state(4).tolist())"
    )
    env = dict(os.environ, PYTHONHASHSEED="12345")
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    here = [int(x) for x in cell_seed(3, "test_x::mdp", 0.95, 200, 7).generate_state(4)]
    assert out.stdout.strip() == str(here)


# --------------------------------------------------------------------------- rounding in P


@pytest.mark.parametrize(
    "row",
    [
        [1.0 + 5e-9, 0.0, 0.0],  # inside the 1e-8 row tolerance; a raw multinomial rejects it
        [0.5 + 1e-12, 0.5, 0.0],
        [1.0 / 3.0, 1.0 / 3.0, 1.0 / 3.0],
        [0.1] * 2 + [0.8 - 1e-12],
    ],
)
def test_rows_summing_to_one_within_rounding_sample(row: list[float]) -> None:
    P = np.tile(np.array(row), (3, 2, 1))
    mdp = TabularMDP(P, np.zeros((3, 2)))
    batch = draw(mdp, 1000, seed=0)
    np.testing.assert_array_equal(batch.counts.sum(axis=2), 1000)
    zero = np.array(row) == 0.0
    assert batch.counts[:, :, zero].sum() == 0
    kernel = sampling_kernel(mdp)
    np.testing.assert_allclose(kernel.sum(axis=1), 1.0, rtol=0, atol=1e-15)
    assert kernel[:, zero].max(initial=0.0) <= 1e-15


# --------------------------------------------------------------------------- n validation


@pytest.mark.parametrize("n", [0, -1])
def test_n_value_errors(garnet: TabularMDP, n: int) -> None:
    with pytest.raises(ValueError, match="`n` must be a positive integer"):
        draw(garnet, n)


@pytest.mark.parametrize("n", [2.5, True, "10", None])
def test_n_type_errors(garnet: TabularMDP, n: object) -> None:
    with pytest.raises(TypeError, match="`n` must be a positive integer"):
        draw(garnet, n)  # type: ignore[arg-type]


def test_n_numpy_integer_accepted(garnet: TabularMDP) -> None:
    assert draw(garnet, np.int64(3)).n == 3


# --------------------------------------------------------------------------- distribution


def test_chi_square_goodness_of_fit(garnet: TabularMDP) -> None:
    # Pearson's chi-square test (scipy.stats.chisquare) of all counts against n P on
    # the support. Rows are independent multinomials, so the pooled statistic has
    # sum over rows of (branching - 1) degrees of freedom: ddof = rows - 1.
    # False-alarm rate 0.001 (the test level).
    n = 20_000
    support = garnet.P > 0
    expected = n * garnet.P[support]
    assert expected.min() >= 5  # the chi-square approximation's usual requirement (common practice)
    counts = draw(garnet, n, seed=0).counts
    rows = garnet.states * garnet.actions
    result = chisquare(counts[support], expected, ddof=rows - 1)
    assert result.pvalue > 0.001


@pytest.fixture(scope="module")
def many_rows() -> tuple[np.ndarray, np.ndarray, int]:
    """20 000 independent p_hat rows (4 states x 5000 actions, every row = p), n = 100."""
    p = np.array([0.1, 0.2, 0.3, 0.4])
    P = np.tile(p, (4, 5000, 1))
    mdp = TabularMDP(P, np.zeros((4, 5000)))
    n = 100
    batch = draw(mdp, n, seed=42)
    return p, batch.counts.reshape(-1, 4) / n, n


def test_weissman_l1_deviation_inequality(many_rows: tuple[np.ndarray, np.ndarray, int]) -> None:
    # Weissman, Ordentlich, Seroussi, Verdu and Weinberger (2003), "Inequalities for the
    # L1 deviation of the empirical distribution", HP Labs tech. report HPL-2003-97
    # (report number from memory):
    #   P(||p_hat - p||_1 >= eps) <= (2^d - 2) exp(-n eps^2 / 2),  d = support size.
    # The empirical frequency over N = 20 000 independent rows may exceed the true
    # probability by sampling noise; Hoeffding's inequality bounds that excess by
    # sqrt(ln(1e6) / (2 N)) except with probability 1e-6 (false-alarm rate <= 1e-6 per eps).
    p, p_hat, n = many_rows
    d, N = p.size, p_hat.shape[0]
    deviation = np.abs(p_hat - p).sum(axis=1)
    slack = np.sqrt(np.log(1e6) / (2 * N))
    for eps in (0.25, 0.3, 0.35):
        bound = (2**d - 2) * np.exp(-n * eps**2 / 2)
        assert np.mean(deviation >= eps) <= bound + slack, eps


def test_mean_l1_deviation(many_rows: tuple[np.ndarray, np.ndarray, int]) -> None:
    # common practice (Cauchy-Schwarz and Jensen): E||p_hat - p||_1 <= sum_i sqrt(p_i (1 - p_i) / n)
    # <= sqrt((d - 1) / n). And exactly, since each coordinate of a multinomial is
    # Binomial(n, p_i) (common practice): E||p_hat - p||_1 = sum_i E|X_i / n - p_i|,
    # which scipy.stats.binom gives by summation. The empirical mean of N = 20 000
    # rows must lie within 5 standard errors of it (false-alarm rate ~ 6e-7).
    p, p_hat, n = many_rows
    d, N = p.size, p_hat.shape[0]
    deviation = np.abs(p_hat - p).sum(axis=1)
    k = np.arange(n + 1)
    exact = sum(float((binom.pmf(k, n, pi) * np.abs(k / n - pi)).sum()) for pi in p)
    stderr = deviation.std(ddof=1) / np.sqrt(N)
    assert abs(deviation.mean() - exact) <= 5 * stderr
    assert deviation.mean() + 5 * stderr <= np.sqrt((d - 1) / n)


def test_first_sample_is_a_draw_from_P(many_rows: tuple[np.ndarray, np.ndarray, int]) -> None:
    # next_states must be in random order: the first sampled successor of every row is
    # itself a draw from p. Chi-square test over 20 000 rows (false-alarm rate 0.001).
    p = np.array([0.1, 0.2, 0.3, 0.4])
    mdp = TabularMDP(np.tile(p, (4, 5000, 1)), np.zeros((4, 5000)))
    first = draw(mdp, 20, seed=43).next_states[:, :, 0].ravel()
    observed = np.bincount(first, minlength=4)
    assert chisquare(observed, observed.sum() * p).pvalue > 0.001


# --------------------------------------------------------------------------- horizon-hard variance


def _delta_method_sd(gamma: float, n: int) -> float:
    """sd of V_hat = 1 / (1 - gamma p_hat) for the loop state, by the delta method.

    p comes from the MDP built by rlrates.horizon_hard, V(p) = 1 / (1 - gamma p) is the
    loop state's value (geometric series, common practice), dV/dp = gamma / (1 - gamma p)^2.
    """
    p = float(rlrates.horizon_hard()(gamma).P[1, 0, 1])
    derivative = gamma / (1.0 - gamma * p) ** 2
    return derivative * np.sqrt(p * (1.0 - p) / n)


def test_loop_value_derivative_matches_solver() -> None:
    # The derivative used above, against a central difference of the exact solver.
    gamma = 0.95
    mdp = rlrates.horizon_hard()(gamma)
    p = float(mdp.P[1, 0, 1])
    h = 1e-6

    def value(q: float) -> float:
        P = np.array(mdp.P)
        P[1:3, :, 1:3] = np.eye(2)[:, None, :] * q
        P[1:3, :, 3] = 1.0 - q
        return float(v_pi(TabularMDP(P, mdp.R), gamma)[1])

    numeric = (value(p + h) - value(p - h)) / (2 * h)
    assert numeric == pytest.approx(gamma / (1 - gamma * p) ** 2, rel=1e-5)


def test_plug_in_sd_grows_like_horizon_to_one_and_a_half() -> None:
    # Azar, Munos and Kappen (2013), "Minimax PAC bounds on the sample complexity of
    # reinforcement learning with a generative model", Machine Learning 91: on this
    # MDP the plug-in value's standard deviation scales as H^1.5 / sqrt(n).
    # (Exactly: sd = (3/16) H^1.5 sqrt(4 gamma - 1) / sqrt(n); the sqrt(4 gamma - 1)
    # factor adds ~0.015 to the slope over gamma in [0.9, 0.999].)
    gammas = np.array([0.9, 0.95, 0.98, 0.99, 0.995, 0.999])
    horizons = 1.0 / (1.0 - gammas)
    sds = np.array([_delta_method_sd(g, 1000) for g in gammas])
    slope = np.polyfit(np.log(horizons), np.log(sds), 1)[0]
    assert slope == pytest.approx(1.5, abs=0.05)


@pytest.mark.parametrize("horizon", [10, 20])
def test_plug_in_sd_matches_delta_method(horizon: int) -> None:
    # Azar, Munos and Kappen (2013): empirical sd of the plug-in loop value over 2000
    # independently seeded draws at n = 20 H, against the delta-method sd.
    # At these n the delta method is within 0.1% of the exact binomial sd, and the
    # sample sd of 2000 replicates has relative standard error ~1.5%; the 15% band is
    # ~10 standard errors (false-alarm rate < 1e-9).
    gamma = 1.0 - 1.0 / horizon
    mdp = rlrates.horizon_hard()(gamma)
    n = 20 * horizon
    kernel = sampling_kernel(mdp)
    loops = np.array(
        [draw(mdp, n, cell_seed(0, "horizon-hard", gamma, n, r), kernel=kernel).counts[1, 0, 1] for r in range(2000)]
    )
    v_hat = 1.0 / (1.0 - gamma * loops / n)
    assert v_hat.std(ddof=1) == pytest.approx(_delta_method_sd(gamma, n), rel=0.15)
    # V_hat from the formula is the plug-in estimate: check one replicate with the solver
    batch = draw(mdp, n, cell_seed(0, "horizon-hard", gamma, n, 0), kernel=kernel)
    plug_in = v_pi(TabularMDP(batch.empirical_P, mdp.R), gamma, np.zeros(mdp.states, dtype=np.int64))
    assert plug_in[1] == pytest.approx(v_hat[0], rel=1e-12)


def test_a_block_of_replicates_is_reproducible_and_consistent(garnet: TabularMDP) -> None:
    from rlrates.sampling import block_seed, draw_block, mdp_kernel

    kernel = mdp_kernel(garnet)
    seed = block_seed(7, "tests/x.py::t", 0.9, 64, 0, 6)
    first = draw_block(kernel, 64, 6, seed)
    again = draw_block(kernel, 64, 6, block_seed(7, "tests/x.py::t", 0.9, 64, 0, 6))
    assert len(first) == 6
    for a, b in zip(first, again):
        np.testing.assert_array_equal(a.counts, b.counts)
        assert (a.counts.sum(axis=2) == 64).all()
        rebuilt = np.apply_along_axis(np.bincount, 2, a.next_states, minlength=garnet.states)
        np.testing.assert_array_equal(rebuilt, a.counts)
    # replicates within a block are different draws (independent streams, common practice)
    assert not np.array_equal(first[0].counts, first[1].counts)
    # the key covers the block: a different range is a different stream
    other = draw_block(kernel, 64, 6, block_seed(7, "tests/x.py::t", 0.9, 64, 6, 12))
    assert not np.array_equal(first[0].counts, other[0].counts)


def test_block_counts_follow_the_multinomial(garnet: TabularMDP) -> None:
    # Pooled counts of 400 replicates against P by a chi-square test per row block (scipy.stats);
    # seeded, deterministic; a correct sampler fails at level 1e-3 (false-alarm rate 0.1%).
    from rlrates.sampling import block_seed, draw_block, mdp_kernel

    kernel = mdp_kernel(garnet)
    batches = draw_block(kernel, 50, 400, block_seed(1, "chi2", 0.5, 50, 0, 400))
    pooled = sum(b.counts for b in batches)
    observed = pooled.reshape(-1, garnet.states)
    expected = garnet.P.reshape(-1, garnet.states) * 50 * 400
    support = expected > 0
    assert (observed[~support] == 0).all()
    stat = float((((observed - expected) ** 2)[support] / expected[support]).sum())
    dof = int(support.sum() - observed.shape[0])
    assert stats.chi2.sf(stat, dof) > 1e-3


# --------------------------------------------------------------------------- the support draw


def _reference_block(mdp: TabularMDP, n: int, replicates: int, seed: np.random.SeedSequence) -> tuple[np.ndarray, list[np.ndarray]]:
    """The sampler written out plainly: the dense kernel, its support, one ``Generator.multinomial`` call
    over the supports (numpy's multinomial, the reference library), counts scattered into a dense
    (replicates, S, A, S) block, and next states laid out from the dense counts."""
    S, A = mdp.states, mdp.actions
    flat = np.array(mdp.P.reshape(S * A, S))
    flat /= flat.sum(axis=1, keepdims=True)
    flat[:, -1] = np.clip(1.0 - flat[:, :-1].sum(axis=1), 0.0, None)
    positive = flat > 0
    width = int(positive.sum(axis=1).max())
    support = np.argsort(positive, axis=1, kind="stable")[:, -width:]
    probs = np.take_along_axis(flat, support, axis=1)
    probs = probs / probs.sum(axis=1, keepdims=True)
    probs[:, -1] = np.clip(1.0 - probs[:, :-1].sum(axis=1), 0.0, None)
    rng = np.random.default_rng(np.random.SeedSequence(seed.entropy, spawn_key=(*seed.spawn_key, 0)))
    drawn = rng.multinomial(n, probs, size=(replicates, S * A))
    counts = np.zeros((replicates, S * A, S), dtype=np.int64)
    np.put_along_axis(counts, np.broadcast_to(support, drawn.shape), drawn, axis=2)
    orders = []
    for r in range(replicates):
        laid_out = np.repeat(np.tile(np.arange(S), S * A), counts[r].ravel()).reshape(S * A, n)
        child = np.random.SeedSequence(seed.entropy, spawn_key=(*seed.spawn_key, 1 + r, 1))
        orders.append(np.random.default_rng(child).permuted(laid_out, axis=1).reshape(S, A, n))
    return counts.reshape(replicates, S, A, S), orders


@pytest.mark.parametrize("mdp", [rlrates.garnet(12, 3, 4, seed=7), rlrates.gridworld(), rlrates.chain(9)],
                         ids=["garnet", "gridworld", "chain"])
def test_block_is_bit_identical_to_the_reference_sampler(mdp: TabularMDP) -> None:
    from rlrates.sampling import block_seed, draw_block, mdp_kernel

    for master, n in ((3, 17), (11, 256)):
        seed = block_seed(master, "identity", 0.9, n, 0, 5)
        expected_counts, expected_orders = _reference_block(mdp, n, 5, seed)
        batches = draw_block(mdp_kernel(mdp), n, 5, seed)
        for r, batch in enumerate(batches):
            np.testing.assert_array_equal(batch.counts, expected_counts[r])
            np.testing.assert_array_equal(batch.next_states, expected_orders[r])


def test_conditional_probabilities_are_worked_out_once_per_kernel(garnet: TabularMDP) -> None:
    # the chain's P(successor j | not before j) is part of the kernel, built with it (common practice)
    from rlrates.sampling import mdp_kernel

    kernel = mdp_kernel(garnet)
    assert kernel.conditional.shape == kernel.probs.shape
    # the first column's conditional is its own probability, the last column's is 1 (it takes the rest)
    np.testing.assert_array_equal(kernel.conditional[:, 0], kernel.probs[:, 0])
    np.testing.assert_allclose(kernel.conditional[:, -1], 1.0, atol=1e-12)


@pytest.mark.parametrize("whole_block", [True, False], ids=["small block: all views at once", "large block: one view"])
def test_a_block_keeps_counts_on_the_support_and_builds_dense_views_on_reading(
        garnet: TabularMDP, whole_block: bool, monkeypatch: pytest.MonkeyPatch) -> None:
    # the draw is (replicates, S*A, k) with k = branching; dense views are built on reading: a small
    # block's all at once, a large block's one at a time (only the last kept)
    from rlrates import sampling
    from rlrates.sampling import block_seed, draw_block, mdp_kernel

    if not whole_block:
        monkeypatch.setattr(sampling, "_WHOLE_BLOCK", 0)
    kernel = mdp_kernel(garnet)
    drawn = kernel.sample_support(np.random.default_rng(0), 40, 3)
    assert drawn.shape == (3, garnet.states * garnet.actions, 4)
    np.testing.assert_array_equal(drawn.sum(axis=2), 40)
    batches = draw_block(kernel, 40, 3, block_seed(0, "views", 0.5, 40, 0, 3))
    first = np.array(batches[0].counts)
    second = batches[1].counts
    assert batches[1].counts is second  # the same view while the same replicate is read
    assert (batches[0].counts is not None) and (batches[1].counts is second) == whole_block
    np.testing.assert_array_equal(batches[0].counts, first)  # rebuilt on demand, same draw
    assert not np.array_equal(first, second)
    with pytest.raises(ValueError):
        second.setflags(write=True)  # read-only through its buffer, in both regimes


def test_draws_given_each_rows_total_keep_the_totals_and_the_row_probabilities(garnet: TabularMDP) -> None:
    # the chain of conditional binomials (Devroye 1986, Non-Uniform Random Variate Generation, XI.1.3;
    # from memory) is a multinomial given each row's total: totals are kept exactly, and the mean count
    # of each successor is total x probability (a 6-sigma band over 2000 replicates: false alarm < 1e-8)
    from rlrates.sampling import mdp_kernel

    kernel = mdp_kernel(garnet)
    rng = np.random.default_rng(5)
    totals = rng.integers(0, 60, size=(2000, kernel.probs.shape[0]))
    drawn = kernel.sample_given_totals(np.random.default_rng(6), totals)
    np.testing.assert_array_equal(drawn.sum(axis=2), totals)
    expected = totals.sum(axis=0)[:, None] * kernel.probs
    sd = np.sqrt((totals.sum(axis=0)[:, None] * kernel.probs * (1 - kernel.probs)))
    assert (np.abs(drawn.sum(axis=0) - expected) <= 6 * sd + 1e-9).all()


# --------------------------------------------------------------------------- sparse MDPs


def test_a_sparse_batch_gives_read_only_sparse_counts() -> None:
    from scipy import sparse

    held = rlrates.gridworld(4, 3, sparse=True)
    batch = draw(held, 33, seed=2)
    counts = batch.counts
    assert batch.sparse and sparse.issparse(counts) and counts.format == "csr"
    assert counts.shape == (held.states * 4, held.states) and counts.dtype == np.int64
    assert counts.has_canonical_format and (counts.data > 0).all()
    np.testing.assert_array_equal(counts.sum(axis=1), 33)
    with pytest.raises(ValueError, match="read-only"):
        counts.data[0] = 0
    # counts fall only where P is positive
    assert counts.multiply(held.P.toarray() == 0).sum() == 0
    assert batch.next_states.shape == (held.states, 4, 33)
    with pytest.raises(ValueError, match="is sparse: use mdp_kernel"):
        sampling_kernel(held)


def test_sparse_block_counts_follow_the_multinomial() -> None:
    # As test_block_counts_follow_the_multinomial, on a sparse grid whose rows have unequal supports
    # (so rows are padded); chi-square of the pooled table (scipy.stats); seeded, deterministic;
    # false-alarm rate 0.1%.
    from rlrates.sampling import block_seed, draw_block, mdp_kernel

    # a corner has 3 successors (itself and two neighbours), an edge or inner cell 4
    held = rlrates.gridworld(4, 3, walls=(), sparse=True)
    kernel = mdp_kernel(held)
    assert kernel.sparse and kernel.support.shape[1] == 4
    assert sorted(set(np.diff(held.P.indptr))) == [3, 4]
    batches = draw_block(kernel, 50, 400, block_seed(1, "chi2-sparse", 0.5, 50, 0, 400))
    observed = sum(b.counts.toarray() for b in batches)
    expected = held.P.toarray() * 50 * 400
    support = expected > 0
    assert (observed[~support] == 0).all()
    stat = float((((observed - expected) ** 2)[support] / expected[support]).sum())
    dof = int(support.sum() - observed.shape[0])
    assert stats.chi2.sf(stat, dof) > 1e-3


def test_a_stream_key_builds_the_seed_and_the_children_a_seed_sequence_would() -> None:
    # numpy's SeedSequence is the reference: the key's children are SeedSequence(entropy,
    # spawn_key=key + path), as SeedSequence.spawn makes them, and block_seed is the key's sequence
    from rlrates.streams import StreamKey, block_key, block_seed

    key = block_key(7, "ctx", 0.9, 256, 0, 24)
    seed = block_seed(7, "ctx", 0.9, 256, 0, 24)
    np.testing.assert_array_equal(key.sequence().generate_state(4), seed.generate_state(4))
    spawned = np.random.SeedSequence(seed.entropy, spawn_key=seed.spawn_key).spawn(2)[1]
    np.testing.assert_array_equal(key.child(1).generate_state(4), spawned.generate_state(4))
    assert StreamKey.of(seed) == key


def test_kernels_are_built_once_per_mdp_and_cannot_be_written() -> None:
    from rlrates import sampling

    mdp = rlrates.garnet(9, 2, 3, seed=41)
    first = sampling.cached_kernel(mdp)
    twin = rlrates.garnet(9, 2, 3, seed=41)  # another object, the same fingerprint
    assert sampling.cached_kernel(twin) is first
    for array in (first.support, first.probs, first.scatter):
        with pytest.raises(ValueError):
            array[0] = 0
    for seed in range(42, 48):  # the cache keeps the newest four kernels
        sampling.cached_kernel(rlrates.garnet(9, 2, 3, seed=seed))
    assert len(sampling._KERNELS) <= 4 and mdp.fingerprint not in sampling._KERNELS


def test_a_stream_key_with_a_negative_key_part_is_refused_as_seed_sequence_refuses_it() -> None:
    # numpy's own message for a negative spawn-key word (the fast construction steps aside)
    from rlrates.streams import StreamKey

    with pytest.raises(ValueError, match="negative"):
        StreamKey(3, (1, -2)).child(0)
