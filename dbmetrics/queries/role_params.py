"""The column-role parameters, defined once: every saved query that rolls up predictions
includes them with the header line `-- include: column_roles` (header.py), and the check,
the partials store and the CLI read their names from here.

A query may declare one of them itself to narrow it (segments.sql: segment_cols must also be
columns of the business table); the included line of that name is then left out.
"""

INCLUDE = "column_roles"

# The header lines `-- include: column_roles` stands for, in order.
HEADER = (
    "param logs (source): prediction log: a Parquet file, glob or (hive-partitioned) folder, "
    "or a table/view name; required unless partials is set",
    "param time_col (column, default ts): prediction time, DATE, TIMESTAMP or TIMESTAMPTZ; "
    "its day is CAST(time AS DATE), for a TIMESTAMPTZ in timezone",
    "param timezone (text, default UTC): time zone (IANA name, e.g. Europe/Berlin) whose "
    "midnight starts a day when time_col is a TIMESTAMPTZ; a DATE or TIMESTAMP is read as "
    "written",
    "param scores_col (column, default logits): the model's scores: a numeric list per row "
    "(one number for binary_* kinds)",
    "param scores_kind (choice(logits|probs|binary_logit|binary_prob), default logits): "
    "logits (softmax taken) or probabilities (checked, renormalised); binary_logit s -> "
    "[0, s], binary_prob p -> [1-p, p]",
    "param label_col (column, default label): true class: 0-based index (an integer, or a "
    "whole-number FLOAT/DOUBLE), or a name listed in classes; NULL or NaN = not yet labelled; "
    "empty = no labels",
    "param unlabelled_value (text): a label value that means not yet labelled (e.g. -1), "
    "counted as unlabelled like NULL, not as a bad label",
    "param version_col (column, default model_version): model version column",
    "param segment_cols (columns): comma-separated segment columns to group by (none by default)",
    "param grain (choice(day|week|month), default week): period length; weeks start on Monday",
    "param labels (source): separate label table (path or table) joined on id_col; its "
    "label_col holds the labels",
    "param id_col (column): prediction id present in both logs and labels (needed with labels)",
    "param classes (text): class names in class-index order, comma-separated, for labels "
    "stored as text (as many as the scores have classes); an unknown name is a bad label",
    "param bins (integer(1..1000), default 15): equal-width confidence bins, bin m holds "
    "m/B < c <= (m+1)/B (0 in bin 0)",
)

# Every column-role parameter (grain is shared by the queries but is not a role).
COLUMN_ROLES = (
    "logs",
    "time_col",
    "timezone",
    "scores_col",
    "scores_kind",
    "label_col",
    "unlabelled_value",
    "version_col",
    "segment_cols",
    "labels",
    "id_col",
    "classes",
    "bins",
)
# Added later: a query written before them, that declares the others, gets their defaults.
OPTIONAL_ROLES = ("timezone", "unlabelled_value")
REQUIRED_ROLES = tuple(n for n in COLUMN_ROLES if n not in OPTIONAL_ROLES)
DEFAULTS = {"timezone": "UTC", "unlabelled_value": None}
