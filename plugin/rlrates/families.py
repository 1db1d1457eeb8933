"""Families of tabular MDPs with known structure, each seeded through numpy Generators.

Every constructor returns a :class:`~rlrates.mdp.TabularMDP` whose ``metadata``
records the family and its parameters (for reports and reproducers).

``garnet``, ``chain``, ``gridworld`` and ``ring`` take ``sparse=``: ``True`` builds
``P`` as a scipy.sparse (S*A, S) array from the successor lists, ``False`` as the
dense (S, A, S) array, and the default ``None`` builds dense unless the dense
array would exceed :data:`rlrates.mdp.DENSE_LIMIT_BYTES` (1 GiB; the MDP's ``notes`` then say
so). Both storages
hold the same probabilities (a Garnet's bit for bit; the others' sums of
coinciding moves to rounding).
``horizon_hard`` depends on the discount, so it returns a *gamma-indexed family*:
a callable ``gamma -> TabularMDP`` that :func:`rlrates.check` accepts in place
of a single MDP.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .costs import dense_kernel_cost, gib, require_memory, sparse_kernel_cost
from .exact import validate_gamma
from .mdp import DENSE_LIMIT_BYTES, TabularMDP, dense_fits

__all__ = ["garnet", "chain", "gridworld", "ring", "deterministic", "horizon_hard", "HorizonHard", "rebuild_call"]


def _positive_int(value: object, name: str, minimum: int = 1) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or int(value) < minimum:
        raise ValueError(f"`{name}` must be an integer >= {minimum}, got {value!r}")
    return int(value)


def _probability(value: object, name: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ValueError(f"`{name}` must be a probability in [0, 1], got {value!r}")
    if not 0.0 <= float(value) <= 1.0:
        raise ValueError(f"`{name}` must be a probability in [0, 1], got {value!r}")
    return float(value)


def _use_sparse(sparse: object, states: int, actions: int) -> bool:
    """The storage a family builds: as asked, or sparse only when dense would not fit (``None``)."""
    if sparse is None:
        return not dense_fits(states, actions)
    if not isinstance(sparse, (bool, np.bool_)):
        raise ValueError(f"`sparse` must be True, False or None (dense unless it would not fit), got {sparse!r}")
    return bool(sparse)


def _storage(sparse: object, call: str, states: int, actions: int, successors: int,
             extra_bytes: int = 0) -> tuple[bool, tuple[str, ...]]:
    """Sparse or dense (see :func:`_use_sparse`), and the notes to give the MDP; refuses what would not fit.

    ``successors`` is the most successors a row stores in sparse form; ``extra_bytes``
    what the family builds beside the kernel.
    """
    use_sparse = _use_sparse(sparse, states, actions)
    if use_sparse:
        cost = sparse_kernel_cost(call, states, actions, successors, extra_bytes)
        advice = "use fewer states or actions (or fewer successors)"
    else:
        cost = dense_kernel_cost(call, states, actions, extra_bytes)
        advice = "use fewer states, or pass sparse=True for a sparse P"
    require_memory(cost, advice)
    if not (sparse is None and use_sparse):
        return use_sparse, ()
    note = (f"built with a sparse P automatically: a dense (S, A, S) = ({states}, {actions}, {states}) kernel "
            f"would take {gib(8 * states * actions * states)}, over the {gib(DENSE_LIMIT_BYTES)} dense limit "
            "(rlrates.mdp.DENSE_LIMIT_BYTES); pass sparse=False for a dense one")
    return True, (note,)


def _sparse_rows(targets: NDArray[np.int64], weights: NDArray[np.float64], states: int) -> Any:
    """A CSR (S*A, S) kernel from per-row successor lists (rows, k); coinciding successors add up."""
    from scipy import sparse

    rows = np.repeat(np.arange(targets.shape[0]), targets.shape[1])
    return sparse.coo_array((weights.ravel(), (rows, targets.ravel())), shape=(targets.shape[0], states)).tocsr()


def _with_sparse(metadata: dict[str, Any], sparse: bool) -> dict[str, Any]:
    return {**metadata, "sparse": True} if sparse else metadata


def _slip_moves(moves: NDArray[np.int64], slip: float) -> tuple[NDArray[np.int64], NDArray[np.float64]]:
    """Successor lists for "the chosen move w.p. 1 - slip, else a uniformly random move".

    ``moves`` (S, M): the state each of the M moves leads to; action a takes move a.
    Returns targets and weights of shape (S * M, M + 1).
    """
    S, M = moves.shape
    chosen = moves.reshape(S * M, 1)
    every = np.repeat(moves, M, axis=0)
    weights = np.concatenate([np.full((S * M, 1), 1.0 - slip), np.full((S * M, M), slip / M)], axis=1)
    return np.concatenate([chosen, every], axis=1), weights


def _garnet_successors(rng: np.random.Generator, rows: int, states: int, branching: int) -> NDArray[np.int64]:
    """The first ``branching`` columns of ``argsort(rng.random((rows, states)))``, drawn in row chunks.

    The same stream as one ``rng.random((rows, states))`` call (a Generator fills arrays in
    C order), with an O(S) partition per row instead of a sort and 32 MB at a time.
    """
    chunk = max(1, 4_000_000 // states)
    out = np.empty((rows, branching), dtype=np.int64)
    for low in range(0, rows, chunk):
        keys = rng.random((min(chunk, rows - low), states))
        if branching < states:
            picked = np.argpartition(keys, branching - 1, axis=1)[:, :branching]
        else:
            picked = np.broadcast_to(np.arange(states), keys.shape)
        order = np.argsort(np.take_along_axis(keys, picked, axis=1), axis=1)
        out[low : low + keys.shape[0]] = np.take_along_axis(picked, order, axis=1)
    return out


def garnet(states: int, actions: int, branching: int, seed: int = 0, *, sparse: bool | None = None) -> TabularMDP:
    """A Garnet MDP: ``branching`` distinct random successors per (s, a).

    Construction after Archibald, McKinnon and Thomas (1995), "On the generation
    of Markov decision processes", J. Oper. Res. Soc. 46: successors drawn without
    replacement, their probabilities the spacings of ``branching - 1`` sorted
    uniform cut points on [0, 1]; rewards uniform on [0, 1].
    """
    states = _positive_int(states, "states")
    actions = _positive_int(actions, "actions")
    branching = _positive_int(branching, "branching")
    if branching > states:
        raise ValueError(f"`branching` ({branching}) cannot exceed `states` ({states})")
    use_sparse, notes = _storage(sparse, f"garnet(states={states}, actions={actions}, branching={branching})",
                                 states, actions, branching)
    rng = np.random.default_rng(np.random.SeedSequence(int(seed)))
    rows = states * actions
    # distinct successors: the first `branching` columns of a random permutation per row
    if use_sparse:
        successors = _garnet_successors(rng, rows, states, branching)
    else:
        successors = np.argsort(rng.random((rows, states)), axis=1)[:, :branching]
    cuts = np.sort(rng.random((rows, branching - 1)), axis=1)
    edges = np.concatenate([np.zeros((rows, 1)), cuts, np.ones((rows, 1))], axis=1)
    weights = np.diff(edges, axis=1)
    if use_sparse:
        P: Any = _sparse_rows(successors, weights, states)
    else:
        P = np.zeros((rows, states))
        np.put_along_axis(P, successors, weights, axis=1)
        P = P.reshape(states, actions, states)
    R = rng.random((states, actions))
    metadata = {"family": "garnet", "states": states, "actions": actions, "branching": branching, "seed": int(seed)}
    return TabularMDP(P, R, name=f"garnet-S{states}-A{actions}-b{branching}-seed{seed}",
                      metadata=_with_sparse(metadata, use_sparse), notes=notes)


def chain(states: int = 10, slip: float = 0.1, seed: int = 0, *, sparse: bool | None = None) -> TabularMDP:
    """A corridor: action 0 moves left, action 1 moves right; with prob. ``slip`` the move reverses.

    Reward 1 for acting in the right end state, 0.1 in the left end state, a small
    seeded reward in [0, 0.05) elsewhere (common practice: the "RiverSwim"-like
    corridor of exploration studies, here with a generative model).
    """
    states = _positive_int(states, "states", 2)
    slip = _probability(slip, "slip")
    use_sparse, notes = _storage(sparse, f"chain(states={states})", states, 2, 2)
    rng = np.random.default_rng(np.random.SeedSequence(int(seed)))
    if use_sparse:
        left = np.maximum(np.arange(states) - 1, 0)
        right = np.minimum(np.arange(states) + 1, states - 1)
        targets = np.stack([left, right, right, left], axis=1).reshape(2 * states, 2)
        weights = np.tile([1 - slip, slip], (2 * states, 1))
        P: Any = _sparse_rows(targets, weights, states)
    else:
        P = np.zeros((states, 2, states))
        for s in range(states):
            left_s, right_s = max(s - 1, 0), min(s + 1, states - 1)
            P[s, 0, left_s] += 1 - slip
            P[s, 0, right_s] += slip
            P[s, 1, right_s] += 1 - slip
            P[s, 1, left_s] += slip
    R = rng.random((states, 2)) * 0.05
    R[0, :] = 0.1
    R[-1, :] = 1.0
    metadata = {"family": "chain", "states": states, "slip": slip, "seed": int(seed)}
    return TabularMDP(P, R, name=f"chain-S{states}-slip{slip:g}", metadata=_with_sparse(metadata, use_sparse),
                      notes=notes)


def gridworld(
    width: int = 5,
    height: int = 5,
    slip: float = 0.2,
    walls: tuple[tuple[int, int], ...] = ((1, 1), (2, 3), (3, 1)),
    goal: tuple[int, int] | None = None,
    *,
    sparse: bool | None = None,
) -> TabularMDP:
    """A grid with walls and slip: actions up/right/down/left; with prob. ``slip`` a uniformly random move.

    Walls are impassable cells (not states). Moving into a wall or off the grid
    leaves the agent in place. Reward 1 for any action taken in the goal cell
    (default: the bottom-right free cell), 0 elsewhere (common practice).
    """
    width = _positive_int(width, "width")
    height = _positive_int(height, "height")
    slip = _probability(slip, "slip")
    # the free cells are listed in Python first (about 250 bytes a cell): refuse before listing them
    _storage(sparse, f"gridworld(width={width}, height={height})", width * height, 4, 5, 250 * width * height)
    wall_set = {tuple(w) for w in walls}
    cells = [(r, c) for r in range(height) for c in range(width) if (r, c) not in wall_set]
    if not cells:
        raise ValueError("`walls` cover the whole grid; no states remain")
    index = {cell: i for i, cell in enumerate(cells)}
    goal_cell = cells[-1] if goal is None else tuple(goal)
    if goal_cell not in index:
        raise ValueError(f"`goal` {goal!r} is a wall or off the grid")
    moves = [(-1, 0), (0, 1), (1, 0), (0, -1)]
    S = len(cells)
    use_sparse, notes = _storage(sparse, f"gridworld(width={width}, height={height})", S, 4, 5)
    if use_sparse:
        P: Any = _sparse_rows(*_slip_moves(_grid_moves(cells, width, height), slip), S)
    else:
        P = np.zeros((S, 4, S))
        for (r, c), s in index.items():
            targets = []
            for dr, dc in moves:
                nxt = (r + dr, c + dc)
                targets.append(index.get(nxt, s))
            for a in range(4):
                P[s, a, targets[a]] += 1 - slip
                for t in targets:
                    P[s, a, t] += slip / 4
    R = np.zeros((S, 4))
    R[index[goal_cell], :] = 1.0
    metadata = {"family": "gridworld", "width": width, "height": height, "slip": slip,
                "walls": [list(w) for w in sorted(wall_set)], "goal": list(goal_cell)}
    return TabularMDP(P, R, name=f"grid-{width}x{height}-slip{slip:g}", metadata=_with_sparse(metadata, use_sparse),
                      notes=notes)


def _grid_moves(cells: list[tuple[int, int]], width: int, height: int) -> NDArray[np.int64]:
    """(S, 4): the state that up/right/down/left leads to from each free cell (itself at a wall or edge)."""
    number = np.full((height + 2, width + 2), -1, dtype=np.int64)  # a frame of walls around the grid
    rc = np.array(cells, dtype=np.int64).reshape(-1, 2) + 1
    number[rc[:, 0], rc[:, 1]] = np.arange(len(cells))
    own = np.arange(len(cells))
    out = np.empty((len(cells), 4), dtype=np.int64)
    for a, (dr, dc) in enumerate([(-1, 0), (0, 1), (1, 0), (0, -1)]):
        nxt = number[rc[:, 0] + dr, rc[:, 1] + dc]
        out[:, a] = np.where(nxt >= 0, nxt, own)
    return out


def ring(states: int = 12, slip: float = 0.1, seed: int = 0, *, sparse: bool | None = None) -> TabularMDP:
    """States on a cycle: stay, step clockwise, step counter-clockwise; with prob. ``slip`` a uniform step.

    Rewards are seeded uniform on [0, 1] per (s, a) (common practice).
    """
    states = _positive_int(states, "states", 3)
    slip = _probability(slip, "slip")
    use_sparse, notes = _storage(sparse, f"ring(states={states})", states, 3, 4)
    rng = np.random.default_rng(np.random.SeedSequence(int(seed)))
    if use_sparse:
        here = np.arange(states)
        P: Any = _sparse_rows(*_slip_moves(np.stack([here, (here + 1) % states, (here - 1) % states], axis=1), slip), states)
    else:
        P = np.zeros((states, 3, states))
        for s in range(states):
            targets = [s, (s + 1) % states, (s - 1) % states]
            for a in range(3):
                P[s, a, targets[a]] += 1 - slip
                for t in targets:
                    P[s, a, t] += slip / 3
    R = rng.random((states, 3))
    metadata = {"family": "ring", "states": states, "slip": slip, "seed": int(seed)}
    return TabularMDP(P, R, name=f"ring-S{states}-slip{slip:g}", metadata=_with_sparse(metadata, use_sparse),
                      notes=notes)


def deterministic(states: int = 8, actions: int = 3, seed: int = 0) -> TabularMDP:
    """Every (s, a) has exactly one successor (one-hot rows): any correct plug-in estimator is exact.

    Successors and rewards uniform at random (seeded).
    """
    states = _positive_int(states, "states")
    actions = _positive_int(actions, "actions")
    require_memory(dense_kernel_cost(f"deterministic(states={states}, actions={actions})", states, actions),
                   "use fewer states or actions (this family is dense only)")
    rng = np.random.default_rng(np.random.SeedSequence(int(seed)))
    successor = rng.integers(0, states, size=(states, actions))
    P = np.zeros((states, actions, states))
    s_idx, a_idx = np.meshgrid(np.arange(states), np.arange(actions), indexing="ij")
    P[s_idx, a_idx, successor] = 1.0
    R = rng.random((states, actions))
    return TabularMDP(P, R, name=f"deterministic-S{states}-A{actions}-seed{seed}",
                      metadata={"family": "deterministic", "states": states, "actions": actions, "seed": int(seed)})


@dataclass(frozen=True)
class HorizonHard:
    """Gamma-indexed family in the spirit of the lower-bound MDP of Azar, Munos and Kappen (2013).

    "Minimax PAC bounds on the sample complexity of reinforcement learning with a
    generative model", Machine Learning 91. State 0 is a decision state whose
    ``actions`` actions each lead to their own rewarding state (states 1..A);
    rewarding state ``k`` gives reward 1 and loops on itself with probability
    ``p = (4 gamma - 1) / (3 gamma)``, otherwise it falls into state A + 1,
    absorbing with reward 0. Since ``1 - gamma p = 4 (1 - gamma) / 3``, a loop's
    value is ``3 H / 4`` and the plug-in estimate's standard deviation grows like
    ``H^1.5 / sqrt(n)``. Needs gamma > 1/4 (so that p > 0).
    """

    actions: int = 2

    def __call__(self, gamma: float) -> TabularMDP:
        gamma = validate_gamma(gamma)
        if gamma <= 0.25:
            raise ValueError(f"horizon_hard needs gamma > 1/4 so that the loop probability is positive, got {gamma}")
        A = _positive_int(self.actions, "actions")
        p = (4 * gamma - 1) / (3 * gamma)
        S = A + 2
        sink = A + 1
        P = np.zeros((S, A, S))
        R = np.zeros((S, A))
        for a in range(A):
            P[0, a, 1 + a] = 1.0
        for k in range(1, A + 1):
            P[k, :, k] = p
            P[k, :, sink] = 1 - p
            R[k, :] = 1.0
        P[sink, :, sink] = 1.0
        return TabularMDP(P, R, name=f"horizon-hard-A{A}-gamma{gamma:g}",
                          metadata={"family": "horizon_hard", "actions": A, "gamma": gamma, "loop_probability": p})

    @property
    def name(self) -> str:
        return f"horizon-hard-A{self.actions}"

    @property
    def metadata(self) -> dict[str, object]:
        return {"family": "horizon_hard", "actions": self.actions}


def horizon_hard(actions: int = 2) -> HorizonHard:
    """The gamma-indexed horizon-hard family; call the result with a discount to get an MDP."""
    A = _positive_int(actions, "actions")
    require_memory(dense_kernel_cost(f"horizon_hard(actions={A})", A + 2, A), "use fewer actions (this family is dense only)")
    return HorizonHard(actions=int(actions))


#: For each family: the constructor's parameters, all recorded in the members' ``metadata``.
_PARAMETERS: dict[str, tuple[str, ...]] = {
    "garnet": ("states", "actions", "branching", "seed"),
    "chain": ("states", "slip", "seed"),
    "ring": ("states", "slip", "seed"),
    "deterministic": ("states", "actions", "seed"),
    "horizon_hard": ("actions",),
}


def rebuild_call(metadata: dict[str, object] | None) -> str | None:
    """Python source that rebuilds a family member from its ``metadata``, e.g. ``rlrates.chain(states=10, ...)``.

    ``None`` when the metadata does not name a family of this module or lacks a parameter.
    """
    metadata = metadata or {}
    keys = _PARAMETERS.get(str(metadata.get("family")))
    if keys is None or any(key not in metadata for key in keys):
        return None
    arguments = [f"{key}={metadata[key]!r}" for key in keys] + (["sparse=True"] if metadata.get("sparse") else [])
    return f"rlrates.{metadata['family']}(" + ", ".join(arguments) + ")"
