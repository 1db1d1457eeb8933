"""The bad-input catalogue: every row of docs/bad-input.md is one case here, and each gives a
clear message that names the problem and where it is (entry, row, replicate, n).

Messages are pinned with regular expressions; a case whose input reaches the estimator
checks the ``"error"`` result's message, every other case the exception's message.
"""

from __future__ import annotations

import re
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import rlrates
from rlrates import reference

DOCS = Path(__file__).resolve().parents[2] / "docs" / "bad-input.md"
MDP = rlrates.garnet(states=6, actions=2, branching=3, seed=4)
CLAIM = rlrates.Claim(n=-0.5)
SMALL = {"n_grid": (128, 256, 512), "replicates": 4}


def _P(**edits: Any) -> np.ndarray:
    P = np.array(MDP.P)
    for key, value in edits.items():
        s, a, t = (int(c) for c in key[1:].split("_"))
        P[s, a, t] = value
    return P


def _run(estimator: Callable[[Any, Any], Any], target: str = "q_pi", **options: Any) -> str:
    result = rlrates.check(estimator, MDP, CLAIM, target=target, **{**SMALL, **options})
    assert result.status == "error", result.message
    return result.message


def _sparse_P(**changes: float) -> Any:
    """MDP's kernel as a scipy.sparse (S*A, S) array, with entries changed (key ``row_col``)."""
    from scipy import sparse

    rows = np.array(MDP.P.reshape(12, 6))
    for key, value in changes.items():
        i, t = (int(x) for x in key[1:].split("_"))
        rows[i, t] = value
    return sparse.csr_array(rows)


def _sparse_model_returns_dense() -> str:
    sparse_mdp = rlrates.TabularMDP(_sparse_P(), MDP.R)
    result = rlrates.check(lambda batch, problem: batch.counts.toarray() / batch.n, sparse_mdp, CLAIM, target="model", **SMALL)
    return result.message


def _returns(make: Callable[[Any], Any], target: str = "q_pi") -> Callable[[], str]:
    return lambda: _run(lambda batch, problem: make(problem), target)


def _raises(batch: Any, problem: Any) -> np.ndarray:
    if batch.n == 256:
        raise KeyError("missing successor table")
    return reference.plugin_q_pi(batch, problem)


def _mutates(batch: Any, problem: Any) -> np.ndarray:
    batch.next_states[0, 0, 0] = 1
    return reference.plugin_q_pi(batch, problem)


def _slow(batch: Any, problem: Any) -> np.ndarray:
    time.sleep(0.02)
    return reference.plugin_q_pi(batch, problem)


_SHARED = np.zeros((6, 2))


def _same_object(batch: Any, problem: Any) -> np.ndarray:
    _SHARED[:] = reference.plugin_q_pi(batch, problem)
    return _SHARED


def _process_pool_with_a_lambda() -> None:
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(max_workers=1) as pool:
        rlrates.check(lambda batch, problem: reference.plugin_q_pi(batch, problem), MDP, CLAIM, executor=pool, **SMALL)


def _report_dir_under_a_file() -> None:
    from rlrates.plugin.session import prepare_report_dir
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        blocker = Path(tmp) / "occupied"
        blocker.write_text("a file")
        try:
            prepare_report_dir(blocker / "reports", controller=True)
        except pytest.UsageError as exc:
            raise ValueError(str(exc)) from None


def _saved_report(tmp: Path) -> Path:
    from rlrates.report import write_check

    result = rlrates.check(reference.plugin_q_pi, MDP, CLAIM, **SMALL)
    return write_check(result, tmp, "tests/test_x.py::test_saved", figures=False)


def _corrupt_report(edit: Callable[[Path], None]) -> Callable[[], None]:
    def trigger() -> None:
        import tempfile

        from rlrates.report import rebuild

        with tempfile.TemporaryDirectory() as tmp:
            folder = _saved_report(Path(tmp))
            edit(folder)
            rebuild(tmp)

    return trigger


def _truncate_json(folder: Path) -> None:
    path = folder / "check.json"
    path.write_text(path.read_text()[:-40])


def _drop_error_column(folder: Path) -> None:
    path = folder / "errors.csv"
    lines = path.read_text().splitlines()
    path.write_text("\n".join(",".join(line.split(",")[:4] + line.split(",")[5:]) for line in lines) + "\n")


@dataclass(frozen=True)
class Case:
    id: str
    trigger: Callable[[], object]
    match: str


def _figure_width(width: str) -> Any:
    from rlrates.report.figures import figure_width

    return figure_width(width)


def _index_columns(columns: list[str]) -> Any:
    from rlrates.report.index import index_latex

    return index_latex([], columns)


CATALOGUE = [
    Case("P-ndim", lambda: rlrates.TabularMDP(np.ones((2, 2)), np.zeros((2, 2))), r"`P` must have 3 dimensions"),
    Case("P-shape", lambda: rlrates.TabularMDP(np.ones((2, 1, 3)) / 3, np.zeros((2, 1))), r"same S on both ends, got \(2, 1, 3\)"),
    Case("P-nan", lambda: rlrates.TabularMDP(_P(p2_1_0=np.nan), MDP.R), r"non-finite entry P\[2, 1, 0\]"),
    Case("P-negative", lambda: rlrates.TabularMDP(_P(p3_0_5=-0.1), MDP.R), r"negative probability P\[3, 0, 5\] = -0.1"),
    Case("P-row-sum", lambda: rlrates.TabularMDP(_P(p4_1_4=MDP.P[4, 1, 4] + 0.01), MDP.R), r"row \(s=4, a=1\) sums to 1.01"),
    Case("P-empty", lambda: rlrates.TabularMDP(np.zeros((0, 2, 0)), np.zeros((0, 2))), r"`P` has no states"),
    Case("P-sparse-shape", lambda: rlrates.TabularMDP(_sparse_P()[:11], MDP.R), r"11 rows is not a multiple of S = 6 columns"),
    Case("P-sparse-negative", lambda: rlrates.TabularMDP(_sparse_P(r7_2=-0.1), MDP.R),
         r"negative probability P\[3, 1, 2\] \(row 7 of the \(S\*A, S\) array\) = -0.1"),
    Case("P-sparse-row-sum", lambda: rlrates.TabularMDP(_sparse_P(r9_0=MDP.P[4, 1, 0] + 0.01), MDP.R), r"row \(s=4, a=1\) sums to 1.01"),
    Case("family-sparse-flag", lambda: rlrates.gridworld(sparse="yes"), r"`sparse` must be True, False or None .* got 'yes'"),
    Case("save-sparse", lambda: rlrates.save_mdp(rlrates.ring(5, sparse=True), "unwritten.npz"),
         r"unwritten.npz: MDP 'ring-S5-slip0.1' is sparse, and save_mdp writes dense MDPs only"),
    Case("R-shape", lambda: rlrates.TabularMDP(MDP.P, np.zeros((6, 3))), r"`R` must have shape \(S, A\) = \(6, 2\)"),
    Case("R-nan", lambda: rlrates.TabularMDP(MDP.P, np.where(np.eye(6, 2, 1) > 0, np.nan, 0.5)), r"`R` has a non-finite entry R\[0, 1\]"),
    Case("gamma-range", lambda: rlrates.q_pi(MDP, 1.5), r"`gamma` must lie in \(0, 1\]"),
    Case("gamma-type", lambda: rlrates.q_star(MDP, "0.9"), r"`gamma` must be a number in \(0, 1\), got '0.9'"),
    Case("gamma-episodic", lambda: rlrates.q_pi(MDP, 1.0), r"`gamma` = 1 needs an episodic problem"),
    Case("policy-not-stochastic", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, policy=np.ones((6, 2)), **SMALL),
         r"`policy` row for state 0 sums to 2"),
    Case("policy-shape", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, policy=np.ones((6, 3)) / 3, **SMALL),
         r"`policy` must have shape \(6,\) or \(6, 2\), got \(6, 3\)"),
    Case("grid-too-short", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, n_grid=(64, 128)), r"at least three distinct values to fit a slope, got \(64, 128\)"),
    Case("grid-non-integer", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, n_grid=(64, 128.5, 256)), r"positive integers, got 128.5"),
    Case("grid-zero", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, n_grid=(0, 64, 128)), r"positive integers, got 0"),
    Case("claim-empty", lambda: rlrates.Claim(n=None, horizon=None), r"at least one factor"),
    Case("claim-non-numeric", lambda: rlrates.Claim(n="-1/2"), r"`n` exponent must be a number or None, got '-1/2'"),
    Case("claim-positive", lambda: rlrates.Claim(n=0.5), r"`n` exponent must be negative .* got 0.5"),
    Case("target-unknown", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, target="v_pi"), r"unknown `target` 'v_pi'; choose one of q_pi, q_star, policy, model"),
    Case("budget-unknown", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, budget="fast"), r"unknown `budget` 'fast'; choose one of ci, appendix"),
    Case("return-shape", _returns(lambda p: np.zeros((p.actions, p.states))), r"returned shape \(2, 6\); expected an \(S, A\) = \(6, 2\)"),
    Case("return-list", _returns(lambda p: [[0.0] * p.actions] * p.states), r"returned list, not a numpy.ndarray"),
    Case("return-nan", _returns(lambda p: np.where(np.eye(6, 2) > 0, np.nan, 1.0)), r"non-finite value nan at index \(0, 0\) \(2 non-finite"),
    Case("return-inf", _returns(lambda p: np.full((6, 2), np.inf)), r"non-finite value inf"),
    Case("return-integers", _returns(lambda p: np.ones((6, 2), dtype=np.int32)), r"dtype int32; Q-values must be floating point"),
    Case("return-bad-action", _returns(lambda p: np.full(6, 5), "policy"), r"picks action 5 in state 0; valid actions are 0..1"),
    Case("return-model-rows", _returns(lambda p: np.full((6, 2, 6), 0.2), "model"), r"model's row \(s=0, a=0\) sums to 1.2"),
    Case("return-model-sparse", _sparse_model_returns_dense, r"returned ndarray; expected a scipy.sparse \(S\*A, S\) = \(12, 6\) transition estimate"),
    Case("estimator-raises", lambda: _run(_raises), r"raised at gamma=0.5, n=256, replicate=0: KeyError: 'missing successor table'(.|\n)*_raises"),
    Case("estimator-mutates", lambda: _run(_mutates), r"raised at gamma=0.5, n=128, replicate=0: ValueError: assignment destination is read-only"),
    Case("estimator-too-slow", lambda: _run(_slow, time_limit=0.005), r"at gamma=0.5, n=128, replicate=0: the call took .* over the per-call time limit of 0.005 s"),
    Case("estimator-same-object", lambda: _run(_same_object), r"replicate=1: the estimator returned the same array object"),
    Case("family-not-mdp", lambda: rlrates.check(reference.plugin_q_pi, lambda g: "mdp", CLAIM, **SMALL), r"returned str for gamma=0.5, not a TabularMDP"),
    Case("time-limit", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, time_limit=-1), r"`time_limit` must be a positive number of seconds, got -1"),
    Case("estimator-not-picklable", _process_pool_with_a_lambda, r"cannot be pickled, so it cannot be sent to the ProcessPoolExecutor.*module-level function"),
    Case("report-dir-not-writable", _report_dir_under_a_file, r"--rlrates-report: cannot write to the report directory .*occupied/reports"),
    Case("report-json-corrupt", _corrupt_report(_truncate_json), r"check.json: not valid JSON \(line \d+, column \d+"),
    Case("report-csv-edited", _corrupt_report(_drop_error_column), r"errors.csv: .*error"),
    Case("label-empty", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, label=" ", **SMALL),
         r"`label` must be a non-empty string, got ' '"),
    Case("figure-width", lambda: _figure_width("wide"), r"figure width 'wide' must be 'column', 'page' or a number of inches"),
    Case("index-columns", lambda: _index_columns(["check", "time"]), r"index columns 'time' unknown; choose from check, test"),
]


@pytest.mark.parametrize("case", CATALOGUE, ids=[c.id for c in CATALOGUE])
def test_bad_input_gives_a_clear_message(case: Case) -> None:
    try:
        outcome = case.trigger()
    except (ValueError, TypeError) as exc:
        text = str(exc)
    else:
        assert isinstance(outcome, str), f"{case.id}: no error was raised"
        text = outcome
    assert re.search(case.match, text), f"{case.id}: {text}"


def test_the_docs_catalogue_lists_every_case_in_order() -> None:
    rows = re.findall(r"^\| `([a-zA-Z-]+)` \|", DOCS.read_text(), flags=re.MULTILINE)
    assert rows == [case.id for case in CATALOGUE]
    assert len(rows) >= 25
