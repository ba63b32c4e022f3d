-- name: binary
-- summary: Two-class models (binary_logit / binary_prob logs and any log with two classes): per period x version x segment, base rate against mean predicted probability, Brier score of the positive class, ROC AUC and average precision with the bound on the error their score binning can add.
-- include: column_roles
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- output period: first day of the period
-- output evaluated_rows: n, evaluated rows with exactly two classes (scored, label 0 or 1, finite loss)
-- output positives: rows labelled 1 (the positive class)
-- output base_rate: positives / n
-- output mean_probability: mean predicted probability of class 1; equals base_rate for a model calibrated in the mean
-- output brier: mean (p1 - label)^2, range [0, 1] (as sklearn.metrics.brier_score_loss); half the multi-class sum sum_j (p_j - [j = label])^2
-- output roc_auc: area under the ROC curve from the score histogram: the probability that a positive scores above a negative, ties counting 1/2 (as sklearn.metrics.roc_auc_score); NULL without both classes
-- output roc_auc_bound: the largest error the binning can add to roc_auc: half the share of positive-negative pairs that share a bin (whose order the histogram cannot see)
-- output average_precision: sum over score bins, highest first, of (recall gain) x (precision at the bin), as sklearn.metrics.average_precision_score with the bin as threshold; NULL without positives
-- output average_precision_bound: the largest error the binning can add to average_precision: per bin, its share of positives x the range of precision its rows could reach in any order inside the bin
-- note: scores are binned into 4096 equal-width bins of the log-odds log(p1 / p0) (z1 - z0 for logits) on [-16, 16], outside values in the end bins: AUC and average precision are rank statistics, so they are computed from summed histograms at any grain or segment set, within the bounds reported beside them. The bounds are 0 when no bin holds both a positive and a negative (and, for average precision, no bin holds more than one positive).
-- note: logs with more than two classes give no rows (their histogram is not kept); use class_metrics and class_calibration.
-- show: period, version_col, segment_cols, evaluated_rows, base_rate, mean_probability, brier, roc_auc, roc_auc_bound, average_precision, average_precision_bound, positives
-- example: dbmetrics run binary --set logs=scores.parquet --set scores_col=score --set scores_kind=binary_prob
WITH
binary_state AS (
    {{binary_state}}
),
bins AS (
    SELECT date_trunc($grain, day)::DATE AS period, {{version_col}}{{segments}}, score_bin,
           sum(positives) AS pos, sum(negatives) AS neg, sum(sum_prob) AS prob,
           sum(sum_brier) AS brier
    FROM binary_state
    GROUP BY ALL
),
-- Cumulative counts from the highest score bin down: tp_above / fp_above are the positives
-- and negatives in higher bins; neg_below the negatives in lower bins.
ranked AS (
    SELECT *,
           coalesce(sum(pos) OVER higher, 0) AS tp_above,
           coalesce(sum(neg) OVER higher, 0) AS fp_above,
           coalesce(sum(neg) OVER lower, 0) AS neg_below
    FROM bins
    WINDOW higher AS (PARTITION BY period, {{version_col}}{{segments}} ORDER BY score_bin DESC
                      ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING),
           lower AS (PARTITION BY period, {{version_col}}{{segments}} ORDER BY score_bin
                     ROWS BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING)
),
totals AS (
    SELECT period, {{version_col}}{{segments}},
           sum(pos) AS p, sum(neg) AS n_neg, sum(prob) AS prob, sum(brier) AS brier,
           sum(pos * (neg_below + 0.5 * neg)) AS auc_pairs,
           sum(pos * neg) AS tied_pairs,
           sum(pos * (tp_above + pos) / (tp_above + fp_above + pos + neg)) AS ap_sum,
           sum(CASE WHEN pos > 0 THEN
                   pos * ((tp_above + pos) / (tp_above + fp_above + pos)
                          - (tp_above + 1) / (tp_above + fp_above + 1 + neg)) END) AS ap_slack
    FROM ranked
    GROUP BY ALL
)
SELECT
    period, {{version_col}}{{segments}},
    (p + n_neg)::BIGINT AS evaluated_rows,
    p::BIGINT AS positives,
    p / nullif(p + n_neg, 0) AS base_rate,
    prob / nullif(p + n_neg, 0) AS mean_probability,
    brier / nullif(p + n_neg, 0) AS brier,
    auc_pairs / nullif(p * n_neg, 0) AS roc_auc,
    0.5 * tied_pairs / nullif(p * n_neg, 0) AS roc_auc_bound,
    ap_sum / nullif(p, 0) AS average_precision,
    coalesce(ap_slack, 0) / nullif(p, 0) AS average_precision_bound
FROM totals
ORDER BY ALL
