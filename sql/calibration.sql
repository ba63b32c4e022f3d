-- name: calibration
-- summary: Reliability-diagram data per period x version (x segment): each non-empty confidence bin's count, mean confidence, accuracy with its 95% Wilson interval and gap, with ECE and MCE.
-- include: column_roles
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- output period: first day of the period
-- output bin: 0-based confidence bin; bin m holds top-label confidence c with m/B < c <= (m+1)/B (c = 0 in bin 0, as sklearn calibration_curve)
-- output bin_lower: m / B
-- output bin_upper: (m + 1) / B
-- output rows: evaluated rows in the bin (scored, label in [0, K), finite loss); empty bins are left out
-- output mean_confidence: mean top-label probability in the bin
-- output accuracy: share of the bin's rows predicted correctly
-- output accuracy_low: lower end of the 95% Wilson (1927) score interval of the bin's accuracy k / n: (p + z^2/2n - z sqrt(p(1 - p)/n + z^2/4n^2)) / (1 + z^2/n), z = 1.959964 (as scipy.stats.binomtest(k, n).proportion_ci(method='wilson')); the reliability diagram's error bar
-- output accuracy_high: upper end of that interval
-- output gap: accuracy - mean_confidence (negative = over-confident)
-- output evaluated_rows: n, evaluated rows of the whole period x version x segment
-- output ece: sum over bins of rows/n * |gap| (Guo et al. 2017 top-label form)
-- output mce: max over non-empty bins of |gap|
-- show: period, version_col, segment_cols, bin, rows, mean_confidence, accuracy, accuracy_low, accuracy_high, gap, ece, mce
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
),
-- Wilson (1927) score interval of each bin's accuracy; z: the 97.5% standard normal quantile
wilson AS (
    SELECT *,
        (correct / rows + z * z / (2 * rows)) / (1 + z * z / rows) AS wilson_center,
        z / (1 + z * z / rows)
            * sqrt(correct / rows * (1 - correct / rows) / rows + z * z / (4 * rows * rows))
            AS wilson_half
    FROM (SELECT *, 1.959963984540054 AS z FROM by_bin)
)
SELECT
    period, {{version_col}}{{segments}}, bin,
    bin / $bins AS bin_lower,
    (bin + 1) / $bins AS bin_upper,
    rows::BIGINT AS rows,
    confidence / rows AS mean_confidence,
    correct / rows AS accuracy,
    greatest(wilson_center - wilson_half, 0) AS accuracy_low,
    least(wilson_center + wilson_half, 1) AS accuracy_high,
    (correct - confidence) / rows AS gap,
    (sum(rows) OVER cell)::BIGINT AS evaluated_rows,
    sum(abs(correct - confidence)) OVER cell / sum(rows) OVER cell AS ece,
    max(abs(correct - confidence) / rows) OVER cell AS mce
FROM wilson
WINDOW cell AS (PARTITION BY period, {{version_col}}{{segments}})
ORDER BY ALL
