"""The kinds of additive state a partials store keeps, defined once.

Each kind is one Parquet file per day in the store folder of the same name, the
{{placeholder}} of that name in the saved queries, and a table computed from the logs. Every
column after the day, the version and segment columns and the kind's own keys is additive:
counts (BIGINT) add with sum, `sum_*` columns with fsum (a Kahan sum). The store itself
(store.py, update.py, fragments.py) only loops over STATE_KINDS: a new kind is a new entry
here and its table in `compute_kinds`, nothing else.
"""

from dataclasses import dataclass

from dbmetrics.queries.engine import partial_states
from dbmetrics.queries.state_sql import CLASS_STATE_COLUMNS, STATE_COLUMNS


@dataclass(frozen=True)
class StateKind:
    """name: store folder, {{placeholder}} and bound parameter `partials_<name>`;
    keys: key columns beyond day x version x segments; columns: the additive columns."""

    name: str
    keys: tuple
    columns: tuple

    def summed(self, column: str) -> str:
        """The SQL that adds `column` across files: fsum for sums, an exact BIGINT sum else."""
        if column.startswith("sum_"):
            return f"fsum({column}) AS {column}"
        return f"CAST(sum({column}) AS BIGINT) AS {column}"


def additive(columns: tuple, keys: tuple) -> tuple:
    return tuple(c for c in columns if c != "day" and c not in keys)


STATE_KINDS = (
    StateKind("state", ("bin",), additive(STATE_COLUMNS, ("bin",))),
    StateKind("class_state", ("class",), additive(CLASS_STATE_COLUMNS, ("class",))),
)
KIND_NAMES = tuple(k.name for k in STATE_KINDS)


def compute_kinds(con, roles, values: dict) -> dict:
    """{kind name: Arrow table with day, keys and the kind's columns} for the rows of
    `roles.logs`, from one scan of the logs."""
    return partial_states(con, roles, values, classes=True)
