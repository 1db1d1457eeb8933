"""The session index of a report directory: one row per check, as Markdown and as a LaTeX tabular.

Pure text functions of the parsed ``check.json`` records (and the folders they
sit in, relative to the index). No timestamps, no machine-dependent text and
fixed float formats, so rebuilding an index from the same records gives the same
bytes.
"""

from __future__ import annotations

import re
from collections import Counter
from collections.abc import Mapping, Sequence
from typing import Any
from urllib.parse import quote

__all__ = ["index_markdown", "index_latex", "latex_escape"]

Entry = tuple[str, Mapping[str, Any]]  # (folder relative to the index, parsed check.json)

_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
    "<": r"\textless{}", ">": r"\textgreater{}", "|": r"\textbar{}",
}
_LATEX_PATTERN = re.compile("|".join(re.escape(c) for c in _LATEX_SPECIAL))
_LATEX_TARGETS = {"q_pi": r"$Q^{\pi}$", "q_star": r"$Q^{*}$", "policy": "policy", "model": "model"}
_BOUNDS_NOTE = "exponent [fire-side lower bound, pass-side upper bound]"


def latex_escape(text: str) -> str:
    """``text`` with LaTeX's special characters escaped for text mode."""
    return _LATEX_PATTERN.sub(lambda match: _LATEX_SPECIAL[match.group()], text)


def _numbers(record: Mapping[str, Any], factor: str) -> tuple[float, float, float] | None | str:
    """(exponent, low, high); ``None`` when not claimed; a reason when claimed but not measured."""
    if record["claim"][factor] is None:
        return None
    fit = next((fit for fit in record["fits"] if fit["factor"] == factor), None)
    if fit is None:
        return "estimator error" if record["status"] == "error" else "no fit"
    if fit["exponent"] is None or fit["low"] is None or fit["high"] is None:
        return str(fit["verdict"])
    return float(fit["exponent"]), float(fit["low"]), float(fit["high"])


def _verdict(record: Mapping[str, Any]) -> str:
    word = str(record["status"])
    if word == "fail" and record["fired"]:
        word += f" ({', '.join(map(str, record['fired']))})"
    return word


def _fixed(value: float) -> str:
    """``+0.52`` / ``-0.47``: two decimals and a sign; a value that rounds to zero is ``+0.00``."""
    text = f"{value:+.2f}"
    return "+0.00" if text == "-0.00" else text


def _tally(entries: Sequence[Entry]) -> str:
    counts = Counter(str(record["status"]) for _, record in entries)
    parts = [f"{counts[s]} {s}" for s in ("pass", "fail", "inconclusive", "error") if counts[s]]
    return f"{len(entries)} check(s): {', '.join(parts)}"


# --------------------------------------------------------------------------- Markdown


def _md_cell(text: str) -> str:
    """Plain text in a table cell: Markdown's backslash and the cell separator escaped, one line."""
    return text.replace("\\", "\\\\").replace("|", "\\|").replace("\n", " ")


def _md_code(text: str) -> str:
    """A code span in a table cell (backslashes are literal there; only the separator is escaped)."""
    fence = "``" if "`" in text else "`"
    pad = " " if "`" in text else ""
    body = text.replace("|", "\\|").replace("\n", " ")
    return f"{fence}{pad}{body}{pad}{fence}"


def _md_exponent(record: Mapping[str, Any], factor: str) -> str:
    numbers = _numbers(record, factor)
    if numbers is None:
        return "not claimed"
    if numbers == "exact":
        return "exact (zero error)"
    if isinstance(numbers, str):
        return f"not fitted ({numbers})"
    exponent, low, high = numbers
    return f"{_fixed(exponent)} [{_fixed(low)}, {_fixed(high)}]"


def _md_claim(claim: Mapping[str, Any]) -> str:
    parts = [f"{symbol}^{claim[key]:g}" for key, symbol in (("n", "n"), ("horizon", "H")) if claim[key] is not None]
    return " ".join(parts)


def index_markdown(entries: Sequence[Entry]) -> str:
    """A Markdown page: one table row per check, in the order given, with links into each folder."""
    lines = [
        "# rlrates checks",
        "",
        f"{_tally(entries)}. Exponents: {_BOUNDS_NOTE}; each folder's check.json has the levels and full provenance.",
        "",
        "| test | target | MDP | n-exponent | H-exponent | claim | verdict | files |",
        "|---|---|---|---|---|---|---|---|",
    ]
    for folder, record in entries:
        link = quote(folder)
        files = f"[figure]({link}/figure.png) · [pdf]({link}/figure.pdf) · [data]({link}/check.json)"
        cells = [
            _md_code(str(record["test_id"])),
            _md_cell(str(record["target"])),
            _md_cell(str(record["mdp"]["name"])),
            _md_exponent(record, "n"),
            _md_exponent(record, "horizon"),
            _md_cell(_md_claim(record["claim"])),
            _md_cell(_verdict(record)),
            files,
        ]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- LaTeX


def _tex_exponent(record: Mapping[str, Any], factor: str) -> str:
    numbers = _numbers(record, factor)
    if numbers is None:
        return "---"
    if numbers == "exact":
        return "exact"
    if isinstance(numbers, str):
        return f"n/a ({latex_escape(numbers)})"
    exponent, low, high = numbers
    return f"${_fixed(exponent)}$ [${_fixed(low)}$, ${_fixed(high)}$]"


def _tex_claim(claim: Mapping[str, Any]) -> str:
    parts = [f"{symbol}^{{{claim[key]:g}}}" for key, symbol in (("n", "n"), ("horizon", "H")) if claim[key] is not None]
    return "$" + " ".join(parts) + "$"


def index_latex(entries: Sequence[Entry]) -> str:
    """A booktabs ``tabular`` (no preamble) to ``\\input`` inside a table environment."""
    lines = [
        f"% rlrates checks, {_tally(entries)}. Needs \\usepackage{{booktabs}}; \\input this file inside a table.",
        f"% Exponents: {_BOUNDS_NOTE}.",
        r"\begin{tabular}{@{}lllllll@{}}",
        r"\toprule",
        r"Test & Target & MDP & $n$-exponent & $H$-exponent & Claim & Verdict \\",
        r"\midrule",
    ]
    for _, record in entries:
        target = str(record["target"])
        cells = [
            r"\texttt{" + latex_escape(str(record["test_id"])) + "}",
            _LATEX_TARGETS.get(target, latex_escape(target)),
            latex_escape(str(record["mdp"]["name"])),
            _tex_exponent(record, "n"),
            _tex_exponent(record, "horizon"),
            _tex_claim(record["claim"]),
            latex_escape(_verdict(record)),
        ]
        lines.append(" & ".join(cells) + r" \\")
    lines += [r"\bottomrule", r"\end{tabular}"]
    return "\n".join(lines) + "\n"
