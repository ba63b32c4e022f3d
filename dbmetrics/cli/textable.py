"""A plain aligned text table for the terminal: numbers right, text left, NULL shown as NULL."""

from __future__ import annotations

import pyarrow as pa

MAX_WIDTH = 40


def render(table: pa.Table, count: bool = True, width: int | None = MAX_WIDTH) -> str:
    """The table as aligned text with a header rule (and a row count); empty for no columns.

    Cells longer than ``width`` characters are cut with an ellipsis.
    """
    if table.num_columns == 0:
        return ""
    columns = [[_cut(_cell(v), width) for v in col.to_pylist()] for col in table.columns]
    right = [_numeric(f.type) for f in table.schema]
    widths = [
        max([len(name)] + [len(c) for c in cells])
        for name, cells in zip(table.column_names, columns)
    ]

    def line(cells):
        parts = [c.rjust(w) if r else c.ljust(w) for c, w, r in zip(cells, widths, right)]
        return "  ".join(parts).rstrip()

    lines = [line(table.column_names), line(["-" * w for w in widths])]
    lines += [line(row) for row in zip(*columns)]
    if count:
        lines.append(f"({table.num_rows} row{'' if table.num_rows == 1 else 's'})")
    return "\n".join(lines) + "\n"


def _numeric(t: pa.DataType) -> bool:
    return pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t)


def _cell(value) -> str:
    if value is None:
        text = "NULL"
    elif isinstance(value, bool):
        text = "true" if value else "false"
    elif isinstance(value, float):
        text = format(value, ".6g")
    elif isinstance(value, list):
        text = "[" + ", ".join(_cell(v) for v in value) + "]"
    else:
        text = str(value).replace("\n", " ")
    return text


def _cut(text: str, width: int | None) -> str:
    return text if width is None or len(text) <= width else text[: width - 1] + "…"
