"""Reliability diagram: accuracy against mean confidence per confidence bin, one curve per group,
each bin's accuracy with its 95% Wilson interval as an error bar, with the diagonal of perfect
calibration and each group's share of rows per bin below."""

from __future__ import annotations

import pyarrow as pa

from dbmetrics.errors import DbmetricsError
from dbmetrics.plots.pooling import pool_bins
from dbmetrics.plots.rows import split_keys
from dbmetrics.plots.style import GREY, HATCHES, new_figure, series_style, tidy


def reliability_figure(
    calibration: pa.Table,
    by: str,
    keys: tuple[str, ...] = (),
    title: str | None = None,
    grain: str = "week",
):
    """A Figure from the ``calibration`` query's result: one curve per value of ``by``, its bins
    pooled over every period and over the other group columns ``keys`` (version, segments)."""
    if calibration.num_rows == 0:
        raise DbmetricsError(
            "nothing to plot: no calibration rows (none evaluated, e.g. no labels: "
            "--set labels=... --set id_col=...; or the row filters kept none)"
        )
    groups = pool_bins(calibration, by)
    figure = new_figure()
    curve, counts = figure.subplots(2, 1, sharex=True, height_ratios=[3, 1])
    curve.plot(
        [0, 1], [0, 1], color=GREY, linestyle=(0, (4, 3)), linewidth=1, label="perfectly calibrated"
    )
    width = (groups[0].bin_upper - groups[0].bin_lower).min() / (len(groups) + 1)
    for i, group in enumerate(groups):
        style = series_style(i)
        curve.plot(
            group.mean_confidence,
            group.accuracy,
            markersize=5,
            linewidth=1.6,
            clip_on=False,
            **style,
            label=f"{group.group}: ECE {group.ece:.3f}, {group.evaluated_rows:,} rows",
        )
        low, high = group.accuracy_interval
        curve.errorbar(
            group.mean_confidence,
            group.accuracy,
            yerr=[group.accuracy - low, high - group.accuracy],
            fmt="none",
            ecolor=style["color"],
            elinewidth=0.9,
            capsize=2,
            clip_on=False,
        )
        left = group.bin_lower + width * (i + 0.5)
        counts.bar(
            left,
            group.rows / group.rows.sum(),
            width=width,
            align="edge",
            color=style["color"],
            hatch=HATCHES[i % len(HATCHES)],
            edgecolor="white",
            linewidth=0.4,
        )
    curve.set(xlim=(0, 1), ylim=(0, 1), ylabel="accuracy (share correct)")
    curve.legend(
        loc="upper left",
        title=f"{by} (bars: 95% Wilson interval)",
        fontsize=8,
        title_fontsize=8,
        frameon=False,
    )
    counts.set(
        xlabel="mean top-label confidence in the bin (probability)", ylabel="share of its rows"
    )
    counts.set_ylim(0, None)
    for ax in (curve, counts):
        tidy(ax)
    curve.set_title(title or _title(calibration, by, keys, grain), fontsize=10)
    return figure


def _title(calibration: pa.Table, by: str, keys: tuple[str, ...], grain: str = "week") -> str:
    """``Reliability per model_version, weeks 2026-01-05 to 2026-06-29 pooled, 15 bins (region
    alpine)``; one period reads ``week of 2026-03-02``, ``day 2026-03-02``, ``month 2026-03``."""
    periods = calibration["period"].to_pylist()
    pooled, fixed = split_keys(calibration, keys, by)
    bins = round(1 / (calibration["bin_upper"][0].as_py() - calibration["bin_lower"][0].as_py()))
    every = "".join(f", every {k}" for k in pooled)
    only = f" ({', '.join(f'{k} {v}' for k, v in fixed.items())})" if fixed else ""
    if min(periods) == max(periods):
        return f"Reliability per {by}, {_one_period(min(periods), grain)}{every}, {bins} bins{only}"
    over = f"{grain}s {min(periods)} to {max(periods)}" + every
    return f"Reliability per {by}, {over} pooled, {bins} bins{only}"


def _one_period(first_day, grain: str) -> str:
    """``week of 2026-03-02``, ``day 2026-03-02`` or ``month 2026-03``."""
    if grain == "month":
        return f"month {first_day:%Y-%m}"
    return f"week of {first_day}" if grain == "week" else f"{grain} {first_day}"
