"""Plain-text explanation of a check result: claim, fits, why, the numbers, how to reproduce.

Pure functions of a :class:`~rlrates.result.CheckResult`; no pytest, no I/O.
"""

from __future__ import annotations

import math

import numpy as np

from .columns import Columns, group_rows, group_stats
from .result import CheckResult

__all__ = ["format_message", "headline", "mean_error_grid", "format_interval"]

_REASON_NAMES = {
    "stall": "error does not fall",
    "rate": "rate too slow",
    "floor": "error floor",
    "horizon": "horizon growth too steep",
}


def headline(result: CheckResult) -> str:
    """One line: status, which sub-tests fired, target and MDP."""
    status = result.status.upper()
    if result.status == "fail":
        why = ", ".join(_REASON_NAMES.get(f, f) for f in result.fired)
        status += f" ({why})"
    elif result.status == "inconclusive":
        status += " (undecided within the budget's escalation allowance)"
    elif result.status == "error":
        status += " (the estimator failed)"
    return f"rlrates {status}: target {result.target} on {result.mdp.name}"


def format_interval(exponent: float, low: float, high: float) -> str:
    if not math.isfinite(exponent):
        return "n/a"
    return f"{exponent:+.3f} [{low:+.3f}, {high:+.3f}]"


def mean_error_grid(table: Columns) -> list[str]:
    """Mean error per n (rows) and gamma (columns; for a coverage sweep per gamma and C), as aligned text lines.

    ``table`` is the error table, or (for the generative model) the cell summary of
    that table (:func:`rlrates.fitting.summarise_cells`, which has the means already).
    """
    table = Columns.of(table)
    if not len(table):
        return []
    coverage = "behaviour" in table and len(np.unique(table["behaviour"])) > 1
    across = ["gamma", "C"] if coverage else ["gamma"]
    if "mean" in table and not coverage:  # a summary: one row per (gamma, n), sorted
        keys, means = table.select("gamma", "n"), np.asarray(table["mean"])
    else:
        groups = group_rows(table, [*across, "n"], within="error")
        means = group_stats(table["error"], groups)["mean"]
        keys = groups.keys
    columns = group_rows(keys, across).keys
    labels = [f"gamma={g:g} C={c:.3g}" if coverage else f"gamma={g:g}"
              for g, c in zip(columns["gamma"].tolist(), (columns["C"] if coverage else columns["gamma"]).tolist())]
    ns = np.unique(keys["n"]).tolist()
    column_of = {tuple(columns[name][i].item() for name in across): i for i in range(len(columns))}
    cells = [["-"] * len(labels) for _ in ns]
    row_of = {n: i for i, n in enumerate(ns)}
    for i in range(len(keys)):
        where = column_of[tuple(keys[name][i].item() for name in across)]
        cells[row_of[keys["n"][i].item()]][where] = f"{means[i]:.4g}"
    widths = [max(len(label), *(len(row[j]) for row in cells)) for j, label in enumerate(labels)]
    first = max(len("n"), *(len(str(n)) for n in ns))
    lines = [f"{'n':>{first}}  " + "  ".join(f"{label:>{w}}" for label, w in zip(labels, widths))]
    lines += [f"{n:>{first}}  " + "  ".join(f"{value:>{w}}" for value, w in zip(row, widths)) for n, row in zip(ns, cells)]
    return lines


_ASSUMED = {
    "generative": "generative model",
    "transitions": "i.i.d. logged transitions from an exactly known occupancy",
    "trajectories": "logged episodes of a fixed length from a known initial distribution",
}


def format_message(result: CheckResult) -> str:
    measured = "absolute error of J(pi)" if result.target == "value" else f"{result.norm}-norm error"
    lines = [headline(result), f"claimed:   {result.claim.describe()}  ({measured})"]
    if result.failure is not None:
        lines.append(f"why:       {result.failure.describe()}")
        lines.append(f"           {len(result.evidence.rows)} replicate(s) finished before it and are kept in the table")
        if result.failure.traceback:
            lines.append("executor traceback:" if result.failure.kind == "crashed" else "estimator traceback:")
            lines.extend("    " + line for line in result.failure.traceback.rstrip().splitlines())
    else:
        lines.append("fitted:    factor    exponent [one-sided bounds]   tested limit (claim + tolerance)  verdict")
        for fit in result.factors:
            interval = format_interval(fit.exponent, fit.low, fit.high)
            limit = f"<= {fit.limit:+.3f} ({fit.claimed:g} + {fit.tolerance:g})"
            lines.append(f"           {fit.symbol:<8}  {interval:<28} {limit:<33} {fit.verdict}")
        levels = {(fit.low_level, fit.high_level) for fit in result.factors if fit.measured}
        if levels:
            lines.append("bounds:    " + "; ".join(
                f"lower {low:.2%}, upper {high:.2%} one-sided" for low, high in sorted(levels)))
        for fit in result.factors:
            if fit.measured and math.isfinite(fit.detectable):
                worse = "slower decay" if fit.factor == "n" else "steeper growth"
                lines.append(f"power:     would have caught {fit.symbol}^{fit.detectable:+.2f} or {worse} "
                             "with 95% probability")
        for reason in result.reasons:
            lines.append(f"why:       {reason}")
        if result.status == "pass" and not result.reasons:
            lines.append("why:       no sub-test fired and every interval is inside its tested limit")
    for note in result.notes:
        lines.append(f"note:      {note}")
    slopes = result.evidence.slope_rows
    if any("slope" in each for each in slopes):
        lines.append("per discount: gamma      H   n-slope (all)   n-slope (largest n)")
        for each in slopes:
            head = f"              {float(each['gamma']):<6g} {float(each['H']):>5.3g}   "
            if each.get("state") == "fitted":
                lines.append(head + f"{float(each['slope']):>+8.3f}        {float(each['upper_slope']):>+8.3f}")
            else:
                lines.append(head + str(each.get("state")))
    evidence = result.evidence
    # without a failure the last decision summarised the whole table: its cell means are the grid's
    summarised = result.failure is None and len(evidence.cells) and "behaviour" not in evidence.rows
    grid = mean_error_grid(evidence.cells if summarised else evidence.rows)
    if grid:
        lines.append("mean error by n:")
        lines.extend("    " + line for line in grid)
    lines.append(
        f"budget:   {result.budget.name}, {result.run.passes} pass(es), {result.estimator_calls} estimator calls, "
        f"{result.run.elapsed:.2f} s ({result.run.estimator_seconds:.2f} s in the estimator)"
    )
    lines.append(f"evidence under idealised assumptions ({_ASSUMED[result.data_regime]}, known rewards), not a proof")
    lines.append(f"reproduce: {result.run.reproducer}")
    return "\n".join(lines)
