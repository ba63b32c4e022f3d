"""``dbmetrics report``: the weekly report as one self-contained HTML file.

The report itself is built by ``dbmetrics.report``; this module gathers the parameters the way
``run`` does (--set, then the project file, then the queries' defaults) and writes the file
atomically.
"""

from __future__ import annotations

from pathlib import Path

import click

from dbmetrics.atomic import write_output
from dbmetrics.cli.params import merge, parse_settings, settings_option
from dbmetrics.errors import DbmetricsError

QUERIES = ("rollup", "drift", "calibration", "labels", "version_gap")


def _html_path(ctx, param, value: str) -> str:
    if Path(value).suffix.lower() not in (".html", ".htm"):
        raise click.BadParameter(f"expected a path ending in .html, got {value!r}")
    return value


@click.command("report")
@settings_option("A query parameter for every query that has it; repeat for more.")
@click.option(
    "--start",
    type=click.DateTime(["%Y-%m-%d"]),
    metavar="DATE",
    help="First period (its first day).",
)
@click.option(
    "--end", type=click.DateTime(["%Y-%m-%d"]), metavar="DATE", help="Last period (its first day)."
)
@click.option(
    "--latest",
    type=click.IntRange(min=1),
    default=4,
    show_default=True,
    help="How many of the newest periods the summary table shows.",
)
@click.option(
    "--segment",
    metavar="COLUMN",
    help="Segment column of the drift map and the flagged cells (default: the first of "
    "segment_cols, else versions only).",
)
@click.option(
    "--measure",
    default="prediction_js",
    show_default=True,
    metavar="COLUMN",
    help="Drift column of the map: prediction_js, confidence_psi, label_js, prediction_kl "
    "or cross_entropy_z.",
)
@click.option("--title", default="Classifier report", show_default=True, help="Page title.")
@click.option(
    "--output",
    "-o",
    required=True,
    metavar="FILE.html",
    callback=_html_path,
    help="HTML file to write (atomically: the old file stays until the new one is complete).",
)
@click.pass_obj
def command(session, settings, start, end, latest, segment, measure, title, output):
    """Write the report for a period range as one HTML file with its pictures inside.

    It shows the latest periods of each version against the drift reference, the flagged
    cells with their reasons, the versions compared with their reliability diagrams and
    calibration gap, a period x segment map of a drift measure with flagged cells marked,
    label coverage over time, and the cautions. The file fetches nothing (no scripts, fonts
    or links): mail it or attach it. Needs matplotlib (the 'plot' extra).

    \b
    Example:
      dbmetrics report --set logs=demo_parquet/logs --set id_col=prediction_id \\
          --set labels=demo_parquet/labels/labels.parquet --segment region -o report.html
    """
    from dbmetrics import queries, report

    dirs = session.query_dirs
    cli_params = parse_settings(settings)
    per_query = {}
    for name in QUERIES:
        info = queries.get_query(name, query_dirs=dirs)
        declared = [p.name for p in info.params]
        per_query[name] = merge(
            name, declared, session.project, {k: v for k, v in cli_params.items() if k in declared}
        )
    known = {p for params in per_query.values() for p in params} | {
        p.name for name in per_query for p in queries.get_query(name, query_dirs=dirs).params
    }
    unknown = sorted(set(cli_params) - known)
    if unknown:
        raise DbmetricsError(
            f"--set: no query of the report has a parameter '{unknown[0]}'; "
            f"their parameters are: {', '.join(sorted(known))}"
        )
    if segment is None:
        configured = per_query["rollup"].get("segment_cols") or ""
        segment = next((s.strip() for s in str(configured).split(",") if s.strip()), None)
    html = session.execute(
        lambda con: report.build_report(
            con,
            {},
            per_query,
            start=start and start.date(),
            end=end and end.date(),
            latest=latest,
            segment=segment,
            measure=measure,
            title=title,
            query_dirs=dirs,
        )
    )
    data = html.encode("utf-8")
    write_output(output, lambda f: f.write(data))
    session.note(f"wrote the report to {output} ({len(data) // 1024} KiB)")
