-- name: segments
-- summary: The rollup beside a business table (revenue, customer tier, ...): one row per period x version x segment, the table's columns joined on the segment columns, and on the period when the table has one (weekly revenue per region).
-- param business (source, required): business table: a Parquet or CSV file, or a table/view name, with one row per segment (or per period and segment, see business_period_col)
-- include: column_roles
-- param segment_cols (columns, required): comma-separated segment columns of the log: the rollup groups by them and the business table is joined on them
-- param business_segment_cols (columns(business), default same as segment_cols): the business table's key columns matching segment_cols, in the same order, when they are named differently (e.g. region_code for region); values are compared as text
-- param business_period_col (column(business)): the business table's period column (DATE or TIMESTAMP); each value is truncated to grain, so any day of a period (a week's Monday or Sunday) joins that period; unset: one business row per segment serves every period
-- param partials (text): a partials store (folder written by `dbmetrics partials update`) to roll up instead of scanning logs; its column roles must cover version_col and segment_cols
-- output period: first day of the period
-- output rows: as in rollup
-- output labelled_rows: as in rollup
-- output label_coverage: as in rollup
-- output evaluated_rows: as in rollup
-- output cross_entropy: as in rollup
-- output cross_entropy_se: as in rollup
-- output perplexity: as in rollup
-- output accuracy: as in rollup
-- output brier: as in rollup
-- output ece: as in rollup
-- output mean_confidence: as in rollup
-- output mean_entropy: as in rollup
-- output missing_scores: as in rollup
-- output invalid_scores: as in rollup
-- output bad_labels: as in rollup
-- output infinite_loss_rows: as in rollup
-- output business_found: a business row was found for the cell (false: its business columns are NULL)
-- note: after the rollup columns come the business table's other columns (its key columns left out), then business_found; `dbmetrics run` says how many cells found no business row.
-- note: a key (segment, and period when business_period_col is set) that appears in more than one business row is an error; the result may not repeat a column name.
-- show: period, version_col, segment_cols, rows, cross_entropy, accuracy, ece, business_found
-- example: dbmetrics run segments --set logs=demo_parquet/logs --set labels=demo_parquet/labels --set id_col=prediction_id --set segment_cols=region --set business=demo_parquet/regions.csv --set grain=month
WITH
rollup AS (
    {{query:rollup}}
),
-- The business table keyed by its segment values joined as text (unit separator between
-- them) and by its period truncated to the grain (NULL when business_period_col is unset:
-- the trailing commas let an unset column parameter render as nothing).
business AS (
    SELECT concat_ws(chr(31), {{business_segment_cols}},) AS __segment_key,
           CAST(date_trunc($grain, CAST(([{{business_period_col}}])[1] AS DATE)) AS DATE)
               AS __period_key,
           len([{{business_period_col}}]) > 0 AS __by_period,
           * EXCLUDE ({{business_segment_cols}}, {{business_period_col}})
    FROM {{business}}
    QUALIFY CASE WHEN count(*) OVER (PARTITION BY __segment_key, __period_key) > 1
                 THEN error('business: a segment (and period) appears in more than one row; give one row per key')
                 ELSE true END
)
SELECT rollup.*,
       business.* EXCLUDE (__segment_key, __period_key, __by_period),
       business.__segment_key IS NOT NULL AS business_found
FROM rollup
LEFT JOIN business
  ON business.__segment_key = concat_ws(chr(31), {{segment_cols}},)
 AND (NOT business.__by_period OR business.__period_key = rollup.period)
ORDER BY ALL
