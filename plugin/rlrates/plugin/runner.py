"""What the ``rlrates`` fixture returns: a runner that checks a claim with the session's settings.

:class:`RatesRunner` runs ``rlrates.check`` with the session's master seed, budget
and worker pool, writes the report folder when the session has a report directory,
attaches the check record to the test item, and turns a failing or inconclusive
check into a clean test failure (or skip) whose message ends with the command
that reproduces it (:func:`reproduce_command`). The numerical core is imported
on the first call, not when this module is imported.
"""

from __future__ import annotations

import os
import shlex
from typing import TYPE_CHECKING, Any

import pytest

from ..vocabulary import PROPERTY_NAME
from .identity import stream_identity
from .marker import MARKER, item_spec
from .settings import BUDGET_OPTION, SEED_OPTION, WORKERS_OPTION

if TYPE_CHECKING:  # pragma: no cover
    from ..claims import Claim
    from ..budgets import Budget
    from ..result import CheckResult
    from ..sweep import Estimator
    from .records import CheckRecord
    from .session import RatesSession

__all__ = ["SESSION_OWNED", "RatesRunner", "reproduce_command", "skip_reason"]

#: Check parameters the session owns; a test cannot override them through the fixture.
SESSION_OWNED = ("seed", "context", "reproducer", "executor")


def reproduce_command(config: pytest.Config, nodeid: str, seed: int, budget: str) -> str:
    """The shell command that reruns one test with the session's seed and budget."""
    file_part, sep, rest = nodeid.partition("::")
    path = config.rootpath / file_part
    try:
        shown = os.path.relpath(path, config.invocation_params.dir)
    except ValueError:  # another drive on Windows
        shown = str(path)
    target = shown.replace(os.sep, "/") + sep + rest
    return f"pytest {shlex.quote(target)} {SEED_OPTION}={seed} {BUDGET_OPTION}={budget}"


def expected_failure(item: pytest.Item) -> dict[str, Any] | None:
    """``{"status": "fail", "strict": ..., "reason": ...}`` when the item is marked xfail (condition true), else ``None``.

    A condition given as a string is not evaluated here: such a mark counts as expected only
    when pytest's own evaluation would not be needed (no conditions, or all of them true).
    """
    for mark in item.iter_markers("xfail"):
        conditions = mark.args or ((mark.kwargs["condition"],) if "condition" in mark.kwargs else ())
        if all(not isinstance(c, str) and bool(c) for c in conditions):
            strict = mark.kwargs.get("strict", item.config.getini("xfail_strict"))
            return {"status": "fail", "strict": bool(strict), "reason": str(mark.kwargs.get("reason", ""))}
    return None


def check_label(item: pytest.Item, given: str | None, count: int) -> str:
    """The check's short name: the one given (marker or call), else the test's name (function and parameters).

    A marker label on a parametrised test keeps the parameter id; the second and later checks of one
    test get ``#2``, ``#3``, ...
    """
    name = item.name
    params = name[name.index("["):] if "[" in name and name.endswith("]") else ""
    label = name if given is None else (given if given.endswith(params) else given + params)
    return label if count == 1 else f"{label}#{count}"


def skip_reason(record: CheckRecord, reproducer: str) -> str:
    """Why an inconclusive check skips its test (with ``--rlrates-inconclusive=skip``)."""
    from ..fit_words import fit_words

    fits = "; ".join(fit_words(fit) for fit in record.fits) or "nothing fitted"
    return (
        f"rlrates inconclusive within the {record.budget!r} budget: target {record.target} on {record.mdp} "
        f"({fits}); reproduce: {reproducer}"
    )


class RatesRunner:
    """The object the ``rlrates`` fixture returns; call it to run a check (see the fixture)."""

    def __init__(self, item: pytest.Item, session: RatesSession) -> None:
        self._item = item
        self._session = session
        #: Every CheckResult this test produced, in call order.
        self.results: list[CheckResult] = []

    @property
    def seed(self) -> int:
        """The session's master seed."""
        return self._session.settings.seed

    @property
    def budget(self) -> str:
        """The session's budget name (a marker or a call may choose another)."""
        return self._session.settings.budget

    @property
    def reproducer(self) -> str:
        """The command that reruns this test alone with the same seed and budget."""
        return reproduce_command(self._item.config, self._item.nodeid, self.seed, self.budget)

    def _report(self, result: CheckResult) -> None:
        """Keep the result; write its report folder when the session has a report directory."""
        self.results.append(result)
        settings = self._session.settings
        if settings.report_dir is not None:
            nodeid = self._item.nodeid
            test_id = nodeid if len(self.results) == 1 else f"{nodeid}#{len(self.results)}"
            self._session.write_report(result, test_id, expected=expected_failure(self._item),
                                       figure_width=settings.figure_width)

    def _refuse_session_owned(self, check_options: dict[str, Any]) -> None:
        __tracebackhide__ = True
        owned = sorted(set(check_options) & set(SESSION_OWNED))
        if owned:
            pytest.fail(
                f"rlrates: `{owned[0]}` is set by the session and cannot be passed to the fixture in "
                f"{self._item.nodeid}; use {SEED_OPTION} for the seed and {WORKERS_OPTION} for parallel sweeps",
                pytrace=False,
            )

    def __call__(
        self,
        estimator: Estimator,
        mdp: Any,
        claim: Claim | None = None,
        *,
        target: str | None = None,
        policy: Any = None,
        budget: str | Budget | None = None,
        label: str | None = None,
        **check_options: Any,
    ) -> CheckResult:
        __tracebackhide__ = True
        nodeid = self._item.nodeid
        spec = item_spec(self._item, self._session.markers)  # parsed and validated at collection
        claim = claim if claim is not None else spec.claim
        if claim is None:
            pytest.fail(
                f"rlrates: no claim to check in {nodeid}; pass one to the fixture, rlrates(estimator, mdp, "
                f"rlrates.Claim(n=-0.5)), or mark the test with @pytest.mark.{MARKER}(n=-0.5)",
                pytrace=False,
            )
        self._refuse_session_owned(check_options)
        for name in ("zero_level", "data", "behaviour"):
            if getattr(spec, name) is not None:
                check_options.setdefault(name, getattr(spec, name))
        from ..rate_check import check
        from ..result import CheckInterrupted

        settings = self._session.settings
        problem = ""
        try:
            result = check(
                estimator,
                mdp,
                claim,
                target=target or spec.target or "q_pi",
                policy=policy if policy is not None else spec.policy,
                budget=budget or spec.budget or settings.budget,
                seed=settings.seed,
                executor=self._session.executor(),
                context=stream_identity(self._item),
                reproducer=self.reproducer,
                label=check_label(self._item, label or spec.label, len(self.results) + 1),
                **check_options,
            )
        except (TypeError, ValueError) as exc:
            problem = f"rlrates: the check in {nodeid} could not run: {type(exc).__name__}: {exc}"
        except CheckInterrupted as interrupted:  # keep what was computed, then let pytest stop cleanly
            self._report(interrupted.result)
            raise
        if problem:  # failed outside the except block, so pytest shows no exception chain
            pytest.fail(problem, pytrace=False)
        self._report(result)
        return self._verdict(result)

    def _verdict(self, result: CheckResult) -> CheckResult:
        """Attach the record to the test; return a passing result, else fail (or skip) the test."""
        __tracebackhide__ = True
        from .records import CheckRecord

        record = CheckRecord.from_result(result, self._item.nodeid, self.reproducer,
                                         expected_failure(self._item) is not None)
        self._item.user_properties.append((PROPERTY_NAME, record.to_json()))
        if result.status == "pass":
            return result
        if result.status == "inconclusive" and self._session.settings.inconclusive == "skip":
            pytest.skip(skip_reason(record, result.run.reproducer))
        pytest.fail(result.message, pytrace=False)
