"""{{rows_by_id}}: one row per evaluated prediction with its id, for queries that pair the
rows two model versions scored for the same prediction (a shadow or canary deployment).

Columns: day, the version and segment columns (own names), pair_id (the id_col value; NULL
when no id_col is given, so nothing pairs), predicted, correct, loss, brier, confidence and
bin, the row statistics of kernels/row_stats.py. Evaluated rows only, as in STATE: usable
scores, a label in [0, K) and a finite loss.

A partials store keeps sums, not rows: there the fragment is an empty relation with the
same columns (and key types), so a query that pairs falls back to its unpaired form.
"""

from .roles import KINDS, ColumnRoles
from .schema import quote
from .state_sql import nested, predictions

STATS = ("predicted", "correct", "loss", "brier", "confidence", "bin")
TYPES = ("INTEGER", "BOOLEAN", "DOUBLE", "DOUBLE", "DOUBLE", "INTEGER")


def rows_by_id(roles: ColumnRoles, id_col: str | None) -> str:
    """The fragment on logs; id_col is a logs column (its own spelling) or None."""
    fn = KINDS[roles.kind][0]
    pair_id = f"logs.{quote(id_col)}" if id_col else "CAST(NULL AS BIGINT)"
    rows = predictions(roles, extra={"pair_id": pair_id})
    stats = ", ".join(f"stats.{name} AS {name}" for name in STATS)
    return (
        f"SELECT day, {roles.keys}, pair_id, {stats}\n"
        f"FROM (SELECT *, {fn}(scores, label, $bins) AS stats FROM {nested(rows)})\n"
        "WHERE stats.score_issue = 0 AND stats.label_issue = 0 AND isfinite(stats.loss)"
    )


def no_rows(filled: dict) -> str:
    """The fragment on a partials store: no rows, the key columns typed as in its STATE."""
    columns = ", ".join(
        f"CAST(NULL AS {t}) AS {name}" for name, t in zip(("pair_id", *STATS), ("BIGINT", *TYPES))
    )
    keys = f"{filled['version_col']}{filled['segments']}"
    return f"SELECT day, {keys}, {columns}\nFROM {nested(filled['state'])}\nLIMIT 0"
