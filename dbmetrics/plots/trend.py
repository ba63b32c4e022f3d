"""A metric over ``period``: one line per group, error bars from ``METRIC_se`` when the result
has it (95%: +-1.96 standard errors); for drift, the reference periods shaded, a point ringed
only when the drawn measure's own test flagged it, and that test's fixed threshold drawn."""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from dbmetrics.errors import DbmetricsError
from dbmetrics.kernels.significance import Z95
from dbmetrics.plots.flags import flagged_for, threshold
from dbmetrics.plots.labels import metric_label, period_label
from dbmetrics.plots.rows import split_keys, text
from dbmetrics.plots.style import COLOURS, LINESTYLES, MARKERS, new_figure, tidy

REFERENCE = "reference window"
FLAGGED = "flagged for this measure"
BARS = f"bars: 95% interval (±{Z95:.2f} SE)"
INSIDE_LEGEND = 4  # at most this many lines: legend inside the axes, else beside them


def trend_figure(
    result: pa.Table,
    metric: str,
    by: str,
    keys: tuple[str, ...] = (),
    grain: str = "week",
    title: str | None = None,
    params: dict | None = None,
):
    """A Figure of ``metric`` over ``period``, one line per value of ``by``.

    ``params``: the query's parameters, for the threshold of a drift measure (e.g.
    ``js_threshold`` for ``prediction_js``).

    ``keys``: the result's other group columns (version, segments); where they take more than
    one value, each combination is its own line, told apart by line style. Colour and marker
    follow the ``by`` value.
    """
    _check(result, metric, by)
    others, fixed = split_keys(result, keys, by)
    periods = np.array(result["period"].to_pylist(), dtype="datetime64[D]")
    values = _floats(result[metric])
    errors = (
        Z95 * _floats(result[f"{metric}_se"]) if f"{metric}_se" in result.column_names else None
    )
    lines = _lines(result, [by, *others])
    by_values = sorted({line[0] for line in lines}, key=text)
    other_values = sorted({line[1:] for line in lines}, key=lambda v: tuple(map(text, v)))

    figure = new_figure()
    ax = figure.subplots()
    notes = []
    if "in_reference" in result.column_names and _shade_reference(
        ax, periods, _bools(result["in_reference"])
    ):
        notes.append(REFERENCE)
    for line, at in lines.items():
        i = by_values.index(line[0])
        j = other_values.index(line[1:]) if others else i
        order = np.argsort(periods[at])
        x, y = periods[at][order], values[at][order]
        style = {
            "color": COLOURS[i % len(COLOURS)],
            "marker": MARKERS[i % len(MARKERS)],
            "linestyle": LINESTYLES[j % len(LINESTYLES)],
            "markersize": 4,
            "linewidth": 1.5,
            "label": ", ".join(map(text, line)),
        }
        if errors is None:
            ax.plot(x, y, **style)
        else:
            ax.errorbar(x, y, yerr=errors[at][order], capsize=2, elinewidth=0.8, **style)
    if _ring_flagged(ax, periods, values, np.array(flagged_for(result, metric), dtype=bool)):
        notes.append(FLAGGED)
    limit = threshold(metric, params or {}) if "flag_reasons" in result.column_names else None
    if limit is not None:
        notes.append(_draw_threshold(ax, *limit))
    if errors is not None:
        ax.plot([], [], " ", label=BARS)
        notes.append(BARS)

    ax.set(xlabel=period_label(grain), ylabel=metric_label(metric))
    _date_axis(ax)
    tidy(ax)
    ax.set_title(title or _title(metric, by, others, fixed, grain), fontsize=10)
    _legend(figure, ax, ", ".join([by, *others]), notes, len(lines))
    return figure


def _check(result: pa.Table, metric: str, by: str) -> None:
    numeric = [
        f.name
        for f in result.schema
        if (pa.types.is_integer(f.type) or pa.types.is_floating(f.type)) and f.name != by
    ]
    if metric not in numeric:
        raise DbmetricsError(
            f"--metric: the result has no numeric column '{metric}'; "
            f"numeric columns are: {', '.join(numeric)}"
        )
    if by not in result.column_names:
        raise DbmetricsError(
            f"--by: the result has no column '{by}'; columns are: {', '.join(result.column_names)}"
        )
    if result.num_rows == 0 or result[metric].null_count == result.num_rows:
        raise DbmetricsError(
            f"nothing to plot: '{metric}' has no values (labelled metrics need labels: "
            "--set labels=... --set id_col=...; or the row filters kept no rows)"
        )


def _floats(column) -> np.ndarray:
    return np.array([np.nan if v is None else float(v) for v in column.to_pylist()])


def _bools(column) -> np.ndarray:
    return np.array([bool(v) for v in column.to_pylist()])


def _lines(result: pa.Table, columns: list[str]) -> dict[tuple, np.ndarray]:
    """Each distinct tuple of ``columns`` values -> its boolean row mask, sorted by the values as text."""
    keys = list(zip(*(result[c].to_pylist() for c in columns)))
    distinct = sorted(set(keys), key=lambda key: tuple(map(text, key)))
    return {key: np.array([k == key for k in keys]) for key in distinct}


def _shade_reference(ax, periods: np.ndarray, in_reference: np.ndarray) -> bool:
    """Grey band over the reference periods, half a period step either side; False if none."""
    if not in_reference.any():
        return False
    hours = periods.astype("datetime64[h]")
    distinct = np.unique(hours)
    step = np.diff(distinct).min() if len(distinct) > 1 else np.timedelta64(24, "h")
    ax.axvspan(
        hours[in_reference].min() - step / 2,
        hours[in_reference].max() + step / 2,
        color="#e8e8e8",
        zorder=0,
        label=REFERENCE,
    )
    return True


def _ring_flagged(ax, periods: np.ndarray, values: np.ndarray, flagged: np.ndarray) -> bool:
    """A black ring around every flagged point, one legend entry for all; False if none."""
    if not flagged.any():
        return False
    ax.scatter(
        periods[flagged],
        values[flagged],
        s=110,
        facecolors="none",
        edgecolors="black",
        linewidths=1.3,
        zorder=5,
        label=FLAGGED,
    )
    return True


def _draw_threshold(ax, name: str, value: float, both: bool) -> str:
    """A dashed line at the fixed limit (and at minus it); the legend text."""
    label = f"threshold {name} = {value:g}" + (" (and its negative)" if both else "")
    for level in (value, -value) if both else (value,):
        ax.axhline(level, color="#555555", linestyle=(0, (5, 3)), linewidth=1, zorder=1)
    ax.plot([], [], color="#555555", linestyle=(0, (5, 3)), linewidth=1, label=label)
    return label


def _legend(figure, ax, title: str, notes: list[str], lines: int) -> None:
    """Lines first, then the notes; inside the axes for a few lines, beside them for more."""
    handles, labels = ax.get_legend_handles_labels()
    order = sorted(range(len(labels)), key=lambda i: labels[i] in notes)
    handles, labels = [handles[i] for i in order], [labels[i] for i in order]
    if lines <= INSIDE_LEGEND:
        ax.legend(handles, labels, loc="best", fontsize=8, title=title, title_fontsize=8)
    else:
        figure.legend(
            handles,
            labels,
            loc="outside right upper",
            fontsize=8,
            frameon=False,
            title=title,
            title_fontsize=8,
        )


def _date_axis(ax) -> None:
    import matplotlib.dates as mdates

    locator = mdates.AutoDateLocator(minticks=4, maxticks=10)
    ax.xaxis.set_major_locator(locator)
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(locator))


def _title(
    metric: str, by: str, others: list[str], fixed: dict[str, str], grain: str = "week"
) -> str:
    """``Cross-entropy (nats) per week, by region (model_version v2)``."""
    label = metric_label(metric)
    split = f"{by} and {', '.join(others)}" if others else by
    only = f" ({', '.join(f'{k} {v}' for k, v in fixed.items())})" if fixed else ""
    return f"{label[0].upper()}{label[1:]} per {grain}, by {split}{only}"
