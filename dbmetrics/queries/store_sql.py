"""The saved queries' state placeholders ({{state}}, {{class_state}}, ... one per state kind)
read from a partials store instead of logs.

A store may hold finer segments than a query asks for: the states are additive, so the
query's version and segment columns are kept and every other key is summed away. The
column roles a store was built with are fixed: a query that gives one with another value
is refused, naming the parameter and both values.
"""

from collections import Counter
from pathlib import Path

import pyarrow.parquet as pq

from dbmetrics.errors import DbmetricsError

from .roles import key_fragments
from .schema import quote
from .state_kinds import STATE_KINDS, StateKind, check
from .store_manifest import listed_files, missing_files, read_manifest
from .values import split_names

UNAVAILABLE = None  # a store keeps sums, not predictions: render refuses {{predictions}}
FIXED = ("time_col", "scores_col", "scores_kind", "label_col", "labels", "id_col", "classes")


def summed(kind: StateKind, keys: str, param: str, lacking: dict | None = None) -> str:
    """SELECT day, keys, the kind's own keys, the sums of its additive columns. `lacking`:
    {column: whether every file lacks it} for the sums some files were written without (an
    earlier store format); those files count as NaN in them, so a sum over any such day is
    NaN rather than a sum over part of the days."""
    lacking = lacking or {}

    def sum_of(column: str) -> str:
        if column not in lacking:
            return kind.summed(column)
        value = "'NaN'::DOUBLE" if lacking[column] else f"coalesce({column}, 'NaN'::DOUBLE)"
        return f"fsum({value}) AS {column}"

    own = ", ".join(kind.keys)
    sums = ",\n    ".join(sum_of(c) for c in kind.columns)
    source = f"read_parquet(${param}{', union_by_name = true' if lacking else ''})"
    return f"SELECT day, {keys}, {own},\n    {sums}\nFROM {source}\nGROUP BY ALL"


def _check_roles(recorded: dict, logs, texts: dict, given: dict, root) -> None:
    """Refuse a column-role parameter the query gives that the store was not built with."""
    wanted = {k: texts[k] for k in FIXED if k in given}
    if "timezone" in given:
        wanted["timezone"] = str(given["timezone"]).strip() or "UTC"
    if "logs" in given and logs is not None:
        recorded = {**recorded, "logs": logs}
        wanted["logs"] = texts["logs"]
    for key, value in wanted.items():
        if key in recorded and recorded[key] != value:
            raise DbmetricsError(
                f"partials: the store {root} was built with {key}={recorded[key]!r}; this "
                f"query gives {key}={value!r}: leave `{key}` out or use a store built with it"
            )


def store_fragments(texts: dict, given: dict | None = None) -> tuple:
    """(fragments, bound values) for a query run with partials=STORE; `given` are the
    parameters the caller set (texts adds the defaults)."""
    root = Path(texts["partials"])
    manifest = read_manifest(root)
    if manifest is None or not manifest["days"]:
        raise DbmetricsError(
            f"partials: `{texts['partials']}` holds no summarised days; "
            "build it with `dbmetrics partials update`"
        )
    recorded = manifest["column_roles"]
    _check_roles(recorded, manifest["logs"], texts, given or {}, root)
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
    absent = missing_files(root, manifest)
    if absent:
        raise DbmetricsError(
            f"partials: the store {root} lists {len(absent)} file(s) that are gone "
            f"(first {absent[0]}); `dbmetrics partials update` recomputes them"
        )
    files = {kind.name: 0 for kind in STATE_KINDS}
    older = {kind.name: Counter() for kind in STATE_KINDS}  # files lacking each column
    for entry in manifest["days"].values():
        for kind, rel in entry["files"].items():
            files[kind] += 1
            older[kind].update(check(kind, pq.read_schema(root / rel), str(root / rel)))
    keys = ", ".join(quote(c) for c in (version, *segments))
    fragments = {
        **key_fragments(version, segments),
        "predictions": UNAVAILABLE,
    }
    bound = {}
    for kind in STATE_KINDS:
        lacking = [k for k, e in manifest["days"].items() if kind.name not in e["files"]]
        if lacking and kind.name == "binary_state" and fragments.get("state"):
            # a store written before the score histogram: the rollup still answers, without
            # its two-class columns, until the next update adds the histogram
            fragments[kind.name] = (
                f"SELECT day, {keys}, "
                + ", ".join(
                    f"CAST(NULL AS {'DOUBLE' if c.startswith('sum_') else 'BIGINT'}) AS {c}"
                    for c in (*kind.keys, *kind.columns)
                )
                + f"\nFROM ({fragments['state']})\nLIMIT 0"
            )
            continue
        if lacking:  # refused by render only when the query reads this kind
            fragments[kind.name] = None
            continue
        fragments[kind.name] = summed(
            kind,
            keys,
            f"partials_{kind.name}",
            {c: n == files[kind.name] for c, n in older[kind.name].items()},
        )
        bound[f"partials_{kind.name}"] = listed_files(root, kind.name, manifest)
    return fragments, bound
