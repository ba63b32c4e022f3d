"""Turn parameter text (as it arrives from the CLI) into checked values.

Only value types live here; sources and columns are checked against the data (schema.py).
"""

import datetime as dt
import math
import re

from dbmetrics.errors import DbmetricsError

from .header import Param, QueryInfo

INTEGER = re.compile(r"[+-]?[0-9]+")
EMPTY_MEANS_NONE = ("label_col",)  # label_col= : a log without labels
SAME_AS = re.compile(r"same as ([a-z_][a-z0-9_]*)")  # default: another parameter's text
NUMBER = re.compile(r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")


def with_defaults(info: QueryInfo, params: dict) -> dict:
    """Every declared parameter -> its text: as given, else its default, else None.

    A default written `same as OTHER` takes OTHER's text (e.g. a business table's key columns
    named as the log's). Empty text given means "none" where that makes sense (label_col= for label-free logs,
    or an optional parameter); a parameter with any other default cannot be emptied.
    Unknown names and missing required parameters are errors.
    """
    declared = {p.name: p for p in info.params}
    unknown = sorted(set(params) - set(declared))
    if unknown:
        raise DbmetricsError(
            f"query `{info.name}` has no parameter {', '.join(unknown)}; "
            f"its parameters are: {', '.join(declared)}"
        )
    texts = {}
    for p in info.params:
        given = params.get(p.name)
        text = p.default if given is None else (as_text(p.name, given).strip() or None)
        if text is None and p.default is not None and p.name not in EMPTY_MEANS_NONE:
            raise DbmetricsError(
                f"parameter `{p.name}` cannot be empty; leave it out for its "
                f"default ({p.default}) or give a value"
            )
        if text is None and p.required:
            raise DbmetricsError(
                f"query `{info.name}` needs parameter `{p.name}` ({p.help}); "
                f"pass --set {p.name}=..."
            )
        texts[p.name] = text
    for p in info.params:
        same = SAME_AS.fullmatch(p.default or "")
        if same and params.get(p.name) is None and same.group(1) in texts:
            texts[p.name] = texts[same.group(1)]
    return texts


def as_text(name: str, value) -> str:
    """A parameter value given in Python as the text the CLI would pass: a list or tuple of
    names joined with commas, a date or datetime in ISO form, a bool as true/false, a number
    as written; text as it is.

    >>> as_text("segment_cols", ["region", "plan"]), as_text("ref_start", dt.date(2026, 1, 5))
    ('region,plan', '2026-01-05')
    """
    if isinstance(value, str):
        return value
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, dt.datetime) and value.time() == dt.time() and not value.tzinfo:
        return value.date().isoformat()  # a day, as pandas gives it
    if isinstance(value, dt.date):
        return value.isoformat()
    if isinstance(value, (list, tuple)) and all(isinstance(v, str) for v in value):
        return ",".join(value)
    raise DbmetricsError(
        f"parameter `{name}` takes text, a number, a date or a list of names; "
        f"got {type(value).__name__} {value!r:.60}"
    )


def convert(p: Param, text: str | None):
    """The value bound for `$name`: int, float, date, or str; None stays None (SQL NULL)."""
    if text is None:
        return None
    if p.kind == "integer":
        if not INTEGER.fullmatch(text):
            raise DbmetricsError(f"parameter `{p.name}` expects a whole number; got `{text}`")
        return _in_range(p, int(text))
    if p.kind == "number":
        if not NUMBER.fullmatch(text) or not math.isfinite(float(text)):
            raise DbmetricsError(
                f"parameter `{p.name}` expects a number such as 0.25; got `{text}`"
            )
        return _in_range(p, float(text))
    if p.kind == "date":
        try:
            return dt.date.fromisoformat(text)
        except ValueError:
            raise DbmetricsError(
                f"parameter `{p.name}` expects a date YYYY-MM-DD; got `{text}`"
            ) from None
    if p.kind == "choice" and text not in p.choices:
        raise DbmetricsError(
            f"parameter `{p.name}` must be one of {', '.join(p.choices)}; got `{text}`"
        )
    return text


def _in_range(p: Param, value):
    """`value` if it lies within p's bounds; else an error naming them (an interval such as
    (0, 1) when an end is excluded)."""
    below = p.low is not None and (value <= p.low if p.low_open else value < p.low)
    above = p.high is not None and (value >= p.high if p.high_open else value > p.high)
    if below or above:
        lo, hi = ("" if x is None else fmt(x) for x in (p.low, p.high))
        bounds = (
            f"{'(' if p.low_open else '['}{lo}, {hi}{')' if p.high_open else ']'}"
            if p.low_open or p.high_open
            else f"{lo}..{hi}"
        )
        raise DbmetricsError(f"parameter `{p.name}` must lie in {bounds}; got {value}")
    return value


def fmt(x: float) -> str:
    return str(int(x)) if x == int(x) else str(x)


def split_names(text: str | None) -> list:
    """`a, b` -> ['a', 'b']; None -> []."""
    return [part.strip() for part in (text or "").split(",") if part.strip()]
