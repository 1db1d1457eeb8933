"""The ``.npz`` form of an MDP file: a dense ``P``, or the CSR parts of a sparse one, checked before loading.

See :mod:`rlrates.storage` for the layout of both forms. Every array's declared
shape and dtype are read from its ``.npy`` header before anything is loaded, so a
forged header (a huge shape, CSR parts that do not fit ``R``) is refused naming the
file without allocating a byte for it. Loading never unpickles. Errors are
``ValueError`` messages that start with the file's path.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.lib.npyio import NpzFile
from numpy.typing import NDArray

if TYPE_CHECKING:  # pragma: no cover
    from .mdp import TabularMDP

__all__ = ["MAX_ENTRIES", "STORAGES", "too_large", "storage_of", "write_npz", "read_npz"]

#: The largest number of array entries (S * A * S for P) an MDP file may describe: 10**8, 800 MB as float64.
MAX_ENTRIES = 10**8
#: How ``P`` is stored: as (S, A, S) probabilities, or as the CSR parts of the (S*A, S) rows.
STORAGES = ("dense", "csr")

_DENSE_KEYS = ("P", "R", "info")
_CSR_KEYS = ("P_data", "P_indices", "P_indptr", "R", "info")
_Headers = dict[str, tuple[tuple[int, ...], np.dtype[Any]]]


def too_large(source: Path, what: str, shape: tuple[int, ...]) -> ValueError:
    entries = int(np.prod(shape, dtype=object))
    return ValueError(
        f"{source}: {what} has shape {shape}, {entries:,} entries ({entries * 8 / 2**30:.3g} GiB as float64), more "
        f"than the {MAX_ENTRIES:,} entries an MDP file may hold; nothing was loaded"
    )


def storage_of(header: dict[str, Any], source: Path) -> str:
    """The header's ``"storage"`` ("dense" when absent), refused naming the file when it is neither."""
    storage = header.get("storage", "dense")
    if storage not in STORAGES:
        raise ValueError(f"{source}: `storage` is {storage!r}; it must be one of {', '.join(map(repr, STORAGES))}")
    return str(storage)


def write_npz(mdp: TabularMDP, header: dict[str, Any], target: Path, default: Any) -> None:
    """Write ``mdp`` as an ``.npz``: ``P`` dense, or a sparse MDP's CSR parts as they are (never densified)."""
    R = np.asarray(mdp.R)
    with open(target, "wb") as handle:  # an open file: numpy must not append a second suffix
        if mdp.is_sparse:
            rows = mdp.P
            info = np.array(json.dumps({**header, "storage": "csr"}, default=default), dtype=np.str_)
            np.savez(handle, P_data=np.asarray(rows.data), P_indices=np.asarray(rows.indices),
                     P_indptr=np.asarray(rows.indptr), R=R, info=info)
        else:
            info = np.array(json.dumps(header, default=default), dtype=np.str_)
            np.savez(handle, P=np.asarray(mdp.P), R=R, info=info)


def _declared(source: Path) -> _Headers:
    """Every array's declared shape and dtype, from its header; a file that is no archive, or arrays over the limit, refused."""
    with source.open("rb") as stream:
        if stream.read(6) == b"\x93NUMPY":
            raise ValueError(f"{source}: not an .npz archive (it holds a single .npy array)")
    if not zipfile.is_zipfile(source):
        raise ValueError(f"{source}: not an .npz archive (a zip file of P.npy, R.npy and info.npy); was it saved "
                         "with rlrates.save_mdp?")
    from numpy.lib import format as npy

    readers = {(1, 0): npy.read_array_header_1_0, (2, 0): npy.read_array_header_2_0}
    declared: _Headers = {}
    try:
        with zipfile.ZipFile(source) as archive:
            for member in archive.infolist():
                with archive.open(member) as stream:
                    version = npy.read_magic(stream)
                    if version not in readers:
                        raise ValueError(f"{source}: array {member.filename} has .npy format version {version}, "
                                         "which rlrates does not read")
                    shape, _, dtype = readers[version](stream)
                entries = int(np.prod(shape, dtype=object))
                if entries > MAX_ENTRIES or entries * dtype.itemsize > 8 * MAX_ENTRIES:
                    raise too_large(source, f"array {member.filename}", tuple(shape))
                declared[member.filename.removesuffix(".npy")] = (tuple(shape), dtype)
    except (OSError, zipfile.BadZipFile, EOFError) as exc:
        raise ValueError(f"{source}: not a readable .npz archive: {type(exc).__name__}: {exc}") from None
    except ValueError as exc:
        if str(exc).startswith(str(source)):
            raise
        raise ValueError(f"{source}: an array header in the archive cannot be read: {exc}") from None
    return declared


def _load(archive: NpzFile, key: str, source: Path) -> NDArray[Any]:
    try:
        return np.asarray(archive[key])
    except ValueError as exc:  # numpy says "Object arrays cannot be loaded when allow_pickle=False" and the like
        raise ValueError(f"{source}: cannot read the .npz archive: {exc}") from None


def _require(declared: _Headers, keys: tuple[str, ...], source: Path, storage: str) -> None:
    missing = [key for key in keys if key not in declared]
    if missing:
        held = ", ".join(keys[:-1]) + " and info"
        raise ValueError(
            f"{source}: missing array(s) {', '.join(sorted(missing))}; an MDP .npz {'of CSR parts ' if storage == 'csr' else ''}"
            f"holds {held} (found: {', '.join(sorted(declared)) or 'nothing'})"
        )


def _header(archive: NpzFile, declared: _Headers, source: Path) -> Any:
    if "info" not in declared:
        _require(declared, _DENSE_KEYS, source, "dense")
    info = _load(archive, "info", source)
    if info.ndim != 0 or info.dtype.kind != "U":
        raise ValueError(
            f"{source}: `info` must be a 0-d unicode array holding JSON text, got dtype {info.dtype} "
            f"and shape {info.shape}"
        )
    try:
        return json.loads(str(info))
    except json.JSONDecodeError as exc:
        raise ValueError(f"{source}: `info` is not valid JSON: {exc}") from None


def _real(array: NDArray[Any], key: str, source: Path) -> NDArray[Any]:
    if array.dtype.kind not in "iuf":
        raise ValueError(f"{source}: array `{key}` must hold real numbers, got dtype {array.dtype}")
    return array


def read_npz(source: Path) -> tuple[Any, NDArray[Any], Any]:
    """``P`` (an ndarray, or a CSR array of shape (S*A, S)), ``R`` and the raw ``info`` header of an ``.npz``."""
    declared = _declared(source)
    try:
        with np.load(source, allow_pickle=False) as archive:
            header = _header(archive, declared, source)
            storage = storage_of(header, source) if isinstance(header, dict) else "dense"
            if storage == "csr":
                _require(declared, _CSR_KEYS, source, storage)
                _check_csr_shapes(declared, source)
                parts = {key: _load(archive, key, source) for key in _CSR_KEYS[:-1]}
                R = _real(parts.pop("R"), "R", source)
                return _csr(parts, R.shape, source), R, header
            _require(declared, _DENSE_KEYS, source, storage)
            P, R = (_real(_load(archive, key, source), key, source) for key in ("P", "R"))
            return P, R, header
    except (OSError, zipfile.BadZipFile, EOFError) as exc:
        raise ValueError(f"{source}: not a readable .npz archive: {type(exc).__name__}: {exc}") from None


def _check_csr_shapes(declared: _Headers, source: Path) -> None:
    """The CSR parts fit the rewards' (S, A), from the declared headers alone (nothing loaded yet)."""
    r_shape, _ = declared["R"]
    if len(r_shape) != 2:
        raise ValueError(f"{source}: array `R` must have shape (S, A), got {r_shape}")
    states, actions = r_shape
    (indptr, indptr_type), (data, data_type), (indices, indices_type) = (
        declared[key] for key in ("P_indptr", "P_data", "P_indices"))
    if indptr != (states * actions + 1,):
        raise ValueError(f"{source}: array `P_indptr` has shape {indptr}; the CSR rows of P for R of shape "
                         f"({states}, {actions}) need ({states * actions + 1},) (S*A + 1)")
    if len(data) != 1 or indices != data:
        raise ValueError(f"{source}: arrays `P_data` {data} and `P_indices` {indices} must be 1-d and of one length "
                         "(one entry per stored probability)")
    for key, dtype, kinds in (("P_data", data_type, "iuf"), ("P_indices", indices_type, "iu"),
                              ("P_indptr", indptr_type, "iu")):
        if dtype.kind not in kinds:
            words = "real numbers" if kinds == "iuf" else "integers"
            raise ValueError(f"{source}: array `{key}` must hold {words}, got dtype {dtype}")


def _csr(parts: dict[str, NDArray[Any]], shape: tuple[int, ...], source: Path) -> Any:
    """The (S*A, S) CSR array of loaded parts, after the index checks scipy leaves out."""
    from scipy import sparse

    states, actions = shape
    indptr, indices = parts["P_indptr"].astype(np.int64), parts["P_indices"].astype(np.int64)
    entries = len(indices)
    falls = np.flatnonzero(np.diff(indptr) < 0)
    if indptr[0] != 0 or indptr[-1] != entries or falls.size:
        seen = f"it falls after row {int(falls[0])}" if falls.size else f"it runs from {indptr[0]} to {indptr[-1]}"
        raise ValueError(f"{source}: array `P_indptr` must rise from 0 to {entries} (the number of stored "
                         f"probabilities) without falling; {seen}")
    outside = (indices < 0) | (indices >= states)
    if outside.any():
        k = int(np.argmax(outside))
        row = int(np.searchsorted(indptr, k, side="right")) - 1
        raise ValueError(f"{source}: array `P_indices` entry {k} (s={row // actions}, a={row % actions}) names "
                         f"next state {indices[k]}, outside 0..{states - 1}")
    return sparse.csr_array((parts["P_data"], indices, indptr), shape=(states * actions, states))
