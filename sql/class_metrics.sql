-- name: class_metrics
-- summary: One row per period x version x segment x class: support, predicted and correct rows, recall, precision, F1, mean predicted probability against label frequency, the class's cross-entropy, class-wise calibration error and top-k recall; then a macro and a weighted average row per cell.
-- include: column_roles
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- output period: first day of the period
-- output class: 0-based class index; NULL on the two average rows
-- output average: NULL on class rows; 'macro' (unweighted mean over classes, as scikit-learn average='macro') or 'weighted' (weighted by support, as average='weighted')
-- output support: evaluated rows labelled with the class (average rows: all evaluated rows of the cell)
-- output predicted_rows: evaluated rows predicted as the class (first maximum)
-- output correct_rows: evaluated rows labelled with and predicted as the class
-- output recall: correct_rows / support; NULL when support is 0 (the weighted row's recall is the accuracy)
-- output precision: correct_rows / predicted_rows; NULL when predicted_rows is 0
-- output f1: 2 correct_rows / (support + predicted_rows), the harmonic mean of precision and recall
-- output mean_probability: mean predicted probability of the class over the cell's evaluated rows
-- output label_frequency: support / evaluated rows of the cell; equals mean_probability for a model calibrated in the mean
-- output cross_entropy: mean -log p(label) over the class's rows (nats); the weighted row's is the cell's cross-entropy
-- output calibration_error: the class's calibration error, sum over equal-width bins of p(class) of |labelled rows - sum of p(class)| / evaluated rows; the macro row's is the class-wise ECE of Kull et al. (2019), the mean over all K classes
-- output top3_recall: share of the class's rows whose label is among the 3 most probable classes; NULL when the cell has 3 classes or fewer (the weighted row's is the top-3 accuracy)
-- output top5_recall: the same for the 5 most probable classes
-- note: rows are the evaluated rows (scored, label in [0, K), finite loss), as the rollup's accuracy; ties between probabilities go to the lowest class index, as argmax.
-- note: averages follow scikit-learn precision_recall_fscore_support: macro and weighted rows average the classes that occur as a label or a prediction in the cell, an undefined precision or recall counting as 0 (its zero_division default); the macro row's cross_entropy and top-k recall average the classes with support.
-- note: calibration uses `bins` equal-width bins of each class's probability, right-closed with 0 in bin 0 (as sklearn.calibration.calibration_curve); a small cell shows a positive calibration error by chance.
-- show: period, version_col, segment_cols, class, average, support, recall, precision, f1, mean_probability, label_frequency, cross_entropy, calibration_error, top3_recall, predicted_rows, correct_rows, top5_recall
-- example: dbmetrics run class_metrics --set logs=demo_parquet/logs --set labels=demo_parquet/labels --set id_col=prediction_id --set grain=month
WITH
class_state AS (
    {{class_state}}
),
class_bin_state AS (
    {{class_bin_state}}
),
-- Per class: the class-state sums, and each bin's calibration gap |labels - probability|
-- taken before bins are summed; one row per period x version x segment x class.
per_class AS (
    SELECT period, {{version_col}}{{segments}}, class,
           sum(support) AS support, sum(predicted) AS predicted, sum(correct) AS correct,
           sum(loss) AS loss, sum(prob) AS prob, sum(top3) AS top3, sum(top5) AS top5,
           sum(gap) AS gap
    FROM (
        SELECT date_trunc($grain, day)::DATE AS period, {{version_col}}{{segments}}, class,
               support_rows AS support, predicted_evaluated_rows AS predicted,
               true_positive_rows AS correct, sum_class_loss AS loss,
               sum_prob_evaluated AS prob, top3_rows AS top3, top5_rows AS top5
        FROM class_state
        UNION ALL BY NAME
        SELECT period, {{version_col}}{{segments}}, class, abs(sum(label_rows) - sum(sum_prob)) AS gap
        FROM (SELECT date_trunc($grain, day)::DATE AS period, * EXCLUDE (day) FROM class_bin_state)
        GROUP BY period, {{version_col}}{{segments}}, class, bin
    )
    GROUP BY ALL
),
metrics AS (
    SELECT period, {{version_col}}{{segments}}, class,
           support, predicted, correct, loss, top3, top5,
           n, k, support > 0 OR predicted > 0 AS present,
           correct / nullif(support, 0) AS recall,
           correct / nullif(predicted, 0) AS precision,
           2 * correct / nullif(support + predicted, 0) AS f1,
           prob / nullif(n, 0) AS mean_probability,
           support / nullif(n, 0) AS label_frequency,
           loss / nullif(support, 0) AS cross_entropy,
           gap / nullif(n, 0) AS calibration_error,
           CASE WHEN k > 3 THEN top3 / nullif(support, 0) END AS top3_recall,
           CASE WHEN k > 5 THEN top5 / nullif(support, 0) END AS top5_recall
    FROM (SELECT *, sum(support) OVER cell AS n, max(class) OVER cell + 1 AS k
          FROM per_class
          WINDOW cell AS (PARTITION BY period, {{version_col}}{{segments}}))
),
averaged AS (
    SELECT period, {{version_col}}{{segments}}, class, NULL::VARCHAR AS average,
           support, predicted AS predicted_rows, correct AS correct_rows,
           recall, precision, f1, mean_probability, label_frequency, cross_entropy,
           calibration_error, top3_recall, top5_recall
    FROM metrics
    UNION ALL BY NAME
    SELECT period, {{version_col}}{{segments}}, NULL::BIGINT AS class, 'macro' AS average,
           sum(support) AS support, sum(predicted) AS predicted_rows, sum(correct) AS correct_rows,
           avg(coalesce(recall, 0)) FILTER (WHERE present) AS recall,
           avg(coalesce(precision, 0)) FILTER (WHERE present) AS precision,
           avg(coalesce(f1, 0)) FILTER (WHERE present) AS f1,
           NULL::DOUBLE AS mean_probability, NULL::DOUBLE AS label_frequency,
           avg(cross_entropy) AS cross_entropy,
           avg(calibration_error) AS calibration_error,
           avg(top3_recall) AS top3_recall, avg(top5_recall) AS top5_recall
    FROM metrics
    GROUP BY ALL
    UNION ALL BY NAME
    SELECT period, {{version_col}}{{segments}}, NULL::BIGINT AS class, 'weighted' AS average,
           sum(support) AS support, sum(predicted) AS predicted_rows, sum(correct) AS correct_rows,
           sum(correct) / nullif(sum(support), 0) AS recall,
           sum(support * coalesce(precision, 0)) FILTER (WHERE present) / nullif(sum(support), 0)
               AS precision,
           sum(support * coalesce(f1, 0)) FILTER (WHERE present) / nullif(sum(support), 0) AS f1,
           NULL::DOUBLE AS mean_probability, NULL::DOUBLE AS label_frequency,
           sum(loss) / nullif(sum(support), 0) AS cross_entropy,
           sum(support * calibration_error) / nullif(sum(support), 0) AS calibration_error,
           CASE WHEN max(k) > 3 THEN sum(top3) / nullif(sum(support), 0) END AS top3_recall,
           CASE WHEN max(k) > 5 THEN sum(top5) / nullif(sum(support), 0) END AS top5_recall
    FROM metrics
    GROUP BY ALL
)
SELECT period, {{version_col}}{{segments}}, class, average,
       support::BIGINT AS support, predicted_rows::BIGINT AS predicted_rows,
       correct_rows::BIGINT AS correct_rows,
       recall, precision, f1, mean_probability, label_frequency, cross_entropy,
       calibration_error, top3_recall, top5_recall
FROM averaged
ORDER BY period, {{version_col}}{{segments}}, class NULLS LAST, average
