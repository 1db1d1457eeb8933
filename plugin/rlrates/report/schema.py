"""``check.json``: the content of a check's record, built from a result and validated when read back.

Top-level keys (schema ``rlrates-check/3``)::

    schema        "rlrates-check/3"
    test_id       the pytest node id (or any id the caller gives)
    label         the check's short name in reports (given, or the last part of test_id)
    expected      "fail" when the test was marked xfail (``strict`` says whether strictly), else "pass"
    estimator     {qualname, module, importable, import_problem, source_file, source_sha256,
                  packages {distribution: version} of what the estimator's module imports}
    status        "pass" | "fail" | "inconclusive" | "error"
    fired         sub-tests that fired: "rate", "floor", "horizon"
    reasons       why the verdict, one sentence per item
    notes         remarks (cells left out of the fits, where the H-exponent was fitted, ...)
    claim         {n, horizon, text}: the claimed exponents (null when not claimed)
    target, norm  what was estimated and how its error was measured
    fits          one Fit.to_dict() per claimed factor: factor, exponent, se, low, high,
                  low_level, high_level, claimed, tolerance, detectable, verdict
    bounds        what low and high mean (one-sided bounds at the levels low_level, high_level)
    slopes        the per-discount n-slopes: gamma, H, points, state, and for fitted
                  discounts n_min, n_max, slope, slope_se, upper_slope, upper_se
    cells         one entry per (gamma, n) cell of the last decision: gamma, n,
                  replicates, mean, usable (asymptotic and not saturated), zero (error
                  vanished), fitted (entered an n-fit), left_out (why not; "" when fitted)
    budget       every field of the Budget (dataclasses.asdict)
    seed          the master seed
    streams       how every replicate's random stream is built: context, key layout,
                  per-discount spawn-key prefixes, replicate blocks
    mdp           {name, metadata, fingerprints {repr(gamma): hex}, scales {repr(gamma): error scale}}
    run           {started, finished (UTC ISO 8601), elapsed_seconds, estimator_seconds,
                  passes, estimator_calls (the rows, plus a call that raised or returned an invalid estimate)}
    environment   {versions {rlrates, python, numpy, scipy, pandas, pytest, matplotlib},
                  platform, python, implementation, machine, git_commit}; gymnasium's
                  version too when the MDP was imported from a gymnasium environment
    failure       null, or {gamma, n, replicate, kind, message, traceback, description}
    reproducer    the call that reproduces the check
    message       the check's full explanation
    data          {errors: "errors.csv", rows, columns, sha256 of the CSV text}
    extra         whatever the caller adds (for example the pytest-xdist worker)

:func:`check_record` builds the record; :func:`read_record` reads one back and
checks every key the report code relies on, so a hand-edited file is refused
with the file and the key named; :func:`record_fit` gives a record's fit of one
factor back as a :class:`rlrates.result.Fit`. Pure: no pytest import.
"""

from __future__ import annotations

import dataclasses
import json
from collections.abc import Mapping
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..claims import MAX_EXPONENT as CLAIM_MAX_EXPONENT
from ..result import FIT_KEYS, Fit
from ..vocabulary import ERROR_COLUMNS, FAILURE_KINDS, NORMS, STATUSES, SUBTEST_NAMES, TARGETS, Factor
from .files import ERRORS_FILE, ReportError, read_text
from .table import MAX_ERROR
from .provenance import environment, frame_records, json_safe, package_version, streams

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from ..result import CheckResult

__all__ = ["SCHEMA", "CELL_KEYS", "MAX_EXPONENT", "default_label", "record_label", "check_record", "record_text", "read_record",
           "record_fit"]

#: Version tag of ``check.json``; readers refuse other versions.
SCHEMA = "rlrates-check/3"

#: Largest size of a claimed or fitted exponent a record may hold (a figure draws n^exponent
#: over the grid, which stays within float64 up to here).
MAX_EXPONENT = CLAIM_MAX_EXPONENT

_NUMBER = (int, float)
_OPTIONAL_NUMBER = (int, float, type(None))

#: The keys of one entry of ``cells``, with the JSON types each may take.
CELL_KEYS: tuple[tuple[str, type | tuple[type, ...]], ...] = (
    ("gamma", _NUMBER), ("n", int), ("replicates", int), ("mean", _OPTIONAL_NUMBER),
    ("usable", bool), ("zero", bool), ("fitted", bool), ("left_out", str),
)

_REQUIRED: tuple[tuple[str, type | tuple[type, ...]], ...] = (
    ("schema", str), ("test_id", str), ("status", str), ("target", str), ("norm", str),
    ("claim", dict), ("claim.n", _OPTIONAL_NUMBER), ("claim.horizon", _OPTIONAL_NUMBER),
    ("fits", list), ("slopes", list), ("cells", list), ("fired", list), ("mdp", dict), ("mdp.name", str),
    ("budget", dict), ("budget.name", str), ("seed", int), ("data", dict), ("data.sha256", str),
)


# --------------------------------------------------------------------------- building


def _cells(summary: "pd.DataFrame") -> list[dict[str, Any]]:
    """One entry per (gamma, n) cell of the decision's summary (``[]`` when no pass was decided)."""
    if not len(summary):
        return []
    return frame_records(summary.loc[:, [key for key, _ in CELL_KEYS]])


def _failure(result: "CheckResult") -> dict[str, Any] | None:
    failure = result.failure
    if failure is None:
        return None
    return {
        "gamma": float(failure.gamma), "n": int(failure.n), "replicate": int(failure.replicate),
        "kind": failure.kind, "message": failure.message, "traceback": failure.traceback,
        "description": failure.describe(),
    }


def _by_discount(values: Mapping[float, Any]) -> dict[str, Any]:
    return {repr(float(gamma)): json_safe(value) for gamma, value in sorted(values.items())}


def _run(result: "CheckResult", rows: int) -> dict[str, Any]:
    finished = datetime.now(timezone.utc)
    started = finished - timedelta(seconds=float(result.run.elapsed))
    return {
        "started": started.isoformat(timespec="microseconds"),
        "finished": finished.isoformat(timespec="microseconds"),
        "elapsed_seconds": float(result.run.elapsed),
        "estimator_seconds": float(result.run.estimator_seconds),
        "passes": int(result.run.passes),
        "estimator_calls": result.estimator_calls,
    }


def default_label(test_id: str) -> str:
    """A check's short name from its id: the part after the last ``::`` (the test function), without a path."""
    return test_id.rsplit("::", 1)[-1].rsplit("/", 1)[-1] or test_id


def record_label(record: Mapping[str, Any]) -> str:
    """The short name of a (validated) record's check."""
    label = record.get("label")
    return label if isinstance(label, str) and label else default_label(str(record["test_id"]))


def _environment(result: "CheckResult") -> dict[str, Any]:
    found = environment()
    if result.mdp.metadata.get("source") == "gymnasium":
        found["versions"]["gymnasium"] = package_version("gymnasium")
    return found


def check_record(result: "CheckResult", test_id: str, errors_sha256: str, rows: int,
                 extra: Mapping[str, Any] | None = None, expected: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """The content of ``check.json`` for one check (see the module docstring for the keys).

    ``expected`` is ``{"status": "fail", "strict": bool, "reason": str}`` for a
    test marked xfail, else ``None`` (expected to pass).
    """
    return {
        "schema": SCHEMA,
        "test_id": test_id,
        "label": result.run.label or default_label(test_id),
        "expected": json_safe(dict(expected)) if expected else {"status": "pass", "strict": False, "reason": ""},
        "estimator": json_safe(dict(result.run.estimator)),
        "status": result.status,
        "fired": list(result.fired),
        "reasons": list(result.reasons),
        "notes": list(result.notes),
        "claim": {"n": result.claim.n, "horizon": result.claim.horizon, "coverage": result.claim.coverage,
                  "text": result.claim.describe()},
        "target": result.target,
        "data_regime": result.data_regime,
        "norm": result.norm,
        "fits": [fit.to_dict() for fit in result.factors],
        "bounds": {
            "low": "fire-side one-sided bound at level low_level = 1 - alpha / (number of sub-tests)",
            "high": "pass-side one-sided bound at level high_level = 1 - budget.pass_alpha",
        },
        "slopes": frame_records(result.evidence.slopes),
        "cells": _cells(result.evidence.summary),
        "budget": json_safe(dataclasses.asdict(result.budget)),
        "seed": int(result.seed),
        "streams": streams(result),
        "mdp": {
            "name": result.mdp.name,
            "metadata": json_safe(result.mdp.metadata),
            "fingerprints": _by_discount(result.mdp.fingerprints),
            "scales": _by_discount(result.mdp.scales),
        },
        "run": _run(result, rows),
        "environment": _environment(result),
        "failure": _failure(result),
        "reproducer": result.run.reproducer,
        "message": result.message,
        "data": {"errors": ERRORS_FILE, "rows": rows, "columns": list(ERROR_COLUMNS), "sha256": errors_sha256},
        "extra": json_safe(dict(extra or {})),
    }


def record_text(record: Mapping[str, Any]) -> str:
    """The text of ``check.json``: indented, strict JSON (no NaN), UTF-8 kept as is."""
    return json.dumps(record, indent=2, allow_nan=False, ensure_ascii=False) + "\n"


# --------------------------------------------------------------------------- validating


def _lookup(record: Mapping[str, Any], dotted: str) -> tuple[bool, Any]:
    value: Any = record
    for part in dotted.split("."):
        if not isinstance(value, Mapping) or part not in value:
            return False, None
        value = value[part]
    return True, value


def _has_type(value: Any, kinds: type | tuple[type, ...]) -> bool:
    """``isinstance``, except that a JSON true/false is not a number."""
    allowed = kinds if isinstance(kinds, tuple) else (kinds,)
    if isinstance(value, bool):
        return bool in allowed
    return isinstance(value, allowed)


def _check_keys(path: Path, record: Mapping[str, Any]) -> None:
    for key, kinds in _REQUIRED:
        found, value = _lookup(record, key)
        if not found:
            raise ReportError(f"{path}: missing key {key!r}")
        if not _has_type(value, kinds):
            raise ReportError(f"{path}: key {key!r} has the wrong type ({type(value).__name__}: {value!r})")
    if record["schema"] != SCHEMA:
        raise ReportError(f"{path}: schema {record['schema']!r} is not {SCHEMA!r}; rewrite it with this version of rlrates")
    if record["status"] not in STATUSES:
        raise ReportError(f"{path}: status {record['status']!r} is not one of {', '.join(STATUSES)}")


def _entries(path: Path, record: Mapping[str, Any], key: str, needed: tuple[str, ...]) -> list[Mapping[str, Any]]:
    """The objects of the list ``record[key]``, each holding the keys ``needed``."""
    entries = record[key]
    for i, entry in enumerate(entries):
        if not isinstance(entry, dict):
            raise ReportError(f"{path}: {key}[{i}] must be an object, found {type(entry).__name__}")
        for name in needed:
            if name not in entry:
                raise ReportError(f"{path}: missing key '{key}[{i}].{name}'")
    return list(entries)


def _check_entries(path: Path, record: Mapping[str, Any]) -> None:
    """Every fit reads back as a :class:`Fit`; every cell and slope has its keys, of the right types."""
    for i, fit in enumerate(_entries(path, record, "fits", FIT_KEYS)):
        try:
            Fit.from_dict(fit)
        except ValueError as exc:
            raise ReportError(f"{path}: fits[{i}]: {exc}") from None
    for i, cell in enumerate(_entries(path, record, "cells", tuple(key for key, _ in CELL_KEYS))):
        for name, kinds in CELL_KEYS:
            if not _has_type(cell[name], kinds):
                raise ReportError(f"{path}: cells[{i}].{name} has the wrong type ({cell[name]!r})")
    for i, slope in enumerate(_entries(path, record, "slopes", ("gamma", "state"))):
        if not _has_type(slope["gamma"], _NUMBER) or not _has_type(slope.get("slope"), _OPTIONAL_NUMBER):
            raise ReportError(f"{path}: slopes[{i}] needs a number gamma and a number (or null) slope")


def _no_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a JSON number (rlrates writes strict JSON: no NaN or Infinity)")


def _refuse(path: Path, key: str, value: Any, valid: str) -> None:
    raise ReportError(f"{path}: {key} is {value!r}; {valid}")


def _check_claim(path: Path, record: Mapping[str, Any]) -> None:
    """The claim as :class:`rlrates.Claim` takes it, with exponents a figure can draw; fits claim the same."""
    n, horizon = record["claim"]["n"], record["claim"]["horizon"]
    if n is not None and not -MAX_EXPONENT <= n < 0:
        _refuse(path, "claim.n", n, f"a claimed n-exponent is a negative number, at least -{MAX_EXPONENT:g}, or null")
    if horizon is not None and not -MAX_EXPONENT <= horizon <= MAX_EXPONENT:
        _refuse(path, "claim.horizon", horizon, f"a claimed H-exponent is a number from -{MAX_EXPONENT:g} to "
                f"{MAX_EXPONENT:g}, or null")
    coverage = record["claim"].get("coverage")  # records of checks before the coverage factor have no such key
    if coverage is not None and (isinstance(coverage, bool) or not isinstance(coverage, (int, float))
                                 or not -MAX_EXPONENT <= coverage <= MAX_EXPONENT):
        _refuse(path, "claim.coverage", coverage, f"a claimed C-exponent is a number from -{MAX_EXPONENT:g} to "
                f"{MAX_EXPONENT:g}, or null")
    if n is None and horizon is None and coverage is None:
        _refuse(path, "claim", record["claim"], "a claim has an n-, an H- or a C-exponent")
    for i, fit in enumerate(record["fits"]):
        for key in ("exponent", "claimed"):
            if fit[key] is not None and not -MAX_EXPONENT <= fit[key] <= MAX_EXPONENT:
                _refuse(path, f"fits[{i}].{key}", fit[key], f"an exponent is a number from -{MAX_EXPONENT:g} to "
                        f"{MAX_EXPONENT:g}, or null")
        if fit["claimed"] != record["claim"].get(fit["factor"]):
            _refuse(path, f"fits[{i}].claimed", fit["claimed"],
                    f"it must be the claim's {fit['factor']}-exponent, {record['claim'].get(fit['factor'])!r}")


def _check_failure(path: Path, failure: Any) -> None:
    """``failure`` is null or an object naming the cell and the kind of failure."""
    if failure is None:
        return
    valid = ("null, or an object with gamma (in (0, 1)), n (>= 1), replicate (>= 0), "
             f"kind (one of {', '.join(FAILURE_KINDS)}) and message")
    if not isinstance(failure, dict):
        _refuse(path, "failure", failure, valid)
    checks = (("gamma", lambda v: _has_type(v, _NUMBER) and 0 < v < 1), ("n", lambda v: _has_type(v, int) and v >= 1),
              ("replicate", lambda v: _has_type(v, int) and v >= 0), ("kind", lambda v: v in FAILURE_KINDS),
              ("message", lambda v: isinstance(v, str)))
    for key, valid_value in checks:
        if key not in failure or not valid_value(failure[key]):
            _refuse(path, f"failure.{key}", failure.get(key), f"failure must be {valid}")


def _check_values(path: Path, record: Mapping[str, Any]) -> None:
    """Values in range: words from the vocabulary, discounts in (0, 1), n >= 1, means >= 0."""
    if record["target"] not in TARGETS:
        _refuse(path, "target", record["target"], f"choose one of {', '.join(TARGETS)}")
    if record["norm"] not in NORMS:
        _refuse(path, "norm", record["norm"], f"choose one of {', '.join(NORMS)}")
    for i, name in enumerate(record["fired"]):
        if name not in SUBTEST_NAMES:
            _refuse(path, f"fired[{i}]", name, f"a sub-test is one of {', '.join(SUBTEST_NAMES)}")
    if record["seed"] < 0:
        _refuse(path, "seed", record["seed"], "the master seed is an integer >= 0")
    _check_claim(path, record)
    _check_failure(path, record.get("failure"))
    for i, cell in enumerate(record["cells"]):
        for key, ok, valid in (("gamma", 0 < cell["gamma"] < 1, "a discount lies in (0, 1)"),
                               ("n", cell["n"] >= 1, "n is a whole number of samples >= 1"),
                               ("replicates", cell["replicates"] >= 0, "a count of replicates is >= 0"),
                               ("mean", cell["mean"] is None or 0 <= cell["mean"] <= MAX_ERROR,
                                f"a mean error is a number from 0 to {MAX_ERROR:g}, or null")):
            if not ok:
                _refuse(path, f"cells[{i}].{key}", cell[key], valid)
    for i, slope in enumerate(record["slopes"]):
        if not 0 < slope["gamma"] < 1:
            _refuse(path, f"slopes[{i}].gamma", slope["gamma"], "a discount lies in (0, 1)")


def read_record(path: Path) -> dict[str, Any]:
    """Read and validate one ``check.json``; a :class:`ReportError` names the file, the key at fault and
    what would be valid."""
    text = read_text(path)
    try:
        record = json.loads(text, parse_constant=_no_constant)
    except json.JSONDecodeError as exc:
        raise ReportError(f"{path}: not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})") from None
    except (ValueError, RecursionError) as exc:
        raise ReportError(f"{path}: not valid JSON ({exc if isinstance(exc, ValueError) else 'nested too deeply'})") from None
    if not isinstance(record, dict):
        raise ReportError(f"{path}: expected a JSON object at the top level, found {type(record).__name__}")
    _check_keys(path, record)
    _check_entries(path, record)
    _check_values(path, record)
    return record


def record_fit(record: Mapping[str, Any], factor: Factor) -> Fit | None:
    """The fit of ``factor`` in a (validated) record, or ``None`` when it has none."""
    return next((Fit.from_dict(fit) for fit in record["fits"] if fit["factor"] == factor), None)
