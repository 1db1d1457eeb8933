"""Result objects: what a check found, as frozen records.

* :class:`Fit`: one claimed factor (its fitted exponent, one-sided bounds and
  their levels, the claim, the tolerance, what the check could have detected,
  and the verdict), with ``to_dict`` / ``from_dict`` for JSON;
* :class:`CellFailure`: why an estimator call gave no usable error, and where;
* :class:`CheckResult`: the whole answer, in groups: the MDP it ran on
  (:class:`MDPDescription`), how the run went (:class:`RunInfo`) and the
  evidence tables (:class:`Evidence`). Its ``message`` is rendered when first
  read (a check nobody reads the message of does not pay for it).

Pure: no pytest, no I/O; pandas only for the evidence tables, built when first read.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, fields
from typing import TYPE_CHECKING, Any

from .claims import Claim
from .columns import Columns
from .budgets import Budget
from .vocabulary import FACTORS, FIT_VERDICTS, Factor, FailureKind, FitVerdict, Status

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = [
    "Fit", "FIT_KEYS", "CellFailure", "Block", "MDPDescription", "RunInfo", "Evidence",
    "CheckResult", "CheckInterrupted", "fits_frame",
]

_FACTOR_SYMBOLS = {"n": "n", "horizon": "H", "coverage": "C"}


def _number_or_nan(value: Any) -> float:
    return math.nan if value is None else float(value)


def _finite_or_none(value: float) -> float | None:
    return value if math.isfinite(value) else None


@dataclass(frozen=True)
class Fit:
    """The evidence on one claimed factor.

    ``exponent`` is the fitted exponent and ``se`` its standard error (NaN when
    not measured). ``low`` is the fire-side one-sided bound at confidence level
    ``low_level``; ``high`` the pass-side one-sided bound at level ``high_level``.
    The claim is tested against ``claimed + tolerance``. ``detectable`` is the
    smallest true exponent this check would have failed with 95% probability
    (NaN when not measured).
    """

    factor: Factor
    exponent: float
    se: float
    low: float
    high: float
    low_level: float
    high_level: float
    claimed: float
    tolerance: float
    detectable: float
    verdict: FitVerdict

    def __post_init__(self) -> None:
        if self.factor not in FACTORS:
            raise ValueError(f"`factor` must be one of {', '.join(FACTORS)}, got {self.factor!r}")
        if self.verdict not in FIT_VERDICTS:
            raise ValueError(f"`verdict` must be one of {', '.join(FIT_VERDICTS)}, got {self.verdict!r}")

    @property
    def symbol(self) -> str:
        """``n``, ``H`` or ``C``."""
        return _FACTOR_SYMBOLS[self.factor]

    @property
    def limit(self) -> float:
        """The exponent actually tested: the claim plus its tolerance."""
        return self.claimed + self.tolerance

    @property
    def measured(self) -> bool:
        return math.isfinite(self.exponent) and math.isfinite(self.low) and math.isfinite(self.high)

    def describe(self) -> str:
        """One line, e.g. ``n -0.512 in [-0.560, -0.470], claimed <= -0.5: ok``."""
        seen = f"{self.exponent:+.3f} in [{self.low:+.3f}, {self.high:+.3f}]" if self.measured else "not measurable"
        return f"{self.symbol} {seen}, claimed <= {self.claimed:+g}: {self.verdict}"

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe: non-finite numbers become ``None``."""
        out: dict[str, Any] = {}
        for item in fields(self):
            value = getattr(self, item.name)
            out[item.name] = _finite_or_none(value) if isinstance(value, float) else value
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> "Fit":
        """The inverse of :meth:`to_dict` (``None`` becomes NaN); unknown or missing keys raise ``ValueError``."""
        if not isinstance(data, Mapping):
            raise ValueError(f"a fit must be a mapping, got {type(data).__name__}")
        missing = [key for key in FIT_KEYS if key not in data]
        if missing:
            raise ValueError(f"a fit lacks key(s) {', '.join(missing)}")
        numbers: dict[str, float] = {}
        for key in FIT_KEYS:
            if key in ("factor", "verdict"):
                continue
            if not _is_number(data[key]):
                raise ValueError(f"fit key {key!r} must be a number or null, got {data[key]!r}")
            numbers[key] = _number_or_nan(data[key])
        factor, verdict = data["factor"], data["verdict"]
        if factor not in FACTORS:
            raise ValueError(f"fit key 'factor' must be one of {', '.join(FACTORS)}, got {factor!r}")
        if verdict not in FIT_VERDICTS:
            raise ValueError(f"fit key 'verdict' must be one of {', '.join(FIT_VERDICTS)}, got {verdict!r}")
        return cls(factor=factor, verdict=verdict, **numbers)


def _is_number(value: Any) -> bool:
    return value is None or (isinstance(value, (int, float)) and not isinstance(value, bool))


#: The keys of a fit, in order (``Fit.to_dict``, ``check.json``'s ``fits``, ``CheckResult.fits`` columns).
FIT_KEYS: tuple[str, ...] = tuple(item.name for item in fields(Fit))


def fits_frame(fits: tuple[Fit, ...]) -> "pd.DataFrame":
    """A DataFrame with one row per fit and the columns ``FIT_KEYS``."""
    import pandas as pd

    return pd.DataFrame([[getattr(fit, key) for key in FIT_KEYS] for fit in fits], columns=list(FIT_KEYS))


@dataclass(frozen=True)
class CellFailure:
    """Why an estimator call did not give a usable error, and at which (gamma, n, replicate)."""

    gamma: float
    n: int
    replicate: int
    kind: FailureKind
    message: str
    traceback: str
    behaviour: int | None = None  # the behaviour level of a logged-data cell

    def describe(self) -> str:
        where = f"gamma={self.gamma:g}, n={self.n}, replicate={self.replicate}"
        if self.behaviour is not None:
            where += f", behaviour={self.behaviour}"
        if self.kind == "raised":
            return f"the estimator raised at {where}: {self.message}"
        if self.kind == "interrupted":
            return f"interrupted ({self.message or 'KeyboardInterrupt'}) at {where}; the rows finished before it are kept"
        if self.kind == "crashed":
            return f"the cell at {where} never finished: {self.message}; the rows finished before it are kept"
        return f"invalid estimate at {where}: {self.message}"


@dataclass(frozen=True)
class Block:
    """Replicates ``start .. stop - 1`` of the cell (gamma, n), drawn together from one stream."""

    gamma: float
    n: int
    start: int
    stop: int


@dataclass(frozen=True)
class MDPDescription:
    """The MDP a check ran on: its name, family metadata, and per discount its fingerprint and error scale."""

    name: str
    metadata: Mapping[str, Any]
    fingerprints: Mapping[float, str]
    scales: Mapping[float, float]


@dataclass(frozen=True)
class RunInfo:
    """How the run went: passes, timings, the stream context, the replicate blocks and the reproducer.

    ``estimator`` describes the estimator that ran (:func:`rlrates.estimator_origin.estimator_origin`);
    ``label`` is the short name of the check in reports ("" when none was given).
    """

    passes: int
    elapsed: float
    estimator_seconds: float
    context: str
    blocks: tuple[Block, ...]
    reproducer: str
    estimator: Mapping[str, Any] = field(default_factory=dict)
    label: str = ""


@dataclass(frozen=True)
class Evidence:
    """The tables behind the verdict, held as numpy columns; each becomes a DataFrame when first read.

    ``table``: one row per (gamma, n, replicate) with the error (columns
    ``ERROR_COLUMNS``). ``summary``: one row per (gamma, n) cell with the mean,
    its log and delta-method variance, and whether the cell entered the fits
    (``fitted``) or why not (``left_out``). ``slopes``: the n-slope per discount.
    A check never builds them itself (``rows``, ``cells`` and ``slope_rows`` are
    what it computed), so a check that nobody reads costs no pandas.
    """

    rows: Columns
    cells: Columns
    slope_rows: tuple[dict[str, Any], ...] = ()
    _frames: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)

    def _frame(self, name: str) -> "pd.DataFrame":
        if name not in self._frames:
            if name == "slopes":
                import pandas as pd

                self._frames[name] = pd.DataFrame([dict(row) for row in self.slope_rows])
            else:
                self._frames[name] = (self.rows if name == "table" else self.cells).to_frame()
        return self._frames[name]

    @property
    def table(self) -> "pd.DataFrame":
        return self._frame("table")

    @property
    def summary(self) -> "pd.DataFrame":
        return self._frame("summary")

    @property
    def slopes(self) -> "pd.DataFrame":
        return self._frame("slopes")


@dataclass(frozen=True)
class CheckResult:
    """Everything a check found; ``message`` explains it in plain words."""

    status: Status
    claim: Claim
    target: str
    norm: str
    budget: Budget
    seed: int
    mdp: MDPDescription
    run: RunInfo
    evidence: Evidence
    factors: tuple[Fit, ...]
    fired: tuple[str, ...] = ()
    reasons: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    failure: CellFailure | None = None
    data_regime: str = "generative"  # where the samples came from: "generative", "transitions" or "trajectories"
    # renders the message from the other fields (rlrates.messages.format_message, given by the check)
    _render: Callable[["CheckResult"], str] | None = field(default=None, repr=False, compare=False)

    @property
    def message(self) -> str:
        """The plain-text explanation (:func:`rlrates.messages.format_message`), rendered when first read."""
        text = self.__dict__.get("_message")
        if text is None:
            text = "" if self._render is None else self._render(self)
            object.__setattr__(self, "_message", text)  # a cache of a pure function of the fields
        return text

    @property
    def passed(self) -> bool:
        return self.status == "pass"

    @property
    def table(self) -> "pd.DataFrame":
        """The tidy error table: one row per (gamma, n, replicate)."""
        return self.evidence.table

    @property
    def fits(self) -> "pd.DataFrame":
        """The fits as a DataFrame (a view of ``factors``: one row per claimed factor)."""
        return fits_frame(self.factors)

    @property
    def estimator_calls(self) -> int:
        """Calls made: the rows of the table, plus the call that raised or returned an invalid estimate."""
        failed = self.failure is not None and self.failure.kind in ("raised", "invalid")
        return len(self.evidence.rows) + int(failed)

    def fit(self, factor: Factor) -> Fit | None:
        """The fit of one factor, or ``None`` when it was not claimed."""
        return next((fit for fit in self.factors if fit.factor == factor), None)

    def __repr__(self) -> str:
        return (f"CheckResult(status={self.status!r}, target={self.target!r}, mdp={self.mdp.name!r}, "
                f"fired={list(self.fired)})")


class CheckInterrupted(KeyboardInterrupt):
    """A KeyboardInterrupt during a sweep, carrying the partial result (status "error").

    Catching it as a KeyboardInterrupt behaves as usual; callers that want the rows
    computed so far (the pytest layer writes them to the report) read ``.result``.
    """

    def __init__(self, result: CheckResult) -> None:
        super().__init__(result.failure.describe() if result.failure else "interrupted")
        self.result = result
