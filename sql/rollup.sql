-- name: rollup
-- summary: One row per period x version x segment: volume, label coverage, cross-entropy, accuracy and Brier with 95% intervals, perplexity, ECE with a debiased l2 calibration error and its interval, entropy, and the rows that could not be scored, by reason.
-- include: column_roles
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- output period: first day of the period (date_trunc of grain; Monday for weeks)
-- output rows: prediction rows
-- output labelled_rows: rows whose label is not NULL (inline or joined), valid or not
-- output label_coverage: labelled_rows / rows
-- output evaluated_rows: n, rows with usable scores, a label in [0, K) and finite loss; the rows every labelled metric averages over
-- output cross_entropy: mean -log p(label) in nats over evaluated rows
-- output cross_entropy_se: standard error of that mean, sqrt(s^2 / n) with the sample variance s^2 (n - 1) from the sum and sum of squares; NULL for n < 2
-- output cross_entropy_low: cross_entropy - z cross_entropy_se, z = 1.959964 (the 97.5% normal quantile): the 95% normal interval of the mean
-- output cross_entropy_high: cross_entropy + z cross_entropy_se
-- output perplexity: exp(cross_entropy)
-- output accuracy: share of evaluated rows whose predicted class (first maximum) is the label
-- output accuracy_low: lower end of the 95% Wilson (1927) score interval of accuracy = k / n: (p + z^2/2n - z sqrt(p(1 - p)/n + z^2/4n^2)) / (1 + z^2/n), z = 1.959964 (as scipy.stats.binomtest(k, n).proportion_ci(method='wilson'))
-- output accuracy_high: upper end of that interval (+ z sqrt(...))
-- output brier: mean Brier score as sklearn.metrics.brier_score_loss: for a two-class cell (binary_* logs, two-class lists) the positive class's (p1 - label)^2, range [0, 1]; otherwise brier_multiclass
-- output brier_se: standard error of brier, sqrt(s^2 / n) with the sample variance s^2 (n - 1) of the per-row scores from their sum and sum of squares (half brier_multiclass_se in a two-class cell, as each row's score is half); NULL for n < 2 and for periods holding a day a store summarised before it kept the sum of squares
-- output brier_low: brier - z brier_se, z = 1.959964: the 95% normal interval of the mean
-- output brier_high: brier + z brier_se
-- output brier_multiclass: mean multi-class Brier score sum_j (p_j - [j = label])^2 (Brier 1950), range [0, 2]; twice brier in a two-class cell
-- output brier_multiclass_se: standard error of brier_multiclass, as brier_se
-- output ece: sum over confidence bins of |correct - sum of confidence| / n = sum_b n_b/n |acc_b - conf_b| (top-label, evaluated rows, empty bins contribute 0); biased upward on small samples (see ece_l2_debiased)
-- output ece_l2: the plug-in l2 calibration error sqrt(sum_b n_b/n (acc_b - conf_b)^2) over the same bins (at least ece); biased upward on small samples
-- output ece_l2_debiased: Kumar, Liang and Ma (2019, "Verified uncertainty calibration") debiased l2 calibration error sqrt(max(0, sum_b n_b/n ((acc_b - conf_b)^2 - acc_b (1 - acc_b) / (n_b - 1)))): each bin's squared gap less the binomial variance of its accuracy (a bin with n_b < 2 adds 0), unbiased for the squared error before the square root
-- output ece_l2_low: lower end of an approximate 95% interval of the l2 calibration error: sqrt(max(0, D - z SE)) with D the debiased squared error and SE its delta-method standard error (each bin's gap taken as normal with the binomial variance, plus the multinomial variation of the bin counts); NULL for n < 2
-- output ece_l2_high: sqrt(max(0, D + z SE)), the upper end of that interval
-- output mean_confidence: mean top-label probability over scored rows (label-free)
-- output mean_entropy: mean Shannon entropy (nats) of the predicted distribution over scored rows (label-free)
-- output missing_scores: rows whose scores are NULL or empty
-- output invalid_scores: rows whose scores are unusable (NaN, +inf logit, all classes masked, probabilities not a distribution)
-- output bad_labels: scored rows with a label outside [0, K), a class name not in classes, or conflicting late labels
-- output infinite_loss_rows: scored, validly labelled rows whose true class has probability 0 (counted, never averaged in)
-- output base_rate: two-class cells: share of evaluated rows labelled 1 (the positive class); NULL otherwise (as every column below)
-- output mean_positive_probability: two-class cells: mean predicted probability of class 1, to compare with base_rate
-- output roc_auc: two-class cells: ROC AUC from the score histogram (see the binary query), with roc_auc_bound
-- output roc_auc_bound: the largest error the score binning can add to roc_auc
-- output average_precision: two-class cells: average precision (PR AUC) from the score histogram
-- output average_precision_bound: the largest error the score binning can add to average_precision
-- note: two-class columns come from the binary query (its notes give the binning and the bounds); they are NULL for logs with more than two classes, and a cell counts as two-class when all its evaluated rows have two classes.
-- note: rows = missing_scores + invalid_scores + scored rows; scored rows = unlabelled + bad_labels + infinite_loss_rows + evaluated_rows.
-- show: period, version_col, segment_cols, rows, label_coverage, cross_entropy, cross_entropy_se, accuracy, accuracy_low, accuracy_high, ece, ece_l2_debiased, brier, brier_se, mean_entropy, mean_confidence, evaluated_rows, missing_scores, invalid_scores, bad_labels, infinite_loss_rows
-- example: dbmetrics run rollup --set logs=demo_parquet/logs --set labels=demo_parquet/labels --set id_col=prediction_id --set segment_cols=region --set grain=month
WITH
state AS (
    {{state}}
),
-- The additive state summed to period x version x segment x confidence bin; the bin's
-- calibration gap |correct - sum of confidence| is taken here, before bins are summed.
by_bin AS (
    SELECT date_trunc($grain, day)::DATE AS period, {{version_col}}{{segments}}, bin,
           sum(COLUMNS(* EXCLUDE (day, bin, {{version_col}}{{segments}}))),
           abs(sum(correct_rows) - sum(sum_confidence_evaluated)) AS calibration_gap
    FROM state
    GROUP BY ALL
),
-- Each bin's part of the squared calibration error, times n. With the bin's accuracy a_b,
-- its gap g_b = a_b - mean confidence and v_b = a_b (1 - a_b) / (n_b - 1), the estimated
-- binomial variance of a_b: n_b g_b^2 (plug-in); n_b t_b with t_b = g_b^2 - v_b, Kumar, Liang
-- and Ma's (2019) debiased estimate (0 where n_b < 2); and for the interval's delta-method
-- variance, n_b^2 v_b (4 G_b + 2 v_b) (the variance of g_b^2 for a normal g_b, times n^2),
-- n_b G_b and n_b G_b^2, with G_b = max(t_b, 0) the estimated squared gap.
binned AS (
    SELECT * EXCLUDE (gap, variance, squared),
        evaluated_rows * gap * gap AS calibration_sq,
        coalesce(evaluated_rows * (gap * gap - variance), 0) AS calibration_sq_debiased,
        coalesce(evaluated_rows * evaluated_rows * variance * (4 * squared + 2 * variance), 0)
            AS calibration_sq_var,
        coalesce(evaluated_rows * squared, 0) AS calibration_sq_bins,
        coalesce(evaluated_rows * squared * squared, 0) AS calibration_sq_bins_sq
    FROM (
        SELECT *, CASE WHEN variance IS NOT NULL THEN greatest(gap * gap - variance, 0) END
            AS squared
        FROM (
            SELECT *,
                (correct_rows - sum_confidence_evaluated) / nullif(evaluated_rows, 0) AS gap,
                CASE WHEN evaluated_rows > 1 THEN
                    correct_rows::DOUBLE * (evaluated_rows - correct_rows)
                    / (evaluated_rows::DOUBLE * evaluated_rows * (evaluated_rows - 1)) END
                    AS variance
            FROM by_bin
        )
    )
),
totals AS (
    SELECT period, {{version_col}}{{segments}},
           sum(COLUMNS(* EXCLUDE (period, bin, {{version_col}}{{segments}})))
    FROM binned
    GROUP BY ALL
),
-- The two-class view of each cell (no rows for logs with more than two classes).
two_class AS (
    {{query:binary}}
),
cells AS (
    SELECT cur.*, ref.evaluated_rows AS two_class_rows, ref.brier AS positive_brier,
           ref.base_rate, ref.mean_probability AS mean_positive_probability, ref.roc_auc,
           ref.roc_auc_bound, ref.average_precision, ref.average_precision_bound
    FROM totals AS cur
    LEFT JOIN two_class AS ref
        ON cur.period = ref.period AND cur.{{version_col}} IS NOT DISTINCT FROM ref.{{version_col}}
       AND {{segment_match}}
),
-- Point estimates and standard errors. A sum of squares read as NaN (a day written by an
-- earlier store format) leaves its standard error NULL.
measured AS (
    SELECT *,
        sum_loss / nullif(evaluated_rows, 0) AS cross_entropy,
        CASE WHEN evaluated_rows > 1 THEN
            sqrt(greatest(sum_loss_sq - sum_loss * sum_loss / evaluated_rows, 0)
                 / (evaluated_rows - 1) / evaluated_rows) END AS cross_entropy_se,
        correct_rows / nullif(evaluated_rows, 0) AS accuracy,
        sum_brier / nullif(evaluated_rows, 0) AS brier_multiclass,
        CASE WHEN evaluated_rows > 1 AND NOT isnan(sum_brier_sq) THEN
            sqrt(greatest(sum_brier_sq - sum_brier * sum_brier / evaluated_rows, 0)
                 / (evaluated_rows - 1) / evaluated_rows) END AS brier_multiclass_se,
        two_class_rows = evaluated_rows AS two_class,
        calibration_sq_debiased / nullif(evaluated_rows, 0) AS ece_sq_debiased,
        -- the delta method: the bins' variances given their counts n_b, then the counts'
        -- multinomial variation, (sum n_b G_b^2 - (sum n_b G_b)^2 / n)
        CASE WHEN evaluated_rows > 1 THEN
            sqrt(greatest(calibration_sq_var + calibration_sq_bins_sq
                          - calibration_sq_bins * calibration_sq_bins / evaluated_rows, 0))
            / evaluated_rows END AS ece_sq_se,
        1.959963984540054 AS z  -- the 97.5% standard normal quantile: 95% intervals
    FROM cells
),
-- A two-class row's (p1 - y)^2 is half its multi-class Brier, so is the standard error.
intervals AS (
    SELECT *,
        CASE WHEN two_class THEN positive_brier ELSE brier_multiclass END AS brier,
        CASE WHEN two_class THEN brier_multiclass_se / 2 ELSE brier_multiclass_se END AS brier_se,
        -- Wilson (1927) score interval of accuracy = k / n
        (accuracy + z * z / (2 * evaluated_rows)) / (1 + z * z / evaluated_rows) AS wilson_center,
        z / (1 + z * z / evaluated_rows)
            * sqrt(accuracy * (1 - accuracy) / evaluated_rows
                   + z * z / (4 * evaluated_rows * evaluated_rows)) AS wilson_half
    FROM measured
)
SELECT
    period, {{version_col}}{{segments}},
    rows::BIGINT AS rows,
    labelled_rows::BIGINT AS labelled_rows,
    labelled_rows / rows AS label_coverage,
    evaluated_rows::BIGINT AS evaluated_rows,
    cross_entropy,
    cross_entropy_se,
    cross_entropy - z * cross_entropy_se AS cross_entropy_low,
    cross_entropy + z * cross_entropy_se AS cross_entropy_high,
    exp(cross_entropy) AS perplexity,
    accuracy,
    greatest(wilson_center - wilson_half, 0) AS accuracy_low,
    least(wilson_center + wilson_half, 1) AS accuracy_high,
    brier,
    brier_se,
    brier - z * brier_se AS brier_low,
    brier + z * brier_se AS brier_high,
    brier_multiclass,
    brier_multiclass_se,
    calibration_gap / nullif(evaluated_rows, 0) AS ece,
    sqrt(calibration_sq / nullif(evaluated_rows, 0)) AS ece_l2,
    sqrt(greatest(ece_sq_debiased, 0)) AS ece_l2_debiased,
    sqrt(greatest(ece_sq_debiased - z * ece_sq_se, 0)) AS ece_l2_low,
    sqrt(greatest(ece_sq_debiased + z * ece_sq_se, 0)) AS ece_l2_high,
    sum_confidence / nullif(scored_rows, 0) AS mean_confidence,
    sum_entropy / nullif(scored_rows, 0) AS mean_entropy,
    missing_scores::BIGINT AS missing_scores,
    invalid_scores::BIGINT AS invalid_scores,
    bad_labels::BIGINT AS bad_labels,
    infinite_loss_rows::BIGINT AS infinite_loss_rows,
    base_rate, mean_positive_probability, roc_auc, roc_auc_bound, average_precision,
    average_precision_bound
FROM intervals
ORDER BY ALL
