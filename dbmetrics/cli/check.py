"""``dbmetrics check``: the health report of a prediction log; exit 4 when problems are found."""

from __future__ import annotations

import json
import sys

import click
import pyarrow as pa

from dbmetrics.atomic import write_output
from dbmetrics.cli.output import choose_format
from dbmetrics.cli.params import merge, parse_settings, settings_option
from dbmetrics.cli.textable import render
from dbmetrics.errors import DbmetricsError

EXIT_PROBLEMS = 4
SHOWN_FILES = 20


@click.command("check")
@settings_option("A column-role or check parameter; repeat for more. Wins over the project file.")
@click.option(
    "--format",
    "-f",
    "fmt",
    type=click.Choice(("table", "json")),
    help="Report format; default: from the --output suffix, else table.",
)
@click.option(
    "--output",
    "-o",
    metavar="PATH",
    help="Write the report to this file (atomically: the old file stays until the new one is complete).",
)
@click.pass_context
def command(ctx, settings, fmt, output):
    """Check a prediction log: its schema, rows per period and version, the class count K
    per version, and bad rows by reason.

    Parameters (--set, or the project file's [params] and [queries.check]): the saved
    queries' column roles (logs, time_col, scores_col, scores_kind, label_col, version_col,
    labels, id_col, classes) and grain; target_col (soft targets), tolerance (default
    0.001) and require_labels (no|yes: count NULL labels as a problem).

    \b
    Exit status: 0 clean; 4 problems found; 1 error (one line on stderr).
    Example:
      dbmetrics check --set logs=demo_parquet/logs --set id_col=prediction_id \\
          --set labels=demo_parquet/labels/labels.parquet --format json -o health.json
    """
    from dbmetrics import check

    session = ctx.obj
    declared = [p.name for p in check.info().params]
    params = merge("check", declared, session.project, parse_settings(settings))
    fmt = choose_format(fmt, output)
    if fmt not in ("table", "json"):
        raise DbmetricsError(
            f"--output: check writes a table (.txt) or json (.json) report, not {fmt}"
        )
    report = session.execute(lambda con: check.check_log(con, params))
    data = (_as_json(report) if fmt == "json" else as_text(report)).encode()
    if output:
        write_output(output, lambda f: f.write(data))
        session.note(f"wrote the report to {output}: {summary(report)}")
    else:
        sys.stdout.buffer.write(data)
        sys.stdout.buffer.flush()
    ctx.exit(0 if report.clean else EXIT_PROBLEMS)


def summary(report) -> str:
    n = len(report.problems)
    return "clean" if report.clean else f"{n} problem{'s' * (n > 1)} found"


def _as_json(report) -> str:
    return (
        json.dumps(report.to_dict(), indent=1, ensure_ascii=False, allow_nan=False, default=str)
        + "\n"
    )


def as_text(report) -> str:
    """The report for a terminal: a verdict line, then one aligned table per section."""
    parts = [f"dbmetrics check: {report.source}: {summary(report).upper()}\n"]
    parts.append(
        section(
            "Columns",
            {
                "column": [c[0] for c in report.columns],
                "type": [c[1] for c in report.columns],
                "role": [c[2] or "" for c in report.columns],
            },
        )
    )
    if report.drift:
        parts.append(
            section(
                "Differences between files",
                {
                    "column": [d.column for d in report.drift],
                    "status": ["PROBLEM" if d.problem else "info" for d in report.drift],
                    "detail": [d.detail for d in report.drift],
                },
                width=None,
            )
        )
    parts.append(
        section(
            f"Rows per {report.grain} and version",
            {
                "period": pa.array([p for p, _, _ in report.periods], pa.date32()),
                "version": [None if v is None else str(v) for _, v, _ in report.periods],
                "rows": pa.array([n for _, _, n in report.periods], pa.int64()),
            },
        )
    )
    parts.append(
        section(
            "Classes per version (K = scores length)",
            {
                "version": [None if c.version is None else str(c.version) for c in report.classes],
                "scored_rows": pa.array([c.rows for c in report.classes], pa.int64()),
                "usual_k": pa.array([c.usual_k for c in report.classes], pa.int64()),
                "other_k_rows": pa.array([c.other_k_rows for c in report.classes], pa.int64()),
                "k_seen": [", ".join(map(str, c.k_seen)) for c in report.classes],
            },
        )
    )
    parts.append(
        section(
            "Checks",
            {
                "check": [i.check for i in report.issues],
                "reason": [i.reason for i in report.issues],
                "count": pa.array([i.count for i in report.issues], pa.int64()),
                "status": [status(i) for i in report.issues],
                "meaning": [
                    " ".join(filter(None, (i.meaning, i.detail and f"[{i.detail}]")))
                    for i in report.issues
                ],
            },
            width=None,
        )
    )
    bad = [f for f in report.files if f.null_timestamps or f.out_of_order]
    if bad:
        shown = bad[:SHOWN_FILES]
        more = (
            f" (first {SHOWN_FILES} of {len(bad)}; all in --format json)"
            if len(bad) > SHOWN_FILES
            else ""
        )
        parts.append(
            section(
                f"Files with timestamp problems{more}",
                {
                    "file": [f.file for f in shown],
                    "rows": pa.array([f.rows for f in shown], pa.int64()),
                    "null_timestamps": pa.array([f.null_timestamps for f in shown], pa.int64()),
                    "out_of_order": pa.array([f.out_of_order for f in shown], pa.int64()),
                },
                width=None,
            )
        )
    if report.notes:
        parts.append("Notes:\n" + "".join(f"  {n}\n" for n in report.notes))
    return "\n".join(parts)


def status(issue) -> str:
    if not issue.count:
        return "ok"
    return "PROBLEM" if issue.problem else "info"


def section(title: str, columns: dict, width: int | None = 40) -> str:
    return f"{title}:\n" + render(pa.table(columns), count=False, width=width)
