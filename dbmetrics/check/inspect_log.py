"""check_log: run the check's queries and assemble the Report."""

from collections import Counter, defaultdict

import duckdb

from dbmetrics.errors import DbmetricsError
from dbmetrics.queries import notes, score_kind
from dbmetrics.queries.header import bound_values
from dbmetrics.queries.schema import first_line, is_parquet, open_source, shadowing, unreadable
from dbmetrics.queries.values import split_names

from . import files, sql
from .params import Resolved, resolve
from .report import FileStats, Issue, Report, VersionClasses

FILE_COLUMN = "dbmetrics_file"
SECTIONS = (
    "scores",
    "classes",
    "labels",
    "timestamps",
    "versions",
    "ids",
    "labels_table",
    "targets",
)


def check_log(con: duckdb.DuckDBPyConnection, params: dict) -> "Report":
    """The health report of the log `params` describe (the saved queries' column roles).

    Reads the log with GROUP BY queries (and one window per Parquet file for the order;
    nothing is loaded into Python), so it spills rather than run out of memory. Raises
    DbmetricsError with one line for a bad parameter, an unreadable file (named), or a
    failed query.
    """
    r = resolved(con, params)
    values = {**r.values, **r.logs.bound, **(r.roles.labels.bound if r.roles.labels else {})}

    def fetch(query):
        return con.execute(query, bound_values(query, values)).fetchall()

    try:
        return assemble(con, r, fetch)
    except duckdb.Error as exc:
        raise _located(con, r, exc) from None


def resolved(con, params: dict) -> Resolved:
    """resolve(), with the files' differing column types added to an error (a type that
    changed between files is the usual cause of a wrong-type column)."""
    try:
        return resolve(con, params)
    except DbmetricsError as exc:
        hint = _drift_hint(con, params.get("logs"))
        raise DbmetricsError(f"{exc}; {hint}" if hint else str(exc)) from None


def _drift_hint(con, logs: str | None) -> str:
    try:
        source = open_source(con, "logs", str(logs or "").strip())
        if not is_parquet(source):
            return ""
        found = [d for d in files.drift(con, source, {}) if d.detail.startswith("types")]
    except (DbmetricsError, duckdb.Error):
        return ""
    return " ".join(f"note: {d.column} {d.detail}" for d in found)


def _located(con, r: Resolved, exc: duckdb.Error) -> DbmetricsError:
    """The error, naming the file that cannot be read when there is one."""
    for name, source in (("logs", r.logs), ("labels", r.roles.labels)):
        if source is not None and is_parquet(source):
            bad = unreadable(con, source)
            if bad:
                return DbmetricsError(
                    f"{name}: file `{bad[0]}` cannot be read ({bad[1]}); "
                    "repair it or move it out of the log"
                )
    return DbmetricsError(f"check failed: {first_line(exc)}")


def assemble(con, r: Resolved, fetch) -> Report:
    roles = r.roles
    role_of = {
        col: role
        for role, col in (
            ("time_col", roles.time),
            ("scores_col", roles.scores),
            ("version_col", roles.version),
            ("label_col", roles.label if roles.labels is None else None),
            ("id_col", r.id_col),
            ("target_col", r.target_col),
        )
        if col
    }
    columns = tuple((c, t, role_of.get(c)) for c, t in r.logs.columns.items())
    grouped = fetch(sql.rows(r))
    issues = _row_issues(r, grouped) + _empty_answers(r, grouped)
    classes = _version_classes(grouped)
    issues.append(Issue("classes", "k_differs", sum(v.other_k_rows for v in classes), True))
    issues.append(_kind_issue(roles.kind, grouped))
    if roles.classes:
        issues.append(_classes_issue(split_names(roles.classes_text), classes))
    notes, file_stats, drift = [], (), ()
    if is_parquet(r.logs):
        drift = tuple(files.drift(con, r.logs, role_of)) + tuple(
            files.Drift(key, role_of.get(key), shadowing(key), True) for key in r.logs.shadowed
        )
        if "file_row_number" in {c.lower() for c in r.logs.columns}:
            notes.append("out_of_order not checked: the log has its own file_row_number column")
        else:
            file_col = FILE_COLUMN
            while file_col in r.logs.columns:
                file_col += "_"
            file_stats = tuple(FileStats(*row) for row in fetch(sql.order(r, file_col)))
            issues.append(
                Issue("timestamps", "out_of_order", sum(f.out_of_order for f in file_stats), True)
            )
    else:
        notes.append(
            "out_of_order and drift between files not checked: the log is not Parquet files"
        )
    if r.id_col:
        dup_ids, dup_rows, null_ids = fetch(sql.duplicates(r))[0]
        issues += [
            Issue("ids", "duplicate_ids", dup_rows, True, f"{dup_ids} ids"),
            Issue("ids", "null_ids", null_ids, True),
        ]
    if roles.labels is not None:
        names = (
            "label_rows",
            "null_label_ids",
            "null_labels",
            "unknown_class_labels" if roles.classes else "negative_labels",
            "conflicting_label_ids",
            "orphan_labels",
        )
        counts = dict(zip(names, fetch(sql.labels_table(r))[0]))
        notes.append(
            f"labels table: {counts.pop('label_rows')} rows; columns: "
            + ", ".join(f"{c} {t}" for c, t in roles.labels.columns.items())
        )
        issues += [Issue("labels_table", n, c, True) for n, c in counts.items()]
    if r.target_col:
        found = dict(fetch(sql.targets(r)))
        issues += [
            Issue("targets", reason, found.get(reason, 0), reason != "no_target")
            for reason, _ in (("no_target", ""),) + sql.TARGET_REASONS
        ]
    if roles.label is None:
        notes.append("labels not checked: label_col is empty")
    periods = defaultdict(int)
    for period, version, _, _, _, _, n in grouped:
        periods[(period, version)] += n
    issues = tuple(sorted(issues, key=lambda i: SECTIONS.index(i.check)))
    clean = not any(i.problem and i.count for i in issues) and not any(d.problem for d in drift)
    return Report(
        r.texts["logs"],
        r.texts["grain"],
        columns,
        drift,
        tuple((p, v, n) for (p, v), n in sorted(periods.items(), key=_null_last)),
        tuple(classes),
        issues,
        file_stats,
        tuple(notes),
        clean,
    )


def _row_issues(r: Resolved, grouped: list) -> list:
    """Issues by reason from the grouped row classification (every checked reason listed)."""
    score = Counter()
    label = Counter()
    null_time = null_version = 0
    for period, version, _, score_issue, label_issue, _, n in grouped:
        score[score_issue] += n
        label[label_issue] += n
        null_time += n if period is None else 0
        null_version += n if version is None else 0
    probs = r.roles.kind in ("probs", "binary_prob")
    score_reasons = sql.SCORE_REASONS + (sql.PROB_REASONS if probs else sql.LOGIT_REASONS)
    strict = r.texts["require_labels"] == "yes"
    return (
        [Issue("scores", reason, score[reason], True) for reason, _ in score_reasons]
        + [
            Issue("labels", reason, label[reason], reason != "unlabelled" or strict)
            for reason, _ in sql.label_reasons(r)
        ]
        + [
            Issue("timestamps", "null_timestamps", null_time, True),
            Issue("versions", "null_versions", null_version, True),
        ]
    )


def _empty_answers(r: Resolved, grouped: list) -> list:
    """The log-wide empty answers the saved queries warn about (notes.py): no row with usable
    scores; a label table whose ids match no prediction."""
    rows = sum(g[-1] for g in grouped)
    scored = sum(g[-1] for g in grouped if g[3] is None)
    matched = sum(g[-1] for g in grouped if g[4] != "unlabelled")
    no_scores = rows > 0 and scored == 0
    no_match = r.roles.labels is not None and rows > 0 and matched == 0
    return [
        Issue(
            "scores",
            "no_usable_scores",
            rows if no_scores else 0,
            True,
            notes.no_usable_scores(rows) if no_scores else "",
        ),
        Issue(
            "labels_table",
            "labels_match_no_prediction",
            rows if no_match else 0,
            True,
            notes.no_labels(r.texts, rows) if no_match else "",
        ),
    ]


def _kind_issue(kind: str, grouped: list) -> Issue:
    """scores_kind_mismatch: every row's scores (not a sample) against scores_kind; the
    count is the rows that contradict it, the detail the likely kind."""
    shapes = Counter()
    for *_, shape, n in grouped:
        if shape is not None:
            shapes[shape] += n
    message = score_kind.mismatch(kind, shapes, sampled=False)
    fitting = shapes["distribution"] + shapes["unit"]
    count = (
        fitting if kind.endswith("logit") or kind == "logits" else sum(shapes.values()) - fitting
    )
    return Issue("scores", "scores_kind_mismatch", count if message else 0, True, message or "")


def _classes_issue(names: list, classes: list) -> Issue:
    """classes_count_differs: rows of versions whose usual K is not the number of names."""
    off = [v for v in classes if v.usual_k is not None and v.usual_k != len(names)]
    detail = ", ".join(f"{v.version}: K = {v.usual_k}" for v in off)
    return Issue(
        "classes",
        "classes_count_differs",
        sum(v.rows for v in off),
        True,
        f"classes names {len(names)}; {detail}" if off else "",
    )


def _version_classes(grouped: list) -> list:
    """Per version: rows with a K, the usual K (most rows; the smaller on a tie), the rows
    with another K, and every K seen."""
    ks = defaultdict(Counter)
    for _, version, k, _, _, _, n in grouped:
        if k is not None:
            ks[version][k] += n
    out = []
    for version, counts in sorted(ks.items(), key=lambda item: _null_last((item[0],))):
        usual = min(counts, key=lambda k: (-counts[k], k))
        total = sum(counts.values())
        out.append(
            VersionClasses(version, total, usual, total - counts[usual], tuple(sorted(counts)))
        )
    return out


def _null_last(item):
    """Sort key: NULLs after values, element by element."""
    key = item[0] if isinstance(item[0], tuple) else item[:1]
    return tuple((v is None, v if v is not None else 0) for v in key)
