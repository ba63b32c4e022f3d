-- name: drift
-- summary: One row per period x version (x segment) compared with a reference window: prediction, confidence and label distribution shift, change in cross-entropy and ECE, each test's p-value and Benjamini-Hochberg q-value across the table, and a flag when a change is both significant at the false discovery rate fdr and larger than its threshold.
-- include: column_roles
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- param ref_start (date): first day of the reference window (default: the first day in the data)
-- param ref_end (date): last day of the reference window (default: the end of the 4th period from ref_start's period)
-- param fdr (number(>0..<1), default 0.05): false discovery rate: a test can flag its cell only when its q-value (Benjamini-Hochberg 1995, over every test of every tested cell of the table) is at most fdr
-- param min_rows (integer(0..), default 200): a cell or reference with fewer scored (for label tests: evaluated) rows is never flagged
-- param js_threshold (number(0..), default 0.01): flag when prediction_js exceeds this (nats) and its q-value is at most fdr
-- param psi_threshold (number(0..), default 0.25): flag when confidence_psi exceeds this and its q-value is at most fdr; common practice (a rule of thumb, no single source): < 0.1 stable, 0.1-0.25 moderate, > 0.25 major
-- param label_js_threshold (number(0..), default 0.02): flag when label_js exceeds this (nats) and its q-value is at most fdr
-- param ece_threshold (number(0..), default 0.1): flag when |ece_delta| exceeds this and its q-value is at most fdr
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
-- output cross_entropy_p: two-sided p-value of cross_entropy_z, 2 P(Z > |z|) for a standard normal Z; NULL when not tested
-- output prediction_js_p: p-value of prediction_js, P(X > 8 n_eff prediction_js) for X chi-square with K - 1 degrees of freedom (see notes); NULL when not tested
-- output confidence_psi_p: p-value of confidence_psi, P(X > n_eff confidence_psi) for X chi-square with bins - 1 degrees of freedom; NULL when not tested
-- output label_js_p: p-value of label_js, as prediction_js_p with the labelled rows; NULL when not tested
-- output ece_p: p-value of ece_delta (a heuristic, see notes); NULL when not tested
-- output cross_entropy_q: Benjamini-Hochberg q-value of cross_entropy_p over every p-value of the table (see notes)
-- output prediction_js_q: q-value of prediction_js_p
-- output confidence_psi_q: q-value of confidence_psi_p
-- output label_js_q: q-value of label_js_p
-- output ece_q: q-value of ece_p
-- output flagged: a test passed its limits (see flag_reasons); false in the reference window and below min_rows
-- output flag_reasons: which tests passed their limits, with values and q-values; NULL when not flagged
-- note: smoothing: every class of the mean predicted distribution (as a sum of probabilities), every label count and every confidence-bin count gets +0.5 before normalising (Jeffreys prior), on both sides, so empty bins give finite divergences. K = the largest class index in the data + 1.
-- note: prediction_kl is reported, not flagged on (unbounded, asymmetric); prediction_js, confidence_psi, label_js, ece_delta and cross_entropy_z are tested, each flagging its cell when its q-value is at most fdr and its effect passes its threshold (cross_entropy: the q-value alone).
-- note: divergence p-values: two samples of sizes n and m (n_eff = nm/(n+m)) from one distribution over D bins give 8 n_eff JS and n_eff PSI of about chi-square(D - 1); the p-value is that chi-square's survival function, computed exactly for whole D - 1 (the closed form of the regularised upper incomplete gamma function at half-integers). D = K classes or bins; n = scored rows (labelled rows for label_js). For mean predicted probabilities the p-value is conservative (too large).
-- note: chance ECE (a heuristic): the expected ECE of a perfectly calibrated model with the same bin counts and accuracies, sqrt(2/pi) sum_b sqrt(n_b acc_b (1 - acc_b)) / n; ECE is biased upward by about this much, so small cells differ by chance. ece_p takes |ece_delta| / (chance ECE of cell + of reference) as a standard normal |Z| (conservative: the sum of the chance ECEs is larger than the standard deviation of ece_delta).
-- note: the cross-entropy test treats cell and reference as independent samples and pools their variance (under "no change" they share it; this keeps the cell's mean and its standard error from moving together, which a skewed loss otherwise turns into extra false alarms).
-- note: multiplicity: a table of hundreds of cells with five tests each would flag some clean cells at any fixed per-test level. The q-values control the false discovery rate over the whole table (Benjamini and Hochberg 1995, valid for independent or positively dependent tests): sort the m p-values of the tested cells, p_(1) <= ... <= p_(m); q_(i) = min over j >= i of min(1, p_(j) m / j) (as scipy.stats.false_discovery_control(p, method='bh')). Flagging the tests with q <= fdr keeps the expected share of clean tests among the flagged ones at most fdr. The table is the query's: period filters (run --since/--until/--last) cut rows after the q-values are computed.
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
           -- For two samples (sizes n, m; n_eff = nm/(n+m)) of one distribution over D bins,
           -- 8 n_eff JS and n_eff PSI are both about chi-square(D - 1).
           8 * scored_rows * ref_scored_rows / (scored_rows + ref_scored_rows) AS js_scale,
           8 * labelled * ref_labelled / nullif(labelled + ref_labelled, 0) AS label_scale
    FROM paired AS p, ref_window AS w
),
-- One row per test of a tested cell: a standard normal |z| or a chi-square x with d degrees
-- of freedom.
tests AS (
    SELECT cell, t.test, t.z, t.x, t.d
    FROM measured, unnest([
        {'test': 'cross_entropy', 'z': abs(cross_entropy_z), 'x': NULL::DOUBLE, 'd': NULL::BIGINT,
         'run': label_tested},
        {'test': 'prediction_js', 'z': NULL, 'x': js_scale * prediction_js, 'd': k - 1,
         'run': tested},
        {'test': 'confidence_psi', 'z': NULL, 'x': js_scale / 8 * confidence_psi, 'd': $bins - 1,
         'run': tested},
        {'test': 'label_js', 'z': NULL, 'x': label_scale * label_js, 'd': k - 1,
         'run': label_tested},
        {'test': 'ece', 'z': abs(ece_delta) / nullif(ece_noise + ref_ece_noise, 0), 'x': NULL,
         'd': NULL, 'run': label_tested}]) AS u(t)
    WHERE t.run AND coalesce(t.z, t.x) IS NOT NULL AND coalesce(t.d, 1) >= 1
),
-- p-values. Normal: 2 P(Z > z). Chi-square: the regularised upper incomplete gamma function
-- Q(d/2, x/2) in closed form for whole d: sum over a = d/2 - 1, d/2 - 2, ... >= 0 of
-- exp(-x/2) (x/2)^a / Gamma(a + 1), plus erfc(sqrt(x/2)) = 2 P(Z > sqrt x) for odd d.
p_values AS (
    SELECT cell, test, CASE
        WHEN z IS NOT NULL THEN least(2 * normal_sf(z), 1.0)
        WHEN x <= 0 THEN 1.0
        ELSE least(CASE WHEN d % 2 = 1 THEN 2 * normal_sf(sqrt(x)) ELSE 0.0 END
                   + coalesce(list_sum(list_transform(range(d % 2, d - 1, 2), lambda j:
                         exp(-x / 2 + j / 2 * ln(x / 2) - lgamma(j / 2 + 1)))), 0.0), 1.0)
        END AS p
    FROM tests
),
-- Benjamini-Hochberg over every test of the table: i = rank of p (1 = smallest), m tests;
-- q_(i) = min over j >= i of min(1, p_(j) m / j).
q_values AS (
    SELECT cell, test, p,
           least(min(p * m / i) OVER (ORDER BY i DESC ROWS UNBOUNDED PRECEDING), 1.0) AS q
    FROM (SELECT *, row_number() OVER (ORDER BY p) AS i, count(*) OVER () AS m FROM p_values)
),
judged AS (
    SELECT m.*, pq.* EXCLUDE (cell)
    FROM measured AS m
    LEFT JOIN (
        PIVOT q_values ON test IN ('cross_entropy', 'prediction_js', 'confidence_psi',
                                   'label_js', 'ece')
        USING any_value(p) AS p, any_value(q) AS q GROUP BY cell
    ) AS pq USING (cell)
),
reasons AS (
    SELECT *, concat_ws('; ',
        CASE WHEN cross_entropy_q <= $fdr
             THEN printf('cross_entropy %+.4f (z = %.1f, q = %.2g)', cross_entropy_delta,
                         cross_entropy_z, cross_entropy_q) END,
        CASE WHEN prediction_js_q <= $fdr AND prediction_js > $js_threshold
             THEN printf('prediction_js %.4f (q = %.2g)', prediction_js, prediction_js_q) END,
        CASE WHEN confidence_psi_q <= $fdr AND confidence_psi > $psi_threshold
             THEN printf('confidence_psi %.3f (q = %.2g)', confidence_psi, confidence_psi_q) END,
        CASE WHEN label_js_q <= $fdr AND label_js > $label_js_threshold
             THEN printf('label_js %.4f (q = %.2g)', label_js, label_js_q) END,
        CASE WHEN ece_q <= $fdr AND abs(ece_delta) > $ece_threshold
             THEN printf('ece %+.4f (q = %.2g)', ece_delta, ece_q) END) AS reasons
    FROM judged
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
    cross_entropy_p, prediction_js_p, confidence_psi_p, label_js_p, ece_p,
    cross_entropy_q, prediction_js_q, confidence_psi_q, label_js_q, ece_q,
    reasons <> '' AS flagged,
    nullif(reasons, '') AS flag_reasons
FROM reasons
ORDER BY ALL
