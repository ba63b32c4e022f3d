"""Confusion matrix picture: counts and row-normalised rates side by side, or, for many
classes, the most frequent confusions as bars.

The ``confusion`` query's rows are summed over every period and group in the result (counts
add; rates are recomputed from the sums, never averaged). Cells are shaded on one
white-to-blue ramp whose lightness falls steadily, so the picture reads the same in
greyscale and with any colour-vision deficiency; every cell also carries its number.
"""

from __future__ import annotations

import numpy as np
import pyarrow as pa

from dbmetrics.errors import DbmetricsError
from dbmetrics.plots.style import COLOURS, new_figure, tidy

MATRIX_UP_TO = 20  # classes drawn as a matrix; beyond, the top confused pairs
TOP_PAIRS = 20


def pooled_matrix(confusion: pa.Table) -> np.ndarray:
    """(K, K) counts, true class by row, predicted class by column, summed over all rows.

    >>> t = pa.table({"label": [0, 1, 1, 0], "predicted": [0, 0, 1, 0], "rows": [3, 1, 2, 4]})
    >>> pooled_matrix(t).tolist()
    [[7, 0], [1, 2]]
    """
    label = np.asarray(confusion["label"].to_pylist(), np.int64)
    predicted = np.asarray(confusion["predicted"].to_pylist(), np.int64)
    k = int(max(label.max(), predicted.max())) + 1
    matrix = np.zeros((k, k), np.int64)
    np.add.at(matrix, (label, predicted), np.asarray(confusion["rows"].to_pylist(), np.int64))
    return matrix


def row_rates(matrix: np.ndarray) -> np.ndarray:
    """Each row divided by its sum (NaN for a class that never occurs as a label)."""
    totals = matrix.sum(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(totals > 0, matrix / totals, np.nan)


def top_confusions(matrix: np.ndarray, top: int = TOP_PAIRS) -> list:
    """The `top` off-diagonal (true, predicted, rows, rate) by rows, largest first (ties by
    class index).

    >>> top_confusions(np.array([[5, 2, 0], [4, 1, 1], [0, 3, 9]]), 2)
    [(1, 0, 4, 0.6666666666666666), (2, 1, 3, 0.25)]
    """
    rates = row_rates(matrix)
    pairs = [
        (t, p, int(matrix[t, p]), float(rates[t, p]))
        for t in range(len(matrix))
        for p in range(len(matrix))
        if t != p and matrix[t, p] > 0
    ]
    return sorted(pairs, key=lambda x: (-x[2], x[0], x[1]))[:top]


def _compact(n: int) -> str:
    """A count in at most four characters: 987, 9.9k, 12k, 1.2M."""
    for size, unit in ((1_000_000, "M"), (1_000, "k")):
        if n >= size:
            value = n / size
            return f"{value:.1f}{unit}" if value < 10 else f"{value:.0f}{unit}"
    return str(n)


def percent(rate: float) -> str:
    """A rate as a whole percentage; '<1' for a rate that rounds to 0 but is not, '' for 0.

    >>> [percent(r) for r in (0.0, 0.004, 0.126, float("nan"))]
    ['', '<1', '13', '']
    """
    if np.isnan(rate) or rate == 0:
        return ""
    return "<1" if rate < 0.005 else f"{100 * rate:.0f}"


def confusion_figure(
    confusion: pa.Table, names: list | None = None, title: str | None = None, top: int = TOP_PAIRS
):
    """A Figure from the ``confusion`` query's result, pooled over its periods and groups:
    counts and row-normalised rates for up to MATRIX_UP_TO classes, else the `top` most
    frequent confusions as bars."""
    if confusion.num_rows == 0:
        raise DbmetricsError(
            "nothing to plot: no confusion rows (none evaluated, e.g. no labels: "
            "--set labels=... --set id_col=...; or the row filters kept none)"
        )
    matrix = pooled_matrix(confusion)
    k = len(matrix)
    names = [str(n) for n in names] if names and len(names) >= k else [str(c) for c in range(k)]
    heading = title or (
        f"Confusion matrix, {matrix.sum():,} evaluated rows, accuracy "
        f"{np.trace(matrix) / matrix.sum():.3f}"
    )
    if k > MATRIX_UP_TO:
        return _bars(matrix, names, heading, top)
    figure = new_figure()
    left, right = figure.subplots(1, 2)
    _heatmap(left, matrix / max(matrix.max(), 1), matrix, names, _compact, "rows")
    rates = row_rates(matrix)
    _heatmap(right, rates, rates, names, percent, "% of label")
    left.set_title("counts", fontsize=9)
    right.set_title("share of each true class (%)", fontsize=9)
    figure.suptitle(heading, fontsize=10)
    return figure


def _ramp():
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("white_to_blue", ["#FFFFFF", COLOURS[0], "#002A44"])


def _heatmap(ax, shade: np.ndarray, numbers: np.ndarray, names: list, fmt, unit: str) -> None:
    k = len(names)
    ax.imshow(np.nan_to_num(shade), cmap=_ramp(), vmin=0, vmax=1, aspect="equal")
    size = min(8.0, 90.0 / k)
    for t in range(k):
        for p in range(k):
            value = numbers[t, p]
            text = fmt(int(value)) if unit == "rows" else fmt(value)
            if text and text != "0":
                dark = np.nan_to_num(shade[t, p]) > 0.45
                ax.text(
                    p,
                    t,
                    text,
                    ha="center",
                    va="center",
                    fontsize=size,
                    color="white" if dark else "black",
                    fontweight="bold" if t == p else "normal",
                )
    long = k > 8 or max(len(n) for n in names) > 4
    ax.set_xticks(range(k), names, fontsize=size, rotation=90 if long else 0)
    ax.set_yticks(range(k), names, fontsize=size)
    ax.set_xlabel("predicted class", fontsize=8)
    ax.set_ylabel("true class", fontsize=8)
    ax.tick_params(length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)


def _bars(matrix: np.ndarray, names: list, heading: str, top: int):
    pairs = top_confusions(matrix, top)
    figure = new_figure()
    ax = figure.subplots()
    labels = [f"{names[t]} -> {names[p]}" for t, p, _, _ in pairs]
    counts = [n for _, _, n, _ in pairs]
    ax.barh(range(len(pairs)), counts, color=COLOURS[0])
    for i, (_, _, n, rate) in enumerate(pairs):
        ax.text(n, i, f" {n:,} ({100 * rate:.1f}% of the true class)", va="center", fontsize=7)
    ax.set_yticks(range(len(pairs)), labels, fontsize=7)
    ax.invert_yaxis()
    ax.set_xlabel("evaluated rows (true class -> predicted class)")
    ax.set_xlim(0, max(counts, default=1) * 1.35)
    tidy(ax)
    ax.set_title(f"{heading}: the {len(pairs)} most frequent confusions", fontsize=10)
    return figure
