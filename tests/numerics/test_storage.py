"""save_mdp / load_mdp: round trips, hand-written JSON, and a clear error for every malformed file."""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import rlrates
from rlrates.storage import FORMAT, VERSION

# A two-state, two-action MDP written out by hand (its arrays are the expected values).
HAND_P = [[[0.9, 0.1], [0.0, 1.0]], [[0.5, 0.5], [1.0, 0.0]]]
HAND_R = [[0.0, 1.0], [0.5, 0.0]]
HAND_SPARSE = [[0, 0, 0, 0.9], [0, 0, 1, 0.1], [0, 1, 1, 1.0], [1, 0, 0, 0.5], [1, 0, 1, 0.5], [1, 1, 0, 1.0]]


@pytest.fixture(scope="module")
def garnet() -> rlrates.TabularMDP:
    return rlrates.garnet(states=12, actions=3, branching=4, seed=7)


def _write_json(path: Path, document: Any) -> Path:
    path.write_text(json.dumps(document), encoding="utf-8")
    return path


# ---------------------------------------------------------------------------------------------
# round trips


@pytest.mark.parametrize("suffix", [".npz", ".json", ".JSON"])
def test_round_trip_keeps_fingerprint_name_and_metadata(garnet: rlrates.TabularMDP, tmp_path: Path, suffix: str) -> None:
    path = rlrates.save_mdp(garnet, tmp_path / f"g{suffix}")
    assert path == tmp_path / f"g{suffix}" and path.is_file()  # no second suffix appended
    back = rlrates.load_mdp(path)
    assert back.fingerprint == garnet.fingerprint
    assert back.name == garnet.name
    assert back.metadata == garnet.metadata
    np.testing.assert_array_equal(back.P, garnet.P)
    np.testing.assert_array_equal(back.R, garnet.R)


def test_json_writes_sparse_for_sparse_kernels_and_dense_otherwise(garnet: rlrates.TabularMDP, tmp_path: Path) -> None:
    sparse = json.loads(rlrates.save_mdp(garnet, tmp_path / "g.json").read_text())
    assert "transitions" in sparse and "P" not in sparse  # branching 4 of 12 successors
    assert len(sparse["transitions"]) == np.count_nonzero(garnet.P)
    dense_mdp = rlrates.TabularMDP(HAND_P, HAND_R)
    dense = json.loads(rlrates.save_mdp(dense_mdp, tmp_path / "d.json").read_text())
    assert dense["P"] == HAND_P and "transitions" not in dense
    assert (dense["format"], dense["version"]) == (FORMAT, VERSION)


def test_numpy_metadata_is_stored_as_plain_json(tmp_path: Path) -> None:
    mdp = rlrates.TabularMDP(HAND_P, HAND_R, name="np", metadata={"k": np.int64(3), "v": np.arange(2), "t": (1, 2)})
    for suffix in (".npz", ".json"):
        back = rlrates.load_mdp(rlrates.save_mdp(mdp, tmp_path / f"m{suffix}"))
        assert back.metadata == {"k": 3, "v": [0, 1], "t": [1, 2]}  # tuples come back as lists


def test_npz_is_read_without_pickle(garnet: rlrates.TabularMDP, tmp_path: Path) -> None:
    path = rlrates.save_mdp(garnet, tmp_path / "g.npz")
    with np.load(path, allow_pickle=False) as archive:
        assert sorted(archive.files) == ["P", "R", "info"]
        assert archive["info"].shape == () and archive["info"].dtype.kind == "U"


# ---------------------------------------------------------------------------------------------
# hand-written JSON


@pytest.mark.parametrize("form", ["P", "transitions"])
def test_hand_written_json(tmp_path: Path, form: str) -> None:
    document = {"name": "loop", "metadata": {"by": "hand"}, "R": HAND_R}
    document[form] = HAND_P if form == "P" else HAND_SPARSE
    mdp = rlrates.load_mdp(_write_json(tmp_path / "loop.json", document))
    np.testing.assert_array_equal(mdp.P, HAND_P)
    np.testing.assert_array_equal(mdp.R, HAND_R)
    assert (mdp.name, mdp.metadata) == ("loop", {"by": "hand"})


def test_minimal_json_takes_its_name_from_the_file(tmp_path: Path) -> None:
    mdp = rlrates.load_mdp(_write_json(tmp_path / "tiny.json", {"P": [[[1.0]]], "R": [[0.25]]}))
    assert (mdp.states, mdp.actions, mdp.name, mdp.metadata) == (1, 1, "tiny", {})


# ---------------------------------------------------------------------------------------------
# malformed files


@pytest.mark.parametrize(
    ("document", "match"),
    [
        ({"P": HAND_P}, r"missing key 'R'"),
        ({"R": HAND_R}, r"exactly one of 'P' .* and 'transitions' .*; found neither"),
        ({"R": HAND_R, "P": HAND_P, "transitions": HAND_SPARSE}, r"exactly one of .*; found both"),
        ({"R": HAND_R, "P": HAND_P, "transition": []}, r"unknown key\(s\) 'transition'"),
        ({"R": HAND_R, "P": [[0.5, 0.5], [1.0, 0.0]]}, r"'P' must be nested lists \[S\]\[A\]\[S\]; got 2 level"),
        ({"R": HAND_R, "P": [[[0.5, 0.5], [1.0]], [[1.0, 0.0], [1.0, 0.0]]]}, r"'P' must be nested lists .*equal lengths"),
        ({"R": HAND_R, "P": "identity"}, r"'P' must be nested lists \[S\]\[A\]\[S\], got str"),
        ({"R": [["a", "b"], ["c", "d"]], "P": HAND_P}, r"'R' must be a list of S lists of A numbers"),
        ({"R": [[True, 0.0], [0.0, 0.0]], "P": HAND_P}, r"'R' must hold numbers, not true/false"),
        ({"R": HAND_R, "transitions": {"0": 1}}, r"'transitions' must be a list of \[s, a, s_next, prob\] entries"),
        ({"R": HAND_R, "transitions": [[0, 0, 0]]}, r"'transitions' entry 0 \(\[0, 0, 0\]\) must be a list \[s, a, s_next, prob\]"),
        ({"R": HAND_R, "transitions": [[0, 2, 0, 1.0]]}, r"entry 0 .*`a` = 2 is out of range 0..1 \(R has shape \(2, 2\)\)"),
        ({"R": HAND_R, "transitions": [[0, 0, 1.5, 1.0]]}, r"entry 0 .*`s_next` must be an integer, got 1.5"),
        ({"R": HAND_R, "transitions": [[0, 0, 0, "half"]]}, r"entry 0 .*`prob` must be a number"),
        ({"R": HAND_R, "transitions": HAND_SPARSE + [[0, 0, 0, 0.9]]}, r"entry 6 .* repeats \(s, a, s_next\) = \(0, 0, 0\) of entry 0"),
        ({"R": HAND_R, "transitions": HAND_SPARSE[:-1]}, r"not a valid MDP: `P` row \(s=1, a=1\) sums to 0"),
        ({"R": HAND_R, "P": [[[0.9, 0.2], [0.0, 1.0]], [[0.5, 0.5], [1.0, 0.0]]]}, r"not a valid MDP: `P` row \(s=0, a=0\) sums to 1.1"),
        ({"R": [[0.0, 1.0]], "P": HAND_P}, r"not a valid MDP: `R` must have shape"),
        ({"R": HAND_R, "P": HAND_P, "name": 3}, r"`name` must be a string, got int"),
        ({"R": HAND_R, "P": HAND_P, "metadata": [1]}, r"`metadata` must be a JSON object, got list"),
        ({"R": HAND_R, "P": HAND_P, "version": 99}, r"unsupported `version` 99"),
        ({"R": HAND_R, "P": HAND_P, "format": "other"}, r"`format` is 'other', expected 'rlrates-mdp'"),
        ([1, 2], r"the document must be a JSON object, got list"),
    ],
)
def test_malformed_json_names_the_file_and_the_problem(tmp_path: Path, document: Any, match: str) -> None:
    path = _write_json(tmp_path / "bad.json", document)
    with pytest.raises(ValueError, match=r"bad\.json: .*" + match):
        rlrates.load_mdp(path)


def test_invalid_json_text(tmp_path: Path) -> None:
    path = tmp_path / "broken.json"
    path.write_text('{"R": [[0.0]], "P": [[[1.0]]]', encoding="utf-8")
    with pytest.raises(ValueError, match=r"broken\.json: not valid JSON"):
        rlrates.load_mdp(path)


def _npz(path: Path, **arrays: Any) -> Path:
    with open(path, "wb") as handle:
        np.savez(handle, **arrays)
    return path


GOOD_INFO = np.array(json.dumps({"name": "x", "metadata": {}}))


@pytest.mark.parametrize(
    ("arrays", "match"),
    [
        ({"P": np.array(HAND_P), "info": GOOD_INFO}, r"missing array\(s\) R; an MDP .npz holds P, R and info \(found: P, info\)"),
        ({"P": np.array(HAND_P), "R": np.array(HAND_R)}, r"missing array\(s\) info"),
        ({"P": np.array(HAND_P), "R": np.array(HAND_R), "info": np.array("{not json")}, r"`info` is not valid JSON"),
        ({"P": np.array(HAND_P), "R": np.array(HAND_R), "info": np.zeros(3)}, r"`info` must be a 0-d unicode array"),
        ({"P": np.array(HAND_P), "R": np.array(HAND_R), "info": np.array("[1]")}, r"`info` must be a JSON object"),
        ({"P": np.array(HAND_P).astype(str), "R": np.array(HAND_R), "info": GOOD_INFO}, r"array `P` must hold real numbers"),
        ({"P": np.array(HAND_P)[0], "R": np.array(HAND_R), "info": GOOD_INFO}, r"not a valid MDP: `P` must have 3 dimensions"),
        ({"P": np.array(HAND_P), "R": np.array([[0.0, np.nan], [0.0, 0.0]]), "info": GOOD_INFO},
         r"not a valid MDP: `R` has a non-finite entry R\[0, 1\]"),
        ({"P": np.array(HAND_P), "R": np.array(HAND_R), "info": np.array({"a": 1}, dtype=object)},
         r"cannot read the .npz archive: .*allow_pickle"),
    ],
)
def test_malformed_npz_names_the_file_and_the_problem(tmp_path: Path, arrays: dict[str, Any], match: str) -> None:
    path = _npz(tmp_path / "bad.npz", **arrays)
    with pytest.raises(ValueError, match=r"bad\.npz: .*" + match):
        rlrates.load_mdp(path)


def test_a_file_that_is_not_an_archive(tmp_path: Path) -> None:
    path = tmp_path / "text.npz"
    path.write_text("P R info\n", encoding="utf-8")
    with pytest.raises(ValueError, match=r"text\.npz: "):
        rlrates.load_mdp(path)
    single = tmp_path / "single.npz"
    with single.open("wb") as handle:
        np.save(handle, np.zeros(3))
    with pytest.raises(ValueError, match=r"single\.npz: not an \.npz archive \(it holds a single \.npy array\)"):
        rlrates.load_mdp(single)


def test_extension_and_missing_file(garnet: rlrates.TabularMDP, tmp_path: Path) -> None:
    with pytest.raises(ValueError, match=r"g\.txt: unsupported extension '\.txt'; an MDP file must end in \.npz or \.json"):
        rlrates.save_mdp(garnet, tmp_path / "g.txt")
    with pytest.raises(ValueError, match=r"noext: no file extension; an MDP file must end in"):
        rlrates.load_mdp(tmp_path / "noext")
    with pytest.raises(ValueError, match=r"absent\.json: no such file"):
        rlrates.load_mdp(tmp_path / "absent.json")
    assert not (tmp_path / "g.txt").exists()


def test_metadata_that_is_not_json_is_refused_before_writing(tmp_path: Path) -> None:
    mdp = rlrates.TabularMDP(HAND_P, HAND_R, name="odd", metadata={"when": object()})
    for suffix in (".npz", ".json"):
        with pytest.raises(ValueError, match=r"cannot save the metadata of MDP 'odd': .*object is not JSON data"):
            rlrates.save_mdp(mdp, tmp_path / f"odd{suffix}")
        assert not (tmp_path / f"odd{suffix}").exists()
    with pytest.raises(TypeError, match=r"`mdp` must be a TabularMDP, got dict"):
        rlrates.save_mdp({"P": HAND_P}, tmp_path / "x.json")  # type: ignore[arg-type]


# --------------------------------------------------------------------------- files that would take gigabytes
# (common practice: read the declared sizes first, as the .npy header format documents them, and refuse before allocating)


def _forged_npz(path: Path, shape: tuple[int, ...]) -> Path:
    """An .npz whose P.npy header declares ``shape`` but holds no data (a few hundred bytes on disk)."""
    import io
    import zipfile

    header = io.BytesIO()
    np.lib.format.write_array_header_1_0(header, {"descr": "<f8", "fortran_order": False, "shape": shape})
    with zipfile.ZipFile(path, "w") as archive:
        archive.writestr("P.npy", header.getvalue())
        for key, value in (("R", np.array(HAND_R)), ("info", GOOD_INFO)):
            buffer = io.BytesIO()
            np.save(buffer, value)
            archive.writestr(f"{key}.npy", buffer.getvalue())
    return path


@pytest.mark.parametrize("shape", [(2000, 100, 2000), (10**6, 10**6, 10**6)], ids=["3-GB", "466-TiB"])
def test_an_npz_declaring_a_huge_array_is_refused_before_loading(tmp_path: Path, shape: tuple[int, ...]) -> None:
    path = _forged_npz(tmp_path / "forged.npz", shape)
    assert path.stat().st_size < 2000
    with pytest.raises(ValueError, match=rf"forged\.npz: array P\.npy has shape \({shape[0]}, {shape[1]}, {shape[2]}\), "
                                         r"[\d,]+ entries .*more than the 100,000,000 entries an MDP file may hold"):
        rlrates.load_mdp(path)


def test_a_json_whose_rewards_imply_a_huge_kernel_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "rows.json"
    path.write_text('{"R": [' + ", ".join(["[0.0]"] * 200_000) + '], "transitions": []}', encoding="utf-8")
    with pytest.raises(ValueError, match=r"rows\.json: the P that 'R' implies has shape \(200000, 1, 200000\), "
                                         r"40,000,000,000 entries"):
        rlrates.load_mdp(path)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("[" * 100_000 + "]" * 100_000, r"deep\.json: JSON nested too deeply"),
        ('{"R": [[1' + "0" * 400 + ']], "P": [[[1.0]]]}', r"deep\.json: 'R' holds a number too large for a float64"),
        ('{"R": [[1' + "0" * 5000 + ']], "P": [[[1.0]]]}', r"deep\.json: a number in the JSON cannot be read"),
        ('{"R": [[0.0]], "transitions": [[0, 0, 0, 1' + "0" * 400 + "]]}", r"deep\.json: 'transitions' entry 0 .*too large"),
    ],
    ids=["nesting", "10**400", "digit-limit", "10**400-prob"],
)
def test_json_nesting_and_number_sizes_are_value_errors_naming_the_file(tmp_path: Path, text: str, match: str) -> None:
    path = tmp_path / "deep.json"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ValueError, match=match):
        rlrates.load_mdp(path)


def test_a_text_file_named_npz_gets_no_advice_to_allow_pickling(tmp_path: Path) -> None:
    path = tmp_path / "text.npz"
    path.write_text("P R info\n", encoding="utf-8")
    with pytest.raises(ValueError) as raised:
        rlrates.load_mdp(path)
    assert "pickle" not in str(raised.value)
    assert re.search(r"text\.npz: not an \.npz archive \(a zip file of P\.npy, R\.npy and info\.npy\)", str(raised.value))


# --------------------------------------------------------------------------- sparse MDPs, stored without densifying
# (the CSR layout, data / indices / indptr with indptr of length rows + 1, as scipy.sparse.csr_array documents it)


def _same_sparse(back: rlrates.TabularMDP, mdp: rlrates.TabularMDP) -> None:
    assert back.is_sparse and back.P.shape == mdp.P.shape
    assert back.fingerprint == mdp.fingerprint and (back.name, back.metadata) == (mdp.name, mdp.metadata)
    for part in ("data", "indices", "indptr"):
        np.testing.assert_array_equal(getattr(back.P, part), getattr(mdp.P, part))
    np.testing.assert_array_equal(back.R, mdp.R)


@pytest.mark.parametrize("suffix", [".npz", ".json"])
def test_a_sparse_mdp_round_trips_sparse_with_its_fingerprint(tmp_path: Path, suffix: str) -> None:
    mdp = rlrates.garnet(states=40, actions=3, branching=4, seed=2, sparse=True)
    path = rlrates.save_mdp(mdp, tmp_path / f"g{suffix}")
    _same_sparse(rlrates.load_mdp(path), mdp)
    if suffix == ".npz":
        with np.load(path) as archive:
            assert sorted(archive.files) == ["P_data", "P_indices", "P_indptr", "R", "info"]
            assert archive["P_indptr"].shape == (40 * 3 + 1,) and archive["P_data"].shape == (mdp.P.nnz,)
            assert json.loads(str(archive["info"]))["storage"] == "csr"


@pytest.mark.parametrize("suffix", [".npz", ".json"])
def test_a_gridworld_of_ten_thousand_states_is_saved_and_loaded_without_its_dense_kernel(tmp_path: Path,
                                                                                         suffix: str) -> None:
    """Dense, its P would be 4 * 10**8 entries (3 GiB), four times the file limit: only the CSR parts are stored."""
    mdp = rlrates.gridworld(100, 100, sparse=True)
    assert mdp.states * mdp.actions * mdp.states > rlrates.storage.MAX_ENTRIES
    path = rlrates.save_mdp(mdp, tmp_path / f"grid{suffix}")
    assert path.stat().st_size < 20 * 2**20
    _same_sparse(rlrates.load_mdp(path), mdp)


def test_a_hand_written_sparse_json_loads_sparse_with_the_dense_files_probabilities(tmp_path: Path) -> None:
    path = _write_json(tmp_path / "hand.json", {"R": HAND_R, "transitions": HAND_SPARSE, "storage": "csr"})
    back = rlrates.load_mdp(path)
    assert back.is_sparse
    np.testing.assert_array_equal(back.P.toarray().reshape(2, 2, 2), np.array(HAND_P))
    assert not rlrates.load_mdp(_write_json(tmp_path / "dense.json", {"R": HAND_R, "transitions": HAND_SPARSE})).is_sparse


def _forged_csr(path: Path, shapes: dict[str, tuple[int, ...]], dtypes: dict[str, str] | None = None) -> Path:
    """An .npz of CSR parts whose headers declare ``shapes`` but hold no data (loading them would fail)."""
    import io
    import zipfile

    info = np.array(json.dumps({"name": "x", "metadata": {}, "storage": "csr"}))
    with zipfile.ZipFile(path, "w") as archive:
        for key, shape in shapes.items():
            header = io.BytesIO()
            descr = (dtypes or {}).get(key, "<f8" if key == "P_data" else "<i8")
            np.lib.format.write_array_header_1_0(header, {"descr": descr, "fortran_order": False, "shape": shape})
            archive.writestr(f"{key}.npy", header.getvalue())
        for key, value in (("R", np.array(HAND_R)), ("info", info)):
            buffer = io.BytesIO()
            np.save(buffer, value)
            archive.writestr(f"{key}.npy", buffer.getvalue())
    return path


@pytest.mark.parametrize(
    ("shapes", "dtypes", "match"),
    [
        ({"P_data": (6,), "P_indices": (6,), "P_indptr": (4,)}, None,
         r"array `P_indptr` has shape \(4,\); the CSR rows of P for R of shape \(2, 2\) need \(5,\) \(S\*A \+ 1\)"),
        ({"P_data": (6,), "P_indices": (7,), "P_indptr": (5,)}, None,
         r"arrays `P_data` \(6,\) and `P_indices` \(7,\) must be 1-d and of one length"),
        ({"P_data": (10**9,), "P_indices": (10**9,), "P_indptr": (5,)}, None,
         r"array P_data\.npy has shape \(1000000000,\), 1,000,000,000 entries .*more than the 100,000,000 entries"),
        ({"P_data": (6,), "P_indices": (6,), "P_indptr": (5,)}, {"P_indices": "<f8"},
         r"array `P_indices` must hold integers, got dtype float64"),
        ({"P_data": (6,), "P_indices": (6,)}, None,
         r"missing array\(s\) P_indptr; an MDP .npz of CSR parts holds P_data, P_indices, P_indptr, R and info"),
    ],
    ids=["indptr-not-S*A+1", "lengths-differ", "a-billion-entries", "float-indices", "no-indptr"],
)
def test_a_forged_sparse_header_is_refused_naming_the_file_before_loading(
        tmp_path: Path, shapes: dict[str, tuple[int, ...]], dtypes: dict[str, str] | None, match: str) -> None:
    path = _forged_csr(tmp_path / "forged.npz", shapes, dtypes)
    assert path.stat().st_size < 2000
    with pytest.raises(ValueError, match=r"forged\.npz: " + match):
        rlrates.load_mdp(path)


def _csr_parts(**edits: Any) -> dict[str, Any]:
    """The CSR parts of the hand-written MDP (rows s * A + a), with ``edits`` replacing some of them."""
    from scipy import sparse

    rows = sparse.csr_array(np.array(HAND_P).reshape(4, 2))
    parts = {"P_data": rows.data, "P_indices": rows.indices, "P_indptr": rows.indptr, "R": np.array(HAND_R),
             "info": np.array(json.dumps({"name": "x", "metadata": {}, "storage": "csr"}))}
    return {**parts, **edits}


@pytest.mark.parametrize(
    ("edits", "match"),
    [
        ({"P_indices": np.array([0, 1, 1, 0, 1, 2])}, r"array `P_indices` entry 5 \(s=1, a=1\) names next state 2, outside 0\.\.1"),
        ({"P_indptr": np.array([0, 2, 1, 5, 6])}, r"array `P_indptr` must rise from 0 to 6 .* it falls after row 1"),
        ({"P_indptr": np.array([1, 2, 3, 5, 6])}, r"array `P_indptr` must rise from 0 to 6 .* it runs from 1 to 6"),
        ({"P_data": np.array([0.9, 0.2, 1.0, 0.5, 0.5, 1.0])},
         r"the stored arrays are not a valid MDP: `P` row \(s=0, a=0\) sums to 1\.1, not 1"),
        ({"info": np.array(json.dumps({"storage": "coo"}))}, r"`storage` is 'coo'; it must be one of 'dense', 'csr'"),
    ],
    ids=["next-state-out-of-range", "indptr-falls", "indptr-offset", "row-sum", "unknown-storage"],
)
def test_bad_csr_parts_are_refused_naming_the_file_and_the_entry(tmp_path: Path, edits: dict[str, Any],
                                                                  match: str) -> None:
    path = _npz(tmp_path / "bad.npz", **_csr_parts(**edits))
    with pytest.raises(ValueError, match=r"bad\.npz: " + match):
        rlrates.load_mdp(path)


def test_a_sparse_json_needs_transitions_and_counts_only_what_it_lists(tmp_path: Path) -> None:
    dense_p = _write_json(tmp_path / "mixed.json", {"R": HAND_R, "P": HAND_P, "storage": "csr"})
    with pytest.raises(ValueError, match=r"mixed\.json: \"storage\": \"csr\" needs 'transitions'"):
        rlrates.load_mdp(dense_p)
    # 20000 states with one action each, every state a self-loop: dense it would be 4 * 10**8 entries
    wide = {"R": [[0.0]] * 20_000, "transitions": [[s, 0, s, 1.0] for s in range(20_000)], "storage": "csr"}
    back = rlrates.load_mdp(_write_json(tmp_path / "wide.json", wide))
    assert back.is_sparse and back.P.nnz == 20_000 and back.states == 20_000
