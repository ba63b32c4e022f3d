"""PNG pictures of query results, drawn with matplotlib (the optional extra ``plot``).

    confusion_figure(confusion) -> Figure           counts and row rates (or top confusions), pooled
    reliability_figure(calibration, by) -> Figure   accuracy vs confidence per group, pooled over periods
    trend_figure(result, metric, by, keys) -> Figure   a metric over ``period``, one line per group
    heatmap_figure(drift, measure, rows) -> Figure   a drift measure per period x segment, flags marked
    confidence_gap(calibration, keys) -> Table       mean confidence minus accuracy per period
    png_bytes(figure) -> bytes                       WIDTH x HEIGHT pixels
    pool_bins(calibration, by) -> list[Pooled]       calibration bins summed over periods (no matplotlib)
    keep_rows(table, equal, start, end) -> Table     rows with COLUMN = VALUE and period in [start, end]

Importing this package does not import matplotlib; drawing without it raises
``DbmetricsError("plotting needs matplotlib: pip install 'dbmetrics[plot]'")``.
"""

from .confusion import confusion_figure
from .heatmap import heatmap_figure
from .pooling import Pooled, confidence_gap, pool_bins
from .reliability import reliability_figure
from .rows import keep_rows
from .style import HEIGHT, WIDTH, png_bytes, require_matplotlib
from .trend import trend_figure

__all__ = [
    "HEIGHT",
    "WIDTH",
    "Pooled",
    "confidence_gap",
    "heatmap_figure",
    "confusion_figure",
    "keep_rows",
    "png_bytes",
    "pool_bins",
    "reliability_figure",
    "require_matplotlib",
    "trend_figure",
]
