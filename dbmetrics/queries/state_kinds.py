"""The kinds of additive state a partials store keeps, defined once.

Each kind is one Parquet file per day in the store folder of the same name, the
{{placeholder}} of that name in the saved queries, and a table computed from the logs. Every
column after the day, the version and segment columns and the kind's own keys is additive:
counts (BIGINT) add with sum, `sum_*` columns with fsum (a Kahan sum). The store itself
(partials/store.py, partials/update.py, store_sql.py) only loops over STATE_KINDS: a new kind
is a new entry here and its table in `compute_kinds`, nothing else.
"""

from dataclasses import dataclass

import pyarrow as pa

from dbmetrics.errors import DbmetricsError

from .class_sums import EXTRA_STATES
from .engine import partial_states
from .state_sql import CLASS_STATE_COLUMNS, STATE_COLUMNS


@dataclass(frozen=True)
class StateKind:
    """name: store folder, {{placeholder}} and bound parameter `partials_<name>`;
    keys: key columns beyond day x version x segments; columns: the additive columns;
    added: (column, format version) pairs, the `sum_*` columns that day files written
    before that store format lack (they are read as NaN, see `lacking`)."""

    name: str
    keys: tuple
    columns: tuple
    added: tuple = ()

    def summed(self, column: str) -> str:
        """The SQL that adds `column` across files: fsum for sums, an exact BIGINT sum else."""
        if column.startswith("sum_"):
            return f"fsum({column}) AS {column}"
        return f"CAST(sum({column}) AS BIGINT) AS {column}"


def additive(columns: tuple, keys: tuple) -> tuple:
    return tuple(c for c in columns if c != "day" and c not in keys)


STATE_KINDS = (
    StateKind("state", ("bin",), additive(STATE_COLUMNS, ("bin",)), (("sum_brier_sq", 4),)),
    StateKind("class_state", ("class",), additive(CLASS_STATE_COLUMNS, ("class",))),
    *(StateKind(name, keys, sums) for name, (keys, sums) in EXTRA_STATES.items()),
)
KIND_NAMES = tuple(k.name for k in STATE_KINDS)


def compute_kinds(con, roles, values: dict) -> dict:
    """{kind name: Arrow table with day, keys and the kind's columns} for the rows of
    `roles.logs`, from one scan of the logs."""
    return partial_states(con, roles, values, classes=True)


# The declared schema of a day file (column order and types), one for every writer: the
# DuckDB update and the Spark job cast their tables with `conform` before staging, and
# readers `check` each listed file before rolling the store up.
#
#     day                 DATE
#     version, segments   the log's own types (text as `string`, whatever Arrow flavour
#                         the engine that wrote it uses)
#     the kind's keys     `bin` INTEGER, `class` BIGINT, any other BIGINT
#     the kind's columns  `sum_*` DOUBLE, counts BIGINT
FIXED_TYPES = {"day": pa.date32(), "bin": pa.int32(), "class": pa.int64()}
KINDS_BY_NAME = {k.name: k for k in STATE_KINDS}


def column_type(name: str) -> pa.DataType:
    """The declared type of a state column (not a version or segment column)."""
    if name in FIXED_TYPES:
        return FIXED_TYPES[name]
    return pa.float64() if name.startswith("sum_") else pa.int64()


def _key_type(t: pa.DataType) -> pa.DataType:
    """A version or segment column's type without the engine's Arrow flavour (large or view
    strings and binaries, dictionary encoding), so equal values have equal types."""
    if pa.types.is_dictionary(t):
        t = t.value_type
    if pa.types.is_large_string(t) or pa.types.is_string_view(t):
        return pa.string()
    if pa.types.is_large_binary(t) or pa.types.is_binary_view(t):
        return pa.binary()
    return t


def declared(kind: str, schema: pa.Schema, without: tuple = ()) -> pa.Schema:
    """The declared schema of a `kind` day file whose version and segment columns are those
    of `schema` (every column that is not `day` nor one of the kind's own); `without`: the
    columns added after the format the file was written in."""
    k = KINDS_BY_NAME[kind]
    own = ("day", *k.keys, *k.columns)
    keys = [f for f in schema if f.name not in own]
    return pa.schema(
        [
            pa.field("day", column_type("day")),
            *(pa.field(f.name, _key_type(f.type)) for f in keys),
            *(pa.field(c, column_type(c)) for c in (*k.keys, *k.columns) if c not in without),
        ]
    )


def conform(kind: str, table: pa.Table) -> pa.Table:
    """`table`, a state of `kind`, in the declared column order and types."""
    schema = declared(kind, table.schema)
    missing = [f.name for f in schema if f.name not in table.column_names]
    if missing:
        raise DbmetricsError(f"partials: a {kind} table lacks column(s) {', '.join(missing)}")
    return table.select(schema.names).cast(schema)


def lacking(kind: str, version: int) -> tuple:
    """The columns of `kind` that a day file written in store format `version` lacks."""
    return tuple(c for c, since in KINDS_BY_NAME[kind].added if version < since)


def check(kind: str, schema: pa.Schema, where: str) -> tuple:
    """Refuse a day file whose schema is neither the declared one nor that of an earlier
    store format (names, order, types); return the columns it lacks (empty when current)."""
    versions = sorted({since for _, since in KINDS_BY_NAME[kind].added})
    for without in ((), *(lacking(kind, v - 1) for v in reversed(versions))):
        if schema.remove_metadata().equals(declared(kind, schema, without)):
            return without
    got = ", ".join(f"{f.name} {f.type}" for f in schema)
    want = ", ".join(f"{f.name} {f.type}" for f in declared(kind, schema))
    raise DbmetricsError(
        f"partials: {where} does not have the declared {kind} schema; has ({got}), "
        f"expected ({want}); recompute it with `partials update --full`"
    )
