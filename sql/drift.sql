-- name: drift
-- summary: One row per period x version (x segment) compared with a reference window: prediction, confidence and label distribution shift, change in cross-entropy and ECE, and a flag when a change is larger than chance or a threshold.
-- include: column_roles
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- param ref_start (date): first day of the reference window (default: the first day in the data)
-- param ref_end (date): last day of the reference window (default: the end of the 4th period from ref_start's period)
-- param z (number(0..), default 4): flag a cross-entropy change when |cross_entropy_z| > z; also sets the chance level each divergence must pass (see notes)
-- param min_rows (integer(0..), default 200): a cell or reference with fewer scored (for label tests: evaluated) rows is never flagged
-- param js_threshold (number(0..), default 0.01): flag when prediction_js exceeds this (nats) and its chance level
-- param psi_threshold (number(0..), default 0.25): flag when confidence_psi exceeds this and its chance level; common practice (a rule of thumb, no single source): < 0.1 stable, 0.1-0.25 moderate, > 0.25 major
-- param label_js_threshold (number(0..), default 0.02): flag when label_js exceeds this (nats) and its chance level
-- param ece_threshold (number(0..), default 0.1): flag when |ece_delta| exceeds this and z times the chance ECE of cell and reference (see notes)
-- output period: first day of the period
-- output in_reference: the period overlaps the reference window; such rows are never flagged
-- output reference: 'same version' (this version's rows in the window, when it has min_rows scored rows there) or 'all versions' (all versions pooled); always the same segment
-- output rows: prediction rows in the cell
-- output scored_rows: rows with usable scores
-- output evaluated_rows: scored rows with a label in [0, K) and finite loss
-- output ref_scored_rows: scored rows in the reference
-- output ref_evaluated_rows: evaluated rows in the reference
-- output prediction_kl: KL(cell || reference) of the mean predicted class distribution (nats, smoothed)
-- output prediction_js: Jensen-Shannon divergence of the same two distributions (nats, <= ln 2)
-- output confidence_psi: PSI of the top-label confidence histograms (bins bins, smoothed)
-- output label_js: Jensen-Shannon divergence of the label histograms (rows with a label in [0, K)); NULL without labels on either side
-- output cross_entropy: mean cross-entropy of the cell (nats)
-- output ref_cross_entropy: mean cross-entropy of the reference
-- output cross_entropy_delta: cross_entropy - ref_cross_entropy
-- output cross_entropy_z: delta / combined standard error, s_p sqrt(1/n + 1/m) with the pooled sample variance s_p^2 of the loss in cell (n rows) and reference (m rows)
-- output ece: ECE of the cell (as in rollup)
-- output ref_ece: ECE of the reference
-- output ece_delta: ece - ref_ece
-- output flagged: a test passed its limit (see flag_reasons); false in the reference window and below min_rows
-- output flag_reasons: which tests passed their limits, with values; NULL when not flagged
-- note: smoothing: every class of the mean predicted distribution (as a sum of probabilities), every label count and every confidence-bin count gets +0.5 before normalising (Jeffreys prior), on both sides, so empty bins give finite divergences. K = the largest class index in the data + 1.
-- note: prediction_kl is reported, not flagged on (unbounded, asymmetric); prediction_js, confidence_psi, label_js, ece_delta and cross_entropy_z are flagged on.
-- note: chance levels: two samples of sizes n and m (n_eff = nm/(n+m)) from one distribution over D bins give 8 n_eff JS and n_eff PSI of about chi-square(D - 1); a divergence is flagged only above max(threshold, ((D - 1) + z sqrt(2 (D - 1))) / (8 n_eff)), resp. / n_eff for PSI. D = K classes or bins; n = scored rows (labelled rows for label_js). For mean predicted probabilities this chance level is conservative.
-- note: chance ECE (a heuristic): the expected ECE of a perfectly calibrated model with the same bin counts and accuracies, sqrt(2/pi) sum_b sqrt(n_b acc_b (1 - acc_b)) / n; ECE is biased upward by about this much, so small cells differ by chance.
-- note: the cross-entropy test treats cell and reference as independent samples and pools their variance (under "no change" they share it; this keeps the cell's mean and its standard error from moving together, which a skewed loss otherwise turns into extra false alarms). The default z = 4 lets about 6 in 100,000 clean cells pass by chance (two-sided normal tail), so a weekly table of hundreds of cells stays quiet; z = 3 (0.3%) is more sensitive and noisier.
-- show: period, version_col, segment_cols, flagged, flag_reasons, prediction_js, confidence_psi, label_js, cross_entropy_z, ece_delta, cross_entropy_delta, rows, reference
-- example: dbmetrics run drift --set logs=demo_parquet/logs --set labels=demo_parquet/labels --set id_col=prediction_id --set segment_cols=region --set ref_start=2026-01-05 --set ref_end=2026-02-01
WITH
state AS (
    {{state}}
),
class_state AS (
    {{class_state}}
),
-- Reference window ref_start..ref_end, both inclusive.
ref_window AS (
    SELECT ref_start, step,
           coalesce(CAST($ref_end AS DATE),
                    CAST(date_trunc($grain, ref_start) + 4 * step - INTERVAL 1 DAY AS DATE)) AS ref_end
    FROM (SELECT coalesce(CAST($ref_start AS DATE), min(day)) AS ref_start,
                 CASE $grain WHEN 'day' THEN INTERVAL 1 DAY WHEN 'week' THEN INTERVAL 7 DAY
                      ELSE INTERVAL 1 MONTH END AS step
          FROM state)
),
-- Bin rows of the state and class rows of the class state, tagged with period and window.
tagged AS (
    SELECT s.*, date_trunc($grain, s.day)::DATE AS period,
           s.day BETWEEN w.ref_start AND w.ref_end AS in_window
    FROM (SELECT * FROM state UNION ALL BY NAME SELECT * FROM class_state) AS s, ref_window AS w
),
-- Sums per bin/class for three kinds of group: each cell (period x version x segment);
-- each version x segment in the window; each segment in the window, versions pooled.
grouped AS (
    SELECT GROUPING(period) = 0 AS is_cell, GROUPING({{version_col}}) = 1 AS pooled,
           period, {{version_col}}{{segments}}, bin, class,
           sum(rows) AS rows, sum(scored_rows) AS scored, sum(evaluated_rows) AS evaluated,
           sum(correct_rows) AS correct, sum(sum_confidence_evaluated) AS confidence,
           sum(sum_loss) AS loss, sum(sum_loss_sq) AS loss_sq,
           sum(sum_prob) AS prob, sum(label_rows) AS labelled
    FROM tagged
    GROUP BY GROUPING SETS ((period, {{version_col}}{{segments}}, bin, class),
                            (in_window, {{version_col}}{{segments}}, bin, class),
                            (in_window{{segments}}, bin, class))
    HAVING GROUPING(period) = 0 OR in_window
),
-- One profile per group: totals, cross-entropy with its standard error, ECE, and the
-- confidence histogram, class-probability mass and label counts as maps.
profiles AS (
    SELECT is_cell, pooled, period, {{version_col}}{{segments}},
           sum(rows) AS rows, sum(scored) AS scored_rows, sum(evaluated) AS evaluated_rows,
           sum(loss) / nullif(sum(evaluated), 0) AS cross_entropy,
           -- sum of squared deviations of the loss from its mean
           greatest(sum(loss_sq) - sum(loss) * sum(loss) / nullif(sum(evaluated), 0), 0) AS loss_ss,
           sum(abs(correct - confidence)) / nullif(sum(evaluated), 0) AS ece,
           -- the ECE a perfectly calibrated model shows by chance with these bin counts
           sqrt(2 / pi()) * sum(sqrt(correct * (evaluated - correct) / nullif(evaluated, 0)))
               / nullif(sum(evaluated), 0) AS ece_noise,
           map(list(bin) FILTER (WHERE bin IS NOT NULL),
               list(scored) FILTER (WHERE bin IS NOT NULL)) AS confidence_counts,
           map(list(class) FILTER (WHERE class IS NOT NULL),
               list(prob) FILTER (WHERE class IS NOT NULL)) AS class_mass,
           map(list(class) FILTER (WHERE class IS NOT NULL),
               list(labelled) FILTER (WHERE class IS NOT NULL)) AS label_counts,
           sum(labelled) AS labelled
    FROM grouped
    GROUP BY ALL
),
-- Dense histograms with +0.5 in every bin/class, then normalised.
smoothed AS (
    SELECT * EXCLUDE (confidence_counts, class_mass, label_counts),
           list_transform(range($bins), lambda b: coalesce(confidence_counts[b], 0)::DOUBLE + 0.5)
               AS confidence_hist,
           list_transform(range(k), lambda c: coalesce(class_mass[c], 0)::DOUBLE + 0.5) AS class_hist,
           list_transform(range(k), lambda c: coalesce(label_counts[c], 0)::DOUBLE + 0.5) AS label_hist
    FROM profiles, (SELECT coalesce(max(class) + 1, 0) AS k FROM class_state)
),
dists AS (
    SELECT * EXCLUDE (class_hist, label_hist),
           list_transform(class_hist, lambda x: x / class_total) AS mean_prediction,
           list_transform(label_hist, lambda x: x / label_total) AS label_dist
    FROM (SELECT *, list_sum(class_hist) AS class_total, list_sum(label_hist) AS label_total
          FROM smoothed)
),
-- Each cell with its reference: the same segment; the same version when that version has
-- min_rows scored rows in the window, else all versions pooled.
paired AS (
    SELECT cur.* EXCLUDE (is_cell, pooled),
           ref.pooled AS ref_pooled,
           ref.scored_rows AS ref_scored_rows, ref.evaluated_rows AS ref_evaluated_rows,
           ref.cross_entropy AS ref_cross_entropy, ref.loss_ss AS ref_loss_ss,
           ref.ece AS ref_ece, ref.ece_noise AS ref_ece_noise, ref.labelled AS ref_labelled,
           ref.confidence_hist AS ref_confidence_hist, ref.mean_prediction AS ref_mean_prediction,
           ref.label_dist AS ref_label_dist
    FROM (SELECT row_number() OVER () AS cell, * FROM dists WHERE is_cell) AS cur
    LEFT JOIN (SELECT * FROM dists WHERE NOT is_cell) AS ref
        ON {{segment_match}}
       AND (ref.pooled OR (ref.{{version_col}} IS NOT DISTINCT FROM cur.{{version_col}}
                           AND ref.scored_rows >= $min_rows))
    QUALIFY row_number() OVER (PARTITION BY cur.cell ORDER BY ref.pooled) = 1
),
measured AS (
    SELECT p.*,
           p.period <= w.ref_end AND p.period + w.step > w.ref_start AS in_reference,
           kl_divergence(mean_prediction, ref_mean_prediction) AS prediction_kl,
           js_divergence(mean_prediction, ref_mean_prediction) AS prediction_js,
           population_stability_index(confidence_hist, ref_confidence_hist) AS confidence_psi,
           CASE WHEN labelled > 0 AND ref_labelled > 0
                THEN js_divergence(label_dist, ref_label_dist) END AS label_js,
           cross_entropy - ref_cross_entropy AS cross_entropy_delta,
           -- pooled two-sample standard error: under "no change" both samples share one variance
           (cross_entropy - ref_cross_entropy) / nullif(sqrt(
               (loss_ss + ref_loss_ss) / (evaluated_rows + ref_evaluated_rows - 2)
               * (1 / evaluated_rows + 1 / ref_evaluated_rows)), 0) AS cross_entropy_z,
           ece - ref_ece AS ece_delta,
           NOT in_reference AND scored_rows >= $min_rows AND ref_scored_rows >= $min_rows AS tested,
           tested AND evaluated_rows >= $min_rows AND ref_evaluated_rows >= $min_rows AS label_tested,
           -- Chance levels: for two samples (sizes n, m; n_eff = nm/(n+m)) of one distribution
           -- over D bins, 8 n_eff JS and n_eff PSI are both about chi-square(D - 1); chance is its
           -- mean plus z standard deviations. Conservative for mean predicted probabilities.
           ((k - 1) + $z * sqrt(2 * (k - 1)))
               / (8 * scored_rows * ref_scored_rows / (scored_rows + ref_scored_rows)) AS prediction_chance,
           (($bins - 1) + $z * sqrt(2 * ($bins - 1)))
               / (scored_rows * ref_scored_rows / (scored_rows + ref_scored_rows)) AS psi_chance,
           ((k - 1) + $z * sqrt(2 * (k - 1)))
               / (8 * labelled * ref_labelled / nullif(labelled + ref_labelled, 0)) AS label_chance
    FROM paired AS p, ref_window AS w
),
reasons AS (
    SELECT *, concat_ws('; ',
        CASE WHEN label_tested AND abs(cross_entropy_z) > $z
             THEN printf('cross_entropy %+.4f (z = %.1f)', cross_entropy_delta, cross_entropy_z) END,
        CASE WHEN tested AND prediction_js > greatest($js_threshold, prediction_chance)
             THEN printf('prediction_js %.4f', prediction_js) END,
        CASE WHEN tested AND confidence_psi > greatest($psi_threshold, psi_chance)
             THEN printf('confidence_psi %.3f', confidence_psi) END,
        CASE WHEN label_tested AND label_js > greatest($label_js_threshold, label_chance)
             THEN printf('label_js %.4f', label_js) END,
        CASE WHEN label_tested AND abs(ece_delta) > greatest($ece_threshold,
                                                             $z * (ece_noise + ref_ece_noise))
             THEN printf('ece %+.4f', ece_delta) END) AS reasons
    FROM measured
)
SELECT
    period, {{version_col}}{{segments}},
    coalesce(in_reference, false) AS in_reference,
    CASE WHEN ref_pooled THEN 'all versions' WHEN NOT ref_pooled THEN 'same version' END AS reference,
    rows::BIGINT AS rows,
    scored_rows::BIGINT AS scored_rows,
    evaluated_rows::BIGINT AS evaluated_rows,
    ref_scored_rows::BIGINT AS ref_scored_rows,
    ref_evaluated_rows::BIGINT AS ref_evaluated_rows,
    prediction_kl, prediction_js, confidence_psi, label_js,
    cross_entropy, ref_cross_entropy, cross_entropy_delta, cross_entropy_z,
    ece, ref_ece, ece_delta,
    reasons <> '' AS flagged,
    nullif(reasons, '') AS flag_reasons
FROM reasons
ORDER BY ALL
