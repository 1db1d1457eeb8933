"""Tests of what a check records about its estimator (check.json's ``estimator``) and of its Python reproducer.

The reproducer is checked the way a reader uses it: pasted into a fresh Python
process, where it must run the same check and give the same numbers (every
stream derives from the seed, so the exponent is bit-identical). Checks here use
the ci budget on a 10-state Garnet: about a second each, seeded, deterministic.
"""

from __future__ import annotations

import ast
import hashlib
import importlib.metadata
import inspect
import json
import subprocess
import sys
import textwrap
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import rlrates
from rlrates import reference
from rlrates.estimator_origin import estimator_expression, estimator_origin, import_problem
from rlrates.report import read_check, write_check

LAB_MODULE = '''
import numpy as np
from rlrates import reference


def plug_in(batch, problem):
    """The plug-in evaluator, as a lab's own module would hold it."""
    return reference.plugin_q_pi(batch, problem)
'''

#: Runs the pasted reproducer and prints the check's status and n-exponent (repr, so every digit).
RUNNER = textwrap.dedent('''
    import ast, sys
    tree = ast.parse(sys.stdin.read())
    *statements, last = tree.body
    exec(compile(ast.Module(statements, []), "<reproducer>", "exec"))
    result = eval(compile(ast.Expression(last.value), "<reproducer>", "eval"))
    print(result.status, repr(result.fit("n").exponent))
''')


def run_pasted(reproducer: str, path: Path | None = None) -> list[str]:
    env_path = [str(path)] if path else []
    done = subprocess.run([sys.executable, "-c", RUNNER], input=reproducer, capture_output=True, text=True, timeout=120,
                          env={"PYTHONPATH": ":".join(env_path + sys.path[1:]), "PATH": "/usr/bin:/bin"})
    assert done.returncode == 0, done.stderr
    return done.stdout.split()


@pytest.fixture()
def lab(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Any:
    """A module ``labmod`` on sys.path, imported under another name as a user would (``import labmod as E``)."""
    (tmp_path / "labmod.py").write_text(LAB_MODULE, encoding="utf-8")
    monkeypatch.syspath_prepend(str(tmp_path))
    import labmod as E  # type: ignore[import-not-found]

    yield E
    sys.modules.pop("labmod", None)


def test_reproducer_of_a_module_estimator_pastes_and_runs(lab: Any, tmp_path: Path) -> None:
    mdp = rlrates.garnet(10, 2, 3, seed=1)
    result = rlrates.check(lab.plug_in, mdp, rlrates.Claim(n=-0.5), seed=5)
    reproducer = result.run.reproducer
    assert reproducer.startswith("import rlrates; import labmod; rlrates.check(labmod.plug_in, rlrates.garnet(")
    ast.parse(reproducer)  # valid Python as printed
    status, exponent = run_pasted(reproducer, tmp_path)
    fit = result.fit("n")
    assert fit is not None and (status, exponent) == (result.status, repr(fit.exponent))


def test_reproducer_of_a_locally_defined_estimator_says_it_cannot_be_imported() -> None:
    def stale(batch: Any, problem: Any) -> np.ndarray:
        return reference.plugin_q_pi(batch, problem)

    imported, name = estimator_expression(stale)
    assert imported == ""
    assert name.startswith("<test_reproducer_of_a_locally_defined_estimator_says_it_cannot_be_imported.<locals>.stale: "
                           "cannot be imported, ")
    assert "defined inside a function; define it at module level" in name
    assert estimator_origin(stale)["importable"] is False
    assert "it is a lambda" in str(import_problem(lambda b, p: None))


def test_reproducer_says_plainly_when_the_mdp_cannot_be_rebuilt() -> None:
    mdp = rlrates.TabularMDP(np.array(rlrates.garnet(6, 2, 3, seed=0).P), np.full((6, 2), 0.5), name="my-lab-mdp")
    result = rlrates.check(reference.plugin_q_pi, mdp, rlrates.Claim(n=-0.5), n_grid=(256, 512, 1024), replicates=4)
    assert ("rlrates.check(rlrates.reference.plugin_q_pi, <the MDP 'my-lab-mdp': not rebuildable from its metadata, "
            "build it as before>, ") in result.run.reproducer


def test_check_json_names_the_estimator_its_source_and_its_packages(lab: Any, tmp_path: Path) -> None:
    result = rlrates.check(lab.plug_in, rlrates.garnet(10, 2, 3, seed=1), rlrates.Claim(n=-0.5), seed=5)
    saved = read_check(write_check(result, tmp_path / "report", "t.py::test_lab", figures=False))
    estimator = saved.record["estimator"]
    assert (estimator["qualname"], estimator["module"], estimator["importable"]) == ("plug_in", "labmod", True)
    assert estimator["source_sha256"] == hashlib.sha256(inspect.getsource(lab.plug_in).encode()).hexdigest()
    assert estimator["source_file"] == str(tmp_path / "labmod.py")
    # labmod imports numpy and rlrates: their installed versions (importlib.metadata) are recorded
    assert estimator["packages"]["numpy"] == importlib.metadata.version("numpy")
    assert estimator["packages"]["pytest-rlrates"] == importlib.metadata.version("pytest-rlrates")
    assert saved.record["label"] == "test_lab"


def test_gymnasium_version_is_recorded_for_an_imported_environment(tmp_path: Path) -> None:
    gymnasium = pytest.importorskip("gymnasium")
    env = gymnasium.make("FrozenLake-v1", is_slippery=True)
    mdp = rlrates.from_gymnasium(env)
    result = rlrates.check(reference.plugin_q_pi, mdp, rlrates.Claim(n=-0.5), seed=5, n_grid=(256, 512, 1024),
                           gammas=(0.5, 0.75), replicates=4)
    record = json.loads((write_check(result, tmp_path, "t::gym", figures=False) / "check.json").read_text())
    assert record["environment"]["versions"]["gymnasium"] == importlib.metadata.version("gymnasium")


def test_an_error_check_counts_the_call_that_returned_an_invalid_estimate(tmp_path: Path) -> None:
    """One call, one invalid return: "1 estimator calls", not 0 (issue 13)."""
    def wrong_shape(batch: Any, problem: Any) -> np.ndarray:
        return np.zeros(3)

    result = rlrates.check(wrong_shape, rlrates.garnet(10, 2, 3, seed=1), rlrates.Claim(n=-0.5))
    assert result.status == "error" and len(result.table) == 0
    assert result.estimator_calls == 1
    assert ", 1 estimator calls," in result.message
    record = read_check(write_check(result, tmp_path, "t::err", figures=False)).record
    assert record["run"]["estimator_calls"] == 1
