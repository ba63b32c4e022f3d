-- dbmetrics SQL functions as DuckDB macros: plain SQL for any DuckDB client (shell, R, Java,
-- BI tools). Load with one statement, e.g. in the DuckDB shell:  .read dbmetrics_macros.sql
--
-- Scores are lists (FLOAT[], DOUBLE[], FLOAT[K], DOUBLE[K], integer or decimal lists); labels
-- are 0-based class indices. Everything is computed in DOUBLE, natural logarithm (nats).
-- The same functions exist as Python UDFs over numpy kernels; both implementations pass one
-- conformance suite (results agree with scipy to 1e-12 relative) and follow one set of rules:
--
--   * a NULL or empty list, a NULL or NaN element, or a NULL label gives NULL;
--   * a -inf logit is a masked class (probability 0); a +inf logit, or every class masked,
--     gives NULL; a true class of probability 0 gives +inf loss;
--   * probabilities are checked: no negative entry, a sum within 1e-3 of 1 (SUM_TOLERANCE
--     in dbmetrics/kernels/distributions.py), then renormalised; otherwise NULL;
--   * 0 log 0 = 0; divergences are clipped to their range (never -1e-17);
--   * a label outside [0, K) or two lists of different length are errors that name the
--     function and the bad value.
--
-- Row statistics (logit_row_stats / prob_row_stats) use the codes of
-- dbmetrics/kernels/row_stats.py:
--   score_issue  0 ok | 1 missing (NULL/empty) | 2 invalid (NaN, +inf logit, all masked)
--                3 not a distribution (probabilities only)
--   label_issue  0 ok | 1 unlabelled (NULL) | 2 out of range [0, K)
--
-- Technique: a row maximum or sum is computed once and captured by the lambdas that need it,
-- by mapping over a one-element list, list_transform([x], lambda x_: ...)[1]; referencing
-- list_max(z) inside a per-element lambda would recompute it K times.
-- Macros whose names start with dbmetrics_ are helpers of this file.

-- ------------------------------------------------------------------ helpers

-- A label checked against K classes: NULL stays NULL (also when the scores are NULL or
-- empty); outside [0, K) is an error naming the function and the label.
CREATE OR REPLACE MACRO dbmetrics_label(fn, k, label) AS
    CASE
        WHEN label IS NULL OR k IS NULL OR k = 0 THEN NULL
        WHEN label < 0 OR label >= k THEN error(
            fn || ': label ' || label || ' is outside [0, ' || k || ') for a row with ' || k
            || ' classes (labels are 0-based class indices)')
        ELSE label::BIGINT
    END;

-- A binary label: 0 or 1, else an error naming the function and the label.
CREATE OR REPLACE MACRO dbmetrics_binary_label(fn, label) AS
    CASE
        WHEN label IS NULL THEN NULL
        WHEN label <> 0 AND label <> 1 THEN error(
            fn || ': label ' || label
            || ' is not 0 or 1 (binary labels mark the positive class with 1)')
        ELSE label::BIGINT
    END;

-- Two lists of the same length, else an error naming the function, the second list and both
-- lengths. Returns true when both are present (not NULL, not empty).
CREATE OR REPLACE MACRO dbmetrics_same_length(fn, a, b, what) AS
    CASE
        WHEN len(a) > 0 AND len(b) > 0 AND len(a) <> len(b) THEN error(
            fn || ': the first list has ' || len(a) || ' classes but ' || what || ' has '
            || len(b) || ' in the same row; both lists must have one entry per class')
        ELSE len(a) > 0 AND len(b) > 0
    END;

-- A divergence kept within [0, high] (rounding of nearly equal rows can give -1e-17).
CREATE OR REPLACE MACRO dbmetrics_clipped(d, high) AS
    CASE WHEN d < 0.0 THEN 0.0 WHEN d > high THEN high ELSE d END;

-- log(1 + x) accurate for tiny x (DuckDB has no log1p): if 1 + x rounds to 1 the answer is
-- x, else log(u) * x / (u - 1) cancels the rounding of u = 1 + x.
CREATE OR REPLACE MACRO dbmetrics_log1p(x) AS
    list_transform([1.0 + x], lambda l1p_u:
        CASE WHEN l1p_u = 1.0 THEN x ELSE ln(l1p_u) * x / (l1p_u - 1.0) END)[1];

-- log(1 + exp(t)), numpy.logaddexp(0, t)'s branches.
CREATE OR REPLACE MACRO dbmetrics_softplus(t) AS
    list_transform([t::DOUBLE], lambda sp_t:
        CASE
            WHEN sp_t = 0.0 THEN ln(2.0)
            WHEN sp_t > 0.0 THEN sp_t + dbmetrics_log1p(exp(-sp_t))
            ELSE dbmetrics_log1p(exp(sp_t))
        END)[1];

-- The two-class scores of one binary score (the pack's only spelling of these wrappers; the
-- package's is dbmetrics/binary_scores.py, and tests/test_binary_scores.py holds them equal):
-- a log-odds s of class 1 is the logits [0, s]; a probability p of class 1 is [1 - p, p].
CREATE OR REPLACE MACRO dbmetrics_binary_logit_scores(s) AS [0.0, s::DOUBLE];
CREATE OR REPLACE MACRO dbmetrics_binary_prob_scores(p) AS [1.0 - p::DOUBLE, p::DOUBLE];

-- Sum of exp(z - m) of DOUBLE[] logits with row maximum m (unchecked).
CREATE OR REPLACE MACRO dbmetrics_expsum(z, m) AS
    list_sum(list_transform(z, lambda es_v: exp(es_v - m)));

-- Whether a DOUBLE[] of logits with maximum m is a defined row.
CREATE OR REPLACE MACRO dbmetrics_defined(z, m) AS
    coalesce(isfinite(m) AND list_count(z) = len(z), false);

-- Calibration bin: m (0-based) with edge_m < c <= edge_{m+1}, edges m * (1/B) and 1.0 as
-- numpy.linspace(0, 1, B + 1) makes them; c = 0 in bin 0; c outside [0, 1] -> NULL.
-- ceil(c * B) - 1 is the bin up to one step of rounding; comparisons with the edges settle it.
CREATE OR REPLACE MACRO dbmetrics_edge(i, b) AS
    CASE WHEN i >= b THEN 1.0 ELSE i * (1.0 / b) END;
CREATE OR REPLACE MACRO dbmetrics_bin(c, b) AS
    CASE WHEN c >= 0.0 AND c <= 1.0 THEN
        list_transform([least(greatest(ceil(c * b)::BIGINT - 1, 0), b - 1)], lambda bn_g:
            list_transform([bn_g - (c <= dbmetrics_edge(bn_g, b) AND bn_g > 0)::BIGINT],
                lambda bn_h:
                    (bn_h + (c > dbmetrics_edge(bn_h + 1, b) AND bn_h < b - 1)::BIGINT)::INTEGER
            )[1])[1]
    END;

-- ------------------------------------------------------------------ softmax family

CREATE OR REPLACE MACRO logsumexp(logits) AS
    list_transform([list_max(logits)::DOUBLE], lambda lse_m:
        CASE WHEN dbmetrics_defined(logits, lse_m)
             THEN ln(dbmetrics_expsum(logits, lse_m)) + lse_m END)[1];

CREATE OR REPLACE MACRO dbmetrics_log_softmax(logits) AS
    list_transform([list_max(logits)::DOUBLE], lambda ls_m:
        CASE WHEN dbmetrics_defined(logits, ls_m) THEN
            list_transform([ln(dbmetrics_expsum(logits, ls_m))], lambda ls_l:
                list_transform(logits, lambda ls_v: (ls_v - ls_m) - ls_l))[1]
        END)[1];

CREATE OR REPLACE MACRO dbmetrics_softmax(logits) AS
    list_transform([list_max(logits)::DOUBLE], lambda sm_m:
        CASE WHEN dbmetrics_defined(logits, sm_m) THEN
            list_transform([dbmetrics_expsum(logits, sm_m)], lambda sm_s:
                list_transform(logits, lambda sm_v: exp(sm_v - sm_m) / sm_s))[1]
        END)[1];

-- Probabilities checked (no NULL/NaN/inf, none negative, sum within 1e-3 of 1) and
-- renormalised to sum 1; NULL otherwise.
CREATE OR REPLACE MACRO dbmetrics_as_distribution(probs) AS
    list_transform([probs::DOUBLE[]], lambda ad_p:
        list_transform([list_sum(ad_p)], lambda ad_t:
            CASE WHEN list_count(ad_p) = len(ad_p) AND isfinite(ad_t)
                      AND abs(ad_t - 1.0) <= 0.001 AND list_min(ad_p) >= 0.0
                 THEN list_transform(ad_p, lambda ad_x: ad_x / ad_t) END)[1])[1];

-- Non-negative counts or weights scaled to sum 1; NULL if invalid or all zero.
CREATE OR REPLACE MACRO dbmetrics_normalised(counts) AS
    list_transform([counts::DOUBLE[]], lambda nm_c:
        list_transform([list_sum(nm_c)], lambda nm_t:
            CASE WHEN list_count(nm_c) = len(nm_c) AND isfinite(nm_t) AND nm_t > 0.0
                      AND list_min(nm_c) >= 0.0
                 THEN list_transform(nm_c, lambda nm_x: nm_x / nm_t) END)[1])[1];

-- ------------------------------------------------------------------ losses

-- -log softmax(z)[y] for a checked label y (NULL when y is NULL or the row is undefined).
CREATE OR REPLACE MACRO dbmetrics_cross_entropy(z, y) AS
    CASE WHEN y IS NOT NULL THEN
        list_transform([list_max(z)::DOUBLE], lambda ce_m:
            CASE WHEN dbmetrics_defined(z, ce_m)
                 THEN ln(dbmetrics_expsum(z, ce_m)) - (z[y + 1] - ce_m) END)[1]
    END;

CREATE OR REPLACE MACRO cross_entropy(logits, label) AS
    dbmetrics_cross_entropy(logits, dbmetrics_label('cross_entropy', len(logits), label));

-- -sum_j t_j log p_j given a log-probability list and a target distribution (0 where t_j = 0).
-- logp is bound once: a macro argument is an expression, computed again wherever it is used.
CREATE OR REPLACE MACRO dbmetrics_soft_loss(logp, t) AS
    list_transform([logp], lambda sl_l:
        CASE WHEN sl_l IS NOT NULL THEN
            0.0 - list_sum(list_transform(t, lambda sl_t, sl_i:
                CASE WHEN sl_t = 0.0 THEN 0.0 ELSE sl_t * sl_l[sl_i] END))
        END)[1];

CREATE OR REPLACE MACRO dbmetrics_cross_entropy_probs(probs, label) AS
    list_transform([dbmetrics_as_distribution(probs)], lambda cep_p:
        list_transform([dbmetrics_label('cross_entropy_probs', len(probs), label)], lambda cep_y:
            0.0 - ln(cep_p[cep_y + 1]))[1])[1];

CREATE OR REPLACE MACRO soft_cross_entropy(logits, target) AS
    CASE WHEN dbmetrics_same_length('soft_cross_entropy', logits, target, 'the target') THEN
        dbmetrics_soft_loss(dbmetrics_log_softmax(logits), dbmetrics_as_distribution(target))
    END;

CREATE OR REPLACE MACRO soft_cross_entropy_probs(probs, target) AS
    CASE WHEN dbmetrics_same_length('soft_cross_entropy_probs', probs, target, 'the target') THEN
        dbmetrics_soft_loss(list_transform(dbmetrics_as_distribution(probs), lambda scp_x: ln(scp_x)),
                            dbmetrics_as_distribution(target))
    END;

CREATE OR REPLACE MACRO binary_cross_entropy(logit, label) AS
    list_transform([logit::DOUBLE], lambda bce_s:
        list_transform([dbmetrics_binary_label('binary_cross_entropy', label)], lambda bce_y:
            CASE WHEN bce_y IS NOT NULL AND NOT isnan(bce_s) AND bce_s <> 'inf'::DOUBLE
                 THEN dbmetrics_softplus(CASE WHEN bce_y = 1 THEN -bce_s ELSE bce_s END) END
        )[1])[1];

CREATE OR REPLACE MACRO binary_cross_entropy_prob(p, label) AS
    list_transform([p::DOUBLE], lambda bcp_p:
        list_transform([dbmetrics_binary_label('binary_cross_entropy_prob', label)], lambda bcp_y:
            CASE WHEN bcp_p >= 0.0 AND bcp_p <= 1.0 AND bcp_y IS NOT NULL
                 THEN dbmetrics_cross_entropy_probs(dbmetrics_binary_prob_scores(bcp_p), bcp_y)
            END)[1])[1];

-- sum_j (p_j - [j = y])^2 of a probability list and a checked label.
CREATE OR REPLACE MACRO dbmetrics_brier(p, y) AS
    list_sum(list_transform(p, lambda br_x, br_i:
        (br_x - (br_i = y + 1)::DOUBLE) * (br_x - (br_i = y + 1)::DOUBLE)));

CREATE OR REPLACE MACRO brier_score(logits, label) AS
    list_transform([dbmetrics_label('brier_score', len(logits), label)], lambda bs_y:
        CASE WHEN bs_y IS NOT NULL THEN dbmetrics_brier(dbmetrics_softmax(logits), bs_y) END)[1];

CREATE OR REPLACE MACRO brier_score_probs(probs, label) AS
    list_transform([dbmetrics_label('brier_score_probs', len(probs), label)], lambda bsp_y:
        CASE WHEN bsp_y IS NOT NULL THEN dbmetrics_brier(dbmetrics_as_distribution(probs), bsp_y) END)[1];

CREATE OR REPLACE MACRO binary_brier_score(p, label) AS
    list_transform([p::DOUBLE], lambda bb_p:
        list_transform([dbmetrics_binary_label('binary_brier_score', label)], lambda bb_y:
            CASE WHEN bb_p >= 0.0 AND bb_p <= 1.0 AND bb_y IS NOT NULL
                 THEN dbmetrics_brier(dbmetrics_binary_prob_scores(bb_p), bb_y) / 2.0 END)[1])[1];

-- ------------------------------------------------------------------ information measures

-- sum_j p_j log(p_j / q_j) with 0 where p_j = 0 and +inf where q_j = 0 < p_j.
CREATE OR REPLACE MACRO dbmetrics_xlogy_ratio(p, q) AS
    list_sum(list_transform(p, lambda xr_x, xr_i:
        CASE WHEN xr_x = 0.0 THEN 0.0 ELSE xr_x * (ln(xr_x) - ln(q[xr_i])) END));

-- -sum_j p_j log p_j, 0 log 0 = 0.
CREATE OR REPLACE MACRO dbmetrics_entropy(p) AS
    0.0 - list_sum(list_transform(p, lambda en_x:
        CASE WHEN en_x = 0.0 THEN 0.0 ELSE en_x * ln(en_x) END));

CREATE OR REPLACE MACRO kl_divergence(p, q) AS
    CASE WHEN dbmetrics_same_length('kl_divergence', p, q, 'q') THEN
        list_transform([dbmetrics_as_distribution(p)], lambda kl_p:
            list_transform([dbmetrics_as_distribution(q)], lambda kl_q:
                dbmetrics_clipped(dbmetrics_xlogy_ratio(kl_p, kl_q), 'inf'::DOUBLE))[1])[1]
    END;

CREATE OR REPLACE MACRO js_divergence(p, q) AS
    CASE WHEN dbmetrics_same_length('js_divergence', p, q, 'q') THEN
        list_transform([dbmetrics_as_distribution(p)], lambda js_p:
            list_transform([dbmetrics_as_distribution(q)], lambda js_q:
                dbmetrics_clipped(
                    0.5 * list_sum(list_transform(js_p, lambda js_x, js_i:
                        CASE WHEN js_x = 0.0 THEN 0.0
                             ELSE js_x * (ln(js_x) - ln(js_x + js_q[js_i]) + ln(2.0)) END))
                    + 0.5 * list_sum(list_transform(js_q, lambda js_y, js_j:
                        CASE WHEN js_y = 0.0 THEN 0.0
                             ELSE js_y * (ln(js_y) - ln(js_p[js_j] + js_y) + ln(2.0)) END)),
                    ln(2.0)))[1])[1]
    END;

CREATE OR REPLACE MACRO population_stability_index(actual, expected) AS
    CASE WHEN dbmetrics_same_length('population_stability_index', actual, expected, 'expected')
    THEN
        list_transform([dbmetrics_normalised(actual)], lambda psi_a:
            list_transform([dbmetrics_normalised(expected)], lambda psi_e:
                dbmetrics_clipped(dbmetrics_xlogy_ratio(psi_a, psi_e)
                                  + dbmetrics_xlogy_ratio(psi_e, psi_a), 'inf'::DOUBLE))[1])[1]
    END;

CREATE OR REPLACE MACRO shannon_entropy(probs) AS
    dbmetrics_entropy(dbmetrics_as_distribution(probs));

CREATE OR REPLACE MACRO softmax_entropy(logits) AS dbmetrics_entropy(dbmetrics_softmax(logits));

-- ------------------------------------------------------------------ predictions

-- 0-based index of the first maximum; NULL for an undefined row (NaN, +inf, all -inf).
CREATE OR REPLACE MACRO dbmetrics_predicted_class(scores) AS
    list_transform([list_max(scores)::DOUBLE], lambda pc_m:
        CASE WHEN dbmetrics_defined(scores, pc_m)
             THEN (list_position(scores, list_max(scores)) - 1)::INTEGER END)[1];

CREATE OR REPLACE MACRO is_correct(scores, label) AS
    dbmetrics_predicted_class(scores) = dbmetrics_label('is_correct', len(scores), label);

CREATE OR REPLACE MACRO confidence(logits) AS
    list_transform([list_max(logits)::DOUBLE], lambda cf_m:
        CASE WHEN dbmetrics_defined(logits, cf_m)
             THEN 1.0 / dbmetrics_expsum(logits, cf_m) END)[1];

CREATE OR REPLACE MACRO confidence_probs(probs) AS
    list_max(dbmetrics_as_distribution(probs));

-- Top-1 minus top-2 of a probability list (1 for a single class).
CREATE OR REPLACE MACRO dbmetrics_margin(p) AS
    list_transform([list_reverse_sort(p)[1:2]], lambda mg_s:
        CASE WHEN len(mg_s) = 1 THEN 1.0 ELSE mg_s[1] - mg_s[2] END)[1];

CREATE OR REPLACE MACRO margin(logits) AS dbmetrics_margin(dbmetrics_softmax(logits));

CREATE OR REPLACE MACRO margin_probs(probs) AS
    dbmetrics_margin(dbmetrics_as_distribution(probs));

CREATE OR REPLACE MACRO calibration_bin(conf, bins) AS
    CASE
        WHEN bins < 1 OR bins > 1000000 THEN error(
            'calibration_bin: bins must be a whole number in 1..1000000, got ' || bins)
        ELSE dbmetrics_bin(conf::DOUBLE, bins::BIGINT)
    END;

-- ------------------------------------------------------------------ recalibration

-- Cross-entropy of dbmetrics_softmax(z / t) for each temperature t; kind is a scores_kind ('logits',
-- 'binary_logit': the scores are logits; 'probs', 'binary_prob': checked probabilities whose
-- logs are the logits). NULL for a row that cannot be evaluated (scores unusable, label NULL
-- or outside [0, K), or an infinite loss).
CREATE OR REPLACE MACRO temperature_scaled_losses(scores, label, temperatures, kind) AS
    list_transform([temperatures::DOUBLE[]], lambda ts_t:
        CASE
            WHEN len(ts_t) = 0 OR len(list_filter(ts_t, lambda ts_x: isfinite(ts_x) AND ts_x > 0))
                                  <> len(ts_t)
                THEN error('temperature_scaled_losses: temperatures must be positive numbers')
            WHEN kind NOT IN ('logits', 'binary_logit', 'probs', 'binary_prob')
                THEN error('temperature_scaled_losses: kind must be logits, probs, '
                           || 'binary_logit or binary_prob, got ' || kind)
            ELSE list_transform([
                    CASE WHEN kind IN ('logits', 'binary_logit') THEN scores::DOUBLE[]
                         ELSE list_transform(dbmetrics_as_distribution(scores), lambda ts_p: ln(ts_p))
                    END], lambda ts_z:
                list_transform([CASE WHEN label >= 0 AND label < len(ts_z) THEN label END],
                    lambda ts_y:
                    list_transform([list_transform(ts_t, lambda ts_temp:
                        dbmetrics_cross_entropy(
                            list_transform(ts_z, lambda ts_v: ts_v / ts_temp), ts_y))],
                        lambda ts_out:
                        CASE WHEN len(list_filter(ts_out, lambda ts_o: isfinite(ts_o)))
                                  = len(ts_out) THEN ts_out END)[1])[1])[1]
        END)[1];

-- ------------------------------------------------------------------ row statistics

CREATE OR REPLACE MACRO dbmetrics_row_bins(bins) AS
    CASE
        WHEN bins IS NULL OR bins < 1 OR bins > 1000000 THEN error(
            'row statistics: bins must be one whole number in 1..1000000 for the whole query, got '
            || coalesce(bins::VARCHAR, 'NULL'))
        ELSE bins::BIGINT
    END;

-- 0 ok | 1 NULL label | 2 outside [0, K) (judged only where the scores have classes).
CREATE OR REPLACE MACRO dbmetrics_label_issue(k, label) AS
    CASE WHEN label IS NULL THEN 1 WHEN k > 0 AND (label < 0 OR label >= k) THEN 2 ELSE 0 END;

-- Every per-row quantity a rollup needs, from logits: d = z - max(z) <= 0,
-- s = sum_j exp(d_j) >= 1, p = exp(d) / s; loss = log s - d_y, confidence = 1 / s,
-- entropy = log s - sum_j p_j d_j (masked classes add 0), Brier = sum_j (p_j - [j = y])^2.
-- Values that do not depend on each other are bound together in one struct: DuckDB's time to
-- bind a query doubles with each nested lambda level (nine levels took 0.66 s per query).
CREATE OR REPLACE MACRO logit_row_stats(logits, label, bins) AS
    list_transform([{'z': logits::DOUBLE[], 'b': dbmetrics_row_bins(bins)}], lambda rs_a:
    list_transform([{'m': list_max(rs_a.z), 'li': dbmetrics_label_issue(len(rs_a.z), label)}],
        lambda rs_c:
    list_transform([CASE WHEN len(rs_a.z) > 0
                         THEN (NOT dbmetrics_defined(rs_a.z, rs_c.m))::INTEGER * 2 ELSE 1 END],
        lambda rs_si:
    list_transform([CASE WHEN rs_si = 0 THEN list_transform(rs_a.z, lambda rs_v: rs_v - rs_c.m) END],
        lambda rs_d:
    list_transform([{'e': list_transform(rs_d, lambda rs_x: exp(rs_x)),
                     'y': CASE WHEN rs_c.li = 0 THEN label::BIGINT END}], lambda rs_f:
    list_transform([list_sum(rs_f.e)], lambda rs_s:
        {
            'score_issue': rs_si::TINYINT,
            'label_issue': rs_c.li::TINYINT,
            'classes': CASE WHEN rs_si <> 1 THEN len(rs_a.z) END::INTEGER,
            'loss': ln(rs_s) - rs_d[rs_f.y + 1],
            'confidence': 1.0 / rs_s,
            'predicted': (list_position(rs_d, 0.0) - 1)::INTEGER,
            'correct': CASE WHEN rs_f.y IS NOT NULL THEN list_position(rs_d, 0.0) - 1 = rs_f.y END,
            'brier': CASE WHEN rs_f.y IS NOT NULL
                          THEN dbmetrics_brier(list_transform(rs_f.e, lambda rs_q: rs_q / rs_s), rs_f.y)
                     END,
            'entropy': ln(rs_s) - list_sum(list_transform(rs_f.e, lambda rs_q, rs_i:
                CASE WHEN rs_q > 0.0 THEN rs_q / rs_s * rs_d[rs_i] ELSE 0.0 END)),
            'bin': dbmetrics_bin(1.0 / rs_s, rs_a.b)
        }
    )[1])[1])[1])[1])[1])[1];

-- The same from probabilities: checked (score_issue 3 when not a distribution) and
-- renormalised; loss = -log p_y, confidence = max p, entropy = -sum p log p.
CREATE OR REPLACE MACRO prob_row_stats(probs, label, bins) AS
    list_transform([{'z': probs::DOUBLE[], 'b': dbmetrics_row_bins(bins)}], lambda ps_a:
    list_transform([{'t': list_sum(ps_a.z), 'li': dbmetrics_label_issue(len(ps_a.z), label)}],
        lambda ps_c:
    list_transform([CASE
                        WHEN coalesce(len(ps_a.z), 0) = 0 THEN 1
                        WHEN list_count(ps_a.z) < len(ps_a.z) OR NOT isfinite(ps_c.t) THEN 2
                        WHEN abs(ps_c.t - 1.0) > 0.001 OR list_min(ps_a.z) < 0.0 THEN 3
                        ELSE 0
                    END], lambda ps_si:
    list_transform([CASE WHEN ps_si = 0 THEN list_transform(ps_a.z, lambda ps_v: ps_v / ps_c.t) END],
        lambda ps_p:
    list_transform([{'c': list_max(ps_p), 'y': CASE WHEN ps_c.li = 0 THEN label::BIGINT END}],
        lambda ps_f:
        {
            'score_issue': ps_si::TINYINT,
            'label_issue': ps_c.li::TINYINT,
            'classes': CASE WHEN ps_si <> 1 THEN len(ps_a.z) END::INTEGER,
            'loss': 0.0 - ln(ps_p[ps_f.y + 1]),
            'confidence': ps_f.c,
            'predicted': (list_position(ps_p, ps_f.c) - 1)::INTEGER,
            'correct': CASE WHEN ps_f.y IS NOT NULL THEN list_position(ps_p, ps_f.c) - 1 = ps_f.y END,
            'brier': CASE WHEN ps_f.y IS NOT NULL THEN dbmetrics_brier(ps_p, ps_f.y) END,
            'entropy': dbmetrics_entropy(ps_p),
            'bin': dbmetrics_bin(ps_f.c, ps_a.b)
        }
    )[1])[1])[1])[1])[1];

-- ------------------------------------------------------------------ tail probabilities

-- erfc(x) for x >= 0 (x = 0 gives 1): below 1.5, 1 - erf(x) from the series of positive
-- terms erf(x) = sum_n exp(-x^2) x^(2n+1) / Gamma(n + 3/2) (no cancellation; 60 terms);
-- from 1.5, Laplace's continued fraction erfc(x) = exp(-x^2) / sqrt(pi) / (x + (1/2) / (x +
-- (2/2) / (x + (3/2) / ...))) evaluated from its 100th level. Within 1e-12 of scipy.
CREATE OR REPLACE MACRO dbmetrics_erfc(x) AS
    CASE
        WHEN x = 0.0 THEN 1.0
        WHEN x < 1.5 THEN 1.0 - list_sum(list_transform(range(60), lambda ef_n:
            exp(-x * x + (2 * ef_n + 1) * ln(x) - lgamma(ef_n + 1.5))))
        ELSE exp(-x * x) / sqrt(pi())
             / list_reduce(range(100, 0, -1), lambda ef_t, ef_k: x + ef_k / 2.0 / ef_t, x)
    END;

-- P(Z > z) for a standard normal Z, erfc(z / sqrt 2) / 2; NaN gives NULL.
CREATE OR REPLACE MACRO normal_sf(z) AS
    list_transform([z::DOUBLE], lambda ns_z:
        CASE
            WHEN isnan(ns_z) THEN NULL
            WHEN ns_z >= 0.0 THEN dbmetrics_erfc(ns_z / sqrt(2.0)) / 2.0
            ELSE 1.0 - dbmetrics_erfc(-ns_z / sqrt(2.0)) / 2.0
        END)[1];

-- ------------------------------------------------------------------ public names

-- The functions other macros build on are defined above as dbmetrics_ helpers, so that
-- replacing one public name (e.g. by the Python UDF of the same name) changes nothing else.
CREATE OR REPLACE MACRO log_softmax(logits) AS dbmetrics_log_softmax(logits);
CREATE OR REPLACE MACRO softmax(logits) AS dbmetrics_softmax(logits);
CREATE OR REPLACE MACRO as_distribution(probs) AS dbmetrics_as_distribution(probs);
CREATE OR REPLACE MACRO cross_entropy_probs(probs, label) AS
    dbmetrics_cross_entropy_probs(probs, label);
CREATE OR REPLACE MACRO predicted_class(scores) AS dbmetrics_predicted_class(scores);
