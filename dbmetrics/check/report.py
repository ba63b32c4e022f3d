"""The health report of a log: what was found, section by section, and whether it is clean.

An issue counts rows (or ids, or files, as its meaning says); an issue with `problem` and a
non-zero count, or a drift with `problem`, makes the log not clean. Issues that are not
problems (e.g. rows not labelled yet) are reported for information.
"""

import datetime as dt
from dataclasses import asdict, dataclass

MEANINGS = {
    "missing_scores": "scores NULL or an empty list",
    "null_in_scores": "a NULL inside the scores list",
    "nan_scores": "a NaN score",
    "infinite_scores": "a +inf logit or every class -inf (logits); an infinite probability (probs)",
    "negative_probs": "a negative probability",
    "probs_not_summing_to_1": "probabilities do not sum to 1 within the tolerance",
    "scores_kind_mismatch": "scores that contradict scores_kind (probabilities declared as "
    "logits, or the reverse; detail: the likely kind)",
    "classes_count_differs": "rows of versions whose K is not the number of names in classes",
    "no_usable_scores": "every row's scores are missing or invalid (the metrics are empty)",
    "labels_match_no_prediction": "no id of the labels table matches a prediction (label "
    "coverage 0)",
    "k_differs": "scores length differs from its version's usual K",
    "unlabelled": "label NULL, NaN or unlabelled_value (not labelled yet)",
    "unknown_class": "label is not one of the names in classes",
    "label_conflict_or_unknown": "the labels table gives the id conflicting labels, an "
    "unknown class name, or -1 (see the labels_table issues)",
    "label_out_of_range": "label outside [0, K)",
    "null_timestamps": "time_col NULL",
    "out_of_order": "timestamp earlier than the nearest earlier non-NULL one in the same "
    "file (file order)",
    "null_versions": "version_col NULL",
    "duplicate_ids": "rows repeating an id_col value seen before (detail: how many ids)",
    "null_ids": "id_col NULL",
    "null_label_ids": "labels table rows whose id is NULL",
    "null_labels": "labels table rows whose label is NULL, NaN or unlabelled_value",
    "unknown_class_labels": "labels table rows whose label is not one of the names in classes",
    "negative_labels": "labels table rows with a negative label",
    "conflicting_label_ids": "ids the labels table gives different labels (counts ids)",
    "orphan_labels": "labels table rows whose id matches no prediction",
    "no_target": "soft target NULL",
    "target_not_finite": "soft target empty, or with a NULL, NaN or infinite entry",
    "target_negative": "soft target with a negative entry",
    "target_not_summing_to_1": "soft target does not sum to 1 within the tolerance",
    "target_length_differs": "soft target length differs from the scores' K",
}


@dataclass(frozen=True)
class Issue:
    check: str  # scores, classes, labels, timestamps, versions, ids, labels_table, targets
    reason: str
    count: int
    problem: bool
    detail: str = ""

    @property
    def meaning(self) -> str:
        return MEANINGS[self.reason]


@dataclass(frozen=True)
class FileStats:
    file: str
    rows: int
    null_timestamps: int
    out_of_order: int


@dataclass(frozen=True)
class VersionClasses:
    version: str | None
    rows: int  # rows with scores (K known)
    usual_k: int | None
    other_k_rows: int
    k_seen: tuple


@dataclass(frozen=True)
class Report:
    """Sections: columns (name, type, role), drift between files, rows per period and
    version, K per version, issues by reason, per-file counts (Parquet), and notes."""

    source: str
    grain: str
    columns: tuple
    drift: tuple
    periods: tuple  # (period, version, rows)
    classes: tuple  # VersionClasses
    issues: tuple  # Issue
    files: tuple  # FileStats
    notes: tuple
    clean: bool

    @property
    def problems(self) -> list:
        """The issues and drifts that make the log not clean."""
        return [i for i in self.issues if i.problem and i.count] + [
            d for d in self.drift if d.problem
        ]

    def to_dict(self) -> dict:
        """Plain JSON-ready data (dates as ISO strings)."""
        out = asdict(self)
        out["columns"] = [dict(zip(("name", "type", "role"), c)) for c in self.columns]
        out["periods"] = [
            {"period": p.isoformat() if isinstance(p, dt.date) else p, "version": v, "rows": n}
            for p, v, n in self.periods
        ]
        out["issues"] = [{**asdict(i), "meaning": i.meaning} for i in self.issues]
        out["problems"] = len(self.problems)
        return out
