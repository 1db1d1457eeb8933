"""Command line.

``python -m rlrates demo`` checks reference estimators and a broken one;
``python -m rlrates report DIR [--figure-width column|page|INCHES] [--style FILE]
[--columns check,mdp,n,verdict] [--table-span column|page|long]`` redraws the figures and
the index of a report directory from its saved tables (no rerun), at the width
asked and in the user's matplotlib style (``--style``, or a matplotlibrc that
matplotlib finds as usual).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from typing import Any


def _demo(seed: int) -> int:
    import numpy as np

    import rlrates
    from rlrates import reference

    def stale_buffer_q_pi(batch: rlrates.Batch, problem: rlrates.Problem) -> np.ndarray:
        """A plug-in evaluator after a bad refactor: it keeps only the first 32 samples."""
        S, A = problem.states, problem.actions
        kept = batch.next_states[:, :, :32]
        model = np.zeros((S, A, S))
        np.add.at(model, (np.arange(S)[:, None, None], np.arange(A)[None, :, None], kept), 1.0 / kept.shape[2])
        return reference.evaluate_arrays(model, problem.rewards, problem.gamma, problem.policy)

    mdp = rlrates.garnet(states=20, actions=4, branching=5, seed=seed)
    claim = rlrates.Claim(n=-0.5, horizon=2.0)
    outcomes = []
    for label, estimator in (("plug-in evaluation", reference.plugin_q_pi), ("stale-buffer refactor", stale_buffer_q_pi)):
        result = rlrates.check(estimator, mdp, claim, target="q_pi", seed=seed)
        print(f"== {label} ==")
        print(result.message)
        print()
        outcomes.append(result.status)
    expected = ["pass", "fail"]
    print(f"demo: plug-in {outcomes[0]}, stale buffer {outcomes[1]} (expected {expected[0]}, {expected[1]})")
    return 0 if outcomes == expected else 1


def _style(path: str | None) -> Any:
    """A context that applies the matplotlib style sheet ``path`` (nothing without one, or without matplotlib)."""
    import contextlib

    if path is None:
        return contextlib.nullcontext()
    from .report.figures import load_matplotlib

    matplotlib = load_matplotlib()
    if matplotlib is None:
        return contextlib.nullcontext()
    import matplotlib.style

    return matplotlib.style.context(path)


def _report(args: argparse.Namespace) -> int:
    import warnings

    from .report import ReportError, ReportWarning, rebuild

    columns = [c.strip() for c in args.columns.split(",") if c.strip()] if args.columns else None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ReportWarning)
        try:
            with _style(args.style):
                written = rebuild(args.directory, figure_width=args.figure_width, columns=columns,
                                  span=args.table_span)
        except (ReportError, ValueError, OSError) as exc:
            print(f"rlrates report: error: {exc}", file=sys.stderr)
            return 2
    for path in written:
        print(f"wrote {path}")
    for warning in caught:
        if issubclass(warning.category, ReportWarning):
            print(f"rlrates report: {warning.message}", file=sys.stderr)
        else:  # pragma: no cover - anything else goes back to the warnings machinery
            warnings.warn_explicit(warning.message, warning.category, warning.filename, warning.lineno)
    return 0


def _seed(text: str) -> int:
    try:
        seed = int(text)
    except ValueError:
        seed = -1
    if seed < 0:
        raise argparse.ArgumentTypeError(f"the master seed must be an integer >= 0, got {text!r}")
    return seed


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m rlrates", description="pytest-rlrates command line")
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser("demo", help="check a correct and a broken estimator on a Garnet MDP")
    demo.add_argument("--seed", type=_seed, default=0, help="master seed, an integer >= 0 (default 0)")
    report = commands.add_parser("report", help="rebuild the figures and index of a report directory from its saved files")
    report.add_argument("directory", help="the report directory (holds one folder per check)")
    report.add_argument("--figure-width", default=None, metavar="WIDTH",
                        help="column (3.4 in, panels stacked), page (7 in) or a width in inches "
                        "(default: the figure size of your matplotlib style, else page)")
    report.add_argument("--style", default=None, metavar="FILE",
                        help="a matplotlib style sheet (name or file) to draw the figures with")
    report.add_argument("--columns", default=None, metavar="LIST",
                        help="comma-separated columns of index.tex: check, test, target, mdp, claim, n, horizon, "
                        "verdict (default check,mdp,n,horizon,verdict)")
    report.add_argument("--table-span", default="column", choices=("column", "page", "long"),
                        help="index.tex as one-column table floats (default), full-width table* floats, "
                        "or a longtable across pages (one-column documents)")
    args = parser.parse_args(argv)
    if args.command == "demo":
        return _demo(args.seed)
    if args.command == "report":
        return _report(args)
    return 2  # pragma: no cover


if __name__ == "__main__":
    sys.exit(main())
