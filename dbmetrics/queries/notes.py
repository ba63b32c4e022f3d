"""Empty or meaningless answers, said in one line each: what happened and what to change.

`result_notes(texts, table)` reads a saved query's result (its documented output columns),
so it costs nothing and works the same on logs and on a partials store:

- every row's scores are unusable (invalid_scores = rows, or no scored_rows);
- no row is labelled: a label table whose ids match no prediction, or a label column that
  is NULL everywhere (label coverage 0), or calibration / recalibration with no labelled
  row at all (an empty result);
- drift: a reference window without rows; every period inside the reference; every cell
  outside the reference below min_rows (nothing can ever be flagged).
- version_gap: no cell with evaluated rows of both versions (every difference NULL), and a
  partials store, on which nothing can be paired.

The check reports the log-wide ones as issues with the same words (`no_usable_scores`,
`labels_match_no_prediction`).
"""

import pyarrow as pa
import pyarrow.compute as pc


def no_usable_scores(rows: int) -> str:
    return (
        f"none of the {rows} rows has usable scores (all missing or invalid_scores): check "
        "scores_col and scores_kind, and `dbmetrics check` for the reasons"
    )


def no_labels(texts: dict, rows: int) -> str:
    if texts.get("labels"):
        return (
            f"labels: no id in `{texts['labels']}` matches an id_col `{texts.get('id_col')}` "
            f"of the {rows} predictions (label coverage 0): check that id_col names the same "
            "ids, of the same type, in both"
        )
    return (
        f"label_col `{texts.get('label_col')}` is NULL (or unlabelled) on all {rows} rows "
        "(label coverage 0): the labelled metrics are empty until labels arrive"
    )


def total(table: pa.Table, column: str) -> int:
    return int(pc.sum(table.column(column)).as_py() or 0)


def result_notes(name: str, texts: dict, table: pa.Table) -> list:
    """One line per empty or meaningless part of query `name`'s result."""
    cols = set(table.column_names)
    notes = []
    rows = total(table, "rows") if "rows" in cols else 0
    scored = (
        total(table, "scored_rows")
        if "scored_rows" in cols
        else rows - total(table, "invalid_scores") - total(table, "missing_scores")
        if {"invalid_scores", "missing_scores"} <= cols
        else None
    )
    if rows and scored == 0:
        return [no_usable_scores(rows)]  # the rest follows from it
    if rows and texts.get("label_col"):
        labelled = (
            total(table, "labelled_rows")
            if "labelled_rows" in cols
            else total(table, "evaluated_rows")
            if texts.get("labels") and "evaluated_rows" in cols
            else None
        )
        if labelled == 0:
            notes.append(no_labels(texts, rows))
    if table.num_rows == 0 and "evaluated_rows" in cols and "labelled_rows" not in cols:
        notes.append(_empty_evaluation(name, texts))
    if name == "drift" or {"in_reference", "ref_scored_rows"} <= cols:
        notes += _drift_notes(texts, table)
    if {"metric", "form", "version_a", "version_b"} <= cols:
        notes += _comparison_notes(name, texts, table)
    return notes


def _comparison_notes(name: str, texts: dict, table: pa.Table) -> list:
    """version_gap: nothing compared, and the unpaired-only partials store."""
    notes = []
    if texts.get("partials"):
        notes.append(
            f"{name}: a partials store keeps sums, not rows, so no prediction is paired by "
            "id and every cell takes the unpaired (Welch) form; run it on the logs with "
            "id_col to pair the predictions both versions scored (shadow or canary)"
        )
    if table.num_rows and table.column("form").null_count == table.num_rows:
        keys = table.column_names[: table.column_names.index("metric")]  # period, segments
        cells = table.select(keys).group_by(keys).aggregate([]).num_rows
        a, b = table.column("version_a")[0].as_py(), table.column("version_b")[0].as_py()
        notes.append(
            f"{name}: none of the {cells} period x segment cells has evaluated rows of both "
            f"version_a `{a}` and version_b `{b}`, so every difference is NULL: choose "
            "versions that ran at the same time (version_a, version_b) or a longer grain"
        )
    return notes


def _empty_evaluation(name: str, texts: dict) -> str:
    """calibration / recalibration without any evaluated row."""
    if not texts.get("label_col"):
        return f"{name}: label_col is empty, so there is nothing to evaluate: {name} needs labels"
    return (
        f"{name}: no row has both usable scores and a valid label, so the result is empty: "
        "check label_col (or labels and id_col) and run `dbmetrics check`"
    )


def _drift_notes(texts: dict, table: pa.Table) -> list:
    if table.num_rows == 0 or "in_reference" not in table.column_names:
        return []
    window = f"ref_start={texts.get('ref_start') or 'first day'}, ref_end={texts.get('ref_end') or 'end of the 4th period'}"
    periods = table.column("period")
    span = f"{pc.min(periods).as_py()}..{pc.max(periods).as_py()}"
    inside = table.column("in_reference").to_pylist()
    if all(inside):
        return [
            f"drift: every period ({span}) lies inside the reference window ({window}), so "
            "nothing is compared or flagged: end the window earlier (ref_end) or wait for "
            "more periods"
        ]
    if not any(v for v in table.column("ref_scored_rows").to_pylist()):
        return [
            f"drift: the reference window ({window}) holds no scored rows, so nothing is "
            f"compared or flagged: set ref_start/ref_end to days inside the log ({span})"
        ]
    min_rows = int(texts.get("min_rows") or 0)
    outside = [
        (s or 0, r or 0)
        for s, r, i in zip(
            table.column("scored_rows").to_pylist(),
            table.column("ref_scored_rows").to_pylist(),
            inside,
        )
        if not i
    ]
    if all(s < min_rows or r < min_rows for s, r in outside):
        largest = max(min(s, r) for s, r in outside)
        return [
            f"drift: every cell outside the reference (or its reference) has fewer than "
            f"min_rows={min_rows} scored rows (the largest has {largest}), so nothing can be "
            "flagged: lower min_rows, use a longer grain or fewer segment_cols"
        ]
    return []
