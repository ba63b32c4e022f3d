-- name: confusion
-- summary: The confusion matrix per period x version x segment: one row per (label, predicted class) pair that occurs, with its count and its share of the label's rows.
-- param logs (source): prediction log: a Parquet file, glob or (hive-partitioned) folder, or a table/view name; required unless partials is set
-- param time_col (column, default ts): prediction time, DATE or TIMESTAMP; its day is CAST(time AS DATE)
-- param scores_col (column, default logits): the model's scores: a numeric list per row (one number for binary_* kinds)
-- param scores_kind (choice(logits|probs|binary_logit|binary_prob), default logits): logits (softmax taken) or probabilities (checked, renormalised); binary_logit s -> [0, s], binary_prob p -> [1-p, p]
-- param label_col (column, default label): true class: 0-based index, or a name listed in classes; NULL = not yet labelled; empty = no labels
-- param version_col (column, default model_version): model version column
-- param segment_cols (columns): comma-separated segment columns to group by (none by default)
-- param grain (choice(day|week|month), default week): period length; weeks start on Monday
-- param labels (source): separate label table (path or table) joined on id_col; its label_col holds the labels
-- param id_col (column): prediction id present in both logs and labels (needed with labels)
-- param classes (text): class names in class-index order, comma-separated, for labels stored as text; an unknown name is a bad label
-- param bins (integer(1..1000), default 15): equal-width confidence bins, bin m holds m/B < c <= (m+1)/B (0 in bin 0)
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- output period: first day of the period
-- output label: true class (0-based index)
-- output predicted: predicted class (first maximum)
-- output rows: evaluated rows with this label and this prediction (pairs that never occur are left out)
-- output label_rows: evaluated rows with this label in the cell (the row of the matrix)
-- output rate: rows / label_rows, the row-normalised matrix (on the diagonal: the class's recall)
-- note: rows are the evaluated rows (scored, label in [0, K), finite loss), as the rollup's accuracy; sum over the diagonal / sum of rows = accuracy.
-- show: period, version_col, segment_cols, label, predicted, rows, rate, label_rows
-- example: dbmetrics run confusion --set logs=demo_parquet/logs --set labels=demo_parquet/labels --set id_col=prediction_id --set grain=month
WITH
confusion_state AS (
    {{confusion_state}}
),
cells AS (
    SELECT date_trunc($grain, day)::DATE AS period, {{version_col}}{{segments}}, label, predicted,
           sum(rows) AS rows
    FROM confusion_state
    GROUP BY ALL
)
SELECT period, {{version_col}}{{segments}}, label, predicted,
       rows::BIGINT AS rows,
       (sum(rows) OVER by_label)::BIGINT AS label_rows,
       rows / sum(rows) OVER by_label AS rate
FROM cells
WINDOW by_label AS (PARTITION BY period, {{version_col}}{{segments}}, label)
ORDER BY ALL
