"""The pytest layer of pytest-rlrates: options, ini keys, the marker, two fixtures, header and summary.

Registered through the ``pytest11`` entry point ``rlrates`` (``-p no:rlrates``
turns it off). Importing this module loads neither numpy, scipy nor pandas: the
numerical core is imported inside fixtures and hooks, the first time a test
actually runs a check, so sessions that never use it do not pay for it.

Session state lives in ``config.stash`` (a :class:`RatesSession`, also
registered as a plugin for the report hooks). Each check's record rides on its
test report as the user property ``("rlrates", json)``, so the summary works
under pytest-xdist and the same values land in JUnit XML.
"""

from __future__ import annotations

import argparse
import os
import shlex
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import pytest

from .marker_spec import MARKER, MarkerError, MarkerSpec, merge_specs, parse_marker

if TYPE_CHECKING:  # pragma: no cover
    from concurrent.futures import Executor

    from .claims import Claim
    from .profiles import Profile
    from .rate_check import CheckResult
    from .records import CheckRecord
    from .suite import SuiteMember

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
PROFILE_OPTION = "--rlrates-profile"
SEED_OPTION = "--rlrates-seed"
REPORT_OPTION = "--rlrates-report"
WORKERS_OPTION = "--rlrates-workers"
INCONCLUSIVE_OPTION = "--rlrates-inconclusive"
SUITE_OPTION = "--rlrates-suite"
INCONCLUSIVE_CHOICES = ("fail", "skip")
#: The names of ``rlrates.PROFILES``, spelled out so that ``--help`` needs no import.
PROFILE_NAMES = ("quick", "full")
#: The user-property name that carries a check record (equal to ``rlrates.records.PROPERTY_NAME``).
PROPERTY_NAME = "rlrates"
DEFAULT_SEED = 0
RANDOM_SEED = "random"
#: The key under which the controller hands its master seed to pytest-xdist workers.
WORKER_SEED_KEY = "rlrates_master_seed"
#: Check parameters the session owns; a test cannot override them through the fixture.
SESSION_OWNED = ("seed", "context", "reproducer", "executor")

MARKER_HELP = (
    "rlrates(claim=None, *, n=None, horizon=None, target=None, profile=None, suite=None, mdps=None, "
    "policy=None): the rate claim under test (an rlrates.Claim, or its exponents as n= and horizon=) "
    "plus defaults for the `rlrates` fixture (target, profile, policy); suite= narrows the standard "
    "MDP suite of `rlrates_mdp` to member names or tags, mdps= replaces it with your own MDPs "
    "(a list, or a dict {id: mdp})."
)


# --------------------------------------------------------------------------- option values


def _parse_profile(text: str) -> str:
    from .profiles import PROFILES

    if text not in PROFILES:
        raise argparse.ArgumentTypeError(f"unknown profile {text!r}; choose one of {', '.join(PROFILES)}")
    return text


def _parse_seed(text: str) -> int | str:
    if text.strip() == RANDOM_SEED:
        return RANDOM_SEED
    try:
        seed = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"the master seed must be an integer >= 0 or {RANDOM_SEED!r}, got {text!r}"
        ) from None
    if seed < 0:
        raise argparse.ArgumentTypeError(f"the master seed must be an integer >= 0, got {text!r}")
    return seed


def _parse_workers(text: str) -> int:
    try:
        workers = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"the number of worker processes must be an integer >= 1, got {text!r}") from None
    if workers < 1:
        raise argparse.ArgumentTypeError(f"the number of worker processes must be an integer >= 1, got {text!r}")
    return workers


def _parse_suite(text: str) -> tuple[str, ...]:
    from .suite import SuiteError, select_members

    keys = tuple(part.strip() for part in text.split(",") if part.strip())
    if not keys:
        raise argparse.ArgumentTypeError(f"give member names or tags separated by commas, got {text!r}")
    try:
        select_members(keys, where=SUITE_OPTION)
    except SuiteError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    return keys


def _parse_inconclusive(text: str) -> str:
    if text not in INCONCLUSIVE_CHOICES:
        raise argparse.ArgumentTypeError(
            f"an inconclusive check can {' or '.join(INCONCLUSIVE_CHOICES)} its test, got {text!r}"
        )
    return text


def pytest_addoption(parser: pytest.Parser) -> None:
    group = parser.getgroup("rlrates", "rate checks of tabular RL estimators (pytest-rlrates)")
    group.addoption(
        PROFILE_OPTION, dest="rlrates_profile", type=_parse_profile, default=None, metavar="NAME",
        help=f"sweep design of every check: {' or '.join(PROFILE_NAMES)} (default quick; ini key rlrates_profile).",
    )
    group.addoption(
        SEED_OPTION, dest="rlrates_seed", type=_parse_seed, default=None, metavar="SEED",
        help="master seed from which every sample stream of every check derives, together with the test id: "
        f"an integer >= 0, or '{RANDOM_SEED}' to draw one (default {DEFAULT_SEED}; ini key rlrates_seed).",
    )
    group.addoption(
        REPORT_OPTION, dest="rlrates_report", default=None, metavar="DIR",
        help="directory for check reports (ini key rlrates_report).",
    )
    group.addoption(
        WORKERS_OPTION, dest="rlrates_workers", type=_parse_workers, default=None, metavar="N",
        help="spread each check's sweep over N worker processes; results do not depend on N "
        "(default 1; ini key rlrates_workers).",
    )
    group.addoption(
        INCONCLUSIVE_OPTION, dest="rlrates_inconclusive", type=_parse_inconclusive, default=None,
        metavar="ACTION",
        help="what an inconclusive check does to its test: fail (default) or skip with the reason; "
        "it never passes (ini key rlrates_inconclusive).",
    )
    group.addoption(
        SUITE_OPTION, dest="rlrates_suite", type=_parse_suite, default=None, metavar="SELECTORS",
        help="comma-separated member names or tags of the standard MDP suite that rlrates_mdp runs over, "
        "e.g. random,chain (default: all; ini key rlrates_suite). A marker's suite= or mdps= still wins.",
    )
    parser.addini("rlrates_profile", "rlrates: default sweep profile (quick or full).", type="string", default="")
    parser.addini("rlrates_seed", f"rlrates: default master seed (integer >= 0 or '{RANDOM_SEED}').", type="string",
                  default="")
    parser.addini("rlrates_report", "rlrates: directory for check reports, relative to the ini file.",
                  type="string", default="")
    parser.addini("rlrates_workers", "rlrates: worker processes per check (integer >= 1).", type="string", default="")
    parser.addini("rlrates_inconclusive", "rlrates: fail or skip a test whose check is inconclusive.",
                  type="string", default="")
    parser.addini("rlrates_suite", "rlrates: member names or tags of the standard MDP suite that "
                  "rlrates_mdp runs over (default: all).", type="args", default=[])


# --------------------------------------------------------------------------- session settings


@dataclass(frozen=True)
class RatesSettings:
    """The resolved session-wide settings (command line over ini key over default)."""

    profile: str = "quick"
    seed: int = DEFAULT_SEED
    workers: int = 1
    inconclusive: str = "fail"
    report_dir: Path | None = None
    suite: tuple[str, ...] | None = None


def _from_ini(config: pytest.Config, name: str, parse: Callable[[str], Any]) -> Any:
    raw = config.getini(name)
    if not isinstance(raw, str) or not raw.strip():
        return None
    try:
        return parse(raw.strip())
    except argparse.ArgumentTypeError as exc:
        origin = f" in {config.inipath}" if config.inipath else ""
        raise pytest.UsageError(f"ini key {name} = {raw!r}{origin}: {exc}") from None


def _setting(config: pytest.Config, name: str, parse: Callable[[str], Any], default: Any) -> Any:
    value = config.getoption(name)
    if value is None:
        value = _from_ini(config, name, parse)
    return default if value is None else value


def resolve_settings(config: pytest.Config) -> RatesSettings:
    """Read options and ini keys; raise :class:`pytest.UsageError` naming any bad ini value."""
    seed = _setting(config, "rlrates_seed", _parse_seed, DEFAULT_SEED)
    workerinput: Mapping[str, Any] | None = getattr(config, "workerinput", None)
    if workerinput is not None and WORKER_SEED_KEY in workerinput:
        seed = int(workerinput[WORKER_SEED_KEY])  # the controller decided, e.g. for --rlrates-seed=random
    elif seed == RANDOM_SEED:
        import secrets

        seed = secrets.randbelow(2**32)
    report: Path | None = None
    if config.getoption("rlrates_report"):
        report = config.invocation_params.dir / str(config.getoption("rlrates_report"))
    elif str(config.getini("rlrates_report")).strip():
        base = config.inipath.parent if config.inipath else config.rootpath
        report = base / str(config.getini("rlrates_report")).strip()
    from_option = config.getoption("rlrates_suite")
    suite_keys = list(from_option) if from_option else [str(item) for item in config.getini("rlrates_suite") or []]
    if suite_keys and not from_option:
        from .suite import SuiteError, select_members

        try:
            select_members(suite_keys, where="ini key rlrates_suite")
        except SuiteError as exc:
            raise pytest.UsageError(str(exc)) from None
    return RatesSettings(
        profile=_setting(config, "rlrates_profile", _parse_profile, "quick"),
        seed=int(seed),
        workers=_setting(config, "rlrates_workers", _parse_workers, 1),
        inconclusive=_setting(config, "rlrates_inconclusive", _parse_inconclusive, "fail"),
        report_dir=report,
        suite=tuple(suite_keys) or None,
    )


@dataclass
class RatesSession:
    """Per-session state: settings, collected check records, built MDPs and the worker pool.

    Registered as a plugin so that it sees every test report, including those a
    pytest-xdist controller receives from its workers.
    """

    settings: RatesSettings
    records: list[CheckRecord] = field(default_factory=list)
    built: dict[str, Any] = field(default_factory=dict)
    _seen: dict[str, int] = field(default_factory=dict)
    _executor: Executor | None = None

    def executor(self) -> Executor | None:
        """The session's process pool, created on first use when workers > 1."""
        if self.settings.workers <= 1:
            return None
        if self._executor is None:
            from concurrent.futures import ProcessPoolExecutor

            self._executor = ProcessPoolExecutor(max_workers=self.settings.workers)
        return self._executor

    def build(self, member: SuiteMember) -> Any:
        if not member.standard:
            return member.build()
        if member.name not in self.built:
            self.built[member.name] = member.build()
        return self.built[member.name]

    def close(self) -> None:
        if self._executor is not None:
            self._executor.shutdown(wait=True, cancel_futures=True)
            self._executor = None

    def pytest_runtest_logreport(self, report: pytest.TestReport) -> None:
        texts = [value for name, value in report.user_properties if name == PROPERTY_NAME]
        already = self._seen.get(report.nodeid, 0)
        if len(texts) <= already:
            return
        from .records import CheckRecord

        for text in texts[already:]:
            try:
                self.records.append(CheckRecord.from_json(str(text)))
            except (ValueError, TypeError):
                continue  # someone else's property of the same name: not ours to summarise
        self._seen[report.nodeid] = max(already, len(texts))


_SESSION = pytest.StashKey[RatesSession]()


def _session(config: pytest.Config) -> RatesSession:
    return config.stash[_SESSION]


def session_settings(config: pytest.Config) -> RatesSettings:
    """The resolved rlrates settings of a pytest session (for other plugins and conftest files)."""
    return _session(config).settings


def _prepare_report_dir(directory: Path, controller: bool) -> None:
    """Make sure the report directory is writable; on the controller, clear earlier sessions' checks."""
    try:
        directory.mkdir(parents=True, exist_ok=True)
        probe = directory / f".rlrates-write-test-{os.getpid()}"
        probe.write_text("")
        probe.unlink()
    except OSError as exc:
        raise pytest.UsageError(
            f"{REPORT_OPTION}: cannot write to the report directory {directory}: {exc.strerror or exc}"
        ) from None
    if not controller:
        return
    import shutil

    for old in directory.iterdir():  # only folders this plugin wrote: they hold a check.json
        if old.is_dir() and (old / "check.json").is_file():
            shutil.rmtree(old)
    for name in ("index.md", "index.tex"):
        (directory / name).unlink(missing_ok=True)


def pytest_configure(config: pytest.Config) -> None:
    config.addinivalue_line("markers", MARKER_HELP)
    session = RatesSession(resolve_settings(config))
    if session.settings.report_dir is not None:
        _prepare_report_dir(session.settings.report_dir, controller=not hasattr(config, "workerinput"))
    config.stash[_SESSION] = session
    config.pluginmanager.register(session, "rlrates-session")


def pytest_unconfigure(config: pytest.Config) -> None:
    session = config.stash.get(_SESSION, None)
    if session is not None:
        session.close()
        if config.pluginmanager.is_registered(session):
            config.pluginmanager.unregister(session)


@pytest.hookimpl(optionalhook=True)
def pytest_configure_node(node: Any) -> None:
    """pytest-xdist controller: hand the master seed to each worker (only called when xdist runs)."""
    node.workerinput[WORKER_SEED_KEY] = _session(node.config).settings.seed


def pytest_report_header(config: pytest.Config) -> list[str]:
    settings = _session(config).settings
    line = (
        f"rlrates: profile {settings.profile}, master seed {settings.seed} "
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
    session = config.stash.get(_SESSION, None)
    if session is None or not session.records:
        return
    if session.settings.report_dir is not None:
        from .report import FIGURES_SKIPPED, figures_available, write_index

        written = write_index(session.settings.report_dir)
        if written:
            terminalreporter.write_line(
                f"rlrates report: {len(session.records)} check(s) under {session.settings.report_dir} "
                f"({', '.join(path.name for path in written)})"
            )
        if not figures_available():
            terminalreporter.write_line(f"rlrates report: {FIGURES_SKIPPED}")
    from .records import format_summary

    lines = format_summary(session.records)
    if lines is None:
        return
    settings = session.settings
    terminalreporter.write_sep("=", f"rlrates checks: profile {settings.profile}, master seed {settings.seed}")
    for line in lines:
        terminalreporter.write_line(line)


# --------------------------------------------------------------------------- the marker (see marker_spec.py)


def marker_spec(node: pytest.Item | Any) -> MarkerSpec:
    """The merged ``rlrates`` markers of a test item or function definition."""
    specs = [parse_marker(tuple(mark.args), mark.kwargs, node.nodeid) for mark in node.iter_markers(MARKER)]
    return merge_specs(specs) if specs else MarkerSpec()


def _spec_or_fail(node: Any) -> MarkerSpec:
    """The node's marker spec, or a clean failure with the marker error (no exception chain shown)."""
    __tracebackhide__ = True
    try:
        return marker_spec(node)
    except MarkerError as exc:
        problem = str(exc)
    pytest.fail(problem, pytrace=False)


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
    spec = _spec_or_fail(metafunc.definition)
    if MDP_FIXTURE not in metafunc.fixturenames or _parametrised_by_user(metafunc.definition):
        return
    members = spec.members
    if members is None:
        from .suite import select_members

        members = tuple(select_members(_session(metafunc.config).settings.suite, where="the session's suite"))
    metafunc.parametrize(MDP_FIXTURE, members, ids=[member.name for member in members], indirect=True)


# --------------------------------------------------------------------------- fixtures


def reproduce_command(config: pytest.Config, nodeid: str, seed: int, profile: str) -> str:
    """The shell command that reruns one test with the session's seed and profile."""
    file_part, sep, rest = nodeid.partition("::")
    path = config.rootpath / file_part
    try:
        shown = os.path.relpath(path, config.invocation_params.dir)
    except ValueError:  # another drive on Windows
        shown = str(path)
    target = shown.replace(os.sep, "/") + sep + rest
    return f"pytest {shlex.quote(target)} {SEED_OPTION}={seed} {PROFILE_OPTION}={profile}"


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
    def profile(self) -> str:
        """The session's profile name (a marker or a call may choose another)."""
        return self._session.settings.profile

    @property
    def reproducer(self) -> str:
        """The command that reruns this test alone with the same seed and profile."""
        return reproduce_command(self._item.config, self._item.nodeid, self.seed, self.profile)

    def _report(self, result: CheckResult) -> None:
        """Keep the result; write its report folder when the session has a report directory."""
        self.results.append(result)
        report_dir = self._session.settings.report_dir
        if report_dir is not None:
            from .report import figures_available, write_check

            nodeid = self._item.nodeid
            label = nodeid if len(self.results) == 1 else f"{nodeid}#{len(self.results)}"
            write_check(result, report_dir, label, figures=figures_available())

    def __call__(
        self,
        estimator: Callable[[Any, Any], Any],
        mdp: Any,
        claim: Claim | None = None,
        *,
        target: str | None = None,
        policy: Any = None,
        profile: str | Profile | None = None,
        **check_options: Any,
    ) -> CheckResult:
        __tracebackhide__ = True
        nodeid = self._item.nodeid
        spec = _spec_or_fail(self._item)  # normally validated at collection already
        claim = claim if claim is not None else spec.claim
        if claim is None:
            pytest.fail(
                f"rlrates: no claim to check in {nodeid}; pass one to the fixture, rlrates(estimator, mdp, "
                f"rlrates.Claim(n=-0.5)), or mark the test with @pytest.mark.{MARKER}(n=-0.5)",
                pytrace=False,
            )
        owned = sorted(set(check_options) & set(SESSION_OWNED))
        if owned:
            pytest.fail(
                f"rlrates: `{owned[0]}` is set by the session and cannot be passed to the fixture in {nodeid}; "
                f"use {SEED_OPTION} for the seed and {WORKERS_OPTION} for parallel sweeps",
                pytrace=False,
            )
        from .rate_check import CheckInterrupted, check

        settings = self._session.settings
        problem = ""
        try:
            result = check(
                estimator,
                mdp,
                claim,
                target=target or spec.target or "q_pi",
                policy=policy if policy is not None else spec.policy,
                profile=profile or spec.profile or settings.profile,
                seed=settings.seed,
                executor=self._session.executor(),
                context=nodeid,
                reproducer=self.reproducer,
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
        from .records import CheckRecord

        record = CheckRecord.from_result(result, nodeid)
        self._item.user_properties.append((PROPERTY_NAME, record.to_json()))
        if result.status == "pass":
            return result
        if result.status == "inconclusive" and settings.inconclusive == "skip":
            pytest.skip(_skip_reason(record, result.reproducer))
        pytest.fail(result.message, pytrace=False)


def _skip_reason(record: CheckRecord, reproducer: str) -> str:
    fits = "; ".join(fit.describe() for fit in record.fits) or "nothing fitted"
    return (
        f"rlrates inconclusive within the {record.profile!r} budget: target {record.target} on {record.mdp} "
        f"({fits}); reproduce: {reproducer}"
    )


@pytest.fixture
def rlrates(request: pytest.FixtureRequest) -> RatesRunner:
    """Check an estimator's error rate: ``rlrates(estimator, mdp, claim=None, target=..., **options)``.

    Runs ``rlrates.check`` with the session's profile (``--rlrates-profile``),
    master seed (``--rlrates-seed``) and worker processes (``--rlrates-workers``);
    every sample stream derives from the master seed and this test's id, so the
    numbers do not depend on test order or on pytest-xdist. The claim, target,
    profile and policy default to those of ``@pytest.mark.rlrates(...)``.
    Returns the ``CheckResult`` when the claim holds; otherwise fails the test
    with the explanation and a one-line pytest command that reproduces it.
    An inconclusive check fails too, or skips with ``--rlrates-inconclusive=skip``;
    it never passes. Further keyword options (``n_grid``, ``gammas``,
    ``replicates``, ``norm``) go to ``rlrates.check``.

    The fixture argument hides the ``rlrates`` package inside the test, so a
    test module that needs both imports the package under another name::

        import rlrates as rl

        @pytest.mark.rlrates(n=-0.5, horizon=2.0)
        def test_plug_in_rate(rlrates, rlrates_mdp):
            rlrates(plug_in, rlrates_mdp)   # fails the test unless the claim holds

        def test_plug_in_on_my_mdp(rlrates):
            rlrates(plug_in, rl.garnet(20, 4, 5, seed=0), rl.Claim(n=-0.5))

    The returned object also has ``seed``, ``profile``, ``reproducer`` and
    ``results`` (every CheckResult of this test).
    """
    return RatesRunner(request.node, _session(request.config))


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
    from .suite import SuiteMember

    member = getattr(request, "param", None)
    if not isinstance(member, SuiteMember):
        pytest.fail(
            f"{MDP_FIXTURE} is parametrised at collection time; request it as an argument of the test "
            f"function (or of a fixture it uses), not through request.getfixturevalue",
            pytrace=False,
        )
    return _session(request.config).build(member)
