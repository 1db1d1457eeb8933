"""``index.tex``: the session index as LaTeX that drops into a paper.

Each row is named by the check's short label (the full test id is kept in a
comment); the table is one column wide by default (``table``; ``span="page"``
gives ``table*``, ``span="long"`` one ``longtable`` for one-column documents),
its columns can be chosen (:data:`LATEX_COLUMNS`), it has a caption and a
``\\label``, and the floats are split so that none is taller than a page (rows
per float estimated from how the names wrap; longtable refuses two-column mode).
Every row states the limit tested (claim plus tolerance) and the levels of the
bounds, in the cell or, when all rows share them, in the caption. Long names get
break points after ``_``, ``-`` and ``/`` and discretionary hyphens in long words,
so no cell overflows its column. Pure: no pytest import.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from typing import Any

from ..fit_words import percent, signed
from ..result import Fit
from ..vocabulary import Factor
from .index_rows import CLAIM_SYMBOLS, Entry, fit_or_reason, tally, verdict_words
from .schema import record_fit, record_label

__all__ = ["LATEX_COLUMNS", "DEFAULT_LATEX_COLUMNS", "ROWS_PER_FLOAT", "SPANS", "latex_escape", "index_latex"]

_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
    "<": r"\textless{}", ">": r"\textgreater{}", "|": r"\textbar{}",
}
_LATEX_PATTERN = re.compile("|".join(re.escape(c) for c in _LATEX_SPECIAL))
_LATEX_TARGETS = {"q_pi": r"$Q^{\pi}$", "q_star": r"$Q^{*}$", "policy": "policy", "model": "model"}

#: The columns ``index.tex`` can show: key -> (heading, relative width).
LATEX_COLUMNS: dict[str, tuple[str, float]] = {
    "check": ("Check", 1.1),
    "test": ("Test id", 2.0),
    "target": ("Target", 0.6),
    "mdp": ("MDP", 1.0),
    "claim": ("Claim", 0.8),
    "n": (r"$n$-exponent", 1.45),
    "horizon": (r"$H$-exponent", 1.45),
    "coverage": (r"$C$-exponent", 1.45),
    "verdict": ("Verdict", 1.0),
}
#: The default columns (``horizon`` and ``coverage`` are left out when no check claims that exponent).
DEFAULT_LATEX_COLUMNS = ("check", "mdp", "n", "horizon", "coverage", "verdict")
_EXPONENT_KEYS: tuple[Factor, ...] = ("n", "horizon", "coverage")
#: At most this many rows per float (fewer when rows wrap onto several lines).
ROWS_PER_FLOAT = 30
# Float height allowance, for a column of a two-column A4 or letter page with 2 cm margins (the
# narrowest case, so rows wrap most): text lines of \footnotesize (9.5 pt apart) plus 3 pt per row,
# at most _FLOAT_POINTS, leaving room for the caption and the heading. Characters per line are
# estimated at _CHAR_POINTS each in a column _COLUMN_POINTS wide.
_FLOAT_POINTS = 540.0
_COLUMN_POINTS = {"column": 236.0, "page": 483.0, "long": 483.0}
_CHAR_POINTS = 4.4


def latex_escape(text: str) -> str:
    """``text`` with LaTeX's special characters escaped for text mode."""
    return _LATEX_PATTERN.sub(lambda match: _LATEX_SPECIAL[match.group()], text)


_BREAK, _HYPHEN = "\x00", "\x01"  # placed in the raw text, turned into LaTeX after escaping
_LONG_WORD = re.compile(r"[A-Za-z]{9,}")


def _hyphenate(word: str) -> str:
    """A discretionary hyphen after every fifth letter of a long word (LaTeX will not hyphenate one
    joined to a hyphen or an underscore), keeping at least three letters on the last line."""
    return "".join(c + (_HYPHEN if (i + 1) % 5 == 0 and len(word) - i > 3 else "") for i, c in enumerate(word))


def _breakable(text: str) -> str:
    """Escaped text that may break after ``_``, ``-``, ``/``, ``,`` and ``.``, before ``[``, and inside long words."""
    marked = re.sub(r"([_\-/,.])", lambda m: m.group(1) + _BREAK, text).replace("[", _BREAK + "[")
    marked = _LONG_WORD.sub(lambda m: _hyphenate(m.group()), marked)
    return latex_escape(marked).replace(_BREAK, r"\allowbreak{}").replace(_HYPHEN, r"\-")



def _fixed(value: float) -> str:
    """``+0.52`` / ``-0.47``: two decimals and a sign; a value that rounds to zero is ``+0.00``."""
    return signed(value)


def _tex_claim(claim: Mapping[str, Any]) -> str:
    parts = [f"{symbol}^{{{claim[key]:g}}}" for key, symbol in CLAIM_SYMBOLS if claim.get(key) is not None]
    return "$" + " ".join(parts) + "$"


def _tex_number(value: float) -> str:
    return "$" + _fixed(value).replace("+", "{+}") + "$"


def _levels(fit: Fit) -> tuple[float, float]:
    return (round(fit.low_level, 6), round(fit.high_level, 6))


def _shared_levels(entries: Sequence[Entry]) -> tuple[float, float] | None:
    """The bounds' levels when every measured fit of every row has the same ones, else ``None``."""
    fits = [record_fit(record, factor) for _, record in entries for factor in _EXPONENT_KEYS]
    levels = {_levels(fit) for fit in fits if fit is not None and fit.measured}
    return next(iter(levels)) if len(levels) == 1 else None


def _tex_exponent(record: Mapping[str, Any], factor: Factor, shared: tuple[float, float] | None) -> str:
    """Fitted exponent and bounds, then the tested limit (and the levels when rows differ in them)."""
    found = fit_or_reason(record, factor)
    if found is None:
        return "---"
    if isinstance(found, str):
        return f"n/a ({latex_escape(found)})"
    limit = r"\mbox{limit " + _tex_number(found.limit) + "}"
    if found.verdict == "exact":
        return r"exact (zero error)\newline " + limit
    if not found.measured:
        return r"not measurable\newline " + limit
    # the bounds may break after the comma: three exponent columns (n, H and C) share one paper column
    bounds = r"\mbox{[" + _tex_number(found.low) + r",}\allowbreak\hspace{0.17em}\mbox{" + _tex_number(found.high) + "]}"
    levels = "" if shared == _levels(found) else (
        r" \mbox{at " + latex_escape(f"{percent(found.low_level)}/") + r"}\allowbreak\mbox{"
        + latex_escape(percent(found.high_level)) + "}")
    return _tex_number(found.exponent) + " " + bounds + levels + r"\newline " + limit


def _short_label(record: Mapping[str, Any]) -> str:
    """The label without a trailing ``[id]`` that names the MDP (it has its own column)."""
    label, mdp = record_label(record), str(record["mdp"]["name"])
    head, bracket, param = label[:-1].rpartition("[") if label.endswith("]") else ("", "", "")
    if bracket and head and param and (mdp == param or mdp.startswith(param + "-")):
        return head
    return label


def _tex_cell(key: str, record: Mapping[str, Any], shared: tuple[float, float] | None) -> str:
    if key == "check":
        return _breakable(_short_label(record))
    if key == "test":
        return r"\texttt{" + _breakable(str(record["test_id"])) + "}"
    if key == "target":
        target = str(record["target"])
        return _LATEX_TARGETS.get(target, latex_escape(target))
    if key == "mdp":
        return _breakable(str(record["mdp"]["name"]))
    if key == "claim":
        return _tex_claim(record["claim"])
    if key in _EXPONENT_KEYS:
        return _tex_exponent(record, key, shared)
    return latex_escape(verdict_words(record))


def _columns(entries: Sequence[Entry], columns: Sequence[str] | None) -> tuple[str, ...]:
    if columns is None:
        claimed = {key for _, record in entries for key in ("horizon", "coverage")
                   if record["claim"].get(key) is not None}
        return tuple(c for c in DEFAULT_LATEX_COLUMNS if c not in ("horizon", "coverage") or c in claimed)
    chosen = tuple(columns)
    unknown = [c for c in chosen if c not in LATEX_COLUMNS]
    if unknown or not chosen:
        raise ValueError(
            f"index columns {', '.join(map(repr, unknown)) or '(none)'} unknown; choose from {', '.join(LATEX_COLUMNS)}"
        )
    return chosen


def _caption(entries: Sequence[Entry], shared: tuple[float, float] | None, part: int, parts: int) -> str:
    levels = (f"lower (fire-side) bound at {percent(shared[0])}, upper (pass-side) bound at {percent(shared[1])}"
              if shared else "lower (fire-side) and upper (pass-side) bounds at the levels given")
    text = (f"Rate checks ({tally(entries)}). Exponent cells: fitted exponent [{levels}]; "
            "limit: the exponent tested, the claim plus its tolerance.")
    if part:
        text = f"Rate checks, continued ({part + 1} of {parts})."
    return r"\caption{" + latex_escape(text) + "}"


def _row_lines(record: Mapping[str, Any], keys: Sequence[str], widths: Sequence[float], points: float) -> int:
    """Estimated text lines of one row: its tallest cell, the names wrapping at the column width."""
    texts = {"check": _short_label(record), "test": str(record["test_id"]), "mdp": str(record["mdp"]["name"]),
             "verdict": verdict_words(record)}
    lines = 1
    for key, width in zip(keys, widths):
        if key in _EXPONENT_KEYS:
            lines = max(lines, 3)
        elif key in texts:
            per_line = max(1, int((width * points - 6.0) / _CHAR_POINTS))
            lines = max(lines, -(-len(texts[key]) // per_line))
    return lines


def _chunks(entries: Sequence[Entry], keys: Sequence[str], widths: Sequence[float], span: str) -> list[list[Entry]]:
    """The rows split into floats that each fit a page (see _FLOAT_POINTS)."""
    chunks: list[list[Entry]] = [[]]
    height = 0.0
    for entry in entries:
        row = 9.5 * _row_lines(entry[1], keys, widths, _COLUMN_POINTS[span]) + 3.0
        if chunks[-1] and (height + row > _FLOAT_POINTS or len(chunks[-1]) == ROWS_PER_FLOAT):
            chunks.append([])
            height = 0.0
        chunks[-1].append(entry)
        height += row
    return chunks


def _float_lines(entries: Sequence[Entry], keys: Sequence[str], widths: Sequence[float], spec: str, span: str,
                 label: str) -> list[str]:
    """The rows as ``table`` (or ``table*``) floats, split so that each fits a page."""
    shared = _shared_levels(entries)
    environment = "table" if span == "column" else "table*"
    chunks = _chunks(entries, keys, widths, span)
    lines: list[str] = []
    for part, chunk in enumerate(chunks):
        lines += [
            f"\\begin{{{environment}}}[tbp]",
            r"\centering\footnotesize\setlength{\tabcolsep}{3pt}",
            _caption(entries, shared, part, len(chunks)),
            *([f"\\label{{{latex_escape(label)}}}"] if part == 0 else []),
            r"\begin{tabular}{@{}" + spec + "@{}}",
            r"\toprule",
            " & ".join(LATEX_COLUMNS[key][0] for key in keys) + r" \\",
            r"\midrule",
        ]
        lines += [" & ".join(_tex_cell(key, record, shared) for key in keys) + r" \\" for _, record in chunk]
        lines += [r"\bottomrule", r"\end{tabular}", f"\\end{{{environment}}}"]
    return lines


def _longtable_lines(entries: Sequence[Entry], keys: Sequence[str], spec: str, label: str) -> list[str]:
    """The rows as one ``longtable`` that breaks across pages, its heading repeated (one-column documents)."""
    shared = _shared_levels(entries)
    heading = " & ".join(LATEX_COLUMNS[key][0] for key in keys) + r" \\"
    return [
        r"{\footnotesize\setlength{\tabcolsep}{3pt}",
        r"\begin{longtable}{@{}" + spec + "@{}}",
        _caption(entries, shared, 0, 1) + f"\\label{{{latex_escape(label)}}}" + r" \\",
        r"\toprule", heading, r"\midrule", r"\endfirsthead",
        rf"\multicolumn{{{len(keys)}}}{{@{{}}l}}{{\emph{{Rate checks, continued}}}} \\",
        r"\toprule", heading, r"\midrule", r"\endhead",
        r"\bottomrule", r"\endlastfoot",
        *(" & ".join(_tex_cell(key, record, shared) for key in keys) + r" \\" for _, record in entries),
        r"\end{longtable}}",
    ]


#: How ``index.tex`` spans the page: a one-column float, a full-width float, or a longtable.
SPANS = ("column", "page", "long")


def index_latex(entries: Sequence[Entry], columns: Sequence[str] | None = None, span: str = "column",
                label: str = "tab:rlrates") -> str:
    """LaTeX (no preamble) to ``\\input``, needing booktabs and array (and longtable for ``span="long"``).

    ``span``: "column" gives ``table`` floats one column wide, "page" ``table*``
    floats (both split so that each fits a page, and both work in two-column
    documents); "long" one ``longtable`` that breaks across pages (one-column
    documents only: longtable refuses two-column mode). ``columns`` picks and
    orders the columns (keys of :data:`LATEX_COLUMNS`); ``label`` is the
    ``\\label`` of the table. Raises ``ValueError`` for an unknown column or span.
    """
    if span not in SPANS:
        raise ValueError(f"index span {span!r} must be one of {', '.join(map(repr, SPANS))}")
    keys = _columns(entries, columns)
    total = sum(LATEX_COLUMNS[key][1] for key in keys)
    widths = [LATEX_COLUMNS[key][1] / total for key in keys]
    spec = "".join(
        r">{\raggedright\arraybackslash\hspace{0pt}}p{\dimexpr" + f"{width:.3f}"
        + r"\linewidth-2\tabcolsep\relax}" for width in widths)
    lines = [
        f"% rlrates checks, {tally(entries)}. Needs \\usepackage{{booktabs,array"
        + (",longtable" if span == "long" else "") + "}.",
        "% Rows are named by each check's label; the full test ids:",
        *(f"%   {record_label(r)}: {r['test_id']}".replace("\n", " ") for _, r in entries),
    ]
    if span == "long":
        lines += _longtable_lines(entries, keys, spec, label)
    else:
        lines += _float_lines(entries, keys, widths, spec, span, label)
    return "\n".join(lines) + "\n"
