"""The standard MDP suite that the ``rlrates_mdp`` fixture parametrises tests over.

Pure definitions: no pytest, and no numpy at import time. Each member is a name
(which doubles as the pytest id), a set of tags, and a zero-argument builder
that constructs the MDP only when a test actually needs it.

=================== ====================================== ===================================
member              what                                   tags
=================== ====================================== ===================================
garnet-S10-A2-b3    ``garnet(10, 2, 3, seed=1)``           random, stochastic
garnet-S20-A4-b5    ``garnet(20, 4, 5, seed=2)``           random, stochastic
garnet-S30-A3-b10   ``garnet(30, 3, 10, seed=3)``          random, stochastic
chain               ``chain(10, slip=0.1, seed=0)``        structured, stochastic
grid                ``gridworld(5, 5, slip=0.2)``          structured, stochastic
horizon-hard        ``horizon_hard(actions=2)``            structured, stochastic, gamma-indexed
deterministic       ``deterministic(8, 3, seed=0)``        exact
=================== ====================================== ===================================

``deterministic`` is left out of the default selection (every stochastic member)
and of ``structured``: every count-reading estimator is exact on it, so it tests no
rate (a check on it warns); select it by name, by ``exact`` or with ``all``.

A *selector* is a member name, a tag, or ``all``; a selection is the union of
what its selectors match, in the order of the table above.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import partial
from typing import TYPE_CHECKING, Any, Union, cast

if TYPE_CHECKING:  # pragma: no cover
    from .mdp import TabularMDP

    MDPSource = Union[TabularMDP, Callable[[float], TabularMDP]]
else:
    MDPSource = Any

__all__ = [
    "SuiteMember",
    "SuiteError",
    "STANDARD_SUITE",
    "ALL_SELECTOR",
    "member_names",
    "suite_tags",
    "select_members",
    "custom_members",
]

#: The selector that matches every standard member.
ALL_SELECTOR = "all"


class SuiteError(ValueError):
    """A suite selection or a list of user MDPs is not usable; the message names the bad entry."""


@dataclass(frozen=True)
class SuiteMember:
    """One MDP of a suite: ``name`` is also its pytest id; ``build()`` constructs it."""

    name: str
    tags: frozenset[str]
    build: Callable[[], MDPSource] = field(compare=False, repr=False)
    description: str = ""
    standard: bool = True


def _garnet(states: int, actions: int, branching: int, seed: int) -> MDPSource:
    from .families import garnet

    return garnet(states, actions, branching, seed=seed)


def _chain() -> MDPSource:
    from .families import chain

    return chain(10, slip=0.1, seed=0)


def _grid() -> MDPSource:
    from .families import gridworld

    return gridworld(5, 5, slip=0.2)


def _horizon_hard() -> MDPSource:
    from .families import horizon_hard

    return horizon_hard(actions=2)


def _deterministic() -> MDPSource:
    from .families import deterministic

    return deterministic(8, 3, seed=0)


def _member(name: str, tags: str, build: Callable[[], MDPSource], description: str) -> SuiteMember:
    return SuiteMember(name, frozenset(tags.split()), build, description)


STANDARD_SUITE: tuple[SuiteMember, ...] = (
    _member("garnet-S10-A2-b3", "random stochastic", partial(_garnet, 10, 2, 3, 1), "garnet(10, 2, 3, seed=1)"),
    _member("garnet-S20-A4-b5", "random stochastic", partial(_garnet, 20, 4, 5, 2), "garnet(20, 4, 5, seed=2)"),
    _member("garnet-S30-A3-b10", "random stochastic", partial(_garnet, 30, 3, 10, 3), "garnet(30, 3, 10, seed=3)"),
    _member("chain", "structured stochastic", _chain, "chain(10, slip=0.1, seed=0)"),
    _member("grid", "structured stochastic", _grid, "gridworld(5, 5, slip=0.2)"),
    _member("horizon-hard", "structured stochastic gamma-indexed", _horizon_hard, "horizon_hard(actions=2)"),
    _member("deterministic", "exact", _deterministic, "deterministic(8, 3, seed=0)"),
)


def member_names() -> list[str]:
    """Names of the standard members, in suite order."""
    return [member.name for member in STANDARD_SUITE]


def suite_tags() -> list[str]:
    """Every tag used by a standard member, sorted."""
    return sorted({tag for member in STANDARD_SUITE for tag in member.tags})


def _selectors(value: object, where: str) -> list[str]:
    if isinstance(value, str):
        items: list[object] = list(value.replace(",", " ").split())
    elif isinstance(value, Iterable) and not isinstance(value, (bytes, Mapping)):
        items = list(value)
    else:
        raise SuiteError(f"{where}: a suite selection must be a string or a list of strings, got {value!r}")
    for item in items:
        if not isinstance(item, str):
            raise SuiteError(f"{where}: suite selectors must be strings (member names or tags), got {item!r}")
    if not items:
        raise SuiteError(f"{where}: the suite selection is empty; name at least one member or tag")
    return [str(item) for item in items]


def select_members(selection: object = None, *, where: str = "suite") -> list[SuiteMember]:
    """The standard members matched by ``selection`` (``None``: every stochastic member, the default).

    The default leaves out ``deterministic``: every count-reading estimator is exact
    there, so it tests no rate. ``"all"`` or ``"exact"`` select it.

    ``selection`` is a string of whitespace- or comma-separated selectors, or a
    list of selectors. An unknown selector raises :class:`SuiteError` naming it
    and listing the known names and tags; ``where`` says where it came from.
    """
    if selection is None:
        return [m for m in STANDARD_SUITE if "stochastic" in m.tags]
    wanted = _selectors(selection, where)
    names = set(member_names())
    tags = set(suite_tags())
    unknown = [s for s in wanted if s != ALL_SELECTOR and s not in names and s not in tags]
    if unknown:
        raise SuiteError(
            f"{where}: unknown suite selector {unknown[0]!r}; use a member name "
            f"({', '.join(member_names())}), a tag ({', '.join(suite_tags())}) or {ALL_SELECTOR!r}"
        )
    chosen = set(wanted)
    if ALL_SELECTOR in chosen:
        return list(STANDARD_SUITE)
    return [m for m in STANDARD_SUITE if m.name in chosen or m.tags & chosen]


_UNSAFE_ID = re.compile(r"[^\w.+=-]+")


def _derived_id(source: object, position: int) -> str:
    name = getattr(source, "name", None)
    if not isinstance(name, str) or not name:
        name = getattr(source, "__name__", None)
    if not isinstance(name, str) or not name or name == "<lambda>":
        return f"mdp{position}"
    return _UNSAFE_ID.sub("_", name).strip("_") or f"mdp{position}"


def _check_source(source: object, label: str, where: str) -> None:
    from .mdp import TabularMDP  # numpy: only reached when a test brings its own MDPs

    if not isinstance(source, TabularMDP) and not callable(source):
        shown = repr(source)
        shown = shown if len(shown) <= 60 else shown[:57] + "..."
        raise SuiteError(
            f"{where}: {label} must be an rlrates.TabularMDP or a gamma-indexed family "
            f"(a callable gamma -> TabularMDP), got {type(source).__name__} {shown}"
        )


def _fixed(source: MDPSource) -> MDPSource:
    return source


def custom_members(mdps: object, *, where: str = "mdps") -> list[SuiteMember]:
    """Wrap the user's MDPs as suite members.

    ``mdps`` is a list of MDPs (ids from each MDP's ``name``, made unique with a
    ``-2``, ``-3`` ... suffix) or a mapping ``{id: mdp}``.
    """
    entries: list[tuple[str, str, object]] = []  # (id, label for messages, source)
    if isinstance(mdps, Mapping):
        for key, source in mdps.items():
            if not isinstance(key, str) or not key:
                raise SuiteError(f"{where}: MDP ids must be non-empty strings, got {key!r}")
            entries.append((key, f"entry {key!r}", source))
    elif isinstance(mdps, Sequence) and not isinstance(mdps, (str, bytes)):
        seen: dict[str, int] = {}
        for position, source in enumerate(mdps):
            base = _derived_id(source, position)
            seen[base] = seen.get(base, 0) + 1
            entries.append((base if seen[base] == 1 else f"{base}-{seen[base]}", f"entry {position}", source))
    else:
        raise SuiteError(f"{where}: give a list of MDPs or a dict {{id: mdp}}, got {type(mdps).__name__}")
    if not entries:
        raise SuiteError(f"{where}: the list of MDPs is empty; give at least one")
    members = []
    for key, label, source in entries:
        _check_source(source, label, where)
        build = partial(_fixed, cast("MDPSource", source))
        members.append(SuiteMember(key, frozenset({"custom"}), build, "user MDP", standard=False))
    return members
