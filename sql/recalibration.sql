-- name: recalibration
-- summary: How much temperature scaling would lower the cross-entropy, per period x version (x segment): the best single temperature on the grid, fitted in-sample on the labelled rows, and the loss it would give.
-- include: column_roles
-- param min_temperature (number(0.01..100), default 0.25): smallest temperature tried
-- param max_temperature (number(0.01..100), default 4): largest temperature tried
-- param steps (integer(2..201), default 41): temperatures tried, log-spaced from min_temperature to max_temperature (1 is always tried too)
-- output period: first day of the period
-- output evaluated_rows: n, rows with usable scores, a label in [0, K) and finite loss (as in rollup)
-- output cross_entropy: mean cross-entropy as logged (temperature 1), nats
-- output best_temperature: the temperature t on the grid whose softmax(z / t) has the lowest mean cross-entropy; > 1 means the model is over-confident, < 1 under-confident
-- output recalibrated_cross_entropy: the mean cross-entropy at best_temperature
-- output recalibration_gain: cross_entropy - recalibrated_cross_entropy (nats, >= 0): what a temperature fitted to these rows would win back
-- output at_grid_edge: best_temperature is the smallest or largest tried: widen the grid
-- note: temperature scaling (Guo et al. 2017) divides the logits by one number t, so the predicted class and the accuracy do not change; for probability logs the logits are log p. The fit is in-sample: the gain is what recalibration could win at most on these rows; fit t on one period and check it on the next before relying on it.
-- note: cost: one cross-entropy per row and temperature (steps + 1 per row), on logs only (a partials store keeps sums, not rows).
-- show: period, version_col, segment_cols, cross_entropy, best_temperature, recalibrated_cross_entropy, recalibration_gain, at_grid_edge, evaluated_rows
-- example: dbmetrics run recalibration --set logs=demo_parquet/logs --set labels=demo_parquet/labels/labels.parquet --set id_col=prediction_id --set grain=month
WITH
grid AS (
    SELECT [1.0] || list_transform(range($steps), lambda i:
               $min_temperature * pow($max_temperature / $min_temperature, i / ($steps - 1))
           ) AS temperatures
),
losses AS (
    SELECT date_trunc($grain, day)::DATE AS period, {{version_col}}{{segments}},
           temperature_scaled_losses(scores, label, grid.temperatures, $scores_kind) AS ce,
           grid.temperatures
    FROM (
        {{predictions}}
    ) AS p, grid
),
per_temperature AS (
    SELECT period, {{version_col}}{{segments}}, t_index,
           any_value(temperatures[t_index + 1]) AS temperature,
           count(*) AS rows,
           fsum(ce[t_index + 1]) AS total
    FROM (SELECT *, unnest(range(len(ce))) AS t_index FROM losses WHERE ce IS NOT NULL)
    GROUP BY ALL
),
cells AS (
    SELECT period, {{version_col}}{{segments}},
           any_value(rows) AS rows,
           any_value(total) FILTER (WHERE t_index = 0) AS logged_total,
           arg_min(temperature, total) FILTER (WHERE t_index > 0) AS best_temperature,
           min(total) FILTER (WHERE t_index > 0) AS best_total,
           min(temperature) FILTER (WHERE t_index > 0) AS lowest,
           max(temperature) FILTER (WHERE t_index > 0) AS highest
    FROM per_temperature
    GROUP BY ALL
)
SELECT
    period, {{version_col}}{{segments}},
    rows::BIGINT AS evaluated_rows,
    logged_total / rows AS cross_entropy,
    CASE WHEN best_total < logged_total THEN best_temperature ELSE 1.0 END AS best_temperature,
    least(best_total, logged_total) / rows AS recalibrated_cross_entropy,
    (logged_total - least(best_total, logged_total)) / rows AS recalibration_gain,
    best_total < logged_total AND best_temperature IN (lowest, highest) AS at_grid_edge
FROM cells
ORDER BY ALL
