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


def _exits(batch: Any, problem: Any) -> np.ndarray:
    if batch.n == 256:
        raise SystemExit("estimator called sys.exit")
    return reference.plugin_q_pi(batch, problem)


def _generator_exit(batch: Any, problem: Any) -> np.ndarray:
    if batch.n == 256:
        raise GeneratorExit
    return reference.plugin_q_pi(batch, problem)


def _kills_its_process(batch: Any, problem: Any) -> np.ndarray:
    if batch.n == 256:
        import os

        os._exit(3)
    return reference.plugin_q_pi(batch, problem)


def _worker_dies() -> str:
    from concurrent.futures import ProcessPoolExecutor

    with ProcessPoolExecutor(max_workers=2) as pool:
        return _run(_kills_its_process, executor=pool)


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


def _report_dir_with(make: Callable[[Path], None]) -> Callable[[], None]:
    """Prepare a report directory after ``make`` put something of a user's (or another session's) into it."""
    def trigger() -> None:
        import tempfile

        from rlrates.plugin.session import prepare_report_dir

        with tempfile.TemporaryDirectory() as tmp:
            make(Path(tmp))
            try:
                prepare_report_dir(Path(tmp) / "reports", controller=True)
            except pytest.UsageError as exc:
                raise ValueError(str(exc)) from None

    return trigger


def _users_folder(tmp: Path) -> None:
    (tmp / "reports" / "api").mkdir(parents=True)
    (tmp / "reports" / "api" / "check.json").write_text("{}")
    (tmp / "reports" / "index.md").write_text("# my docs")


def _linked_folder(tmp: Path) -> None:
    (tmp / "reports").mkdir()
    (tmp / "reports" / "linked").symlink_to(tmp, target_is_directory=True)


def _live_lock(tmp: Path) -> None:
    import os

    (tmp / "reports").mkdir()
    (tmp / "reports" / ".rlrates-lock").write_text(f"{os.getppid()} another-session\n")


def _hand_written_index() -> None:
    import tempfile

    from rlrates.report import write_index

    with tempfile.TemporaryDirectory() as tmp:
        _saved_report(Path(tmp))
        (Path(tmp) / "index.md").write_text("# my own index")
        write_index(tmp)


def _disk_full() -> str:
    """ENOSPC injected into the file moves of a session's report writer: a warning, and the summary names the check."""
    import errno
    import os
    import tempfile
    import warnings

    from rlrates.plugin.records import CheckRecord
    from rlrates.plugin.session import RatesSession
    from rlrates.plugin.settings import RatesSettings
    from rlrates.report import ReportWarning

    def no_space(source: str, target: str) -> None:
        raise OSError(errno.ENOSPC, "No space left on device")

    result = rlrates.check(reference.plugin_q_pi, MDP, CLAIM, **SMALL)
    with tempfile.TemporaryDirectory() as tmp, pytest.MonkeyPatch.context() as patch:
        session = RatesSession(RatesSettings(report_dir=Path(tmp)))
        patch.setattr(os, "replace", no_space)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            session.write_report(result, "tests/test_x.py::test_full")
        session.records.append(CheckRecord.from_result(result, "tests/test_x.py::test_full"))
        lines = session.report_lines()
    assert [w.category for w in caught] == [ReportWarning]
    return "\n".join([str(caught[0].message), *lines])


def _too_many_workers() -> None:
    import argparse

    from rlrates.plugin.settings import _parse_workers

    try:
        _parse_workers("100000")
    except argparse.ArgumentTypeError as exc:
        raise ValueError(str(exc)) from None


def _interrupted_while_sampling() -> str:
    from rlrates import sweep

    real = sweep.draw_block

    def interrupted(kernel: Any, n: int, *args: Any) -> Any:
        if n >= 256:
            raise KeyboardInterrupt
        return real(kernel, n, *args)

    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(sweep, "draw_block", interrupted)
        try:
            rlrates.check(reference.plugin_q_pi, MDP, CLAIM, **SMALL)
        except rlrates.CheckInterrupted as exc:
            return f"{exc} ({len(exc.result.table)} rows kept)"
    raise AssertionError("the check was not interrupted")


def _sigterm() -> str:
    import os
    import signal

    from rlrates.plugin.session import Terminated, _on_sigterm

    previous = signal.getsignal(signal.SIGTERM)
    try:
        _on_sigterm(os.getpid())(signal.SIGTERM, None)
    except Terminated as exc:
        return f"{type(exc).__name__}: {exc}; then {signal.getsignal(signal.SIGTERM)!r}"
    finally:
        signal.signal(signal.SIGTERM, previous)
    raise AssertionError("no Terminated")


def _check_with(**options: Any) -> Callable[[], object]:
    return lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, **{**SMALL, **options})


def _logged_value_message(estimator: Callable[[Any, Any], Any]) -> str:
    return rlrates.check(estimator, MDP, CLAIM, target="value", data="trajectories", **SMALL).message


def _ground_truth_written() -> str:
    victim = rlrates.garnet(states=6, actions=2, branching=3, seed=9)

    def vandal(batch: Any, problem: Any) -> Any:
        victim.R.setflags(write=True)
        victim.R[0, 0] = 0.5
        return reference.plugin_q_pi(batch, problem)

    return rlrates.check(vandal, victim, CLAIM, **SMALL).message


def _marker_budget_list() -> None:
    from rlrates.plugin.marker import parse_marker

    parse_marker((), {"n": -0.5, "budget": ["ci"]}, "test_x.py::test_y")


def _load_text(name: str, text: str) -> None:
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / name
        path.write_text(text, encoding="utf-8")
        rlrates.load_mdp(path)


def _forged_csr_npz() -> None:
    """A sparse MDP file whose P_indptr header declares 4 rows + 1 for the 3 x 2 rewards' 6 rows; no data."""
    import io
    import json
    import tempfile
    import zipfile

    info = np.array(json.dumps({"storage": "csr"}))
    with tempfile.TemporaryDirectory() as tmp:
        with zipfile.ZipFile(Path(tmp) / "csr.npz", "w") as archive:
            for key, shape in (("P_data", (6,)), ("P_indices", (6,)), ("P_indptr", (5,))):
                header = io.BytesIO()
                np.lib.format.write_array_header_1_0(header, {"descr": "<i8", "fortran_order": False, "shape": shape})
                archive.writestr(f"{key}.npy", header.getvalue())
            for key, value in (("R", np.zeros((3, 2))), ("info", info)):
                buffer = io.BytesIO()
                np.save(buffer, value)
                archive.writestr(f"{key}.npy", buffer.getvalue())
        rlrates.load_mdp(Path(tmp) / "csr.npz")


def _forged_npz() -> None:
    import io
    import tempfile
    import zipfile

    header = io.BytesIO()
    np.lib.format.write_array_header_1_0(header, {"descr": "<f8", "fortran_order": False, "shape": (2000, 100, 2000)})
    with tempfile.TemporaryDirectory() as tmp:
        with zipfile.ZipFile(Path(tmp) / "forged.npz", "w") as archive:
            archive.writestr("P.npy", header.getvalue())
        rlrates.load_mdp(Path(tmp) / "forged.npz")


def _identity_without_an_ini_file() -> str:
    """The stream identity of tests/test_lab.py::test_rate when pytest started in tests/ (rootdir tests/) and no ini exists."""
    import tempfile
    from types import SimpleNamespace

    from rlrates.plugin.identity import stream_identity

    with tempfile.TemporaryDirectory() as tmp:
        (Path(tmp) / ".git").mkdir()
        path = Path(tmp) / "tests" / "test_lab.py"
        item = SimpleNamespace(config=SimpleNamespace(inipath=None, rootpath=path.parent), nodeid="test_lab.py::test_rate",
                               path=path)
        return f"streams from {stream_identity(item)}"  # type: ignore[arg-type]


def _marker_policy_word() -> None:
    from rlrates.plugin.marker import parse_marker

    parse_marker((), {"n": -0.5, "policy": "greedy"}, "test_x.py::test_y")


def _demo_negative_seed() -> str:
    import contextlib
    import io

    from rlrates.__main__ import main

    errors = io.StringIO()
    with contextlib.redirect_stderr(errors), pytest.raises(SystemExit) as raised:
        main(["demo", "--seed", "-1"])
    return f"exit {raised.value.code}: {errors.getvalue()}"


def _gym_table_too_large() -> None:
    from types import SimpleNamespace

    table = {s: {a: [(1.0, s, 0.0, False)] for a in range(4)} for s in range(40_000)}
    rlrates.from_gymnasium(SimpleNamespace(P=table))


def _marker_without_fixture() -> str:
    import warnings
    from types import SimpleNamespace

    from rlrates.plugin import pytest_runtest_setup

    item = SimpleNamespace(nodeid="test_x.py::test_y", fixturenames=["request"],
                           get_closest_marker=lambda name: object() if name == "rlrates" else None)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pytest_runtest_setup(item)  # type: ignore[arg-type]
    return "; ".join(f"{type(w.message).__name__}: {w.message}" for w in caught)


def _saved_report(tmp: Path, figures: bool = False) -> Path:
    from rlrates.report import write_check

    result = rlrates.check(reference.plugin_q_pi, MDP, CLAIM, **SMALL)
    folder = write_check(result, tmp, "tests/test_x.py::test_saved", figures=False)
    if figures:  # as if drawn by the plugin (listed as ours), then replaced by the edit
        from rlrates.report import files

        files.write_text(folder / "figure.png", "a figure")
        (folder / "figure.png").unlink()
    return folder


def _corrupt_report(edit: Callable[[Path], None], figures: bool = False) -> Callable[[], None]:
    """``python -m rlrates report`` on a saved check after ``edit``: its message (exit code 2), or ``None`` (exit 0)."""
    def trigger() -> str | None:
        import contextlib
        import io
        import tempfile

        from rlrates.__main__ import main

        with tempfile.TemporaryDirectory() as tmp:
            folder = _saved_report(Path(tmp), figures)
            edit(folder)
            errors = io.StringIO()
            with contextlib.redirect_stderr(errors):
                code = main(["report", tmp])
        if code == 0:
            return None
        assert code == 2, errors.getvalue()
        return errors.getvalue()

    return trigger


def _truncate_json(folder: Path) -> None:
    path = folder / "check.json"
    path.write_text(path.read_text()[:-40])


def _drop_error_column(folder: Path) -> None:
    path = folder / "errors.csv"
    lines = path.read_text().splitlines()
    path.write_text("\n".join(",".join(line.split(",")[:4] + line.split(",")[5:]) for line in lines) + "\n")


def _on_a_machine_with(memory: int, build: Callable[[], object]) -> Callable[[], object]:
    """Run ``build`` as if the machine had ``memory`` bytes (so the case does not depend on this machine)."""
    def trigger() -> object:
        from rlrates import costs

        with pytest.MonkeyPatch.context() as patch:
            patch.setattr(costs, "machine_memory", lambda: memory)
            return build()

    return trigger


def _huge_input_kernel() -> None:
    """A (40000, 4, 40000) P that takes no memory itself (a broadcast view): its validated copy would."""
    S = 40_000
    rlrates.TabularMDP(np.broadcast_to(np.full(1, 1.0 / S), (S, 4, S)), np.zeros((S, 4)))


def _gym_table(states: int) -> None:
    from types import SimpleNamespace

    rlrates.from_gymnasium(SimpleNamespace(P={s: {a: [(1.0, s, 0.0, False)] for a in range(4)} for s in range(states)}))


def _overflowing_truth() -> None:
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", rlrates.RewardRangeWarning)
        huge = rlrates.TabularMDP(MDP.P, np.full((6, 2), 1e308), name="huge-rewards")
    rlrates.check(reference.plugin_q_pi, huge, CLAIM, **SMALL)


def _edit_record(edit: Callable[[dict[str, Any]], None]) -> Callable[[Path], None]:
    def change(folder: Path) -> None:
        import json

        record = json.loads((folder / "check.json").read_text())
        edit(record)
        (folder / "check.json").write_text(json.dumps(record, indent=2))

    return change


def _edit_csv(column: str, value: str) -> Callable[[Path], None]:
    """Set ``column`` of the table's first row to ``value`` and update the checksum in check.json, as a careful editor would."""
    def change(folder: Path) -> None:
        import hashlib
        import json

        lines = (folder / "errors.csv").read_text().splitlines()
        at = lines[0].split(",").index(column)
        first = lines[1].split(",")
        first[at] = value
        text = "\n".join([lines[0], ",".join(first), *lines[2:]]) + "\n"
        (folder / "errors.csv").write_text(text)
        _edit_record(lambda record: record["data"].update(sha256=hashlib.sha256(text.encode()).hexdigest()))(folder)

    return change


def _figure_is_a_directory(folder: Path) -> None:
    (folder / "figure.png").mkdir()


def _latex_verdict(record: dict[str, Any]) -> None:
    record["fits"][0]["verdict"] = r"\textbf{ok}\input{/etc/passwd}"


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
    Case("replicates-fraction", _check_with(replicates=4.9), r"`replicates` must be a whole number .* got float 4.9"),
    Case("replicates-string", _check_with(replicates="10"), r"`replicates` must be a whole number .* got str '10'"),
    Case("replicates-nan", _check_with(replicates=float("nan")), r"`replicates` must be a whole number .* got float nan"),
    Case("gammas-number", _check_with(gammas=0.9), r"`gammas` must be a sequence such as \(0.5, 0.9\), got float 0.9"),
    Case("gammas-string", _check_with(gammas="0.5"), r"`gammas` must be a sequence such as \(0.5, 0.9\), got str '0.5'"),
    Case("grid-number", _check_with(n_grid=128), r"`n_grid` must be a sequence such as \(128, 256, 512\), got int 128"),
    Case("grid-huge", _check_with(n_grid=(2**62, 2**63, 2**64)), r"`n_grid` values must lie in 1 .. 2\*\*63 - 1 .* got 9223372036854775808"),
    Case("executor-not-executor", _check_with(executor=object()), r"`executor` must be a concurrent.futures.Executor .* got object"),
    Case("policy-unused", _check_with(target="q_star", policy=np.full((6, 2), 0.5)),
         r"`policy` is the evaluation policy of targets 'q_pi' and 'value' and is not used with target 'q_star'"),
    Case("marker-budget-list", _marker_budget_list, r"test_x.py::test_y: unknown `budget` \['ci'\]; choose one of ci, appendix"),
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
    Case("estimator-system-exit", lambda: _run(_exits), r"raised at gamma=0.5, n=256, replicate=0: SystemExit: estimator called sys.exit"),
    Case("estimator-generator-exit", lambda: _run(_generator_exit), r"raised at gamma=0.5, n=256, replicate=0: GeneratorExit"),
    Case("worker-died", _worker_dies, r"the cell at gamma=0.5, n=256, replicate=0 never finished: replicates 0..3 of this cell were lost: the worker process running it died"),
    Case("estimator-mutates", lambda: _run(_mutates), r"raised at gamma=0.5, n=128, replicate=0: ValueError: assignment destination is read-only"),
    Case("estimator-too-slow", lambda: _run(_slow, time_limit=0.005), r"at gamma=0.5, n=128, replicate=0: the call took .* over the per-call time limit of 0.005 s"),
    Case("estimator-same-object", lambda: _run(_same_object), r"replicate=1: the estimator returned the same array object"),
    Case("interrupt-outside-estimator", _interrupted_while_sampling,
         r"interrupted \(KeyboardInterrupt\) at gamma=0.5, n=256, replicate=0; the rows finished before it are kept \(4 rows kept\)"),
    Case("sigterm", _sigterm, r"Terminated: SIGTERM; then <Handlers.SIG_DFL: 0>"),
    Case("family-not-mdp", lambda: rlrates.check(reference.plugin_q_pi, lambda g: "mdp", CLAIM, **SMALL), r"returned str for gamma=0.5, not a TabularMDP"),
    Case("time-limit", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, time_limit=-1), r"`time_limit` must be a positive number of seconds, got -1"),
    Case("estimator-not-picklable", _process_pool_with_a_lambda, r"cannot be pickled, so it cannot be sent to the ProcessPoolExecutor.*module-level function"),
    Case("workers-too-many", _too_many_workers, r"100000 worker processes is more than this machine can run usefully: "
         r"at most \d+ \(4 per CPU on its \d+ CPU\(s\)\)"),
    Case("report-dir-not-writable", _report_dir_under_a_file, r"--rlrates-report: cannot write to the report directory .*occupied/reports"),
    Case("file-npz-huge", _forged_npz, r"forged.npz: array P.npy has shape \(2000, 100, 2000\), 400,000,000 entries \(2.98 GiB"),
    Case("file-json-huge", lambda: _load_text("rows.json", '{"R": [' + ", ".join(["[0.0]"] * 20_000) + '], "transitions": []}'),
         r"rows.json: the P that 'R' implies has shape \(20000, 1, 20000\), 400,000,000 entries"),
    Case("file-json-deep", lambda: _load_text("deep.json", "[" * 100_000 + "]" * 100_000), r"deep.json: JSON nested too deeply"),
    Case("file-json-big-number", lambda: _load_text("big.json", '{"R": [[1' + "0" * 400 + ']], "P": [[[1.0]]]}'),
         r"big.json: 'R' holds a number too large for a float64"),
    Case("file-npz-is-text", lambda: _load_text("text.npz", "P R info"), r"text.npz: not an .npz archive \(a zip file of P.npy"),
    Case("file-npz-csr-forged", _forged_csr_npz,
         r"csr.npz: array `P_indptr` has shape \(5,\); the CSR rows of P for R of shape \(3, 2\) need \(7,\)"),
    Case("marker-without-fixture", _marker_without_fixture,
         r"^MarkerUnusedWarning: @pytest.mark.rlrates on test_x.py::test_y, which uses neither the `rlrates` nor"),
    Case("marker-policy-word", _marker_policy_word, r"test_x.py::test_y: `policy` must be an \(S, A\) array .* got 'greedy'"),
    Case("demo-negative-seed", _demo_negative_seed, r"exit 2: (.|\n)*argument --seed: the master seed must be an integer >= 0, got '-1'"),
    Case("gym-too-large", _gym_table_too_large, r"a dense P of shape \(40001, 4, 40001\) has 6,400,320,004 entries \(47.7 GiB"),
    Case("streams-start-directory", _identity_without_an_ini_file, r"^streams from tests/test_lab.py::test_rate$"),
    Case("report-dir-foreign", _report_dir_with(_users_folder),
         r"--rlrates-report: not written by rlrates, so left alone: .*reports/api, .*reports/index.md"),
    Case("report-dir-symlink", _report_dir_with(_linked_folder), r"not written by rlrates, so left alone: .*reports/linked"),
    Case("report-dir-locked", _report_dir_with(_live_lock), r"in use by another rlrates session \(pid \d+, lock file"),
    Case("report-index-hand-written", _hand_written_index, r"index.md; refusing to overwrite index.md"),
    Case("report-disk-full", _disk_full, r"the report of tests/test_x.py::test_full was not written to .*: No space left on device; "
         r"the test keeps its verdict\n(.|\n)*1 report\(s\) missing \(could not be written\): tests/test_x.py::test_full"),
    Case("report-json-corrupt", _corrupt_report(_truncate_json), r"check.json: not valid JSON \(line \d+, column \d+"),
    Case("report-csv-edited", _corrupt_report(_drop_error_column), r"errors.csv: .*error"),
    Case("family-too-large", _on_a_machine_with(16 * 2**30, lambda: rlrates.garnet(states=10**7, actions=10, branching=5)),
         r"garnet\(states=10000000, actions=10, branching=5\) needs about 46.7 GiB \(a sparse P of shape "
         r"\(100000000, 10000000\) with 500,000,000 stored entries.*more than the 16 GiB of memory this machine has"),
    Case("family-dense-too-large", _on_a_machine_with(16 * 2**30, lambda: rlrates.garnet(100_000, 4, 3, sparse=False)),
         r"needs about 1,788 GiB \(a dense P of shape \(100000, 4, 100000\).*pass sparse=True"),
    Case("mdp-too-large", _on_a_machine_with(16 * 2**30, _huge_input_kernel),
         r"validating `P` needs about 155 GiB \(shape \(40000, 4, 40000\), 6,400,000,000 entries.*more than the 16 GiB"),
    Case("gym-over-memory", _on_a_machine_with(64 * 2**20, lambda: _gym_table(2000)),
         r"environment SimpleNamespace needs about 0.716 GiB \(a dense P of shape \(2001, 4, 2001\).*more than the 0.0625 GiB"),
    Case("truth-overflows", _overflowing_truth,
         r"the exact V\^pi of MDP 'huge-rewards' at gamma=0.5 overflows float64 .* rewards reach \|R\| = 1e\+308 "
         r"and values can reach max\|R\| / \(1 - gamma\) = inf\. The MDP is at fault, not an estimator"),
    Case("report-verdict-latex", _corrupt_report(_edit_record(_latex_verdict)),
         r"check.json: fits\[0\]: fit key 'verdict' must be one of ok, violated, unclear, exact"),
    Case("report-failure-not-object", _corrupt_report(_edit_record(lambda r: r.update(failure="n/a"))),
         r"check.json: failure is 'n/a'; null, or an object with gamma \(in \(0, 1\)\), n \(>= 1\)"),
    Case("report-claim-out-of-range", _corrupt_report(_edit_record(lambda r: r["claim"].update(n=1e308))),
         r"check.json: claim.n is 1e\+308; a claimed n-exponent is a negative number, at least -100, or null"),
    Case("report-json-nan", _corrupt_report(lambda f: f.joinpath("check.json").write_text(
         f.joinpath("check.json").read_text().replace('"seed": ', '"seed": NaN, "was": ', 1))),
         r"check.json: not valid JSON \(NaN is not a JSON number"),
    Case("report-figure-directory", _corrupt_report(_figure_is_a_directory, figures=True),
         r"test_saved-[0-9a-f]+/figure.png is a directory, where the report writes its figure.png; move it away"),
    Case("report-csv-huge-error", _corrupt_report(_edit_csv("error", "1e308")),
         r"errors.csv: line 2, column 'error': '1e308' is out of range; an error is a number from 0 to 1e\+150"),
    Case("report-csv-n-zero", _corrupt_report(_edit_csv("n", "0")),
         r"errors.csv: line 2, column 'n': '0' is out of range; n is a whole number of samples >= 1"),
    Case("report-csv-horizon-zero", _corrupt_report(_edit_csv("H", "0")),
         r"errors.csv: line 2, column 'H': '0' is out of range; H is the effective horizon 1 / \(1 - gamma\)"),
    Case("label-empty", lambda: rlrates.check(reference.plugin_q_pi, MDP, CLAIM, label=" ", **SMALL),
         r"`label` must be a non-empty string, got ' '"),
    Case("figure-width", lambda: _figure_width("wide"), r"figure width 'wide' must be 'column', 'page' or a number of inches"),
    Case("index-columns", lambda: _index_columns(["check", "time"]), r"index columns 'time' unknown; choose from check, test"),
    Case("claim-too-steep", lambda: rlrates.Claim(n=-400.0), r"`n` exponent must lie in \[-100, 100\]"),
    Case("data-unknown", _check_with(data="offline"), r"unknown `data` 'offline'; choose one of generative, transitions, "
         r"trajectories"),
    Case("behaviour-generative", _check_with(behaviour=np.full((6, 2), 0.5)),
         r"`behaviour` needs logged data: pass data='transitions' or data='trajectories'"),
    Case("coverage-generative", lambda: rlrates.check(reference.plugin_q_pi, MDP, rlrates.Claim(n=-0.5, coverage=0.5),
                                                      **SMALL), r"a `coverage` claim needs logged data"),
    Case("logged-target", _check_with(data="transitions", target="model"),
         r"target 'model' is not available with data='transitions'; choose one of q_pi, value"),
    Case("episode-length-transitions", _check_with(data="transitions", episode_length=8),
         r"`episode_length` needs data='trajectories'"),
    Case("episode-length-zero", _check_with(data="trajectories", episode_length=0),
         r"`episode_length` must be a positive integer, got 0"),
    Case("episode-length-too-long", _check_with(data="trajectories", episode_length=10**9),
         r"`episode_length` 1000000000 is longer than the smallest n of the grid, 128 transitions"),
    Case("behaviour-rows", _check_with(data="transitions", behaviour=np.full((6, 2), 0.7)), r"behaviour.*row"),
    Case("behaviour-never-covers", _check_with(data="transitions", behaviour=np.tile([0.0, 1.0], (6, 1))),
         r"never visits a state-action pair that the evaluation policy visits .* the concentrability coefficient is "
         r"infinite"),
    Case("value-not-a-number", lambda: _logged_value_message(lambda batch, problem: np.zeros(2)),
         r"the estimator returned shape \(2,\); return a float estimate of the value J\(pi\)"),
    Case("ground-truth-written", _ground_truth_written, r"changed during the check \(its fingerprint no longer matches"),
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
