"""Property-based checks (hypothesis) of the exact solvers and the sampler on random MDPs.

The properties are the defining equations (Bellman, 1957; common practice), not
values produced by the code under test.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given, settings
from hypothesis import strategies as st

from rlrates import TabularMDP
from rlrates.exact import q_pi, q_star, v_pi
from rlrates.fitting import Slope, fit_slope, summarise_cells
from rlrates.sampling import draw

SETTINGS = settings(max_examples=40, deadline=None)


@st.composite
def mdps(draw_: st.DrawFn) -> TabularMDP:
    """Random MDPs with 1-8 states, 1-4 actions, sparse or dense rows, rewards in [0, 1]."""
    S = draw_(st.integers(1, 8))
    A = draw_(st.integers(1, 4))
    seed = draw_(st.integers(0, 2**32 - 1))
    sparse = draw_(st.booleans())
    rng = np.random.default_rng(seed)
    weights = rng.random((S, A, S))
    if sparse:
        keep = rng.random((S, A, S)) < 0.3
        keep[np.arange(S)[:, None], np.arange(A)[None, :], rng.integers(0, S, size=(S, A))] = True
        weights = weights * keep
    P = weights / weights.sum(axis=2, keepdims=True)
    R = rng.random((S, A))
    return TabularMDP(P, R)


gammas = st.floats(min_value=0.05, max_value=0.995)


@SETTINGS
@given(mdp=mdps(), gamma=gammas, policy_seed=st.integers(0, 2**32 - 1))
def test_q_pi_satisfies_bellman_equation(mdp: TabularMDP, gamma: float, policy_seed: int) -> None:
    # Bellman expectation equation: Q(s, a) = R(s, a) + gamma sum_s' P(s'|s, a) sum_a' pi(a'|s') Q(s', a')
    pi = np.random.default_rng(policy_seed).dirichlet(np.ones(mdp.actions), size=mdp.states)
    q = q_pi(mdp, gamma, pi)
    residual = mdp.R + gamma * mdp.P @ (q * pi).sum(axis=1) - q
    assert np.abs(residual).max() <= 1e-9 * max(1.0, np.abs(q).max())
    np.testing.assert_allclose(v_pi(mdp, gamma, pi), (q * pi).sum(axis=1), rtol=1e-10, atol=1e-10)
    # rewards in [0, 1] give values in [0, 1 / (1 - gamma)] (common practice)
    assert q.min() >= -1e-9 and q.max() <= 1.0 / (1.0 - gamma) + 1e-9


@SETTINGS
@given(mdp=mdps(), gamma=gammas)
def test_q_star_satisfies_optimality_equation(mdp: TabularMDP, gamma: float) -> None:
    # Bellman optimality equation: Q*(s, a) = R(s, a) + gamma sum_s' P(s'|s, a) max_a' Q*(s', a')
    q, policy = q_star(mdp, gamma)
    residual = mdp.R + gamma * mdp.P @ q.max(axis=1) - q
    assert np.abs(residual).max() <= 1e-9 * max(1.0, np.abs(q).max())
    # the returned policy is greedy for Q*
    rows = np.arange(mdp.states)
    assert np.all(q[rows, policy] >= q.max(axis=1) - 1e-9 * max(1.0, np.abs(q).max()))


@SETTINGS
@given(mdp=mdps(), n=st.integers(1, 60), seed=st.integers(0, 2**32 - 1))
def test_counts_agree_with_next_states(mdp: TabularMDP, n: int, seed: int) -> None:
    batch = draw(mdp, n, seed=seed)
    S, A = mdp.states, mdp.actions
    seq = batch.next_states
    assert seq.shape == (S, A, n)
    recount = (seq[..., None] == np.arange(S)).sum(axis=2)
    np.testing.assert_array_equal(recount, batch.counts)
    np.testing.assert_array_equal(batch.counts.sum(axis=2), n)
    assert batch.counts[mdp.P == 0].sum() == 0


# ---------------------------------------------------------------------------------------------
# Fits recover known exponents. Synthetic errors err = C n^a H^b times log-normal noise give
# cells whose log-mean has a known slope; over 200 synthetic data sets per example, the
# pair of one-sided bounds at level 0.95 (a 90% interval) must cover the true exponent in at
# least 82% of them (binomial sd of the coverage is 2.1%, so a correct fit falls below 82%
# with probability about 1e-4 per example). Seeds come from the drawn parameters, and
# hypothesis is derandomized: the test is deterministic.


@settings(max_examples=15, deadline=None, derandomize=True)
@given(
    a=st.floats(-1.0, -0.2),
    b=st.floats(0.0, 2.5),
    log_c=st.floats(-3.0, 1.0),
    sigma=st.floats(0.05, 0.6),
)
def test_fitted_exponents_cover_the_truth_at_the_advertised_rate(a: float, b: float, log_c: float, sigma: float) -> None:
    rng = np.random.default_rng(abs(hash((round(a, 6), round(b, 6), round(log_c, 6), round(sigma, 6)))) % 2**32)
    n_grid = np.array([128, 256, 512, 1024, 2048])
    gammas = np.array([0.5, 0.75, 0.9])
    replicates = 24
    covered_n = covered_h = 0
    trials = 200
    gg, nn, rr = np.meshgrid(gammas, n_grid, np.arange(replicates), indexing="ij")
    hh = 1 / (1 - gg)
    for _ in range(trials):
        noise = rng.lognormal(0.0, sigma, size=gg.shape)
        errors = np.exp(log_c) * nn**a * hh**b * noise
        table = pd.DataFrame({"gamma": gg.ravel(), "H": hh.ravel(), "n": nn.ravel(), "replicate": rr.ravel(),
                              "error": errors.ravel(), "seconds": 0.0})
        cells = summarise_cells(table).to_frame()
        df = replicates - 1
        slopes = [fit_slope(np.log(c["n"]), c["log_mean"], c["log_var"], df) for _, c in cells.groupby("gamma")]
        pooled_est = np.mean([s.estimate for s in slopes])
        pooled_se = np.sqrt(sum(s.se**2 for s in slopes)) / len(slopes)
        pooled = Slope(float(pooled_est), float(pooled_se), df, 15)
        covered_n += pooled.lower(0.05) <= a <= pooled.upper(0.05)
        top = cells[cells["n"] == n_grid[-1]]
        horizon = fit_slope(np.log(top["H"]), top["log_mean"], top["log_var"], df)
        covered_h += horizon.lower(0.05) <= b <= horizon.upper(0.05)
    assert covered_n / trials >= 0.82
    assert covered_h / trials >= 0.82


# ---------------------------------------------------------------------------------------------
# Sparse storage: the same model held as a scipy.sparse (S*A, S) array solves to the same values
# (scipy.sparse.linalg.spsolve against numpy.linalg.solve) and samples the same draw.


def _as_sparse(mdp: TabularMDP) -> TabularMDP:
    from scipy import sparse

    return TabularMDP(sparse.csr_array(mdp.P.reshape(mdp.states * mdp.actions, mdp.states)), mdp.R)


@SETTINGS
@given(mdp=mdps(), gamma=gammas, policy_seed=st.integers(0, 2**32 - 1))
def test_sparse_storage_solves_to_the_dense_values(mdp: TabularMDP, gamma: float, policy_seed: int) -> None:
    pi = np.random.default_rng(policy_seed).dirichlet(np.ones(mdp.actions), size=mdp.states)
    held = _as_sparse(mdp)
    scale = max(1.0, 1.0 / (1.0 - gamma))
    np.testing.assert_allclose(q_pi(held, gamma, pi), q_pi(mdp, gamma, pi), rtol=0, atol=1e-10 * scale)
    q_dense, _ = q_star(mdp, gamma)
    q_sparse, _ = q_star(held, gamma)
    np.testing.assert_allclose(q_sparse, q_dense, rtol=0, atol=1e-9 * scale)


@SETTINGS
@given(mdp=mdps(), n=st.integers(1, 60), seed=st.integers(0, 2**32 - 1))
def test_sparse_counts_agree_with_next_states(mdp: TabularMDP, n: int, seed: int) -> None:
    batch = draw(_as_sparse(mdp), n, seed=seed)
    S, A = mdp.states, mdp.actions
    counts = batch.counts.toarray()
    assert batch.counts.shape == (S * A, S)
    recount = (batch.next_states[..., None] == np.arange(S)).sum(axis=2).reshape(S * A, S)
    np.testing.assert_array_equal(recount, counts)
    np.testing.assert_array_equal(counts.sum(axis=1), n)
    assert counts[mdp.P.reshape(S * A, S) == 0].sum() == 0


@SETTINGS
@given(entropy=st.integers(0, 2**130), key=st.lists(st.integers(0, 2**70), max_size=8),
       path=st.lists(st.integers(0, 2**40), max_size=3), pool_size=st.sampled_from([4, 5, 8]))
def test_a_stream_key_child_is_the_seed_sequence_of_its_entropy_and_spawn_key(entropy: int, key: list[int],
                                                                              path: list[int], pool_size: int) -> None:
    # numpy's SeedSequence(entropy, spawn_key=...) is the reference; StreamKey builds the same
    # pool from the words SeedSequence assembles (entropy, zeros up to the pool size, spawn key)
    from rlrates.streams import StreamKey

    child = StreamKey(entropy, tuple(key), pool_size).child(*path)
    reference = np.random.SeedSequence(entropy, spawn_key=(*key, *path), pool_size=pool_size)
    np.testing.assert_array_equal(child.generate_state(8), reference.generate_state(8))
    np.testing.assert_array_equal(np.random.default_rng(child).integers(0, 2**62, size=4),
                                  np.random.default_rng(reference).integers(0, 2**62, size=4))
