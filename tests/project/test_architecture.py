"""The package keeps the shape DEVELOPERS.md describes (common practice for layered codebases):

small modules and functions, no import cycle (at run time or for type checkers),
a numerics core that imports no pytest, one list of lazy exports, and docstrings
that point only at files that exist.
"""

from __future__ import annotations

import ast
import os
import re
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
PACKAGE = ROOT / "plugin" / "rlrates"
MAX_MODULE_LINES = 400
MAX_FUNCTION_LINES = 80
#: Files the plugin itself writes into report folders (named in docstrings, never in the repository).
WRITTEN_FILES = {"errors.csv", "check.json", "figure.png", "figure.pdf", "index.md", "index.tex"}


def _modules() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def _name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _functions(tree: ast.AST) -> Iterator[ast.FunctionDef | ast.AsyncFunctionDef]:
    for node in ast.walk(tree):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            yield node


def test_no_module_is_over_the_size_limit() -> None:
    sizes = {_name(p): len(p.read_text().splitlines()) for p in _modules()}
    assert {name: size for name, size in sizes.items() if size > MAX_MODULE_LINES} == {}


def _code_lines(function: ast.FunctionDef | ast.AsyncFunctionDef) -> int:
    """Lines of a function without its docstring (a full numpydoc docstring is welcome at any length)."""
    size = (function.end_lineno or function.lineno) - function.lineno + 1
    first = function.body[0]
    if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant) and isinstance(first.value.value, str):
        size -= (first.end_lineno or first.lineno) - first.lineno + 1
    return size


def test_no_function_is_over_the_size_limit() -> None:
    long = {}
    for path in _modules():
        for function in _functions(ast.parse(path.read_text())):
            size = _code_lines(function)
            if size > MAX_FUNCTION_LINES:
                long[f"{_name(path)}.{function.name}"] = size
    assert long == {}


def _imports(path: Path, known: set[str]) -> set[str]:
    """Every rlrates module ``path`` imports, anywhere (module level, functions, TYPE_CHECKING blocks)."""
    module = _name(path)
    package = module if path.name == "__init__.py" else module.rpartition(".")[0]
    found: set[str] = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.Import):
            found.update(alias.name for alias in node.names if alias.name in known)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                source = ".".join(base + ([node.module] if node.module else []))
            else:
                source = node.module or ""
            for alias in node.names:  # `from . import x` may name a submodule or an attribute of the package
                candidate = f"{source}.{alias.name}"
                found.add(candidate if candidate in known else source)
    return {name for name in found if name in known and name != module}


def _cycle(graph: dict[str, set[str]]) -> list[str] | None:
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(node: str) -> list[str] | None:
        state[node] = 1
        stack.append(node)
        for nxt in sorted(graph[node]):
            if state.get(nxt) == 1:
                return stack[stack.index(nxt):] + [nxt]
            if nxt not in state and (found := visit(nxt)):
                return found
        state[node] = 2
        stack.pop()
        return None

    for node in sorted(graph):
        if node not in state and (found := visit(node)):
            return found
    return None


def test_no_import_cycle_at_run_time_or_for_type_checkers() -> None:
    known = {_name(p) for p in _modules()}
    graph = {_name(p): _imports(p, known) for p in _modules()}
    assert graph["rlrates.rate_check"], "the import parser found nothing: it is broken"
    assert _cycle(graph) is None


def test_the_numerics_core_imports_no_pytest() -> None:
    offenders = []
    for path in _modules():
        if _name(path).startswith("rlrates.plugin"):
            continue
        for node in ast.walk(ast.parse(path.read_text())):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else (
                [node.module or ""] if isinstance(node, ast.ImportFrom) and not node.level else [])
            if any(name == "pytest" or name.startswith(("pytest.", "_pytest")) for name in names):
                offenders.append(_name(path))
    assert offenders == []


_LIGHT_CHECK = """
import sys
import rlrates
from rlrates import reference
mdp = rlrates.garnet(states=10, actions=2, branching=3, seed=0)
result = rlrates.check(reference.plugin_q_pi, mdp, rlrates.Claim(n=-0.5, horizon=2.0), {args})
assert result.status in ("pass", "fail", "inconclusive"), result.message
print(sorted(name for name in ("pandas", "scipy.stats") if name in sys.modules))
result.table  # the evidence tables become DataFrames when read, and only then
print("pandas" in sys.modules)
"""


@pytest.mark.parametrize("args", ["seed=0", "seed=1, data='transitions'"], ids=["generative", "logged"])
def test_a_check_imports_neither_pandas_nor_scipy_stats_until_its_tables_are_read(args: str) -> None:
    # the statistics path runs on numpy columns (rlrates.columns) and scipy.special's quantiles
    script = _LIGHT_CHECK.format(args=args)
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, check=False,
                          env={**os.environ, "PYTHONWARNINGS": "ignore"})
    assert done.returncode == 0, done.stderr
    assert done.stdout.split("\n")[:2] == ["[]", "True"], done.stdout


def test_lazy_exports_and_type_checking_imports_agree() -> None:
    tree = ast.parse((PACKAGE / "__init__.py").read_text())
    exports: dict[str, str] = {}
    typed: dict[str, str] = {}
    for node in ast.walk(tree):
        if isinstance(node, ast.AnnAssign) and getattr(node.target, "id", "") == "_EXPORTS":
            assert isinstance(node.value, ast.Dict)
            exports = {ast.literal_eval(k): ast.literal_eval(v) for k, v in zip(node.value.keys, node.value.values)
                       if k is not None}
        if isinstance(node, ast.If) and getattr(node.test, "id", "") == "TYPE_CHECKING":
            for item in node.body:
                assert isinstance(item, ast.ImportFrom) and item.level == 1 and item.module
                for alias in item.names:
                    assert alias.asname == alias.name, f"{alias.name}: re-export it as itself"
                    typed[alias.name] = item.module
    assert exports and exports == typed


def test_every_lazy_export_resolves() -> None:
    import rlrates

    for name in rlrates.__all__:
        assert getattr(rlrates, name) is not None


def _repository_files() -> set[str]:
    listed = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=False).stdout
    files = set(listed.split()) if listed else {str(p.relative_to(ROOT)) for p in ROOT.rglob("*") if p.is_file()}
    return files | {str(p.relative_to(ROOT)) for p in _modules()}


def test_docstrings_point_only_at_files_that_exist() -> None:
    files = _repository_files()
    basenames = {Path(f).name for f in files}
    pattern = re.compile(r"(?<![\w/.-])([\w/-]+\.(?:py|md|toml|json|csv|tex|png|pdf|txt|npz))\b")
    missing = []
    for path in _modules():
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, (ast.Module, ast.ClassDef, ast.FunctionDef, ast.AsyncFunctionDef)):
                for mention in pattern.findall(ast.get_docstring(node) or ""):
                    if mention in WRITTEN_FILES or mention in files or Path(mention).name in basenames:
                        continue
                    missing.append(f"{_name(path)}: {mention}")
    assert missing == []


def test_check_has_a_full_numpydoc_docstring() -> None:
    import inspect

    from rlrates.rate_check import check

    doc = inspect.getdoc(check) or ""
    for section in ("Parameters", "Returns", "Raises", "Examples"):
        assert re.search(rf"^{section}\n-+$", doc, flags=re.MULTILINE), section
    names = {name.strip() for line in re.findall(r"^([\w, ]+) :", doc, flags=re.MULTILINE) for name in line.split(",")}
    assert set(inspect.signature(check).parameters) <= names


def test_the_docstring_example_of_check_runs() -> None:
    import doctest

    from rlrates import rate_check

    finder = doctest.DocTestFinder()
    (test,) = [t for t in finder.find(rate_check) if t.name.endswith(".check")]
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS)
    runner.run(test)
    assert runner.summarize(verbose=False).failed == 0
    assert runner.summarize(verbose=False).attempted >= 3


@pytest.mark.parametrize("tier", ["numerics", "engine", "pytest_layer", "project"])
def test_tests_sit_in_tier_folders(tier: str) -> None:
    assert list((ROOT / "tests" / tier).glob("test_*.py")), f"no tests in tests/{tier}"
    assert not list((ROOT / "tests").glob("test_*.py")), "a test module outside the tier folders"
