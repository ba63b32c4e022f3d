"""A drift measure as a period x segment heatmap, cells flagged for that measure marked.

One row per version and segment value, one column per period. Colours come from matplotlib's
``cividis`` map (Nuñez, Anderton and Renslow 2018: designed to read the same with and without
colour-vision deficiency, and monotone in lightness, so it survives greyscale); empty cells
are left white. A cell flagged for the drawn measure gets a cross; a cell flagged only for
another reason gets a small dot.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from dbmetrics.errors import DbmetricsError
from dbmetrics.plots.flags import flagged_for
from dbmetrics.plots.labels import metric_label, period_label
from dbmetrics.plots.rows import text
from dbmetrics.plots.style import new_figure

CROSS = "flagged for this measure"
DOT = "flagged for another reason"


def heatmap_figure(
    drift: pa.Table,
    measure: str,
    rows: tuple[str, ...],
    grain: str = "week",
    title: str | None = None,
):
    """A Figure of ``measure`` from the drift query's result: one row per value of ``rows``
    (e.g. version and segment), one column per period."""
    if drift.num_rows == 0 or drift[measure].null_count == drift.num_rows:
        raise DbmetricsError(f"nothing to plot: '{measure}' has no values in these periods")
    periods = sorted(set(drift["period"].to_pylist()))
    keys = list(zip(*(drift[c].to_pylist() for c in rows)))
    names = sorted(set(keys), key=lambda k: tuple(map(text, k)))
    grid = np.full((len(names), len(periods)), np.nan)
    own = np.zeros(grid.shape, bool)
    other = np.zeros(grid.shape, bool)
    values = drift[measure].to_pylist()
    mine = flagged_for(drift, measure)
    anything = [bool(v) for v in drift["flagged"].to_pylist()]
    for key, period, value, flag_mine, flag_any in zip(
        keys, drift["period"].to_pylist(), values, mine, anything
    ):
        i, j = names.index(key), periods.index(period)
        grid[i, j] = np.nan if value is None else value
        own[i, j] = flag_mine
        other[i, j] = flag_any and not flag_mine

    figure = new_figure()
    ax = figure.subplots()
    image = ax.imshow(
        np.ma.masked_invalid(grid), aspect="auto", cmap="cividis", interpolation="nearest"
    )
    colourbar = figure.colorbar(image, ax=ax, pad=0.01)
    colourbar.set_label(metric_label(measure), fontsize=8)
    for mask, marker, size, label in ((own, "x", 40, CROSS), (other, ".", 14, DOT)):
        y, x = np.nonzero(mask)
        if len(x):
            ax.scatter(x, y, marker=marker, s=size, c="white", linewidths=1.4, label=label)
            ax.scatter(x, y, marker=marker, s=size * 0.45, c="black", linewidths=0.7)
    step = max(1, len(periods) // 12)
    ax.set_xticks(range(0, len(periods), step), [str(p) for p in periods[::step]])
    ax.tick_params(axis="x", labelrotation=45, labelsize=7)
    ax.set_yticks(range(len(names)), [" · ".join(map(text, n)) for n in names], fontsize=7)
    ax.set(xlabel=period_label(grain), ylabel=" · ".join(rows))
    if own.any() or other.any():
        from matplotlib.lines import Line2D

        keys = [(CROSS, "x", 7), (DOT, ".", 6)]
        handles = [
            Line2D([], [], marker=m, markersize=z, color="black", linestyle="", label=t)
            for t, m, z in keys
        ]
        ax.legend(
            handles=handles,
            loc="upper left",
            bbox_to_anchor=(0, -0.22),
            ncol=2,
            fontsize=7,
            frameon=False,
        )
    label = metric_label(measure)
    ax.set_title(
        title or f"{label[0].upper()}{label[1:]} per {grain}, by {' and '.join(rows)}", fontsize=10
    )
    return figure
