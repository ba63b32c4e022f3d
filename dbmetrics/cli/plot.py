"""``dbmetrics plot reliability|trend|gap|coverage``: run a saved query and draw its result as a PNG file.

The drawing lives in ``dbmetrics.plots``; this module gathers parameters the way ``run`` does
(--set, then the project file, then the query's defaults), runs the query and writes the PNG atomically.
"""

from __future__ import annotations

from pathlib import Path

import click

from dbmetrics.atomic import write_output
from dbmetrics.cli.params import merge, parse_settings, settings_option


def _plot_options(command):
    """--set, --by, --only, --start, --end, --title and --output."""
    for option in reversed(
        [
            settings_option(),
            click.option(
                "--by",
                metavar="COLUMN",
                help="One curve per value of this column: the version column (default) or a segment "
                "column (added to segment_cols when missing).",
            ),
            click.option(
                "--only",
                multiple=True,
                metavar="COLUMN=VALUE",
                callback=_pairs,
                help="Keep result rows whose COLUMN equals VALUE; repeat for more. A segment "
                "column is added to segment_cols when missing.",
            ),
            click.option(
                "--start",
                type=click.DateTime(["%Y-%m-%d"]),
                metavar="DATE",
                help="Keep periods whose first day is on or after DATE.",
            ),
            click.option(
                "--end",
                type=click.DateTime(["%Y-%m-%d"]),
                metavar="DATE",
                help="Keep periods whose first day is on or before DATE.",
            ),
            click.option("--title", help="Title instead of the generated one."),
            click.option(
                "--output",
                "-o",
                required=True,
                metavar="FILE.png",
                callback=_png_path,
                help="PNG file to write (atomically: the old file stays until the new one is complete).",
            ),
        ]
    ):
        command = option(command)
    return command


def _pairs(ctx, param, values: tuple[str, ...]) -> tuple[str, ...]:
    for item in values:
        if "=" not in item:
            raise click.BadParameter(f"expected COLUMN=VALUE, got {item!r}")
    return values


def _png_path(ctx, param, value: str) -> str:
    if Path(value).suffix.lower() != ".png":
        raise click.BadParameter(f"expected a path ending in .png, got {value!r}")
    return value


@click.group("plot")
def command():
    """Draw query results as PNG pictures (needs matplotlib: the 'plot' extra).

    Pictures are 1600 x 1000 pixels, colour-blind-safe and readable in greyscale.

    \b
    Example:
      dbmetrics plot trend --query rollup --metric cross_entropy --set logs=demo_parquet/logs \\
          --set labels=demo_parquet/labels/labels.parquet --set id_col=prediction_id --output ce.png
    """


@command.command("reliability")
@_plot_options
@click.pass_obj
def reliability(session, settings, by, only, start, end, title, output):
    """Reliability diagram from the calibration query: accuracy against confidence per version.

    Bins are pooled over every period in the result (their counts and sums added, not
    their averages); narrow the range with --start/--end. ECE per curve is in the legend.

    \b
    Example:
      dbmetrics plot reliability --set logs=demo_parquet/logs --set id_col=prediction_id \\
          --set labels=demo_parquet/labels/labels.parquet --output reliability.png
    """
    from dbmetrics import plots

    table, by, keys, resolved = _query(session, "calibration", settings, by, only, start, end)
    _write(session, plots.reliability_figure(table, by, keys, title, resolved["grain"]), output)


@command.command("trend")
@click.option(
    "--query",
    "-q",
    "name",
    type=click.Choice(["rollup", "drift", "labels"]),
    default="rollup",
    show_default=True,
    help="Saved query whose result to draw.",
)
@click.option(
    "--metric",
    "-m",
    default="cross_entropy",
    show_default=True,
    metavar="COLUMN",
    help="Numeric output column to draw over period, e.g. accuracy, ece, prediction_js, "
    "median_delay_days (--query labels).",
)
@_plot_options
@click.pass_obj
def trend(session, name, metric, settings, by, only, start, end, title, output):
    """A metric over time, one line per version or segment value.

    Cross-entropy gets 95% error bars from cross_entropy_se (rollup). With --query drift,
    the reference window is shaded, a point is ringed only when the drawn measure's own test
    flagged it, and the test's fixed threshold (e.g. js_threshold) is drawn dashed.

    \b
    Example:
      dbmetrics plot trend --query drift --metric prediction_js --by region --only model_version=v2 \\
          --set logs=demo_parquet/logs --set labels=demo_parquet/labels/labels.parquet \\
          --set id_col=prediction_id --output drift.png
    """
    from dbmetrics import plots

    table, by, keys, resolved = _query(session, name, settings, by, only, start, end)
    figure = plots.trend_figure(table, metric, by, keys, resolved["grain"], title, resolved)
    _write(session, figure, output)


@command.command("gap")
@_plot_options
@click.pass_obj
def gap(session, settings, by, only, start, end, title, output):
    """Calibration gap over time: mean confidence minus accuracy per period (calibration query).

    Above 0 the model is over-confident, below 0 under-confident; the gap pools the period's
    confidence bins (sums, not averages).

    \b
    Example:
      dbmetrics plot gap --set logs=demo_parquet/logs --set id_col=prediction_id \\
          --set labels=demo_parquet/labels/labels.parquet --output gap.png
    """
    from dbmetrics import plots

    table, by, keys, resolved = _query(session, "calibration", settings, by, only, start, end)
    gaps = plots.confidence_gap(table, tuple(k for k in keys if k in table.column_names))
    figure = plots.trend_figure(gaps, "confidence_gap", by, keys, resolved["grain"], title)
    figure.axes[0].axhline(0, color="#777777", linewidth=0.8, zorder=1)
    _write(session, figure, output)


@command.command("coverage")
@_plot_options
@click.pass_obj
def coverage(session, settings, by, only, start, end, title, output):
    """Label coverage over time: the share of each period's rows whose label has arrived.

    Recent periods are low while labels are still on their way; a drop in older periods
    means labels stopped arriving.

    \b
    Example:
      dbmetrics plot coverage --set logs=demo_parquet/logs --set id_col=prediction_id \\
          --set labels=demo_parquet/labels/labels.parquet --output coverage.png
    """
    from dbmetrics import plots

    table, by, keys, resolved = _query(session, "rollup", settings, by, only, start, end)
    figure = plots.trend_figure(table, "label_coverage", by, keys, resolved["grain"], title)
    figure.axes[0].set_ylim(0, 1.05)
    _write(session, figure, output)


@command.command("confusion")
@click.option(
    "--class-names",
    metavar="NAME0,NAME1,...",
    help="Class names in class-index order for the axes (default: the `classes` parameter, "
    "else the indices).",
)
@click.option(
    "--top",
    default=20,
    show_default=True,
    type=click.IntRange(1, 200),
    help="With more than 20 classes: how many of the most frequent confusions to draw.",
)
@_plot_options
@click.pass_obj
def confusion(session, class_names, top, settings, by, only, start, end, title, output):
    """Confusion matrix from the confusion query: counts and the share of each true class.

    Counts are summed over every period and group in the result (narrow it with --only,
    --start, --end); up to 20 classes are drawn as two matrices, more as bars of the most
    frequent confusions. Class names come from the `classes` parameter when set.

    \b
    Example:
      dbmetrics plot confusion --only region=east --start 2026-04-27 --set logs=demo_parquet/logs \\
          --set labels=demo_parquet/labels/labels.parquet --set id_col=prediction_id \\
          --class-names damaged,wrong_size,arrived_late,not_as_described,changed_mind,other \\
          --output cm.png
    """
    from dbmetrics import plots, queries

    table, _, _, _ = _query(session, "confusion", settings, by, only, start, end)
    info = queries.get_query("confusion", query_dirs=session.query_dirs)
    params = merge(
        "confusion", [p.name for p in info.params], session.project, parse_settings(settings)
    )
    text = class_names or params.get("classes") or ""
    names = [n.strip() for n in text.split(",") if n.strip()]
    _write(session, plots.confusion_figure(table, names or None, title, top), output)


def _query(session, name, settings, by, only, start, end):
    """Run query ``name`` with the merged parameters; (kept rows, by column, group columns,
    every parameter's value with the defaults)."""
    from dbmetrics import plots, queries

    plots.require_matplotlib()
    dirs = session.query_dirs
    info = queries.get_query(name, query_dirs=dirs)
    params = merge(name, [p.name for p in info.params], session.project, parse_settings(settings))
    resolved = {p.name: p.default for p in info.params} | params
    equal = dict(item.partition("=")[::2] for item in only)
    version = resolved["version_col"]
    segments = [s.strip() for s in (resolved.get("segment_cols") or "").split(",") if s.strip()]
    by = by or version
    outputs = {column for column, _ in info.outputs}
    for column in [by, *equal]:
        if column not in {version, *segments, *outputs}:
            segments.append(column)
    if segments:
        params["segment_cols"] = ",".join(segments)
    table = session.execute(lambda con: queries.run_query(con, name, params, query_dirs=dirs))
    table = plots.keep_rows(table, equal, start and start.date(), end and end.date())
    return table, by, (version, *segments), resolved


def _write(session, figure, output: str) -> None:
    from dbmetrics import plots

    data = plots.png_bytes(figure)
    write_output(output, lambda f: f.write(data))
    session.info(f"wrote {plots.WIDTH}x{plots.HEIGHT} PNG to {output}")
