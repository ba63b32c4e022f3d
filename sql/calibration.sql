-- name: calibration
-- summary: Reliability-diagram data per period x version (x segment): each non-empty confidence bin's count, mean confidence, accuracy and gap, with ECE and MCE.
-- include: column_roles
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- output period: first day of the period
-- output bin: 0-based confidence bin; bin m holds top-label confidence c with m/B < c <= (m+1)/B (c = 0 in bin 0, as sklearn calibration_curve)
-- output bin_lower: m / B
-- output bin_upper: (m + 1) / B
-- output rows: evaluated rows in the bin (scored, label in [0, K), finite loss); empty bins are left out
-- output mean_confidence: mean top-label probability in the bin
-- output accuracy: share of the bin's rows predicted correctly
-- output gap: accuracy - mean_confidence (negative = over-confident)
-- output evaluated_rows: n, evaluated rows of the whole period x version x segment
-- output ece: sum over bins of rows/n * |gap| (Guo et al. 2017 top-label form)
-- output mce: max over non-empty bins of |gap|
-- show: period, version_col, segment_cols, bin, rows, mean_confidence, accuracy, gap, ece, mce
-- example: dbmetrics run calibration --set logs=demo_parquet/logs --set labels=demo_parquet/labels --set id_col=prediction_id --set grain=month --set bins=10
WITH
state AS (
    {{state}}
),
by_bin AS (
    SELECT date_trunc($grain, day)::DATE AS period, {{version_col}}{{segments}}, bin,
           sum(evaluated_rows) AS rows,
           sum(correct_rows) AS correct,
           sum(sum_confidence_evaluated) AS confidence
    FROM state
    WHERE evaluated_rows > 0
    GROUP BY ALL
)
SELECT
    period, {{version_col}}{{segments}}, bin,
    bin / $bins AS bin_lower,
    (bin + 1) / $bins AS bin_upper,
    rows::BIGINT AS rows,
    confidence / rows AS mean_confidence,
    correct / rows AS accuracy,
    (correct - confidence) / rows AS gap,
    (sum(rows) OVER cell)::BIGINT AS evaluated_rows,
    sum(abs(correct - confidence)) OVER cell / sum(rows) OVER cell AS ece,
    max(abs(correct - confidence) / rows) OVER cell AS mce
FROM by_bin
WINDOW cell AS (PARTITION BY period, {{version_col}}{{segments}})
ORDER BY ALL
