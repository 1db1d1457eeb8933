"""The pytest layer of pytest-rlrates: its hooks and its two fixtures.

Registered through the ``pytest11`` entry point ``rlrates`` (``-p no:rlrates``
turns it off). The parts it wires together, one module each:

* :mod:`.settings`: option names, their parsers, ini fallbacks, :class:`RatesSettings`;
* :mod:`.session`: the per-session state in ``config.stash`` (:class:`RatesSession`,
  also registered as a plugin for the report hooks);
* :mod:`.marker`: the ``rlrates`` marker, parsed once at collection into each item's stash;
* :mod:`.runner`: :class:`RatesRunner`, what the ``rlrates`` fixture returns;
* :mod:`.records`: the check record that rides on each test report as the user
  property ``("rlrates", json)`` (so the summary works under pytest-xdist and the
  same values land in JUnit XML), and the terminal summary.

Importing this package loads neither numpy, scipy nor pandas: the numerical core
is imported inside fixtures and hooks, the first time a test actually runs a
check, so sessions that never use it do not pay for it.
"""

from __future__ import annotations

from typing import Any

import pytest

from .marker import ITEM_SPEC, MARKER, MARKER_HELP, MarkerError, MarkerSpec, merge_specs, parse_marker
from .runner import RatesRunner, reproduce_command
from .session import RatesSession, end_session, session_of, session_or_none, session_settings, start_session
from .settings import SEED_OPTION, WORKER_SEED_KEY, RatesSettings, add_options, resolve_settings

__all__ = [
    "RatesSettings",
    "RatesSession",
    "RatesRunner",
    "MarkerSpec",
    "MarkerError",
    "parse_marker",
    "merge_specs",
    "reproduce_command",
    "resolve_settings",
    "session_settings",
]

# Module-level imports stay light (pytest and the standard library only): the rest of
# rlrates, even its pure-Python parts, is imported inside the hooks that need it.

MDP_FIXTURE = "rlrates_mdp"


class MarkerUnusedWarning(pytest.PytestWarning):
    """A test carries the ``rlrates`` marker but never checks anything (it uses neither rlrates fixture)."""


# --------------------------------------------------------------------------- options and session


def pytest_addoption(parser: pytest.Parser) -> None:
    add_options(parser)


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line("markers", MARKER_HELP)
    start_session(config)


def pytest_unconfigure(config: pytest.Config) -> None:
    end_session(config)


@pytest.hookimpl(optionalhook=True)
def pytest_configure_node(node: Any) -> None:
    """pytest-xdist controller: hand the master seed to each worker (only called when xdist runs)."""
    node.workerinput[WORKER_SEED_KEY] = session_of(node.config).settings.seed


def pytest_report_header(config: pytest.Config) -> list[str]:
    settings = session_of(config).settings
    line = (
        f"rlrates: budget {settings.budget}, master seed {settings.seed} "
        f"(rerun with {SEED_OPTION}={settings.seed})"
    )
    extras = []
    if settings.workers > 1:
        extras.append(f"{settings.workers} worker processes per check")
    if settings.inconclusive == "skip":
        extras.append("inconclusive checks skip")
    if settings.report_dir is not None:
        extras.append(f"reports to {settings.report_dir}")
    return [line + "".join(f"; {extra}" for extra in extras)]


def pytest_terminal_summary(terminalreporter: Any, exitstatus: int, config: pytest.Config) -> None:
    if hasattr(config, "workerinput"):
        return
    session = session_or_none(config)
    if session is None or not session.records:
        return
    if session.settings.report_dir is not None:
        for line in session.report_lines():
            terminalreporter.write_line(line)
    from .records import format_summary

    lines = format_summary(session.records)
    if lines is None:
        return
    settings = session.settings
    terminalreporter.write_sep(
        "=", f"rate checks (rlrates), budget {settings.budget}, master seed {settings.seed}"
    )
    for line in lines:
        terminalreporter.write_line(line)


# --------------------------------------------------------------------------- collection


def _parametrised_by_user(definition: Any) -> bool:
    for mark in definition.iter_markers("parametrize"):
        names = mark.args[0] if mark.args else mark.kwargs.get("argnames", "")
        if isinstance(names, str):
            names = [part.strip() for part in names.split(",")]
        if MDP_FIXTURE in names:
            return True
    return False


def pytest_generate_tests(metafunc: pytest.Metafunc) -> None:
    if metafunc.definition.get_closest_marker(MARKER) is None and MDP_FIXTURE not in metafunc.fixturenames:
        return
    __tracebackhide__ = True
    session = session_of(metafunc.config)
    spec = session.markers.spec_or_fail(metafunc.definition)  # a bad marker is a collection error
    if MDP_FIXTURE not in metafunc.fixturenames or _parametrised_by_user(metafunc.definition):
        return
    members = spec.members
    if members is None:
        from ..suite import select_members

        members = tuple(select_members(session.settings.suite, where="the session's suite"))
    metafunc.parametrize(MDP_FIXTURE, members, ids=[member.name for member in members], indirect=True)


def pytest_itemcollected(item: pytest.Item) -> None:
    """Keep the item's merged marker spec in its stash, where the ``rlrates`` fixture reads it."""
    if item.get_closest_marker(MARKER) is None:
        return
    try:
        item.stash[ITEM_SPEC] = session_of(item.config).markers.spec(item)
    except MarkerError:
        pass  # only a mark of a pytest.param can get here; the fixture fails the test with the error


def pytest_runtest_setup(item: pytest.Item) -> None:
    """Warn (as the test starts, where ``-W error`` makes it the test's error) about a marker nothing reads."""
    if item.get_closest_marker(MARKER) is not None and not {"rlrates", MDP_FIXTURE} & set(getattr(item, "fixturenames", ())):
        import warnings

        warnings.warn(MarkerUnusedWarning(
            f"@pytest.mark.{MARKER} on {item.nodeid}, which uses neither the `rlrates` nor the `{MDP_FIXTURE}` "
            "fixture: the marked claim is never checked, and the test passes on its own"
        ))


# --------------------------------------------------------------------------- fixtures


@pytest.fixture
def rlrates(request: pytest.FixtureRequest) -> RatesRunner:
    """Check an estimator's error rate: ``rlrates(estimator, mdp, claim=None, target=..., label=..., **options)``.

    Runs ``rlrates.check`` with the session's budget (``--rlrates-budget``),
    master seed (``--rlrates-seed``) and worker processes (``--rlrates-workers``);
    every sample stream derives from the master seed and this test's id, so the
    numbers do not depend on test order or on pytest-xdist. The claim, target,
    budget and policy default to those of ``@pytest.mark.rlrates(...)``.
    Returns the ``CheckResult`` when the claim holds; otherwise fails the test
    with the explanation and a one-line pytest command that reproduces it.
    An inconclusive check fails too, or skips with ``--rlrates-inconclusive=skip``;
    it never passes. ``label`` names the check in reports (default: the
    marker's ``label=``, else the test's name). Further keyword options
    (``n_grid``, ``gammas``, ``replicates``, ``norm``) go to ``rlrates.check``.

    The fixture argument hides the ``rlrates`` package inside the test, so a
    test module that needs both imports the package under another name::

        import rlrates as rl

        @pytest.mark.rlrates(n=-0.5, horizon=2.0)
        def test_plug_in_rate(rlrates, rlrates_mdp):
            rlrates(plug_in, rlrates_mdp)   # fails the test unless the claim holds

        def test_plug_in_on_my_mdp(rlrates):
            rlrates(plug_in, rl.garnet(20, 4, 5, seed=0), rl.Claim(n=-0.5))

    The returned object also has ``seed``, ``budget``, ``reproducer`` and
    ``results`` (every CheckResult of this test).
    """
    return RatesRunner(request.node, session_of(request.config))


@pytest.fixture
def rlrates_mdp(request: pytest.FixtureRequest) -> Any:
    """One MDP of the rlrates suite; a test that asks for it runs once per member.

    The standard suite holds three seeded Garnets (garnet-S10-A2-b3,
    garnet-S20-A4-b5, garnet-S30-A3-b10), a slippery chain (chain), a slippery
    grid (grid), the gamma-indexed horizon-hard family (horizon-hard) and a
    deterministic MDP (deterministic). Tags: random, structured, stochastic,
    gamma-indexed, exact. Narrow it with ``@pytest.mark.rlrates(suite=[...])``
    (names or tags) or the ini key ``rlrates_suite``; replace it with
    ``@pytest.mark.rlrates(mdps=[...])`` or ``mdps={"id": mdp}``. MDPs are built
    when a test first needs them, once per session.
    """
    from ..suite import SuiteMember

    member = getattr(request, "param", None)
    if not isinstance(member, SuiteMember):
        pytest.fail(
            f"{MDP_FIXTURE} is parametrised at collection time; request it as an argument of the test "
            f"function (or of a fixture it uses), not through request.getfixturevalue",
            pytrace=False,
        )
    return session_of(request.config).build(member)
