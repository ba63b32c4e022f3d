"""The saved queries' {{state}} and {{class_state}} read from a partials store instead of logs.

A store may hold finer segments than a query asks for: the states are additive, so the
query's version and segment columns are kept and every other key is summed away.
"""

from pathlib import Path

from dbmetrics.errors import DbmetricsError
from dbmetrics.queries.schema import quote
from dbmetrics.queries.state_sql import CLASS_STATE_COLUMNS, STATE_COLUMNS
from dbmetrics.queries.values import split_names

from .store import Store

SUMMED_BY_KIND = {"state": "bin", "class_state": "class"}
UNAVAILABLE = None  # a store keeps sums, not predictions: render refuses {{predictions}}


def summed(kind: str, keys: str, param: str) -> str:
    """SELECT day, keys, bin|class, the sums of every additive column, from the store files."""
    extra = SUMMED_BY_KIND[kind]
    columns = STATE_COLUMNS if kind == "state" else CLASS_STATE_COLUMNS
    sums = ",\n    ".join(
        f"CAST(sum({c}) AS BIGINT) AS {c}" if not c.startswith("sum_") else f"fsum({c}) AS {c}"
        for c in columns
        if c not in ("day", extra)
    )
    return f"SELECT day, {keys}, {extra},\n    {sums}\nFROM read_parquet(${param})\nGROUP BY ALL"


def store_fragments(texts: dict) -> tuple:
    """(fragments, bound values) for a query run with partials=STORE."""
    s = Store(Path(texts["partials"]))
    manifest = s.manifest()
    if manifest is None or not manifest.get("days"):
        raise DbmetricsError(
            f"partials: `{texts['partials']}` holds no summarised days; "
            "build it with `dbmetrics partials update`"
        )
    recorded = manifest["column_roles"]
    stored_keys = [recorded["version_col"], *split_names(recorded["segment_cols"])]
    version = texts["version_col"]
    segments = split_names(texts["segment_cols"])
    missing = [c for c in [version, *segments] if c not in stored_keys]
    if missing:
        raise DbmetricsError(
            f"partials: the store keeps {', '.join(stored_keys)}; it cannot "
            f"group by {', '.join(missing)} (build a store with those columns)"
        )
    if str(texts["bins"]) != str(recorded["bins"]):
        raise DbmetricsError(
            f"partials: the store was built with bins={recorded['bins']}; "
            f"this query asks for bins={texts['bins']}"
        )
    keys = ", ".join(quote(c) for c in (version, *segments))
    fragments = {
        "state": summed("state", keys, "partials_state"),
        "class_state": summed("class_state", keys, "partials_class_state"),
        "version_col": quote(version),
        "segment_cols": ", ".join(quote(c) for c in segments),
        "segments": "".join(f", {quote(c)}" for c in segments),
        "segment_match": " AND ".join(
            f"cur.{quote(c)} IS NOT DISTINCT FROM ref.{quote(c)}" for c in segments
        )
        or "true",
    }
    bound = {"partials_state": s.files("state"), "partials_class_state": s.files("class_state")}
    fragments["predictions"] = UNAVAILABLE
    return fragments, bound
