-- name: confusion
-- summary: The confusion matrix per period x version x segment: one row per (label, predicted class) pair that occurs, with its count and its share of the label's rows.
-- include: column_roles
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
