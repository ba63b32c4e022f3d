-- name: version_gap
-- summary: Two model versions side by side in each period x segment: cross-entropy, accuracy, Brier and ECE of both, the difference (b - a) with its standard error, 95% interval and p-value; paired by prediction id when both versions scored the same predictions (shadow or canary), unpaired (Welch) otherwise.
-- include: column_roles
-- param partials (text): a partials store to roll up instead of scanning logs; a store keeps sums, not rows, so every cell takes the unpaired form
-- param version_a (text): the baseline version (as text); default: the most recent version by first appearance other than version_b
-- param version_b (text): the version compared with it; default: the most recent version by first appearance (the later name on a tie) other than version_a
-- param paired_share (number(0..1), default 0.5): a cell takes the paired form when the pairs found by id_col number at least this share of the smaller version's evaluated rows (and at least 2)
-- param exact_below (integer(1..1000), default 25): McNemar's test is the exact binomial test when the discordant pairs number fewer than this, the chi-square test otherwise
-- output period: first day of the period
-- output metric: cross_entropy (nats), accuracy, brier_multiclass (sum_j (p_j - [j = y])^2, the rollup's brier_multiclass) or ece (as in rollup)
-- output version_a: the baseline version
-- output version_b: the version compared with it
-- output form: paired (every number below is over the pairs), unpaired (over every evaluated row of each version), or NULL when one version has no evaluated row in the cell (value of the other, NULL difference)
-- output evaluated_a: evaluated rows of version_a in the cell (as rollup's evaluated_rows)
-- output evaluated_b: evaluated rows of version_b in the cell
-- output paired_rows: pairs found: ids evaluated exactly once by each version in the cell (0 without id_col)
-- output value_a: the metric of version_a (over the pairs in the paired form)
-- output value_b: the metric of version_b (over the pairs in the paired form)
-- output difference: value_b - value_a (negative: version_b has the lower value)
-- output difference_se: standard error of the difference; paired: sd of the per-pair differences / sqrt(pairs), as scipy.stats.ttest_rel; unpaired: sqrt(s_a^2 / n_a + s_b^2 / n_b), as Welch's test (scipy.stats.ttest_ind, equal_var=False); NULL below 2 rows
-- output ci_low: difference - 1.959964 difference_se (95% normal interval)
-- output ci_high: difference + 1.959964 difference_se
-- output p_value: two-sided p-value of no difference, by `test`
-- output test: paired_z or welch_z (2 normal_sf(|difference / difference_se|)); for accuracy in the paired form mcnemar_exact (binomial test, p = 1/2, on the discordant pairs) or mcnemar_chi2 ((b - c)^2 / (b + c) against chi-square with 1 degree of freedom, no continuity correction)
-- output discordant_a: accuracy, paired form: pairs that version_a got right and version_b wrong (McNemar's b)
-- output discordant_b: accuracy, paired form: pairs that version_b got right and version_a wrong (McNemar's c)
-- output disagreement_rate: paired form: share of pairs whose predicted classes differ (on every metric's row of the cell)
-- note: pairing: a row of version_a and a row of version_b with the same id_col value in the same period x segment, both evaluated; an id evaluated twice by one version in a cell pairs with nothing. Without id_col (or on a partials store) nothing pairs and every cell is unpaired; the unpaired interval of a shadow deployment is then wider than it need be, because it ignores that both versions saw the same inputs.
-- note: the interval and the z tests use the normal approximation (fine from a few dozen rows or pairs); McNemar's exact test is used below exact_below discordant pairs, where the chi-square approximation is poor (the usual rule: 25).
-- note: ECE's standard error is the delta method's: each row contributes s_b (correct - m_b), s_b the sign of its bin's gap (accuracy - confidence) and m_b the bin's mean confidence, so the sum of the contributions is n ECE; it treats the signs as fixed and the confidence as constant within a bin. ECE is biased upward on small samples, and its interval is too narrow where a bin's gap is near 0.
-- show: period, segment_cols, metric, form, value_a, value_b, difference, ci_low, ci_high, p_value, test, version_a, version_b, evaluated_a, evaluated_b, paired_rows, disagreement_rate
-- example: dbmetrics run version_gap --set logs=demo_parquet/logs --set labels=demo_parquet/labels/labels.parquet --set id_col=prediction_id --set grain=month
WITH
state AS (
    {{state}}
),
versions AS (
    SELECT CAST({{version_col}} AS VARCHAR) AS name, min(day) AS first_day
    FROM state
    WHERE {{version_col}} IS NOT NULL AND rows > 0
    GROUP BY ALL
),
newest AS (
    SELECT coalesce($version_b, (
        SELECT name FROM versions WHERE name IS DISTINCT FROM $version_a
        ORDER BY first_day DESC, name DESC LIMIT 1
    )) AS b
),
named AS (
    SELECT coalesce($version_a, (
               SELECT name FROM versions WHERE name IS DISTINCT FROM newest.b
               ORDER BY first_day DESC, name DESC LIMIT 1
           )) AS a, b,
           coalesce((SELECT string_agg(name, ', ' ORDER BY first_day, name) FROM versions),
                    'none') AS known
    FROM newest
),
picked AS (
    SELECT CASE
               WHEN a IS NULL OR b IS NULL THEN error(
                   'version_gap compares two versions; the versions with rows are: ' || known)
               WHEN a = b THEN error(
                   'version_a and version_b are both `' || a || '`: name two different versions')
               WHEN a NOT IN (SELECT name FROM versions) THEN error(
                   'version_a: no rows of version `' || a || '`; the versions are: ' || known)
               WHEN b NOT IN (SELECT name FROM versions) THEN error(
                   'version_b: no rows of version `' || b || '`; the versions are: ' || known)
               ELSE a
           END AS version_a,
           b AS version_b
    FROM named
),
-- Unpaired form, from the additive state: per cell x side x bin, then per cell x side.
-- Per bin, sum u = |correct - sum of confidence| and sum u^2 = correct (1 - 2 m) + n m^2,
-- u = s_b (correct - m) with m the bin's mean confidence (see the notes).
side_bins AS (
    SELECT date_trunc($grain, day)::DATE AS period{{segments}},
           CASE WHEN CAST({{version_col}} AS VARCHAR) = version_a THEN 'a' ELSE 'b' END AS side,
           bin,
           sum(evaluated_rows) AS n,
           sum(correct_rows) AS correct,
           sum(sum_confidence_evaluated) AS confidence,
           sum(sum_loss) AS loss,
           sum(sum_loss_sq) AS loss_sq,
           sum(sum_brier) AS brier,
           sum(sum_brier_sq) AS brier_sq
    FROM state, picked
    WHERE CAST({{version_col}} AS VARCHAR) IN (version_a, version_b)
    GROUP BY ALL
),
side_metrics AS (
    SELECT period{{segments}}, side, nullif(n, 0) AS n,
           unnest([
               {'metric': 'cross_entropy', 'total': loss, 'sq': loss_sq},
               {'metric': 'accuracy', 'total': correct::DOUBLE, 'sq': correct::DOUBLE},
               {'metric': 'brier_multiclass', 'total': brier, 'sq': brier_sq},
               {'metric': 'ece', 'total': ece, 'sq': ece_sq}
           ], recursive := true)
    FROM (
        SELECT period{{segments}}, side,
               sum(n) AS n, sum(correct) AS correct, sum(loss) AS loss, sum(loss_sq) AS loss_sq,
               sum(brier) AS brier, sum(brier_sq) AS brier_sq,
               sum(abs(correct - confidence)) AS ece,
               sum(CASE WHEN n > 0 THEN correct * (1 - 2 * confidence / n)
                                        + confidence * confidence / n END) AS ece_sq
        FROM side_bins
        GROUP BY ALL
    )
),
unpaired AS (
    SELECT period{{segments}}, metric,
           any_value(n) FILTER (WHERE side = 'a') AS n_a,
           any_value(total) FILTER (WHERE side = 'a') AS total_a,
           any_value(sq) FILTER (WHERE side = 'a') AS sq_a,
           any_value(n) FILTER (WHERE side = 'b') AS n_b,
           any_value(total) FILTER (WHERE side = 'b') AS total_b,
           any_value(sq) FILTER (WHERE side = 'b') AS sq_b
    FROM side_metrics
    GROUP BY ALL
),
-- Paired form, from the rows: each id evaluated exactly once by each version in a cell.
id_rows AS (
    SELECT * EXCLUDE (times)
    FROM (
        SELECT *, count(*) OVER (PARTITION BY period{{segments}}, side, pair_id) AS times
        FROM (
            SELECT date_trunc($grain, day)::DATE AS period{{segments}},
                   CASE WHEN CAST({{version_col}} AS VARCHAR) = version_a THEN 'a' ELSE 'b' END
                       AS side,
                   pair_id, predicted, correct::INTEGER AS correct, loss, brier, confidence, bin
            FROM ({{rows_by_id}}) AS r, picked
            WHERE CAST({{version_col}} AS VARCHAR) IN (version_a, version_b)
              AND pair_id IS NOT NULL
        )
    )
    WHERE times = 1
),
pairs AS (
    SELECT cur.*, ref.* EXCLUDE (period, pair_id{{segments}})
    FROM (
        SELECT period{{segments}}, pair_id, predicted AS predicted_a, correct AS correct_a,
               loss AS loss_a, brier AS brier_a, confidence AS confidence_a, bin AS bin_a
        FROM id_rows WHERE side = 'a'
    ) AS cur
    JOIN (
        SELECT period{{segments}}, pair_id, predicted AS predicted_b, correct AS correct_b,
               loss AS loss_b, brier AS brier_b, confidence AS confidence_b, bin AS bin_b
        FROM id_rows WHERE side = 'b'
    ) AS ref
        ON cur.period = ref.period AND cur.pair_id = ref.pair_id AND {{segment_match}}
),
-- Each pair's ECE contributions u_a, u_b, from its bins among the cell's pairs.
pair_ece AS (
    SELECT *,
           CASE WHEN bin_correct_a >= bin_confidence_a THEN 1 ELSE -1 END
               * (correct_a - bin_confidence_a / bin_rows_a) AS u_a,
           CASE WHEN bin_correct_b >= bin_confidence_b THEN 1 ELSE -1 END
               * (correct_b - bin_confidence_b / bin_rows_b) AS u_b
    FROM (
        SELECT *,
               count(*) OVER bin_a AS bin_rows_a, sum(correct_a) OVER bin_a AS bin_correct_a,
               sum(confidence_a) OVER bin_a AS bin_confidence_a,
               count(*) OVER bin_b AS bin_rows_b, sum(correct_b) OVER bin_b AS bin_correct_b,
               sum(confidence_b) OVER bin_b AS bin_confidence_b
        FROM pairs
        WINDOW bin_a AS (PARTITION BY period{{segments}}, bin_a),
               bin_b AS (PARTITION BY period{{segments}}, bin_b)
    )
),
pair_sums AS (
    SELECT period{{segments}},
           count(*) AS pairs,
           count(*) FILTER (WHERE correct_a = 1 AND correct_b = 0) AS discordant_a,
           count(*) FILTER (WHERE correct_a = 0 AND correct_b = 1) AS discordant_b,
           count(*) FILTER (WHERE predicted_a <> predicted_b) AS disagreements,
           fsum(loss_a) AS loss_a, fsum(loss_b) AS loss_b,
           fsum(loss_b - loss_a) AS loss_d, fsum((loss_b - loss_a) ** 2) AS loss_dd,
           sum(correct_a)::DOUBLE AS correct_a, sum(correct_b)::DOUBLE AS correct_b,
           sum(correct_b - correct_a)::DOUBLE AS correct_d,
           sum((correct_b - correct_a) ** 2)::DOUBLE AS correct_dd,
           fsum(brier_a) AS brier_a, fsum(brier_b) AS brier_b,
           fsum(brier_b - brier_a) AS brier_d, fsum((brier_b - brier_a) ** 2) AS brier_dd,
           fsum(u_a) AS u_a, fsum(u_b) AS u_b,
           fsum(u_b - u_a) AS u_d, fsum((u_b - u_a) ** 2) AS u_dd
    FROM pair_ece
    GROUP BY ALL
),
paired AS (
    SELECT period{{segments}}, pairs, discordant_a, discordant_b, disagreements,
           unnest([
               {'metric': 'cross_entropy', 'total_a': loss_a, 'total_b': loss_b,
                'sum_d': loss_d, 'sq_d': loss_dd},
               {'metric': 'accuracy', 'total_a': correct_a, 'total_b': correct_b,
                'sum_d': correct_d, 'sq_d': correct_dd},
               {'metric': 'brier_multiclass', 'total_a': brier_a, 'total_b': brier_b,
                'sum_d': brier_d, 'sq_d': brier_dd},
               {'metric': 'ece', 'total_a': u_a, 'total_b': u_b, 'sum_d': u_d, 'sq_d': u_dd}
           ], recursive := true)
    FROM pair_sums
),
combined AS (
    SELECT cur.*, coalesce(ref.pairs, 0) AS paired_rows, ref.discordant_a, ref.discordant_b,
           ref.disagreements, ref.total_a AS pair_total_a, ref.total_b AS pair_total_b,
           ref.sum_d, ref.sq_d,
           CASE WHEN cur.n_a IS NULL OR cur.n_b IS NULL THEN NULL
                WHEN ref.pairs >= 2 AND ref.pairs >= $paired_share * least(cur.n_a, cur.n_b)
                    THEN 'paired'
                ELSE 'unpaired' END AS form
    FROM unpaired AS cur
    LEFT JOIN paired AS ref
        ON cur.period = ref.period AND cur.metric = ref.metric AND {{segment_match}}
),
estimates AS (
    SELECT *,
           CASE WHEN form = 'paired' THEN pair_total_a / paired_rows ELSE total_a / n_a END
               AS value_a,
           CASE WHEN form = 'paired' THEN pair_total_b / paired_rows ELSE total_b / n_b END
               AS value_b,
           CASE WHEN form = 'paired' THEN sum_d / paired_rows
                WHEN form = 'unpaired' THEN total_b / n_b - total_a / n_a END AS difference,
           CASE WHEN form = 'paired' THEN
                    sqrt(greatest(sq_d - sum_d * sum_d / paired_rows, 0)
                         / (paired_rows - 1) / paired_rows)
                WHEN form = 'unpaired' AND n_a > 1 AND n_b > 1 THEN
                    sqrt(greatest(sq_a - total_a * total_a / n_a, 0) / (n_a - 1) / n_a
                         + greatest(sq_b - total_b * total_b / n_b, 0) / (n_b - 1) / n_b)
           END AS difference_se,
           CASE WHEN form = 'paired' AND metric = 'accuracy'
                    AND discordant_a + discordant_b < $exact_below THEN 'mcnemar_exact'
                WHEN form = 'paired' AND metric = 'accuracy' THEN 'mcnemar_chi2'
                WHEN form = 'paired' THEN 'paired_z'
                WHEN form = 'unpaired' THEN 'welch_z' END AS test
    FROM combined
)
SELECT
    period{{segments}}, metric, picked.version_a, picked.version_b, form,
    coalesce(n_a, 0)::BIGINT AS evaluated_a,
    coalesce(n_b, 0)::BIGINT AS evaluated_b,
    paired_rows::BIGINT AS paired_rows,
    value_a, value_b, difference, difference_se,
    difference - 1.959963984540054 * difference_se AS ci_low,
    difference + 1.959963984540054 * difference_se AS ci_high,
    CASE test
        -- two-sided binomial test at p = 1/2: min(1, 2 P(X <= min(b, c))), X ~ Bin(b + c, 1/2)
        WHEN 'mcnemar_exact' THEN least(1.0, 2.0 * list_sum(list_transform(
            range(least(discordant_a, discordant_b) + 1), lambda k_:
                exp(lgamma(discordant_a + discordant_b + 1) - lgamma(k_ + 1)
                    - lgamma(discordant_a + discordant_b - k_ + 1)
                    - (discordant_a + discordant_b) * ln(2.0)))))
        -- chi2.sf(x, 1) = 2 normal_sf(sqrt x), x = (b - c)^2 / (b + c)
        WHEN 'mcnemar_chi2' THEN 2.0 * normal_sf(
            abs(discordant_b - discordant_a) / sqrt(discordant_a + discordant_b))
        ELSE 2.0 * normal_sf(abs(difference) / nullif(difference_se, 0))
    END AS p_value,
    test,
    CASE WHEN form = 'paired' AND metric = 'accuracy' THEN discordant_a END::BIGINT
        AS discordant_a,
    CASE WHEN form = 'paired' AND metric = 'accuracy' THEN discordant_b END::BIGINT
        AS discordant_b,
    CASE WHEN form = 'paired' THEN disagreements / paired_rows END AS disagreement_rate
FROM estimates, picked
ORDER BY ALL
