"""The tabular MDP model: validated, immutable transition and reward arrays.

A :class:`TabularMDP` holds ``P`` of shape ``(S, A, S)`` (``P[s, a, s']`` is the
probability of moving to ``s'`` after taking ``a`` in ``s``) and ``R`` of shape
``(S, A)`` (the expected immediate reward). Large models may instead give ``P``
as a scipy.sparse array of shape ``(S*A, S)`` (row ``s * A + a``); it is kept
sparse (CSR) and everything downstream (exact solves, sampling, the batches'
counts) stays sparse. Construction validates both and
names the offending entry when something is wrong; afterwards the arrays are
read-only, so an estimator or a test cannot change the ground truth by accident.
"""

from __future__ import annotations

import hashlib
import sys
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .costs import Cost, require_memory

__all__ = ["TabularMDP", "RewardRangeWarning", "ROW_SUM_TOLERANCE", "DENSE_LIMIT_BYTES", "dense_fits", "is_sparse"]

#: Largest accepted ``|sum_s' P[s, a, s'] - 1|`` for a transition row. Rows within
#: this tolerance are accepted and renormalised exactly when sampling.
ROW_SUM_TOLERANCE = 1e-8


#: Largest dense (S, A, S) float64 kernel the families build by default (1 GiB, e.g. S = 5000
#: with A = 4 is 800 MB); above it they build a sparse model unless told ``sparse=False``.
DENSE_LIMIT_BYTES = 2**30


def dense_fits(states: int, actions: int) -> bool:
    """Whether a dense (S, A, S) float64 kernel stays within :data:`DENSE_LIMIT_BYTES`."""
    return 8 * states * actions * states <= DENSE_LIMIT_BYTES


def is_sparse(value: object) -> bool:
    """Whether ``value`` is a scipy.sparse array or matrix (False without importing scipy)."""
    if type(value) is np.ndarray:  # the common case, answered without a look-up
        return False
    module = sys.modules.get("scipy.sparse")
    return module is not None and bool(module.issparse(value))


class RewardRangeWarning(UserWarning):
    """Rewards outside [0, 1]: the usual sample-complexity bounds assume that range."""


def _as_float_array(value: ArrayLike, name: str, ndim: int, layout: str) -> NDArray[np.float64]:
    try:
        raw = np.asarray(value)
        if np.iscomplexobj(raw):  # casting would silently drop the imaginary part
            raise TypeError(f"complex dtype {raw.dtype} is not real")
        array = np.array(raw, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"`{name}` must be a numeric array of shape {layout}; {exc}") from None
    if array.ndim != ndim:
        raise ValueError(
            f"`{name}` must have {ndim} dimensions {layout}, got {array.ndim} "
            f"(shape {array.shape})"
        )
    return array


#: Bytes per entry that validating a dense ``P`` adds to the array given: its float64 copy, two
#: boolean masks and the fingerprint's copy.
_VALIDATION_BYTES_PER_ENTRY = 18


def _refuse_unaffordable(P: object) -> None:
    """Refuse, before copying it, a dense ``P`` whose validation would need more memory than the machine has."""
    if not isinstance(P, np.ndarray) or P.ndim != 3:
        return
    cost = Cost("validating `P`", P.nbytes + _VALIDATION_BYTES_PER_ENTRY * P.size,
                f"shape {P.shape}, {P.size:,} entries: the array given, its float64 copy, the checks' masks "
                "and the fingerprint's copy")
    require_memory(cost, "give a smaller model, or a scipy.sparse (S*A, S) `P`, which is validated without densifying")


def _first_index(mask: NDArray[np.bool_]) -> tuple[int, ...]:
    return tuple(int(i) for i in np.argwhere(mask)[0])


def validate_transitions(P: ArrayLike, *, tolerance: float = ROW_SUM_TOLERANCE) -> NDArray[np.float64]:
    """Return ``P`` as a float array after checking it is a valid (S, A, S) kernel."""
    array = _as_float_array(P, "P", 3, "(S, A, S)")
    states, actions, successors = array.shape
    if states == 0:
        raise ValueError("`P` has no states: shape (0, A, S); an MDP needs at least one state")
    if actions == 0:
        raise ValueError(f"`P` has no actions: shape {array.shape}; an MDP needs at least one action")
    if successors != states:
        raise ValueError(
            f"`P` must have shape (S, A, S) with the same S on both ends, got {array.shape}"
        )
    bad = ~np.isfinite(array)
    if bad.any():
        s, a, t = _first_index(bad)
        raise ValueError(
            f"`P` has a non-finite entry P[{s}, {a}, {t}] = {array[s, a, t]!r} "
            f"({int(bad.sum())} non-finite entries in all)"
        )
    negative = array < 0
    if negative.any():
        s, a, t = _first_index(negative)
        raise ValueError(
            f"`P` has a negative probability P[{s}, {a}, {t}] = {array[s, a, t]:.6g}"
        )
    sums = array.sum(axis=2)
    off = np.abs(sums - 1.0) > tolerance
    if off.any():
        s, a = _first_index(off)
        raise ValueError(
            f"`P` row (s={s}, a={a}) sums to {sums[s, a]:.12g}, not 1 "
            f"(tolerance {tolerance:g}; {int(off.sum())} rows off in all)"
        )
    return array


def validate_sparse_transitions(P: Any, *, tolerance: float = ROW_SUM_TOLERANCE) -> tuple[Any, int, int]:
    """Return a canonical, read-only CSR copy of a sparse (S*A, S) kernel, with S and A."""
    from scipy import sparse

    if P.ndim != 2:
        raise ValueError(f"a sparse `P` must have shape (S*A, S), got {P.shape}")
    rows, states = P.shape
    if states == 0 or rows == 0:
        raise ValueError(f"a sparse `P` has no states or no actions: shape {P.shape}; it needs shape (S*A, S) with S, A >= 1")
    if rows % states:
        raise ValueError(
            f"a sparse `P` must have shape (S*A, S): {rows} rows is not a multiple of S = {states} columns"
        )
    actions = rows // states
    if P.dtype.kind not in "biuf":
        raise ValueError(f"a sparse `P` must hold real probabilities, got dtype {P.dtype}")
    flat = sparse.csr_array(P, dtype=np.float64, copy=True)
    flat.sum_duplicates()
    flat.eliminate_zeros()
    row_of = np.repeat(np.arange(rows), np.diff(flat.indptr))

    def where(k: int) -> str:
        return f"P[{row_of[k] // actions}, {row_of[k] % actions}, {flat.indices[k]}] (row {row_of[k]} of the (S*A, S) array)"

    bad = ~np.isfinite(flat.data)
    if bad.any():
        k = int(np.argmax(bad))
        raise ValueError(f"`P` has a non-finite entry {where(k)} = {flat.data[k]!r} ({int(bad.sum())} non-finite entries in all)")
    negative = flat.data < 0
    if negative.any():
        k = int(np.argmax(negative))
        raise ValueError(f"`P` has a negative probability {where(k)} = {flat.data[k]:.6g}")
    sums = np.asarray(flat.sum(axis=1)).ravel()
    off = np.abs(sums - 1.0) > tolerance
    if off.any():
        i = int(np.argmax(off))
        raise ValueError(
            f"`P` row (s={i // actions}, a={i % actions}) sums to {sums[i]:.12g}, not 1 "
            f"(tolerance {tolerance:g}; {int(off.sum())} rows off in all)"
        )
    for part in (flat.data, flat.indices, flat.indptr):
        part.setflags(write=False)
    return flat, states, actions


def validate_rewards(R: ArrayLike, states: int, actions: int) -> NDArray[np.float64]:
    """Return ``R`` as a float array after checking shape (S, A) and finiteness."""
    array = _as_float_array(R, "R", 2, "(S, A)")
    if array.shape != (states, actions):
        raise ValueError(
            f"`R` must have shape (S, A) = ({states}, {actions}) to match `P`, got {array.shape}"
        )
    bad = ~np.isfinite(array)
    if bad.any():
        s, a = _first_index(bad)
        raise ValueError(f"`R` has a non-finite entry R[{s}, {a}] = {array[s, a]!r}")
    return array


class TabularMDP:
    """A finite MDP with transition kernel ``P`` (S, A, S) and mean rewards ``R`` (S, A).

    Parameters
    ----------
    P:
        Transition probabilities; every row ``P[s, a, :]`` is non-negative and sums
        to 1 within :data:`ROW_SUM_TOLERANCE`. Either an (S, A, S) array or a
        scipy.sparse array (or matrix) of shape (S*A, S) whose row ``s * A + a`` is
        ``P[s, a, :]``; a sparse ``P`` is kept as a canonical CSR array.
    R:
        Expected immediate rewards. The bounds this plugin checks assume rewards in
        ``[0, 1]``; other ranges are accepted with a :class:`RewardRangeWarning`.
    name:
        A short label used in test ids and reports.
    metadata:
        Free-form description of where the MDP came from (family and parameters).
    notes:
        Remarks on how the model was built (for example that a family switched to
        sparse storage by itself); a check repeats them in its message.

    The arrays are copied and made read-only; :attr:`fingerprint` is a stable hash
    of their contents (independent of ``name`` and ``metadata``).
    """

    __slots__ = ("_P", "_R", "_name", "_metadata", "_notes", "_fingerprint")

    def __init__(
        self,
        P: ArrayLike,
        R: ArrayLike,
        *,
        name: str = "mdp",
        metadata: Mapping[str, Any] | None = None,
        notes: Sequence[str] = (),
    ) -> None:
        if isinstance(notes, str) or not all(isinstance(note, str) for note in tuple(notes)):
            raise TypeError(f"`notes` must be a sequence of strings, got {notes!r}")
        if is_sparse(P):
            P_array, states, actions = validate_sparse_transitions(P)
        else:
            _refuse_unaffordable(P)
            P_array = validate_transitions(P)
            states, actions = P_array.shape[0], P_array.shape[1]
        R_array = validate_rewards(R, states, actions)
        if R_array.min() < 0.0 or R_array.max() > 1.0:
            warnings.warn(
                f"rewards of MDP {name!r} lie in [{R_array.min():.4g}, {R_array.max():.4g}], "
                "outside [0, 1]; rate constants then scale with the reward range",
                RewardRangeWarning,
                stacklevel=2,
            )
        if not is_sparse(P_array):
            P_array.setflags(write=False)
        R_array.setflags(write=False)
        self._P = P_array
        self._R = R_array
        self._name = str(name)
        self._metadata = dict(metadata or {})
        self._notes = tuple(notes)
        self._fingerprint = _fingerprint(P_array, R_array)

    @property
    def P(self) -> Any:
        """Read-only transition kernel: an (S, A, S) ndarray, or for a sparse MDP a
        scipy.sparse CSR array of shape (S*A, S) (row ``s * A + a``) with read-only parts."""
        return self._P

    @property
    def transition_rows(self) -> Any:
        """``P`` as (S*A, S) rows: a view of the dense array, or the sparse array itself."""
        if self.is_sparse:
            return self._P
        return self._P.reshape(self.states * self.actions, self.states)

    @property
    def is_sparse(self) -> bool:
        """True when ``P`` is held as a scipy.sparse (S*A, S) array."""
        return is_sparse(self._P)

    @property
    def R(self) -> NDArray[np.float64]:
        """Read-only mean rewards, shape (S, A)."""
        return self._R

    @property
    def states(self) -> int:
        return int(self._R.shape[0])

    @property
    def actions(self) -> int:
        return int(self._R.shape[1])

    @property
    def name(self) -> str:
        return self._name

    @property
    def metadata(self) -> dict[str, Any]:
        """A copy of the description given at construction."""
        return dict(self._metadata)

    @property
    def notes(self) -> tuple[str, ...]:
        """Remarks on how the model was built (``()`` when there is nothing to say)."""
        return self._notes

    @property
    def fingerprint(self) -> str:
        """Hex digest of the shape and contents of ``P`` and ``R``."""
        return self._fingerprint

    @property
    def reward_span(self) -> float:
        """``max R - min R``, or 1 when all rewards are equal (a scale for errors)."""
        span = float(self._R.max() - self._R.min())
        return span if span > 0 else 1.0

    def __setattr__(self, key: str, value: Any) -> None:
        if hasattr(self, "_fingerprint"):
            raise AttributeError("TabularMDP is immutable; build a new one instead")
        object.__setattr__(self, key, value)

    def __reduce__(self) -> tuple[Any, ...]:
        # The arrays were validated when this object was built: unpickling (for example in
        # a process-pool worker, once per sweep cell) restores them without validating again.
        return (_restore, (self._P, self._R, self._name, self._metadata, self._fingerprint, self._notes))

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, TabularMDP):
            return NotImplemented
        return self._fingerprint == other._fingerprint

    def __hash__(self) -> int:
        return hash(self._fingerprint)

    def __repr__(self) -> str:
        storage = ", sparse" if self.is_sparse else ""
        return (
            f"TabularMDP(name={self._name!r}, states={self.states}, actions={self.actions}{storage}, "
            f"fingerprint={self._fingerprint[:12]})"
        )


def _fingerprint(P: Any, R: NDArray[np.float64]) -> str:
    """Hex digest of a model's shape and contents (a sparse model hashes its CSR parts, tagged)."""
    digest = hashlib.blake2b(digest_size=16)
    if is_sparse(P):
        states, actions = R.shape
        digest.update(b"csr")
        digest.update(np.asarray((states, actions, states), dtype=np.int64).tobytes())
        digest.update(np.ascontiguousarray(P.indptr, dtype=np.int64).tobytes())
        digest.update(np.ascontiguousarray(P.indices, dtype=np.int64).tobytes())
        digest.update(np.ascontiguousarray(P.data + 0.0).tobytes())
    else:
        digest.update(np.asarray(P.shape, dtype=np.int64).tobytes())
        # `+ 0.0` maps -0.0 to +0.0, so numerically equal models hash alike
        digest.update(np.ascontiguousarray(P + 0.0).tobytes())
    digest.update(np.ascontiguousarray(R + 0.0).tobytes())
    return digest.hexdigest()


def _restore(
    P: Any, R: NDArray[np.float64], name: str, metadata: dict[str, Any], fingerprint: str, notes: tuple[str, ...] = ()
) -> TabularMDP:
    """Rebuild a pickled TabularMDP from its already validated parts."""
    mdp = object.__new__(TabularMDP)
    if is_sparse(P):  # a fresh CSR array from the pickle, canonical already
        for part in (P.data, P.indices, P.indptr):
            part.setflags(write=False)
    else:
        P = np.asarray(P, dtype=np.float64)  # a fresh array from the pickle: no copy needed
        P.setflags(write=False)
    R = np.asarray(R, dtype=np.float64)
    R.setflags(write=False)
    for slot, value in (("_P", P), ("_R", R), ("_name", name), ("_metadata", dict(metadata)), ("_notes", tuple(notes)),
                        ("_fingerprint", fingerprint)):
        object.__setattr__(mdp, slot, value)
    return mdp
