-- name: labels
-- summary: Label arrival per period x version (x segment): how many predictions have a label yet, and how many days their labels took to arrive (median, 90th percentile, mean, largest).
-- include: column_roles
-- param label_time_col (column(labels), default labelled_at): when the label arrived (DATE or TIMESTAMP), a column of the labels table
-- output period: first day of the period (of the prediction time)
-- output rows: prediction rows
-- output labelled_rows: rows with a row in the labels table whose label time is not NULL
-- output label_coverage: labelled_rows / rows
-- output median_delay_days: median of (label time - prediction time) over labelled rows, in days
-- output p90_delay_days: 90th percentile of the same delay (linear interpolation), in days
-- output mean_delay_days: mean delay in days
-- output max_delay_days: largest delay in days
-- output early_labels: labelled rows whose label time is before the prediction time (a clock or join problem; their negative delays are kept in the statistics)
-- note: needs labels and id_col; the scores and bins parameters are accepted as in every query and not used. A prediction with several label rows counts once, with its earliest label time. Recent periods have low coverage and short delays until their late labels arrive: compare periods at the same age.
-- show: period, version_col, segment_cols, rows, label_coverage, median_delay_days, p90_delay_days, max_delay_days, early_labels
-- example: dbmetrics run labels --set logs=demo_parquet/logs --set labels=demo_parquet/labels/labels.parquet --set id_col=prediction_id
WITH
predictions AS (
    SELECT {{id_col}} AS __id, CAST({{time_col}} AS TIMESTAMP) AS __predicted,
           {{version_col}}, {{segment_cols}}
    FROM {{logs}}
),
arrivals AS (
    SELECT {{id_col}} AS __id, min(CAST({{label_time_col}} AS TIMESTAMP)) AS __arrived
    FROM {{labels}}
    WHERE {{label_time_col}} IS NOT NULL
    GROUP BY ALL
),
delays AS (
    SELECT CAST(date_trunc($grain, CAST(__predicted AS DATE)) AS DATE) AS period,
           date_diff('millisecond', __predicted, __arrived) / 86400000.0 AS __delay,
           * EXCLUDE (__id, __predicted, __arrived)
    FROM predictions LEFT JOIN arrivals USING (__id)
),
summed AS (
    SELECT count(*) AS rows,
           count(__delay) AS labelled_rows,
           count(__delay) / count(*) AS label_coverage,
           quantile_cont(__delay, 0.5) AS median_delay_days,
           quantile_cont(__delay, 0.9) AS p90_delay_days,
           avg(__delay) AS mean_delay_days,
           max(__delay) AS max_delay_days,
           count(*) FILTER (WHERE __delay < 0) AS early_labels,
           * EXCLUDE (__delay)
    FROM delays
    GROUP BY ALL
)
SELECT period, {{version_col}},
       * EXCLUDE (period, {{version_col}}, rows, labelled_rows, label_coverage, median_delay_days,
                  p90_delay_days, mean_delay_days, max_delay_days, early_labels),
       rows, labelled_rows, label_coverage, median_delay_days, p90_delay_days, mean_delay_days,
       max_delay_days, early_labels
FROM summed
ORDER BY ALL
