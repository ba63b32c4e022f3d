"""Text tables for people: aligned for the terminal, or Markdown for notes and tickets.

Numbers are written with ``DIGITS`` significant digits and lined up on the decimal point;
``inf``, ``-inf`` and ``NaN`` are written as such and NULL as ``NULL``. Text from the data is
made safe for a terminal: control characters (escape sequences, ``\\r``, ``\\n``, ``\\t``,
bidirectional overrides) are shown as escapes such as ``\\x1b``, never sent as they are.

``result_table`` fits a query result to a width. The columns before the first numeric one
(period, version, segments, flags and their reasons) say what a row is about and always
stay; the others are left out from the end of the order until the rest fits, and text columns
(such as ``flag_reasons``) wrap onto more lines.
"""

from __future__ import annotations

import datetime as dt
import math
import re
import textwrap
import unicodedata
from dataclasses import dataclass

import pyarrow as pa

MAX_WIDTH = 40
DIGITS = 4  # significant digits of a floating-point cell
WRAP_MIN = 32  # a wrapped text column keeps at least this many characters per line
GAP = "  "

_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069\u200e\u200f]")
_NAMED = {"\n": "\\n", "\r": "\\r", "\t": "\\t"}


def safe(text: str) -> str:
    """``text`` with every control character written as a visible escape.

    >>> safe("north\\x1b[2J\\r")
    'north\\\\x1b[2J\\\\r'
    """
    return _CONTROL.sub(_escape, text)


def _escape(match: re.Match) -> str:
    char = match.group()
    code = ord(char)
    return _NAMED.get(char) or (f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}")


def width_of(text: str) -> int:
    """Columns ``text`` takes on a terminal: wide East Asian characters 2, combining marks 0."""
    return sum(
        0 if unicodedata.combining(c) else 2 if unicodedata.east_asian_width(c) in "WF" else 1
        for c in text
    )


def _pad(text: str, width: int, right: bool) -> str:
    fill = " " * max(width - width_of(text), 0)
    return fill + text if right else text + fill


def render(table: pa.Table, count: bool = True, width: int | None = MAX_WIDTH) -> str:
    """The whole table as aligned text with a header rule (and a row count); empty for no
    columns. Cells longer than ``width`` characters are cut with an ellipsis."""
    if table.num_columns == 0:
        return ""
    columns = [[_cut(c, width) for c in cells(col)] for col in table.columns]
    return _lines(
        [safe(n) for n in table.column_names],
        [[[c] for c in col] for col in columns],
        [_numeric(f.type) for f in table.schema],
        [
            max([width_of(safe(n))] + [width_of(c) for c in col])
            for n, col in zip(table.column_names, columns)
        ],
        [table.num_rows] if count else None,
    )


@dataclass(frozen=True)
class Fitted:
    """The text of a result table and which of its columns it left out."""

    text: str
    shown: tuple
    hidden: tuple


def result_table(
    table: pa.Table, columns: list[str] | None = None, width: int | None = None, elide: bool = True
) -> Fitted:
    """``table``'s ``columns`` (all when None), in that order, fitted to ``width`` characters.

    With ``elide``, columns after the first numeric one are left out from the end of the
    order until the rest fits; text columns are wrapped down to ``WRAP_MIN`` characters.
    """
    names = list(columns) if columns is not None else list(table.column_names)
    names = [n for n in names if n in table.column_names]
    numeric = {f.name: _numeric(f.type) for f in table.schema}
    texts = {n: cells(table[n]) for n in names}
    natural = {n: max([width_of(safe(n))] + [width_of(c) for c in texts[n]]) for n in names}
    narrowest = {
        n: natural[n] if numeric[n] else min(natural[n], max(WRAP_MIN, width_of(safe(n))))
        for n in names
    }

    def total(keep, widths):
        return sum(widths[n] for n in keep) + len(GAP) * (len(keep) - 1)

    keep = list(names)
    if width is not None and elide:
        while total(keep, narrowest) > width:
            first_number = next((i for i, n in enumerate(keep) if numeric[n]), len(keep))
            droppable = keep[max(first_number, 1) :]
            if not droppable:
                break
            keep.remove(droppable[-1])
    widths = {n: natural[n] for n in keep}
    if width is not None:
        while total(keep, widths) > width:
            wide = [n for n in keep if not numeric[n] and widths[n] > narrowest[n]]
            if not wide:
                break
            widest = max(wide, key=lambda n: widths[n])
            widths[widest] = max(narrowest[widest], widths[widest] - (total(keep, widths) - width))
    rows = [[_wrap(c, widths[n]) if not numeric[n] else [c] for c in texts[n]] for n in keep]
    text = _lines(
        [safe(n) for n in keep],
        rows,
        [numeric[n] for n in keep],
        [widths[n] for n in keep],
        [table.num_rows],
    )
    hidden = tuple(n for n in table.column_names if n not in keep)
    return Fitted(text, tuple(keep), hidden)


def markdown(table: pa.Table, columns: list[str] | None = None) -> str:
    """A GitHub-flavoured Markdown table of ``columns`` (all when None); numbers right-aligned."""
    names = [n for n in (columns or table.column_names) if n in table.column_names]
    if not names:
        return ""
    numeric = {f.name: _numeric(f.type) for f in table.schema}

    def row(values):
        return "| " + " | ".join(v.replace("|", "\\|") for v in values) + " |"

    body = [[c.strip() for c in cells(table[n])] for n in names]
    lines = [row([safe(n) for n in names])]
    lines.append("|" + "|".join("---:" if numeric[n] else "---" for n in names) + "|")
    lines += [row(values) for values in zip(*body)]
    return "\n".join(lines) + "\n"


def _lines(header, rows, right, widths, count) -> str:
    """Header, rule, and every row (a row's cells may span several lines), then the count."""

    def line(parts):
        return GAP.join(_pad(p, w, r) for p, w, r in zip(parts, widths, right)).rstrip()

    out = [line(header), line(["-" * w for w in widths])]
    for row in zip(*rows):
        height = max(len(part) for part in row)
        for i in range(height):
            out.append(line([part[i] if i < len(part) else "" for part in row]))
    if count:
        n = count[0]
        out.append(f"({n} row{'' if n == 1 else 's'})")
    return "\n".join(out) + "\n"


def _wrap(text: str, width: int) -> list[str]:
    """``text`` in lines of at most ``width`` columns, breaking after '; ' where it can."""
    if width_of(text) <= width:
        return [text]
    lines, current = [], ""
    for piece in re.split(r"(?<=;) ", text):
        candidate = f"{current} {piece}" if current else piece
        if width_of(candidate) <= width:
            current = candidate
            continue
        if current:
            lines.append(current)
        parts = textwrap.wrap(piece, width, break_on_hyphens=False) or [""]
        lines += parts[:-1]
        current = parts[-1]
    lines.append(current)
    return lines


def _numeric(t: pa.DataType) -> bool:
    return pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t)


def cells(column) -> list[str]:
    """Each value of an Arrow column as text; floating-point columns lined up on the point."""
    values = column.to_pylist()
    if pa.types.is_floating(column.type):
        return aligned([number(v) for v in values])
    return [_cell(v) for v in values]


def number(value: float | None, digits: int = DIGITS) -> str:
    """``value`` with ``digits`` significant digits; exponent form below 1e-4 or from 1e9.

    >>> [number(v) for v in (0.0404, 9.71154e-05, 1234.5678, 0.0, float('-inf'), None)]
    ['0.04040', '9.712e-05', '1235', '0', '-inf', 'NULL']
    """
    if value is None:
        return "NULL"
    if math.isnan(value):
        return "NaN"
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    if value == 0:
        return "0"
    exponent = math.floor(math.log10(abs(value)))
    if -4 <= exponent < 9:
        text = f"{value:.{max(digits - 1 - exponent, 0)}f}"
        if math.floor(math.log10(abs(float(text)))) == exponent:
            return text
        exponent += 1  # rounding carried into a new digit (9.9996 -> 10.000)
        return f"{value:.{max(digits - 1 - exponent, 0)}f}"
    return f"{value:.{digits - 1}e}"


def aligned(texts: list[str]) -> list[str]:
    """Numbers as text padded so that their decimal points (or ends) line up."""
    split = [(t, "") if t == "NULL" else _at_point(t) for t in texts]
    left = max((width_of(a) for a, _ in split), default=0)
    right = max((len(b) for _, b in split), default=0)
    return [a.rjust(left) + b.ljust(right) for a, b in split]


def _at_point(text: str) -> tuple[str, str]:
    head, point, tail = text.partition(".")
    return head, point + tail


def _cell(value) -> str:
    if value is None:
        return "NULL"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return number(value)
    if isinstance(value, (dt.date, dt.time)):
        return value.isoformat(sep=" ") if isinstance(value, dt.datetime) else value.isoformat()
    if isinstance(value, list):
        return "[" + ", ".join(_cell(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{safe(str(k))}: {_cell(v)}" for k, v in value.items()) + "}"
    return safe(str(value))


def _cut(text: str, width: int | None) -> str:
    return text if width is None or width_of(text) <= width else text[: width - 1] + "…"
