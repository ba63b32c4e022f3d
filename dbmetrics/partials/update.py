"""Compute the additive states of new days, and of recent days whose labels may have
arrived since, and publish them into a store in one step."""

import datetime as dt
from pathlib import Path

import duckdb
import pyarrow.compute as pc

from dbmetrics.errors import DbmetricsError
from dbmetrics.queries.catalog import get_query
from dbmetrics.queries.engine import compute_states
from dbmetrics.queries.header import COLUMN_MAP
from dbmetrics.queries.roles import column_roles
from dbmetrics.queries.schema import first_line, open_source
from dbmetrics.queries.state_sql import CLASS_STATE_COLUMNS, INTERNAL, STATE_COLUMNS
from dbmetrics.queries.values import convert, with_defaults

from .store import KINDS, Store

RECORDED = (
    "time_col",
    "scores_col",
    "scores_kind",
    "label_col",
    "version_col",
    "segment_cols",
    "labels",
    "id_col",
    "classes",
    "bins",
)
EARLIEST, LATEST = dt.datetime(1, 1, 1), dt.datetime(9999, 12, 31)


def column_roles_texts(params: dict) -> dict:
    """The column-role parameters with the saved queries' defaults; anything else is refused."""
    unknown = sorted(set(params) - set(COLUMN_MAP))
    if unknown:
        raise DbmetricsError(
            f"partials: no parameter {', '.join(unknown)}; a store takes the "
            f"column roles only: {', '.join(COLUMN_MAP)}"
        )
    rollup = get_query("rollup")
    texts = with_defaults(rollup, params)
    if texts["logs"] is None:
        raise DbmetricsError("partials: needs parameter `logs` (the prediction log to summarise)")
    return {name: texts[name] for name in COLUMN_MAP}, rollup


def check_same_map(recorded: dict, texts: dict, root: Path) -> None:
    for key in RECORDED:
        if recorded.get(key) != texts[key]:
            raise DbmetricsError(
                f"partials: the store {root} was built with {key}={recorded.get(key)!r}, "
                f"this update gives {texts[key]!r}; use the same column roles or a new store"
            )


def first_day_to_compute(existing: list, since, relabel_days: int, full: bool):
    """None = everything; else the first day whose state is (re)computed."""
    if full or not existing:
        return None
    if since is not None:
        return since
    return existing[-1] - dt.timedelta(days=max(relabel_days, 0) - 1)


def update(
    con: duckdb.DuckDBPyConnection,
    params: dict,
    store,
    since: dt.date | None = None,
    relabel_days: int = 14,
    full: bool = False,
) -> dict:
    """Bring `store` up to date with the log named in `params` (the saved queries' column roles).

    Days from `first_day_to_compute` on are recomputed from the log and replace the stored
    ones: by default the last `relabel_days` days already stored (labels arrive late) and
    every newer day. The time filter reaches the Parquet scan, so older row groups are
    skipped, not read. Returns a summary of what was written.
    """
    texts, rollup = column_roles_texts(params)
    s = Store(Path(store))
    manifest = s.manifest()
    if manifest is not None:
        check_same_map(manifest["column_roles"], texts, s.root)
    sources = {
        name: open_source(con, name, texts[name])
        for name in ("logs", "labels")
        if texts[name] is not None
    }
    roles = column_roles(texts, sources, set(STATE_COLUMNS + CLASS_STATE_COLUMNS + INTERNAL))
    start = first_day_to_compute(s.days(), since, relabel_days, full)
    values = {
        "bins": convert(rollup.param("bins"), texts["bins"]),
        "classes": texts["classes"],
        "window_start": EARLIEST if start is None else dt.datetime.combine(start, dt.time()),
        "window_end": LATEST,
    }
    for source in sources.values():
        values.update(source.bound)
    tables = dict(zip(("state", "class_state"), engine_states(con, roles, values)))
    generation = (manifest or {}).get("generation", 0) + 1
    days = {
        d: e
        for d, e in (manifest or {}).get("days", {}).items()
        if start is not None and dt.date.fromisoformat(d) < start
    }
    new_days = sorted(set(tables["state"].column("day").to_pylist()))
    for day in new_days:
        days[day.isoformat()] = {
            kind: s.write_day(kind, day, generation, day_rows(tables[kind], day)) for kind in KINDS
        }
    s.commit(
        {
            "generation": generation,
            "column_roles": {k: texts[k] for k in RECORDED},
            "logs": texts["logs"],
            "days": days,
        }
    )
    return {
        "store": str(s.root),
        "generation": generation,
        "recomputed_from": None if start is None else start.isoformat(),
        "days_written": len(new_days),
        "days_held": len(days),
        "rows_summarised": int(pc.sum(tables["state"].column("rows")).as_py() or 0),
    }


def engine_states(con, roles, values: dict) -> tuple:
    try:
        return compute_states(con, roles, values, window=True, classes=True)
    except duckdb.Error as exc:
        raise DbmetricsError(f"partials: computing the state failed: {first_line(exc)}") from exc


def day_rows(table, day):
    return table.filter(pc.equal(table.column("day"), day))
