"""The words results are made of: statuses, verdicts, needs, failure kinds, targets, norms, factors.

Each is a ``typing.Literal`` alias, so type checkers catch a misspelt status, and
the tuple of its values is derived from the alias (``typing.get_args``), so
there is one list to keep. The names of the error table's columns and of the
pytest report property that carries a check record are defined here once too.
Pure: imports nothing from rlrates.
"""

from __future__ import annotations

from typing import Literal, get_args

__all__ = [
    "Status", "STATUSES", "Outcome", "FitVerdict", "FIT_VERDICTS", "SubTestVerdict", "SUBTEST_VERDICTS",
    "SubTestName", "SUBTEST_NAMES", "Need", "NEEDS", "FailureKind", "FAILURE_KINDS", "Target", "TARGETS",
    "Norm", "NORMS", "Factor", "FACTORS", "DataRegime", "DATA_REGIMES", "ERROR_COLUMNS", "LOGGED_COLUMNS",
    "PROPERTY_NAME",
]

#: What a check answers.
Status = Literal["pass", "fail", "inconclusive", "error"]
STATUSES: tuple[Status, ...] = get_args(Status)

#: What one decision pass answers; "ambiguous" asks for more evidence (and becomes "inconclusive"
#: only when the budget is spent).
Outcome = Literal["pass", "fail", "ambiguous"]

#: The verdict on one claimed factor.
FitVerdict = Literal["ok", "violated", "unclear", "exact"]
FIT_VERDICTS: tuple[FitVerdict, ...] = get_args(FitVerdict)

#: The verdict of one sub-test.
SubTestVerdict = Literal["ok", "violated", "unclear"]
SUBTEST_VERDICTS: tuple[SubTestVerdict, ...] = get_args(SubTestVerdict)

#: The sub-tests of a verdict ("reach": every discount had enough asymptotic points;
#: "stall": the error stays large and does not fall at some discount).
SubTestName = Literal["rate", "floor", "reach", "horizon", "stall", "coverage"]
SUBTEST_NAMES: tuple[SubTestName, ...] = get_args(SubTestName)

#: What more evidence an ambiguous pass asks for ("nothing": no budget would settle it).
Need = Literal["replicates", "larger_n", "nothing"]
NEEDS: tuple[Need, ...] = get_args(Need)

#: Why an estimator call gave no usable error ("crashed": the executor lost the cell, e.g. its worker process died).
FailureKind = Literal["raised", "invalid", "interrupted", "crashed"]
FAILURE_KINDS: tuple[FailureKind, ...] = get_args(FailureKind)

#: What the estimator estimates.
Target = Literal["q_pi", "q_star", "policy", "model", "value"]
TARGETS: tuple[Target, ...] = get_args(Target)

#: How an error is measured over states and actions.
Norm = Literal["sup", "mean"]
NORMS: tuple[Norm, ...] = get_args(Norm)

#: The factors a claim bounds: the sample size n, the effective horizon H and (logged data) the
#: concentrability C of the data distribution.
Factor = Literal["n", "horizon", "coverage"]
FACTORS: tuple[Factor, ...] = get_args(Factor)

#: Where the samples come from: n next states for every pair (a generative model), n logged
#: transitions with (s, a) from a behaviour policy's occupancy, or n transitions in whole episodes.
DataRegime = Literal["generative", "transitions", "trajectories"]
DATA_REGIMES: tuple[DataRegime, ...] = get_args(DataRegime)

#: The extra columns of a logged-data check's error table: the behaviour policy's index in the
#: check and the concentrability coefficient C of its data distribution.
LOGGED_COLUMNS = ("behaviour", "C")

#: The columns of a check's tidy error table (``CheckResult.table``, ``errors.csv``).
ERROR_COLUMNS = ("gamma", "H", "n", "replicate", "error", "seconds")

#: The pytest user property (and JUnit XML property) that carries a check record.
PROPERTY_NAME = "rlrates"
