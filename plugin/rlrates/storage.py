"""Saving and loading MDPs: a compact ``.npz`` form and a hand-writable ``.json`` form.

The file extension picks the format (case-insensitive); anything else is refused.

``.npz`` (written by :func:`save_mdp` with ``numpy.savez``, read with ``allow_pickle=False``;
see :mod:`rlrates.npz_archive`)
    Three arrays: ``P`` (S, A, S) float, ``R`` (S, A) float, and ``info``, a 0-d
    unicode array holding the JSON text ``{"format": "rlrates-mdp", "version": 1,
    "name": ..., "metadata": {...}}``. A sparse MDP (``mdp.is_sparse``) is stored
    without densifying: ``P`` is replaced by the CSR parts of its (S*A, S) rows,
    ``P_data`` (float), ``P_indices`` and ``P_indptr`` (integers; ``P_indptr`` has
    S*A + 1 entries for the S and A of ``R``), and ``info`` says ``"storage": "csr"``.
    The arrays are stored bit for bit, so a round trip keeps the fingerprint, and a
    sparse file loads as a sparse MDP.

``.json`` (easy to write by hand)
    One object with these keys::

        {
          "name": "two-state loop",              # optional, default: the file's stem
          "metadata": {"source": "by hand"},     # optional JSON object
          "R": [[0.0, 1.0], [0.5, 0.0]],         # required: S rows of A rewards
          "P": [[[0.9, 0.1], [0.0, 1.0]],        # either dense P: [S][A][S] probabilities
                [[0.5, 0.5], [1.0, 0.0]]]
          "transitions": [[0, 0, 0, 0.9],        # or sparse P: [s, a, s_next, prob] entries;
                          [0, 0, 1, 0.1], ...]   # pairs not listed have probability 0
        }

    Exactly one of ``"P"`` and ``"transitions"`` is given. ``R`` fixes S and A,
    so the sparse form needs no sizes. Each (s, a, s_next) may be listed once in
    ``"transitions"``. ``"storage": "csr"`` (with ``"transitions"``) loads the MDP
    sparse, never building the (S, A, S) array; without it (or with ``"dense"``)
    it loads dense. ``"format"`` and ``"version"`` are accepted and checked
    when present; other keys are refused, which catches misspelt ones.
    :func:`save_mdp` writes the sparse form when fewer than half the entries of
    ``P`` are non-zero, and the dense form otherwise; a sparse MDP always gets
    ``"transitions"`` and ``"storage": "csr"``. Python's JSON writes floats
    with ``repr``, which reads back to the same double, so the fingerprint survives.

Size limits: an MDP file may describe at most :data:`MAX_ENTRIES` entries of
``P`` (S * A * S; 10**8, 800 MB as float64); for a sparse file the limit is on
each stored array (the probabilities stored, and S * A). The declared shapes of an
``.npz`` are read from the archive's array headers, and the S and A of a ``.json``
from its ``R``, before anything large is allocated; a file over the limit is refused
naming the file and the size. JSON nesting deeper than Python's parser allows and
numbers beyond float64 are refused the same way.

Metadata must be JSON data (numpy scalars and arrays are converted to plain
numbers and lists); tuples come back as lists. Every problem with a file,
including the validation errors of :class:`~rlrates.mdp.TabularMDP`, is a
``ValueError`` that names the file.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from .mdp import TabularMDP
from .npz_archive import MAX_ENTRIES, read_npz, storage_of, too_large, write_npz

__all__ = ["save_mdp", "load_mdp", "FORMAT", "VERSION", "MAX_ENTRIES"]

#: The ``"format"`` tag written into every file.
FORMAT = "rlrates-mdp"
#: The file-format version written into every file; files of a newer version are refused.
VERSION = 1

_EXTENSIONS = (".npz", ".json")
_JSON_KEYS = {"format", "version", "name", "metadata", "storage", "P", "transitions", "R"}


def _format_of(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix not in _EXTENSIONS:
        problem = f"unsupported extension {path.suffix!r}" if path.suffix else "no file extension"
        raise ValueError(f"{path}: {problem}; an MDP file must end in .npz or .json")
    return suffix


def _to_json_data(value: Any) -> Any:
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"a value of type {type(value).__name__} is not JSON data")


def _header(mdp: TabularMDP, path: Path) -> dict[str, Any]:
    header = {"format": FORMAT, "version": VERSION, "name": mdp.name, "metadata": mdp.metadata}
    try:
        # a dry run, so that nothing is written when the metadata cannot be stored
        json.dumps(header, default=_to_json_data, allow_nan=False)
    except (TypeError, ValueError) as exc:
        raise ValueError(
            f"{path}: cannot save the metadata of MDP {mdp.name!r}: {exc}; "
            "metadata must be JSON data (strings, finite numbers, booleans, None, lists, dicts with string keys)"
        ) from None
    return header


def save_mdp(mdp: TabularMDP, path: str | os.PathLike[str]) -> Path:
    """Write ``mdp`` to ``path`` (``.npz`` or ``.json``, chosen by the extension); return the path."""
    if not isinstance(mdp, TabularMDP):
        raise TypeError(f"`mdp` must be a TabularMDP, got {type(mdp).__name__}")
    target = Path(path)
    kind = _format_of(target)
    header = _header(mdp, target)
    if kind == ".npz":
        write_npz(mdp, header, target, _to_json_data)
        return target
    document: dict[str, Any] = dict(header)
    if mdp.is_sparse:
        document["storage"] = "csr"
        document["transitions"] = _sparse_entries(mdp)
    elif np.count_nonzero(mdp.P) < mdp.P.size / 2:
        P = mdp.P
        s, a, t = np.nonzero(P)
        document["transitions"] = [[i, j, k, p] for i, j, k, p in zip(s.tolist(), a.tolist(), t.tolist(), P[s, a, t].tolist())]
    else:
        document["P"] = mdp.P.tolist()
    document["R"] = mdp.R.tolist()
    target.write_text(_json_text(document), encoding="utf-8")
    return target


def _json_text(document: dict[str, Any]) -> str:
    """The document with one key a line, and the rows of ``P``, ``"transitions"`` and ``R`` one a line."""
    def value(key: str, item: Any) -> str:
        if key in ("P", "transitions", "R") and item:
            return "[\n  " + ",\n  ".join(json.dumps(row) for row in item) + "\n ]"
        return json.dumps(item, default=_to_json_data)

    return "{\n" + ",\n".join(f" {json.dumps(key)}: {value(key, item)}" for key, item in document.items()) + "\n}\n"


def _sparse_entries(mdp: TabularMDP) -> list[list[Any]]:
    """The [s, a, s_next, prob] entries of a sparse MDP, read off its CSR rows (row s * A + a)."""
    rows = mdp.P
    row = np.repeat(np.arange(rows.shape[0]), np.diff(rows.indptr))
    return [[int(r // mdp.actions), int(r % mdp.actions), t, p]
            for r, t, p in zip(row.tolist(), rows.indices.tolist(), rows.data.tolist())]


def load_mdp(path: str | os.PathLike[str]) -> TabularMDP:
    """Read an MDP written by :func:`save_mdp` (or by hand, for ``.json``)."""
    source = Path(path)
    kind = _format_of(source)
    if not source.is_file():
        raise ValueError(f"{source}: no such file")
    if kind == ".npz":
        P, R, raw = read_npz(source)
        header = _check_header(raw, source, "`info`")
    else:
        P, R, header = _read_json(source)
    try:
        return TabularMDP(P, R, name=header["name"], metadata=header["metadata"])
    except ValueError as exc:
        raise ValueError(f"{source}: the stored arrays are not a valid MDP: {exc}") from None


def _check_header(header: object, source: Path, where: str) -> dict[str, Any]:
    if not isinstance(header, dict):
        raise ValueError(f"{source}: {where} must be a JSON object, got {type(header).__name__}")
    fmt = header.get("format", FORMAT)
    if fmt != FORMAT:
        raise ValueError(f"{source}: `format` is {fmt!r}, expected {FORMAT!r}")
    version = header.get("version", VERSION)
    if isinstance(version, bool) or not isinstance(version, int) or not 1 <= version <= VERSION:
        raise ValueError(f"{source}: unsupported `version` {version!r}; this rlrates reads versions 1..{VERSION}")
    name = header.get("name", source.stem)
    if not isinstance(name, str):
        raise ValueError(f"{source}: `name` must be a string, got {type(name).__name__}")
    metadata = header.get("metadata", {})
    if metadata is None:
        metadata = {}
    if not isinstance(metadata, dict):
        raise ValueError(f"{source}: `metadata` must be a JSON object, got {type(metadata).__name__}")
    return {"name": name, "metadata": metadata}


def _read_json(source: Path) -> tuple[NDArray[Any], NDArray[Any], dict[str, Any]]:
    try:
        document = json.loads(source.read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise ValueError(f"{source}: not valid JSON: {exc}") from None
    except UnicodeDecodeError as exc:
        raise ValueError(f"{source}: not UTF-8 text: {exc}") from None
    except RecursionError:
        raise ValueError(f"{source}: JSON nested too deeply to read (an MDP file needs three levels for P)") from None
    except ValueError as exc:  # e.g. an integer literal longer than Python's digit limit
        raise ValueError(f"{source}: a number in the JSON cannot be read: {exc}") from None
    header = _check_header(document, source, "the document")
    unknown = sorted(set(document) - _JSON_KEYS)
    if unknown:
        raise ValueError(
            f"{source}: unknown key(s) {', '.join(repr(k) for k in unknown)}; "
            f"allowed keys are {', '.join(sorted(_JSON_KEYS))}"
        )
    if "R" not in document:
        raise ValueError(f"{source}: missing key 'R' (the (S, A) rewards, a list of S lists of A numbers)")
    R = _numeric(document["R"], source, "R", 2, "a list of S lists of A numbers")
    csr = storage_of(document, source) == "csr"
    if not csr and R.shape[0] * R.shape[1] * R.shape[0] > MAX_ENTRIES:
        implied = too_large(source, "the P that 'R' implies", (R.shape[0], R.shape[1], R.shape[0]))
        raise ValueError(f"{implied} (with 'transitions' and \"storage\": \"csr\" a file loads sparse, and only "
                         "the entries it lists count)")
    has_dense, has_sparse = "P" in document, "transitions" in document
    if has_dense == has_sparse:
        problem = "both" if has_dense else "neither"
        raise ValueError(
            f"{source}: give exactly one of 'P' (dense [S][A][S] probabilities) and "
            f"'transitions' (sparse [s, a, s_next, prob] entries); found {problem}"
        )
    if has_dense:
        if csr:
            raise ValueError(f"{source}: \"storage\": \"csr\" needs 'transitions' ([s, a, s_next, prob] entries), "
                             "not a dense 'P'")
        return _numeric(document["P"], source, "P", 3, "nested lists [S][A][S]"), R, header
    (s, a, t), probs = _transition_entries(document["transitions"], R.shape, source)
    if csr:
        from scipy import sparse

        rows = (s * R.shape[1] + a, t)
        return sparse.csr_array((probs, rows), shape=(R.shape[0] * R.shape[1], R.shape[0])), R, header
    P = np.zeros((R.shape[0], R.shape[1], R.shape[0]))
    P[s, a, t] = probs
    return P, R, header


def _numeric(value: object, source: Path, key: str, ndim: int, layout: str) -> NDArray[np.float64]:
    if not isinstance(value, list):
        raise ValueError(f"{source}: '{key}' must be {layout}, got {type(value).__name__}")
    try:
        array = np.array(value, dtype=np.float64)
    except OverflowError:
        raise ValueError(f"{source}: '{key}' holds a number too large for a float64 (beyond about 1.8e308)") from None
    except (TypeError, ValueError):
        raise ValueError(f"{source}: '{key}' must be {layout} (equal lengths, numbers only)") from None
    if array.ndim != ndim:
        raise ValueError(f"{source}: '{key}' must be {layout}; got {array.ndim} level(s) of nesting, shape {array.shape}")
    if _holds_bool(value):
        raise ValueError(f"{source}: '{key}' must hold numbers, not true/false")
    return array


def _holds_bool(value: object) -> bool:
    if isinstance(value, bool):
        return True
    if isinstance(value, list):
        return any(_holds_bool(item) for item in value)
    return False


def _transition_entries(entries: object, shape: tuple[int, ...],
                        source: Path) -> tuple[tuple[NDArray[np.int64], ...], NDArray[np.float64]]:
    """The (s, a, s_next) indices and the probabilities of a 'transitions' list, each entry checked and named."""
    states, actions = shape
    if not isinstance(entries, list):
        raise ValueError(f"{source}: 'transitions' must be a list of [s, a, s_next, prob] entries, got {type(entries).__name__}")
    if len(entries) > MAX_ENTRIES:
        raise too_large(source, "'transitions'", (len(entries),))
    fast = _checked_entries(entries, shape)
    if fast is not None:
        return fast
    seen: dict[tuple[int, int, int], int] = {}
    probs: list[float] = []
    for index, entry in enumerate(entries):
        if not isinstance(entry, list) or len(entry) != 4:
            raise ValueError(f"{source}: {_entry(index, entry)} must be a list [s, a, s_next, prob]")
        s, a, t, prob = entry
        key = (s, a, t)
        if not all(type(value) is int and 0 <= value < bound for value, bound in zip(key, (states, actions, states))):
            _refuse_ids(key, (states, actions), source, _entry(index, entry))
        if type(prob) is not float and (isinstance(prob, bool) or not isinstance(prob, (int, float))):
            raise ValueError(f"{source}: {_entry(index, entry)}: `prob` must be a number, got {prob!r}")
        if key in seen:
            raise ValueError(
                f"{source}: {_entry(index, entry)} repeats (s, a, s_next) = {key} of entry {seen[key]}; list each once"
            )
        seen[key] = index
        try:
            probs.append(float(prob))
        except OverflowError:
            raise ValueError(f"{source}: {_entry(index, entry)}: `prob` is too large for a float64") from None
    columns = np.array(list(seen), dtype=np.int64).reshape(-1, 3)
    return (columns[:, 0], columns[:, 1], columns[:, 2]), np.array(probs, dtype=np.float64)


def _checked_entries(entries: list[Any],
                     shape: tuple[int, ...]) -> tuple[tuple[NDArray[np.int64], ...], NDArray[np.float64]] | None:
    """The entries as arrays when every one is well formed (checked in bulk), else ``None``: the caller's
    entry-by-entry pass then finds and names the first bad one."""
    states, actions = shape
    if not all(type(entry) is list and len(entry) == 4 for entry in entries):
        return None
    table = np.empty((len(entries), 4), dtype=object)
    table[:] = entries
    if not set(map(type, table[:, :3].ravel())) <= {int} or not set(map(type, table[:, 3])) <= {int, float}:
        return None
    try:
        ids = table[:, :3].astype(np.int64)
        probs = table[:, 3].astype(np.float64)
    except OverflowError:
        return None
    if ((ids < 0) | (ids >= np.array([states, actions, states]))).any() or not np.isfinite(probs).all():
        return None
    flat = (ids[:, 0] * actions + ids[:, 1]) * states + ids[:, 2]
    if np.unique(flat).size != flat.size:
        return None
    return (ids[:, 0], ids[:, 1], ids[:, 2]), probs


def _entry(index: int, entry: object) -> str:
    return f"'transitions' entry {index} ({json.dumps(entry)})"


def _refuse_ids(ids: tuple[object, ...], shape: tuple[int, int], source: Path, where: str) -> None:
    """Raise the error of the first of s, a, s_next that is no integer or out of range."""
    states, actions = shape
    for label, value, bound in zip(("s", "a", "s_next"), ids, (states, actions, states)):
        if isinstance(value, bool) or not isinstance(value, int):
            raise ValueError(f"{source}: {where}: `{label}` must be an integer, got {value!r}")
        if not 0 <= value < bound:
            raise ValueError(
                f"{source}: {where}: `{label}` = {value} is out of range 0..{bound - 1} "
                f"(R has shape ({states}, {actions}))"
            )
