"""The session-wide settings of the pytest layer: options, ini keys, their parsers, and the resolved values.

Every setting has a command-line option ``--rlrates-...`` and an ini key
``rlrates_...``; the option wins over the ini key, the ini key over the default.
Bad values are rejected by argparse ``type=`` parsers (:class:`argparse.ArgumentTypeError`
naming the value), and a bad ini value becomes a :class:`pytest.UsageError` naming
the key and the ini file. Importing this module loads nothing but pytest and the
standard library.
"""

from __future__ import annotations

import argparse
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

__all__ = [
    "BUDGET_OPTION", "SEED_OPTION", "REPORT_OPTION", "WORKERS_OPTION", "INCONCLUSIVE_OPTION", "SUITE_OPTION",
    "FIGURE_WIDTH_OPTION",
    "INCONCLUSIVE_CHOICES", "BUDGET_NAMES", "DEFAULT_SEED", "RANDOM_SEED", "WORKER_SEED_KEY", "WORKERS_PER_CPU",
    "workers_limit",
    "RatesSettings", "add_options", "resolve_settings",
]

BUDGET_OPTION = "--rlrates-budget"
SEED_OPTION = "--rlrates-seed"
REPORT_OPTION = "--rlrates-report"
WORKERS_OPTION = "--rlrates-workers"
INCONCLUSIVE_OPTION = "--rlrates-inconclusive"
SUITE_OPTION = "--rlrates-suite"
FIGURE_WIDTH_OPTION = "--rlrates-figure-width"
INCONCLUSIVE_CHOICES = ("fail", "skip")
#: The names of ``rlrates.BUDGETS``, spelled out so that ``--help`` needs no import.
BUDGET_NAMES = ("ci", "appendix")
DEFAULT_SEED = 0
RANDOM_SEED = "random"
#: The key under which the controller hands its master seed to pytest-xdist workers.
WORKER_SEED_KEY = "rlrates_master_seed"
#: ``--rlrates-workers`` may be at most this many times the machine's CPU count.
WORKERS_PER_CPU = 4


def workers_limit() -> int:
    """The largest accepted ``--rlrates-workers``: ``WORKERS_PER_CPU`` times ``os.cpu_count()`` (4 when unknown)."""
    import os

    return WORKERS_PER_CPU * (os.cpu_count() or 1)


# --------------------------------------------------------------------------- option values


def _parse_budget(text: str) -> str:
    from ..budgets import BUDGETS

    if text not in BUDGETS:
        raise argparse.ArgumentTypeError(f"unknown budget {text!r}; choose one of {', '.join(BUDGETS)}")
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
    if workers > workers_limit():
        raise argparse.ArgumentTypeError(
            f"{workers} worker processes is more than this machine can run usefully: at most {workers_limit()} "
            f"({WORKERS_PER_CPU} per CPU on its {workers_limit() // WORKERS_PER_CPU} CPU(s)), got {text!r}"
        )
    return workers


def _parse_suite(text: str) -> tuple[str, ...]:
    from ..suite import SuiteError, select_members

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


def _parse_figure_width(text: str) -> str:
    from ..report.figures import figure_width  # imported only when the setting is given

    try:
        figure_width(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None
    return text.strip().lower()


def add_options(parser: pytest.Parser) -> None:
    """Register the ``--rlrates-...`` options and the ``rlrates_...`` ini keys (for ``pytest_addoption``)."""
    group = parser.getgroup("rlrates", "rate checks of tabular RL estimators (pytest-rlrates)")
    group.addoption(
        BUDGET_OPTION, dest="rlrates_budget", type=_parse_budget, default=None, metavar="NAME",
        help=f"sweep design of every check: {' or '.join(BUDGET_NAMES)} (default ci; ini key rlrates_budget).",
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
        f"(default 1, at most {WORKERS_PER_CPU} per CPU; ini key rlrates_workers).",
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
        "e.g. random,chain (default: every stochastic member; ini key rlrates_suite). A marker's suite= or mdps= still wins.",
    )
    group.addoption(
        FIGURE_WIDTH_OPTION, dest="rlrates_figure_width", type=_parse_figure_width, default=None, metavar="WIDTH",
        help="width of report figures: column (3.4 in, panels stacked), page (7 in, the default) or a number "
        "of inches (ini key rlrates_figure_width).",
    )
    parser.addini("rlrates_budget", "rlrates: default sweep budget (ci or appendix).", type="string", default="")
    parser.addini("rlrates_seed", f"rlrates: default master seed (integer >= 0 or '{RANDOM_SEED}').", type="string",
                  default="")
    parser.addini("rlrates_report", "rlrates: directory for check reports, relative to the ini file.",
                  type="string", default="")
    parser.addini("rlrates_workers", "rlrates: worker processes per check (integer >= 1).", type="string", default="")
    parser.addini("rlrates_inconclusive", "rlrates: fail or skip a test whose check is inconclusive.",
                  type="string", default="")
    parser.addini("rlrates_figure_width", "rlrates: width of report figures (column, page or inches).",
                  type="string", default="")
    parser.addini("rlrates_suite", "rlrates: member names or tags of the standard MDP suite that "
                  "rlrates_mdp runs over (default: all).", type="args", default=[])


# --------------------------------------------------------------------------- resolved settings


@dataclass(frozen=True)
class RatesSettings:
    """The resolved session-wide settings (command line over ini key over default)."""

    budget: str = "ci"
    seed: int = DEFAULT_SEED
    workers: int = 1
    inconclusive: str = "fail"
    report_dir: Path | None = None
    suite: tuple[str, ...] | None = None
    figure_width: str | None = None


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


def _master_seed(config: pytest.Config) -> int:
    seed = _setting(config, "rlrates_seed", _parse_seed, DEFAULT_SEED)
    workerinput: Mapping[str, Any] | None = getattr(config, "workerinput", None)
    if workerinput is not None and WORKER_SEED_KEY in workerinput:
        return int(workerinput[WORKER_SEED_KEY])  # the controller decided, e.g. for --rlrates-seed=random
    if seed == RANDOM_SEED:
        import secrets

        return secrets.randbelow(2**32)
    return int(seed)


def _report_dir(config: pytest.Config) -> Path | None:
    if config.getoption("rlrates_report"):
        return config.invocation_params.dir / str(config.getoption("rlrates_report"))
    if str(config.getini("rlrates_report")).strip():
        base = config.inipath.parent if config.inipath else config.rootpath
        return base / str(config.getini("rlrates_report")).strip()
    return None


def _suite_keys(config: pytest.Config) -> tuple[str, ...] | None:
    from_option = config.getoption("rlrates_suite")
    suite_keys = list(from_option) if from_option else [str(item) for item in config.getini("rlrates_suite") or []]
    if suite_keys and not from_option:
        from ..suite import SuiteError, select_members

        try:
            select_members(suite_keys, where="ini key rlrates_suite")
        except SuiteError as exc:
            raise pytest.UsageError(str(exc)) from None
    return tuple(suite_keys) or None


def resolve_settings(config: pytest.Config) -> RatesSettings:
    """Read options and ini keys; raise :class:`pytest.UsageError` naming any bad ini value."""
    seed, report_dir, suite = _master_seed(config), _report_dir(config), _suite_keys(config)
    return RatesSettings(
        budget=_setting(config, "rlrates_budget", _parse_budget, "ci"),
        seed=seed,
        workers=_setting(config, "rlrates_workers", _parse_workers, 1),
        inconclusive=_setting(config, "rlrates_inconclusive", _parse_inconclusive, "fail"),
        report_dir=report_dir,
        suite=suite,
        figure_width=_setting(config, "rlrates_figure_width", _parse_figure_width, None),
    )
