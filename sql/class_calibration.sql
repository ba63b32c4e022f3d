-- name: class_calibration
-- summary: Class-wise reliability-diagram data per period x version (x segment) x class: for each non-empty bin of the class's predicted probability, its rows, mean probability, label frequency and gap, with the class's calibration error; for a two-class model, class 1 is the positive-class reliability curve.
-- include: column_roles
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- param only_class (integer(0..)): keep only this class (e.g. 1: a binary model's positive-class reliability curve)
-- output period: first day of the period
-- output class: 0-based class index
-- output bin: 0-based bin of p(class); bin m holds m/B < p <= (m+1)/B (p = 0 in bin 0, as sklearn calibration_curve)
-- output bin_lower: m / B
-- output bin_upper: (m + 1) / B
-- output rows: evaluated rows whose p(class) falls in the bin; empty bins are left out
-- output mean_probability: mean p(class) in the bin (calibration_curve's prob_pred)
-- output label_frequency: share of the bin's rows labelled with the class (calibration_curve's prob_true)
-- output gap: label_frequency - mean_probability (negative = the class is over-predicted)
-- output evaluated_rows: n, evaluated rows of the whole period x version x segment
-- output calibration_error: the class's calibration error, sum over bins of rows/n * |gap|; averaged over classes it is the class-wise ECE of Kull et al. (2019) (class_metrics' macro row)
-- output max_gap: max over the class's non-empty bins of |gap|
-- note: rows are the evaluated rows (scored, label in [0, K), finite loss); every evaluated row falls in one bin of every class.
-- show: period, version_col, segment_cols, class, bin, rows, mean_probability, label_frequency, gap, calibration_error, max_gap
-- example: dbmetrics run class_calibration --set logs=demo_parquet/logs --set labels=demo_parquet/labels --set id_col=prediction_id --set grain=month --set bins=10 --set only_class=1
WITH
class_bin_state AS (
    {{class_bin_state}}
),
by_bin AS (
    SELECT date_trunc($grain, day)::DATE AS period, {{version_col}}{{segments}}, class, bin,
           sum(rows) AS rows, sum(label_rows) AS labelled, sum(sum_prob) AS prob
    FROM class_bin_state
    WHERE $only_class IS NULL OR class = $only_class
    GROUP BY ALL
)
SELECT
    period, {{version_col}}{{segments}}, class, bin,
    bin / $bins AS bin_lower,
    (bin + 1) / $bins AS bin_upper,
    rows::BIGINT AS rows,
    prob / rows AS mean_probability,
    labelled / rows AS label_frequency,
    (labelled - prob) / rows AS gap,
    (sum(rows) OVER by_class)::BIGINT AS evaluated_rows,
    sum(abs(labelled - prob)) OVER by_class / sum(rows) OVER by_class AS calibration_error,
    max(abs(labelled - prob) / rows) OVER by_class AS max_gap
FROM by_bin
WINDOW by_class AS (PARTITION BY period, {{version_col}}{{segments}}, class)
ORDER BY ALL
