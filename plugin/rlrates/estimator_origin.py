"""Where an estimator comes from: its import path, a hash of its source, the packages its module uses.

:func:`estimator_origin` describes an estimator for ``check.json`` (qualified
name, module, whether ``import module; module.qualname`` gives the same object
back, the sha256 of its source where :mod:`inspect` can find it, and the
versions of the installed distributions that the estimator's module imports, as
far as its globals show them). :func:`estimator_expression` is the Python text
that names the estimator in a pasteable reproducer, with the import line it
needs, or says plainly why it cannot be imported. Pure: no pytest, no I/O
beyond reading the estimator's source file.
"""

from __future__ import annotations

import functools
import hashlib
import importlib
import importlib.metadata
import inspect
import sys
import types
from collections.abc import Mapping
from typing import Any

__all__ = ["estimator_origin", "estimator_expression", "import_problem"]


def _unwrapped(estimator: Any) -> Any:
    """The function behind a ``functools.partial`` or a decorator (``__wrapped__``)."""
    while isinstance(estimator, functools.partial):
        estimator = estimator.func
    return inspect.unwrap(estimator) if callable(estimator) else estimator


def _names(estimator: Any) -> tuple[str, str]:
    """(module, qualified name); a callable instance is named by its class."""
    target = estimator if hasattr(estimator, "__qualname__") else type(estimator)
    return str(getattr(target, "__module__", "") or ""), str(getattr(target, "__qualname__", type(estimator).__name__))


def _resolve(module: str, qualname: str) -> Any:
    """``module.qualname`` looked up the way a reproducer would, or raise LookupError."""
    try:
        value: Any = importlib.import_module(module)
    except Exception as exc:  # any import failure means "cannot be imported"
        raise LookupError(f"module {module!r} cannot be imported ({type(exc).__name__})") from None
    for part in qualname.split("."):
        if not hasattr(value, part):
            raise LookupError(f"{module!r} has no attribute path {qualname!r}")
        value = getattr(value, part)
    return value


def import_problem(estimator: Any) -> str | None:
    """Why ``import module; module.qualname`` does not give ``estimator`` back, or ``None`` when it does."""
    if isinstance(estimator, functools.partial):
        return "it is a functools.partial; name the function and its arguments in the reproducer yourself"
    module, qualname = _names(estimator)
    if "<lambda>" in qualname:
        return "it is a lambda; give it a name at module level to rerun the check from Python"
    if "<locals>" in qualname:
        return f"`{qualname}` is defined inside a function; define it at module level to rerun the check from Python"
    if not module or module == "__main__":
        return f"it is defined in the script that ran ({module or 'no module'}), which another process cannot import"
    if not hasattr(estimator, "__qualname__"):
        return f"it is an instance of `{module}.{qualname}`; build the same instance to rerun the check"
    try:
        found = _resolve(module, qualname)
    except LookupError as exc:
        return str(exc)
    return None if found is estimator else f"`{module}.{qualname}` is another object than the estimator that ran"


def estimator_expression(estimator: Any) -> tuple[str, str]:
    """(import line, expression) naming the estimator in a reproducer.

    ``("import pkg.mod", "pkg.mod.name")`` when the estimator can be imported
    again; otherwise ``("", "<qualname: why it cannot be imported>")``, which is
    not valid Python on purpose: pasting it fails at once with the reason shown.
    """
    module, qualname = _names(estimator)
    problem = import_problem(estimator)
    if problem is None:
        return f"import {module}", f"{module}.{qualname}"
    return "", f"<{qualname}: cannot be imported, {problem}>"


def _source_sha256(estimator: Any) -> str | None:
    function = _unwrapped(estimator)
    code = getattr(function, "__code__", None)
    return _code_source_sha256(code) if code is not None else _hash_source(function)


@functools.lru_cache(maxsize=256)
def _code_source_sha256(code: types.CodeType) -> str | None:
    """The source hash of the code that runs (read once per code object: finding a function's source tokenizes its file)."""
    return _hash_source(code)


def _hash_source(function: Any) -> str | None:
    try:
        source = inspect.getsource(function)
    except (OSError, TypeError):
        return None
    return hashlib.sha256(source.encode("utf-8")).hexdigest()


def _top_packages(module: types.ModuleType) -> set[str]:
    """Top-level package names that ``module``'s globals show it imported (modules, and objects from modules)."""
    found = set()
    for value in vars(module).values():
        name: Any = value.__name__ if isinstance(value, types.ModuleType) else (
            getattr(value, "__module__", None) if callable(value) else None)
        if isinstance(name, str) and name:
            found.add(name.split(".")[0])
    return found


@functools.lru_cache(maxsize=1)
def _distributions() -> Mapping[str, list[str]]:
    """Top-level package -> installed distributions (read once per process: it scans every installed package)."""
    return importlib.metadata.packages_distributions()


@functools.lru_cache(maxsize=512)
def _version(distribution: str) -> str | None:
    """An installed distribution's version (read once per process: each read parses its metadata file)."""
    try:
        return importlib.metadata.version(distribution)
    except importlib.metadata.PackageNotFoundError:  # pragma: no cover - a stale mapping
        return None


def _package_versions(module_name: str) -> dict[str, str]:
    """Versions of the installed distributions behind the packages the module imports (its own included)."""
    module = sys.modules.get(module_name)
    if module is None:
        return {}
    tops = _top_packages(module) | {module_name.split(".")[0]}
    owners = _distributions()
    versions: dict[str, str] = {}
    for top in sorted(tops):
        for distribution in owners.get(top, []):
            version = _version(distribution)
            if version is not None:
                versions[distribution] = version
    return dict(sorted(versions.items()))


def estimator_origin(estimator: Any) -> dict[str, Any]:
    """The estimator's identity for ``check.json``: name, module, importability, source hash, package versions."""
    module, qualname = _names(estimator)
    function = _unwrapped(estimator)
    try:
        source_file = inspect.getsourcefile(function)
    except TypeError:
        source_file = None
    problem = import_problem(estimator)
    return {
        "qualname": qualname,
        "module": module,
        "importable": problem is None,
        "import_problem": problem or "",
        "source_file": source_file,
        "source_sha256": _source_sha256(estimator),
        "packages": _package_versions(module),
    }
