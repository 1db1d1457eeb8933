"""The ``rlrates`` marker: validating and merging its arguments, and reading the markers of a test item.

``@pytest.mark.rlrates(claim=None, *, n=None, horizon=None, coverage=None, target=None, budget=None,
suite=None, mdps=None, policy=None, zero_level=None, label=None, data=None, behaviour=None)``: the claim under test (an
``rlrates.Claim``, or its exponents ``n=`` / ``horizon=`` / ``coverage=``), defaults for the ``rlrates``
fixture (target, budget, policy: an (S, A) array or a callable ``mdp -> policy`` applied to
each MDP; zero_level: the error that counts as zero), the MDPs of ``rlrates_mdp`` (``suite=``
narrows the standard suite to member names or tags; ``mdps=`` replaces it with a list or a dict
``{id: mdp}``), and ``label=``, the check's short name in reports (default: the test function's name).

:func:`parse_marker` and :func:`merge_specs` are plain functions of the marker's
arguments. The pytest layer validates every marker at collection, so a bad argument
is reported before any estimator runs: a :class:`MarkerReader` parses each marker
once per session, and collection keeps each item's merged :class:`MarkerSpec` in the
item's stash under :data:`ITEM_SPEC`, where the ``rlrates`` fixture reads it.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import pytest

if TYPE_CHECKING:  # pragma: no cover
    from ..claims import Claim
    from ..budgets import Budget
    from ..suite import SuiteMember

__all__ = [
    "MARKER", "MARKER_KEYWORDS", "MARKER_HELP", "MarkerError", "MarkerSpec", "parse_marker", "merge_specs",
    "MarkerReader", "ITEM_SPEC", "item_spec",
]

MARKER = "rlrates"
#: The marker's line in ``pytest --markers``.
MARKER_HELP = (
    "rlrates(claim=None, *, n=None, horizon=None, coverage=None, target=None, budget=None, suite=None, mdps=None, "
    "policy=None, zero_level=None, label=None, data=None, behaviour=None): the rate claim under test (an "
    "rlrates.Claim, or its exponents as n=, horizon= and coverage=) plus defaults for the `rlrates` fixture (target, budget, policy: an (S, A) array or a "
    "callable mdp -> policy, zero_level: the error that counts as zero); suite= narrows the standard "
    "MDP suite of `rlrates_mdp` to member names or tags, mdps= replaces it with your own MDPs "
    "(a list, or a dict {id: mdp}); label= names the check in reports (default: the test function's name); "
    "data= ('generative', 'transitions' or 'trajectories') and behaviour= (the logging policy) choose logged data."
)


class MarkerError(ValueError):
    """A ``@pytest.mark.rlrates`` argument is unusable; the message names it and the test."""


MARKER_KEYWORDS = ("claim", "n", "horizon", "coverage", "target", "budget", "suite", "mdps", "policy", "zero_level",
                   "label", "data", "behaviour")


@dataclass(frozen=True)
class MarkerSpec:
    """What one or more ``rlrates`` markers say; ``None`` means "not said"."""

    claim: Claim | None = None
    target: str | None = None
    budget: str | Budget | None = None
    members: tuple[SuiteMember, ...] | None = None
    policy: Any = None
    zero_level: float | None = None
    label: str | None = None
    data: str | None = None
    behaviour: Any = None


def _bad(where: str, text: str) -> MarkerError:
    return MarkerError(f"@pytest.mark.{MARKER} on {where}: {text}")


def parse_marker(args: tuple[Any, ...], kwargs: Mapping[str, Any], where: str) -> MarkerSpec:
    """Validate one marker's arguments; raise :class:`MarkerError` naming the first bad one."""
    unknown = [key for key in kwargs if key not in MARKER_KEYWORDS]
    if unknown:
        import difflib

        close = difflib.get_close_matches(unknown[0], MARKER_KEYWORDS, n=1)
        hint = f" (did you mean `{close[0]}`?)" if close else ""
        raise _bad(where, f"unknown keyword `{unknown[0]}`{hint}; known: {', '.join(MARKER_KEYWORDS)}")
    if len(args) > 1:
        raise _bad(where, f"takes at most one positional argument (the claim), got {len(args)}: {args!r}")
    if args and "claim" in kwargs:
        raise _bad(where, "the claim is given twice, positionally and as `claim=`")
    from ..claims import Claim
    from ..budgets import BUDGETS, Budget
    from ..suite import SuiteError, custom_members, select_members

    claim = args[0] if args else kwargs.get("claim")
    exponents = {key: kwargs[key] for key in ("n", "horizon", "coverage") if key in kwargs}
    if claim is not None and exponents:
        raise _bad(where, f"give either `claim` or the exponents {' and '.join(f'`{k}=`' for k in exponents)}, not both")
    if claim is not None and not isinstance(claim, Claim):
        raise _bad(where, f"`claim` must be an rlrates.Claim, got {claim!r} of type {type(claim).__name__}")
    if exponents:
        try:
            claim = Claim(n=exponents.get("n", -0.5 if "coverage" in exponents else None),
                          horizon=exponents.get("horizon"), coverage=exponents.get("coverage"))
        except (TypeError, ValueError) as exc:
            raise _bad(where, f"bad exponent: {exc}") from None
    target = kwargs.get("target")
    if target is not None:
        from ..targets import validate_target

        try:
            target = validate_target(target)
        except ValueError as exc:
            raise _bad(where, str(exc)) from None
    budget = kwargs.get("budget")
    if budget is not None and not isinstance(budget, Budget) and (not isinstance(budget, str) or budget not in BUDGETS):
        raise _bad(where, f"unknown `budget` {budget!r}; choose one of {', '.join(BUDGETS)} or pass an rlrates.Budget")
    data = kwargs.get("data")
    if data is not None:
        from ..vocabulary import DATA_REGIMES

        if data not in DATA_REGIMES:
            raise _bad(where, f"unknown `data` {data!r}; choose one of {', '.join(DATA_REGIMES)}")
    label = kwargs.get("label")
    if label is not None and (not isinstance(label, str) or not label.strip()):
        raise _bad(where, f"`label` must be a non-empty string, got {label!r}")
    if kwargs.get("suite") is not None and kwargs.get("mdps") is not None:
        raise _bad(where, "give `suite=` (narrow the standard suite) or `mdps=` (replace it), not both")
    members: tuple[SuiteMember, ...] | None = None
    try:
        if kwargs.get("suite") is not None:
            members = tuple(select_members(kwargs["suite"], where="`suite`"))
            if not members:
                raise SuiteError(f"`suite` {kwargs['suite']!r} matches no member")
        elif "mdps" in kwargs:
            members = tuple(custom_members(kwargs["mdps"], where="`mdps`"))
    except SuiteError as exc:
        raise _bad(where, str(exc)) from None
    return MarkerSpec(claim=claim, target=target, budget=budget, members=members,
                      policy=_policy(kwargs.get("policy"), where),
                      zero_level=_zero_level(kwargs.get("zero_level"), where), label=label, data=data,
                      behaviour=_policy(kwargs.get("behaviour"), where, "behaviour"))


def _policy(policy: Any, where: str, name: str = "policy") -> Any:
    """A policy is None, a callable ``mdp -> policy`` (called per MDP by the check), or an array of probabilities."""
    if policy is None or callable(policy):
        return policy
    import numpy as np

    if isinstance(policy, (str, bytes, Mapping)):
        raise _bad(where, f"`{name}` must be an (S, A) array of action probabilities, (S,) actions, or a callable "
                          f"mdp -> policy; got {policy!r}")
    try:
        array = np.asarray(policy, dtype=float)
    except (TypeError, ValueError):
        raise _bad(where, f"`{name}` must be an (S, A) array of action probabilities, (S,) actions, or a callable "
                          f"mdp -> policy; got {type(policy).__name__}") from None
    if array.ndim not in (1, 2) or not np.isfinite(array).all():
        raise _bad(where, f"`{name}` must be a finite (S,) or (S, A) array, got shape {array.shape}")
    return policy


def _zero_level(level: Any, where: str) -> float | None:
    if level is None:
        return None
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0.0 <= float(level) < float("inf"):
        raise _bad(where, f"`zero_level` must be a finite number >= 0 (an error at or below it counts as zero), "
                          f"got {level!r}")
    return float(level)


def merge_specs(specs: Iterable[MarkerSpec]) -> MarkerSpec:
    """Combine markers, closest first (function over class over module): the first one that says a thing wins."""
    merged: dict[str, Any] = {}
    for spec in specs:
        for name in ("claim", "target", "budget", "members", "policy", "zero_level", "label", "data", "behaviour"):
            value = getattr(spec, name)
            if value is not None and name not in merged:
                merged[name] = value
    return MarkerSpec(**merged)


# --------------------------------------------------------------------------- the markers of a test item

#: Where collection keeps an item's merged marker spec (read by the ``rlrates`` fixture).
ITEM_SPEC = pytest.StashKey["MarkerSpec"]()


class MarkerReader:
    """Reads the merged ``rlrates`` markers of a node, parsing each marker once per session.

    A marker on a class or module, or on a function whose test runs once per MDP of
    the suite, is shared by many nodes: its parsed spec is kept (keyed on the marker
    object) and reused. Errors are not kept, so each node's error names that node.
    """

    def __init__(self) -> None:
        self._parsed: dict[int, tuple[Any, MarkerSpec]] = {}

    def spec(self, node: Any) -> MarkerSpec:
        """The merged markers of a test item or function definition; raise :class:`MarkerError` on a bad one."""
        specs = [self._parse(mark, node.nodeid) for mark in node.iter_markers(MARKER)]
        return merge_specs(specs) if specs else MarkerSpec()

    def spec_or_fail(self, node: Any) -> MarkerSpec:
        """The node's marker spec, or a clean failure with the marker error (no exception chain shown)."""
        __tracebackhide__ = True
        try:
            return self.spec(node)
        except MarkerError as exc:
            problem = str(exc)
        pytest.fail(problem, pytrace=False)

    def _parse(self, mark: Any, where: str) -> MarkerSpec:
        known = self._parsed.get(id(mark))
        if known is not None and known[0] is mark:
            return known[1]
        spec = parse_marker(tuple(mark.args), mark.kwargs, where)
        self._parsed[id(mark)] = (mark, spec)  # holding the mark keeps its id from being reused
        return spec


def item_spec(item: pytest.Item, reader: MarkerReader) -> MarkerSpec:
    """The spec collection left in the item's stash; read now only if collection could not (a bad marker)."""
    __tracebackhide__ = True
    spec = item.stash.get(ITEM_SPEC, None)
    return spec if spec is not None else reader.spec_or_fail(item)
