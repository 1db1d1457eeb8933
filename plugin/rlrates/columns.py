"""The tables of the statistics path, held as named numpy columns.

A check builds its error rows, cell summaries and slopes many times per pass;
doing that in pandas cost more than the sampling it summarises. :class:`Columns`
keeps a tidy table as equal-length numpy arrays with the few operations the
statistics need (select, filter, sort, concatenate, group), and becomes a
``pandas.DataFrame`` only where a user reads it (``CheckResult.table``, the
evidence tables, reports), once, at the end.

:func:`group_stats` gives per-group count, mean, median, sample sd, max and min
(numpy's summation; the sd by the two-pass formula), with groups in sorted key
order.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

__all__ = ["Columns", "Groups", "group_rows", "group_stats"]


class Columns:
    """A small tidy table: named, equal-length 1-d numpy arrays, in a fixed column order."""

    __slots__ = ("_data", "_length")

    def __init__(self, data: Mapping[str, Any], length: int | None = None) -> None:
        arrays = {str(name): np.asarray(values) for name, values in data.items()}
        lengths = {len(a) for a in arrays.values()}
        if len(lengths) > 1:
            raise ValueError(f"columns of unequal length: {sorted(lengths)}")
        self._data = arrays
        self._length = lengths.pop() if lengths else int(length or 0)

    @classmethod
    def _made(cls, data: dict[str, np.ndarray], length: int) -> "Columns":
        """A Columns of arrays already checked (the internal constructor of every derived table)."""
        made = cls.__new__(cls)
        made._data, made._length = data, length
        return made

    @classmethod
    def of(cls, table: "Columns | pd.DataFrame") -> "Columns":
        """A Columns view of ``table`` (a Columns, or a DataFrame whose columns are copied out)."""
        if isinstance(table, Columns):
            return table
        return cls({name: table[name].to_numpy() for name in table.columns}, len(table))

    @classmethod
    def concat(cls, parts: Sequence["Columns"]) -> "Columns":
        """The rows of ``parts`` one after another (every part has the first part's columns)."""
        kept = [part for part in parts if part.columns]
        if not kept:
            return parts[0] if parts else cls({})
        names = kept[0].columns
        return cls({name: np.concatenate([part[name] for part in kept]) for name in names})

    @property
    def columns(self) -> tuple[str, ...]:
        return tuple(self._data)

    def __len__(self) -> int:
        return self._length

    def __contains__(self, name: object) -> bool:
        return name in self._data

    def __getitem__(self, key: Any) -> Any:
        """A column by name (an ndarray), or the rows picked by a boolean mask, index array or slice."""
        if isinstance(key, str):
            try:
                return self._data[key]
            except KeyError:
                raise KeyError(f"no column {key!r} (columns: {', '.join(self._data)})") from None
        picked = {name: values[key] for name, values in self._data.items()}
        return Columns._made(picked, len(next(iter(picked.values()))) if picked else 0)

    def select(self, *names: str) -> "Columns":
        """Only the columns ``names`` (a narrow table filters faster)."""
        return Columns._made({name: self[name] for name in names}, self._length)

    def with_columns(self, **new: Any) -> "Columns":
        """These columns plus (or replacing) ``new``, arrays of this table's length."""
        data = {**self._data, **{name: np.asarray(values) for name, values in new.items()}}
        if any(len(values) != self._length for values in data.values()):
            raise ValueError(f"new columns must have {self._length} rows")
        return Columns._made(data, self._length)

    def sort(self, *keys: str) -> "Columns":
        """The rows in ascending order of ``keys`` (the first key the slowest; ties keep their order)."""
        if not self._length:
            return self
        order = np.lexsort([self._data[key] for key in reversed(keys)])
        return self[order]

    def row(self, index: int) -> dict[str, Any]:
        """One row as a dict of Python scalars."""
        return {name: values[index].item() for name, values in self._data.items()}

    def to_frame(self) -> "pd.DataFrame":
        """The table as a pandas DataFrame (the one place the statistics path meets pandas)."""
        import pandas as pd

        return pd.DataFrame(dict(self._data), index=pd.RangeIndex(self._length))

    def __repr__(self) -> str:
        return f"Columns({self._length} rows: {', '.join(self._data)})"


class Groups:
    """Rows grouped by key columns: ``keys`` (one row per group, sorted), ``order`` (the rows, grouped), ``starts``."""

    __slots__ = ("keys", "order", "starts", "counts", "label")

    def __init__(self, keys: Columns, order: np.ndarray, starts: np.ndarray, counts: np.ndarray,
                 label: np.ndarray) -> None:
        self.keys, self.order, self.starts, self.counts, self.label = keys, order, starts, counts, label

    def __len__(self) -> int:
        return len(self.keys)


def group_rows(table: Columns, keys: Iterable[str], within: str | None = None) -> Groups:
    """Group ``table``'s rows by ``keys``; within a group the rows are in ascending ``within`` (then row) order."""
    names = list(keys)
    columns = [table[name] for name in names]
    order = np.lexsort(([table[within]] if within else []) + columns[::-1]) if len(table) else np.zeros(0, int)
    if not len(table):
        return Groups(Columns({name: table[name][:0] for name in names}), order, order, order, order)
    ordered = [column[order] for column in columns]
    change = np.zeros(len(order), dtype=bool)
    change[0] = True
    for column in ordered:
        change[1:] |= column[1:] != column[:-1]
    starts = np.flatnonzero(change)
    counts = np.diff(np.concatenate((starts, [len(order)])))
    label = np.cumsum(change) - 1
    return Groups(Columns._made({name: column[starts] for name, column in zip(names, ordered)}, len(starts)), order,
                  starts, counts, label)


def group_stats(values: np.ndarray, groups: Groups) -> dict[str, np.ndarray]:
    """Per group: count, mean, median, sd (sample, 0 for one value), high, low of ``values``.

    The groups must have been formed with ``within`` the values' own column, so each
    group's values are sorted (the median reads the middle ones).
    """
    if not len(groups):
        empty = np.zeros(0)
        return {"count": groups.counts.astype(np.int64), "mean": empty, "median": empty, "sd": empty,
                "high": empty, "low": empty}
    ordered = values[groups.order].astype(float, copy=False)
    starts, counts = groups.starts, groups.counts
    mean = np.add.reduceat(ordered, starts) / counts
    # inf - inf in a cell with an infinite error, 0 / 0 for one value, two huge middles summed
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        deviation = ordered - mean[groups.label]
        variance = np.add.reduceat(deviation * deviation, starts) / (counts - 1)
        sd = np.sqrt(variance)
        sd[np.isnan(sd)] = 0.0  # one value (no spread to measure), or infinite errors
        low_mid, high_mid = starts + (counts - 1) // 2, starts + counts // 2
        median = np.where(low_mid == high_mid, ordered[low_mid], (ordered[low_mid] + ordered[high_mid]) / 2)
    return {"count": counts.astype(np.int64), "mean": mean, "median": median, "sd": sd,
            "high": np.maximum.reduceat(ordered, starts), "low": np.minimum.reduceat(ordered, starts)}
