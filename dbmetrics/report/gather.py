"""Run the saved queries a report needs and keep their results for one period range."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass

import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.errors import DbmetricsError

MEASURES = ("prediction_js", "confidence_psi", "label_js", "prediction_kl", "cross_entropy_z")


@dataclass(frozen=True)
class ReportData:
    """Everything the page shows; tables are the saved queries' results, rows in the range.

    rollup, drift, calibration: per period x version. cells: drift per period x version x
    ``segment`` (the drift table again when there is no segment). gap: the ``version_gap``
    query per period when two versions ran in the range and it runs, else None. labels: the ``labels``
    query per period x version (None when it cannot run, e.g. no label time column). latest: the last ``latest``
    periods of the range, newest last.
    """

    title: str
    grain: str
    version_col: str
    segment: str | None
    measure: str
    start: dt.date
    end: dt.date
    latest: tuple
    rollup: pa.Table
    drift: pa.Table
    cells: pa.Table
    calibration: pa.Table
    gap: pa.Table | None
    labels: pa.Table | None
    logs: str
    thresholds: dict


def gather(
    con,
    params: dict,
    query_params: dict | None = None,
    start: dt.date | None = None,
    end: dt.date | None = None,
    latest: int = 4,
    segment: str | None = None,
    measure: str = "prediction_js",
    title: str | None = None,
    query_dirs=None,
) -> ReportData:
    """Run rollup, drift and calibration (and version_gap when two versions ran) on ``params``.

    ``query_params`` maps a query name to parameters that win over ``params`` for it (the
    project file's ``[queries.NAME]``, the command line's ``--set``). Periods whose first day
    lies in [start, end] are kept (either end open); the reference window is drift's
    (``ref_start``/``ref_end``) and may lie before ``start``. ``segment``: the column of the
    heatmap and of the flagged-cell list (none: versions only).
    """
    from dbmetrics import queries

    if measure not in MEASURES:
        raise DbmetricsError(f"--measure: expected one of {', '.join(MEASURES)}, got '{measure}'")
    if latest < 1:
        raise DbmetricsError(f"--latest: expected a positive number of periods, got {latest}")
    query_params = query_params or {}

    def run(name: str, **fixed) -> pa.Table:
        info = queries.get_query(name, query_dirs=query_dirs)
        declared = {p.name for p in info.params}
        merged = {k: v for k, v in params.items() if k in declared}
        merged |= query_params.get(name, {})
        merged |= {k: v for k, v in fixed.items() if k in declared}
        return _in_range(queries.run_query(con, name, merged, query_dirs=query_dirs), start, end)

    def resolved(name: str) -> dict:
        info = queries.get_query(name, query_dirs=query_dirs)
        return {p.name: p.default for p in info.params} | params | query_params.get(name, {})

    rollup = run("rollup", segment_cols="")
    if rollup.num_rows == 0:
        raise DbmetricsError(
            "report: no periods in the range"
            + (f" {start or '...'} to {end or '...'}" if start or end else "")
            + "; check --start/--end and the logs"
        )
    drift = run("drift", segment_cols="")
    cells = run("drift", segment_cols=segment) if segment else drift
    calibration = run("calibration", segment_cols="")
    two = len(set(rollup[str(resolved("rollup").get("version_col"))].to_pylist())) > 1
    gap = _optional(lambda: run("version_gap", segment_cols="")) if two else None
    labels = _optional(lambda: run("labels", segment_cols=""))
    settings = resolved("drift")
    periods = sorted(set(rollup["period"].to_pylist()))
    return ReportData(
        title=title or "Classifier report",
        grain=str(settings.get("grain") or "week"),
        version_col=str(settings.get("version_col") or "model_version"),
        segment=segment,
        measure=measure,
        start=periods[0],
        end=periods[-1],
        latest=tuple(periods[-latest:]),
        rollup=rollup,
        drift=drift,
        cells=cells,
        calibration=calibration,
        gap=gap,
        labels=labels,
        logs=str(settings.get("partials") or settings.get("logs") or ""),
        thresholds={k: settings.get(k) for k in THRESHOLDS},
    )


THRESHOLDS = (
    "ref_start",
    "ref_end",
    "fdr",
    "min_rows",
    "js_threshold",
    "psi_threshold",
    "label_js_threshold",
    "ece_threshold",
)


def _optional(call):
    """``call()``, or None when it fails with a one-line error (e.g. no label time column)."""
    try:
        return call()
    except DbmetricsError:
        return None


def _in_range(table: pa.Table, start: dt.date | None, end: dt.date | None) -> pa.Table:
    """Rows whose ``period`` lies in [start, end]; a table without ``period`` as it is."""
    if "period" not in table.column_names:
        return table
    mask = pa.array([True] * table.num_rows, pa.bool_())
    if start is not None:
        mask = pc.and_(mask, pc.greater_equal(table["period"], pa.scalar(start, pa.date32())))
    if end is not None:
        mask = pc.and_(mask, pc.less_equal(table["period"], pa.scalar(end, pa.date32())))
    return table.filter(pc.fill_null(mask, False))
