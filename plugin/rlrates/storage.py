"""Saving and loading MDPs: a compact ``.npz`` form and a hand-writable ``.json`` form.

The file extension picks the format (case-insensitive); anything else is refused.

``.npz`` (written by :func:`save_mdp` with ``numpy.savez``, read with ``allow_pickle=False``)
    Three arrays: ``P`` (S, A, S) float, ``R`` (S, A) float, and ``info``, a 0-d
    unicode array holding the JSON text ``{"format": "rlrates-mdp", "version": 1,
    "name": ..., "metadata": {...}}``. The arrays are stored bit for bit, so a
    round trip keeps the fingerprint.

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
    ``"transitions"``. ``"format"`` and ``"version"`` are accepted and checked
    when present; other keys are refused, which catches misspelt ones.
    :func:`save_mdp` writes the sparse form when fewer than half the entries of
    ``P`` are non-zero, and the dense form otherwise. Python's JSON writes floats
    with ``repr``, which reads back to the same double, so the fingerprint survives.

Size limits: an MDP file may describe at most :data:`MAX_ENTRIES` entries of
``P`` (S * A * S; 10**8, 800 MB as float64). The declared shapes of an ``.npz``
are read from the archive's array headers, and the S and A of a ``.json`` from
its ``R``, before anything large is allocated; a file over the limit is refused
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
import zipfile
from pathlib import Path
from typing import Any

import numpy as np
from numpy.lib.npyio import NpzFile
from numpy.typing import NDArray

from .mdp import TabularMDP

__all__ = ["save_mdp", "load_mdp", "FORMAT", "VERSION", "MAX_ENTRIES"]

#: The largest number of array entries (S * A * S for P) an MDP file may describe: 10**8, 800 MB as float64.
MAX_ENTRIES = 10**8

#: The ``"format"`` tag written into every file.
FORMAT = "rlrates-mdp"
#: The file-format version written into every file; files of a newer version are refused.
VERSION = 1

_EXTENSIONS = (".npz", ".json")
_JSON_KEYS = {"format", "version", "name", "metadata", "P", "transitions", "R"}
_NPZ_KEYS = {"P", "R", "info"}


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
    if mdp.is_sparse:
        raise ValueError(
            f"{target}: MDP {mdp.name!r} is sparse, and save_mdp writes dense MDPs only for now; "
            "save its parts with scipy.sparse.save_npz(path, mdp.P) and numpy.save(path, mdp.R)"
        )
    header = _header(mdp, target)
    if kind == ".npz":
        info = np.array(json.dumps(header, default=_to_json_data), dtype=np.str_)
        with open(target, "wb") as handle:  # an open file: numpy must not append a second suffix
            np.savez(handle, P=np.asarray(mdp.P), R=np.asarray(mdp.R), info=info)
        return target
    document: dict[str, Any] = dict(header)
    P = mdp.P
    if np.count_nonzero(P) < P.size / 2:
        s, a, t = np.nonzero(P)
        document["transitions"] = [
            [int(i), int(j), int(k), float(P[i, j, k])] for i, j, k in zip(s, a, t)
        ]
    else:
        document["P"] = P.tolist()
    document["R"] = mdp.R.tolist()
    target.write_text(json.dumps(document, default=_to_json_data, indent=1) + "\n", encoding="utf-8")
    return target


def load_mdp(path: str | os.PathLike[str]) -> TabularMDP:
    """Read an MDP written by :func:`save_mdp` (or by hand, for ``.json``)."""
    source = Path(path)
    kind = _format_of(source)
    if not source.is_file():
        raise ValueError(f"{source}: no such file")
    if kind == ".npz":
        P, R, header = _read_npz(source)
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


def _too_large(source: Path, what: str, shape: tuple[int, ...]) -> ValueError:
    entries = int(np.prod(shape, dtype=object))
    return ValueError(
        f"{source}: {what} has shape {shape}, {entries:,} entries ({entries * 8 / 2**30:.3g} GiB as float64), more "
        f"than the {MAX_ENTRIES:,} entries an MDP file may hold; nothing was loaded"
    )


def _check_archive(source: Path) -> None:
    """Refuse a file that is not a zip archive, and arrays whose declared size is over the limit, before loading."""
    with source.open("rb") as stream:
        if stream.read(6) == b"\x93NUMPY":
            raise ValueError(f"{source}: not an .npz archive (it holds a single .npy array)")
    if not zipfile.is_zipfile(source):
        raise ValueError(f"{source}: not an .npz archive (a zip file of P.npy, R.npy and info.npy); was it saved "
                         "with rlrates.save_mdp?")
    from numpy.lib import format as npy

    readers = {(1, 0): npy.read_array_header_1_0, (2, 0): npy.read_array_header_2_0}
    try:
        with zipfile.ZipFile(source) as archive:
            for member in archive.infolist():
                with archive.open(member) as stream:
                    version = npy.read_magic(stream)
                    if version not in readers:
                        raise ValueError(f"{source}: array {member.filename} has .npy format version {version}, "
                                         "which rlrates does not read")
                    shape, _, _ = readers[version](stream)
                if int(np.prod(shape, dtype=object)) > MAX_ENTRIES:
                    raise _too_large(source, f"array {member.filename}", tuple(shape))
    except (OSError, zipfile.BadZipFile, EOFError) as exc:
        raise ValueError(f"{source}: not a readable .npz archive: {type(exc).__name__}: {exc}") from None
    except ValueError as exc:
        if str(exc).startswith(str(source)):
            raise
        raise ValueError(f"{source}: an array header in the archive cannot be read: {exc}") from None


def _read_npz(source: Path) -> tuple[NDArray[Any], NDArray[Any], dict[str, Any]]:
    _check_archive(source)
    try:
        loaded = np.load(source, allow_pickle=False)
        if not isinstance(loaded, NpzFile):
            raise ValueError(f"{source}: not an .npz archive (it holds a single .npy array)")
        with loaded as archive:
            missing = sorted(_NPZ_KEYS - set(archive.files))
            if missing:
                raise ValueError(
                    f"{source}: missing array(s) {', '.join(missing)}; an MDP .npz holds P, R and info "
                    f"(found: {', '.join(sorted(archive.files)) or 'nothing'})"
                )
            arrays = {key: archive[key] for key in _NPZ_KEYS}
    except ValueError as exc:
        if str(exc).startswith(str(source)):
            raise
        # numpy says "Object arrays cannot be loaded when allow_pickle=False" and the like
        raise ValueError(f"{source}: cannot read the .npz archive: {exc}") from None
    except (OSError, zipfile.BadZipFile, EOFError) as exc:
        raise ValueError(f"{source}: not a readable .npz archive: {type(exc).__name__}: {exc}") from None
    info = arrays["info"]
    if info.ndim != 0 or info.dtype.kind != "U":
        raise ValueError(
            f"{source}: `info` must be a 0-d unicode array holding JSON text, got dtype {info.dtype} "
            f"and shape {info.shape}"
        )
    try:
        header = json.loads(str(info))
    except json.JSONDecodeError as exc:
        raise ValueError(f"{source}: `info` is not valid JSON: {exc}") from None
    for key in ("P", "R"):
        if arrays[key].dtype.kind not in "iuf":
            raise ValueError(f"{source}: array `{key}` must hold real numbers, got dtype {arrays[key].dtype}")
    return arrays["P"], arrays["R"], _check_header(header, source, "`info`")


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
    if R.shape[0] * R.shape[1] * R.shape[0] > MAX_ENTRIES:
        raise _too_large(source, "the P that 'R' implies", (R.shape[0], R.shape[1], R.shape[0]))
    has_dense, has_sparse = "P" in document, "transitions" in document
    if has_dense == has_sparse:
        problem = "both" if has_dense else "neither"
        raise ValueError(
            f"{source}: give exactly one of 'P' (dense [S][A][S] probabilities) and "
            f"'transitions' (sparse [s, a, s_next, prob] entries); found {problem}"
        )
    if has_dense:
        P = _numeric(document["P"], source, "P", 3, "nested lists [S][A][S]")
    else:
        P = _sparse_transitions(document["transitions"], R.shape, source)
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


def _sparse_transitions(entries: object, shape: tuple[int, ...], source: Path) -> NDArray[np.float64]:
    states, actions = shape
    if not isinstance(entries, list):
        raise ValueError(f"{source}: 'transitions' must be a list of [s, a, s_next, prob] entries, got {type(entries).__name__}")
    P = np.zeros((states, actions, states))
    seen: dict[tuple[int, int, int], int] = {}
    for index, entry in enumerate(entries):
        where = f"'transitions' entry {index} ({json.dumps(entry)})"
        if not isinstance(entry, list) or len(entry) != 4:
            raise ValueError(f"{source}: {where} must be a list [s, a, s_next, prob]")
        *ids, prob = entry
        for label, value, bound in zip(("s", "a", "s_next"), ids, (states, actions, states)):
            if isinstance(value, bool) or not isinstance(value, int):
                raise ValueError(f"{source}: {where}: `{label}` must be an integer, got {value!r}")
            if not 0 <= value < bound:
                raise ValueError(
                    f"{source}: {where}: `{label}` = {value} is out of range 0..{bound - 1} "
                    f"(R has shape ({states}, {actions}))"
                )
        if isinstance(prob, bool) or not isinstance(prob, (int, float)):
            raise ValueError(f"{source}: {where}: `prob` must be a number, got {prob!r}")
        key = (ids[0], ids[1], ids[2])
        if key in seen:
            raise ValueError(
                f"{source}: {where} repeats (s, a, s_next) = {key} of entry {seen[key]}; list each once"
            )
        seen[key] = index
        try:
            P[key] = float(prob)
        except OverflowError:
            raise ValueError(f"{source}: {where}: `prob` is too large for a float64") from None
    return P
