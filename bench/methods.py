"""The routes being timed. Each factory takes a Context, does its untimed setup (connect,
register) and returns a run function; a run returns the rollup as a list of row dicts
(KEYS + METRICS) or, for the scalar methods, a number.

The rollup, per period (Monday week) x model_version x segment, over the rows whose label
is not NULL ("evaluated"; this data has no bad scores or labels): rows, labelled_rows,
mean cross-entropy and its standard error (sample variance, n - 1), accuracy (first
argmax = label), Brier (multi-class sum), ECE over 15 right-closed bins
(sum_b |correct_b - sum of confidence_b| / n) and, over all scored rows, mean confidence
and mean entropy. This is dbmetrics' `rollup` template; the other routes recompute it
independently so that a mismatch points at a bug.
"""

import datetime as dt
import os
from dataclasses import dataclass

import numpy as np

from dbmetrics.kernels import state_jit

KEYS = ("period", "model_version", "segment")
METRICS = (
    "rows",
    "labelled_rows",
    "cross_entropy",
    "cross_entropy_se",
    "accuracy",
    "brier",
    "ece",
    "mean_confidence",
    "mean_entropy",
)
BINS = 15


@dataclass(frozen=True)
class Context:
    scan: str  # read_parquet path or glob
    classes: int
    memory_limit: str | None  # DuckDB memory_limit for the big log, else None
    temp_dir: str


# --- DuckDB routes --------------------------------------------------------------------


def connect(ctx: Context, register: bool):
    import duckdb

    config = {"threads": "2", "temp_directory": ctx.temp_dir}
    if ctx.memory_limit:
        config["memory_limit"] = ctx.memory_limit
    con = duckdb.connect(config=config)
    if register:
        import dbmetrics

        dbmetrics.register(con)
    return con


def scalar(con, sql, ctx):
    return con.execute(sql, [ctx.scan]).fetchone()[0]


def rows_of(table) -> list:
    """Arrow rollup table -> row dicts with KEYS + METRICS, period as ISO date text."""
    out = []
    for row in table.select(list(KEYS + METRICS)).to_pylist():
        row["period"] = str(row["period"])[:10]
        out.append(row)
    return out


FINISH_SQL = """
by_bin AS (
    SELECT period, model_version, segment, bin,
           count(*) AS n, count(*) FILTER (WHERE labelled) AS nl,
           sum(loss) AS s_loss, sum(loss * loss) AS s_loss2,
           count(*) FILTER (WHERE correct) AS s_correct,
           sum(brier) AS s_brier, sum(conf) FILTER (WHERE labelled) AS s_conf_l,
           sum(conf) AS s_conf, sum(entropy) AS s_entropy
    FROM per_row GROUP BY ALL)
SELECT period, model_version, segment,
       sum(n)::BIGINT AS rows, sum(nl)::BIGINT AS labelled_rows,
       sum(s_loss) / sum(nl) AS cross_entropy,
       sqrt((sum(s_loss2) - sum(s_loss) ^ 2 / sum(nl)) / (sum(nl) - 1) / sum(nl)) AS cross_entropy_se,
       sum(s_correct) / sum(nl) AS accuracy,
       sum(s_brier) / sum(nl) AS brier,
       sum(abs(s_correct - coalesce(s_conf_l, 0))) / sum(nl) AS ece,
       sum(s_conf) / sum(n) AS mean_confidence,
       sum(s_entropy) / sum(n) AS mean_entropy
FROM by_bin GROUP BY ALL ORDER BY ALL
"""

# Pure SQL, float64 throughout: d = z - max(z) (list_max hoisted into a subquery, notes
# §2 b1), e = exp(d) materialised once; then s = sum e, sum e*d and sum e*e come from
# list_sum / list_dot_product (built-ins, no lambda). loss = log s - d_y, conf = 1/s,
# entropy = log s - (sum e d)/s, Brier = (sum e e)/s^2 - 2 e_y/s + 1.
SQL_LAMBDA = (
    """
WITH shifted AS (
    SELECT date_trunc('week', ts)::DATE AS period, model_version, segment, label,
           label IS NOT NULL AS labelled,
           list_position(logits, m) - 1 AS pred,
           list_transform(logits, lambda v: v::DOUBLE - m) AS d
    FROM (SELECT *, list_max(logits) AS m FROM read_parquet($1))),
sums AS (
    SELECT *, list_sum(e) AS s, list_dot_product(e, d) AS sed, list_dot_product(e, e) AS see
    FROM (SELECT *, list_transform(d, lambda x: exp(x)) AS e FROM shifted)),
per_row AS (
    SELECT period, model_version, segment, labelled,
           ln(s) - d[label + 1] AS loss,
           pred = label AS correct,
           see / (s * s) - 2 * e[label + 1] / s + 1 AS brier,
           1 / s AS conf,
           ln(s) - sed / s AS entropy,
           least(greatest(ceil((1 / s) * 15)::INTEGER - 1, 0), 14) AS bin
    FROM sums),
"""
    + FINISH_SQL
)

# The same finish over dbmetrics' per-row statistics UDF.
UDF_SQL = (
    """
WITH per_row AS (
    SELECT period, model_version, segment,
           st.label_issue = 0 AS labelled, st.loss AS loss, st.correct AS correct,
           st.brier AS brier, st.confidence AS conf, st.entropy AS entropy, st.bin AS bin
    FROM (SELECT date_trunc('week', ts)::DATE AS period, model_version, segment,
                 logit_row_stats(logits, label, 15) AS st
          FROM read_parquet($1))),
"""
    + FINISH_SQL
)


def floor(ctx):
    """The floor: DuckDB decoding the scores column and touching every value."""
    con = connect(ctx, False)
    return lambda: scalar(con, "SELECT sum(list_sum(logits)) FROM read_parquet(?)", ctx)


def rollup_template(ctx):
    """dbmetrics' `rollup` template through the Python API."""
    from dbmetrics.queries import run_query

    con = connect(ctx, True)
    params = {
        "logs": ctx.scan,
        "grain": "week",
        "segment_cols": "segment",
        "bins": str(BINS),
        "time_col": "ts",
        "scores_col": "logits",
        "label_col": "label",
        "version_col": "model_version",
        "scores_kind": "logits",
    }
    return lambda: rows_of(run_query(con, "rollup", params))


def rollup_numpy_engine(ctx):
    """The same `rollup` with the compiled route turned off: the numpy engine (K <= 64) or
    the UDF route, as without the `jit` extra."""
    os.environ[state_jit.DISABLE_VARIABLE] = "0"
    return rollup_template(ctx)


def rollup_udf_sql(ctx):
    """The rollup written by hand over logit_row_stats (template overhead = difference)."""
    con = connect(ctx, True)
    return lambda: rows_of(con.execute(UDF_SQL, [ctx.scan]).to_arrow_table())


def rollup_sql_lambda(ctx):
    """The rollup in DuckDB SQL alone (list lambdas), float64."""
    con = connect(ctx, False)
    return lambda: rows_of(con.execute(SQL_LAMBDA, [ctx.scan]).to_arrow_table())


def ce_udf(ctx):
    """avg(cross_entropy(logits, label)): dbmetrics' scalar UDF."""
    con = connect(ctx, True)
    return lambda: scalar(con, "SELECT avg(cross_entropy(logits, label)) FROM read_parquet(?)", ctx)


def ce_sql(ctx):
    """The mean cross-entropy in SQL (notes §2 b1, with float64 differences)."""
    con = connect(ctx, False)
    sql = (
        "SELECT avg(ln(list_sum(list_transform(logits, lambda v: exp(v::DOUBLE - m)))) "
        "+ m - logits[label + 1]) FROM (SELECT logits, label, list_max(logits)::DOUBLE AS m "
        "FROM read_parquet(?))"
    )
    return lambda: scalar(con, sql, ctx)


def pack_connection(ctx):
    """A bare DuckDB connection that loaded only the SQL macro pack (as any client would)."""
    from dbmetrics.macros import load_macros

    return load_macros(connect(ctx, False))


def ce_macro(ctx):
    """avg(cross_entropy(logits, label)) through the SQL macro (the pack on a bare connection)."""
    con = pack_connection(ctx)
    return lambda: scalar(con, "SELECT avg(cross_entropy(logits, label)) FROM read_parquet(?)", ctx)


def rollup_sql_state(ctx):
    """The `rollup` saved query as plain SQL (`dbmetrics render`): the state in DuckDB SQL
    alone, run on a bare connection with the macro pack."""
    from dbmetrics.queries.plain_sql import plain_sql

    params = {
        "logs": ctx.scan,
        "grain": "week",
        "segment_cols": "segment",
        "bins": str(BINS),
    }
    sql = plain_sql(connect(ctx, True), "rollup", params)
    con = pack_connection(ctx)
    return lambda: rows_of(con.sql(sql).to_arrow_table())


# --- In-memory routes ------------------------------------------------------------------


def week_start_days(ts_us: np.ndarray) -> np.ndarray:
    """Days since 1970-01-01 of the Monday starting each timestamp's week (1970-01-01 = Thu)."""
    days = ts_us // 86_400_000_000
    return days - (days + 3) % 7


def inner_edges():
    return np.linspace(0.0, 1.0, BINS + 1)[1:-1]


class Sums:
    """Per (group, bin) sums, accumulated block by block with np.bincount."""

    NAMES = (
        "n",
        "nl",
        "s_loss",
        "s_loss2",
        "s_correct",
        "s_brier",
        "s_conf_l",
        "s_conf",
        "s_entropy",
    )

    def __init__(self, groups: int):
        self.size = groups * BINS
        self.acc = {k: np.zeros(self.size) for k in self.NAMES}

    def add(self, cell, labelled, loss, correct, brier, conf, entropy):
        def put(name, w=None):
            self.acc[name] += np.bincount(cell, w, minlength=self.size)

        lab = labelled.astype(np.float64)
        put("n")
        put("nl", lab)
        put("s_loss", loss * lab)
        put("s_loss2", loss * loss * lab)
        put("s_correct", correct * lab)
        put("s_brier", brier * lab)
        put("s_conf_l", conf * lab)
        put("s_conf", conf)
        put("s_entropy", entropy)

    def finish(self, group_keys) -> list:
        """Row dicts for groups with rows; group_keys(g) -> (period, version, segment)."""
        a = {k: v.reshape(-1, BINS) for k, v in self.acc.items()}
        g = {k: v.sum(axis=1) for k, v in a.items()}
        gap = np.abs(a["s_correct"] - a["s_conf_l"]).sum(axis=1)
        out = []
        for i in np.flatnonzero(g["n"]):
            n, nl = g["n"][i], g["nl"][i]
            period, version, segment = group_keys(i)
            out.append(
                {
                    "period": period,
                    "model_version": version,
                    "segment": segment,
                    "rows": int(n),
                    "labelled_rows": int(nl),
                    "cross_entropy": g["s_loss"][i] / nl,
                    "cross_entropy_se": np.sqrt(
                        (g["s_loss2"][i] - g["s_loss"][i] ** 2 / nl) / (nl - 1) / nl
                    ),
                    "accuracy": g["s_correct"][i] / nl,
                    "brier": g["s_brier"][i] / nl,
                    "ece": gap[i] / nl,
                    "mean_confidence": g["s_conf"][i] / n,
                    "mean_entropy": g["s_entropy"][i] / n,
                }
            )
        return sorted(out, key=lambda r: tuple(r[k] for k in KEYS))


def block_stats(z32: np.ndarray, y: np.ndarray, labelled: np.ndarray):
    """Per-row loss, correct, Brier, confidence, entropy, bin of an (n, K) float32 block.

    Works on the transposed float64 block (K, n): numpy reduces along the first axis of a
    contiguous array much faster than along a short last axis (notes §6).
    """
    k, n = z32.shape[1], len(z32)
    d = np.array(z32.T, dtype=np.float64, order="C")
    m = np.maximum.reduce(d, axis=0)
    if k <= 32:
        pred = np.zeros(n, np.int64)
        for j in range(k - 1, -1, -1):  # first maximum wins: lowest index written last
            pred[d[j] == m] = j
    else:
        pred = z32.argmax(axis=1)
    d -= m
    e = np.exp(d)
    s = np.add.reduce(e, axis=0)
    log_s = np.log(s)
    e /= s  # e is now p
    cols = np.arange(n)
    ys = np.where(labelled, y, 0)
    loss = log_s - d[ys, cols]
    entropy = log_s - np.einsum("ij,ij->j", e, d)
    e[ys, cols] -= 1.0
    brier = np.einsum("ij,ij->j", e, e)
    conf = 1.0 / s
    return (
        loss,
        (pred == ys).astype(np.float64),
        brier,
        conf,
        entropy,
        np.searchsorted(inner_edges(), conf, side="left"),
    )


def codes(column):
    """Small integer codes and their values for a (chunked) string column."""
    import pyarrow.compute as pc

    values = pc.unique(column).sort()
    return pc.index_in(column, value_set=values).to_numpy(), values.to_pylist()


def rollup_arrow_numpy(ctx):
    """pyarrow.parquet.read_table straight to numpy; one pass of numpy per block of rows."""
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    def run():
        t = pq.read_table(
            ctx.scan if "*" not in ctx.scan else ctx.scan.rsplit("/", 1)[0],
            columns=["ts", "model_version", "segment", "logits", "label"],
        )
        week = week_start_days(t["ts"].cast("int64").to_numpy())
        w0 = int(week.min())
        wcode = (week - w0) // 7
        vcode, versions = codes(t["model_version"])
        scode, segments = codes(t["segment"])
        nw, nv, ns = int(wcode.max()) + 1, len(versions), len(segments)
        group = (wcode * nv + vcode) * ns + scode
        label = t["label"]
        labelled = label.is_valid().to_numpy()
        y = pc.fill_null(label, 0).to_numpy().astype(np.int64)
        sums = Sums(nw * nv * ns)
        block = max(256, (1 << 20) // ctx.classes)
        start = 0
        for chunk in t["logits"].chunks:
            n = len(chunk)
            flat = chunk.values.to_numpy()
            off = chunk.offsets[0].as_py()
            z = flat[off : off + n * ctx.classes].reshape(n, ctx.classes)
            for a in range(0, n, block):
                b = min(n, a + block)
                rows = slice(start + a, start + b)
                loss, correct, brier, conf, ent, bins = block_stats(z[a:b], y[rows], labelled[rows])
                sums.add(group[rows] * BINS + bins, labelled[rows], loss, correct, brier, conf, ent)
            start += n

        def keys(g):
            g_w, rest = divmod(int(g), nv * ns)
            v, s = divmod(rest, ns)
            day = np.datetime64(w0 + 7 * g_w, "D")
            return str(day), versions[v], segments[s]

        return sums.finish(keys)

    return run


def rollup_pandas(ctx):
    """pandas' default read_parquet, np.stack of the list column, scipy per chunk, groupby."""
    import pandas as pd
    from scipy import special

    def run():
        df = pd.read_parquet(ctx.scan if "*" not in ctx.scan else ctx.scan.rsplit("/", 1)[0])
        z = np.stack(df["logits"].to_numpy())
        labelled = df["label"].notna().to_numpy()
        y = df["label"].fillna(0).to_numpy().astype(np.int64)
        stats = {k: np.empty(len(df)) for k in ("loss", "correct", "brier", "conf", "entropy")}
        step = max(256, (1 << 20) // ctx.classes)
        for a in range(0, len(df), step):
            zc = z[a : a + step].astype(np.float64)
            yc = y[a : a + step]
            rows = np.arange(len(zc))
            logp = special.log_softmax(zc, axis=1)
            p = np.exp(logp)
            stats["loss"][a : a + step] = -logp[rows, yc]
            stats["correct"][a : a + step] = zc.argmax(axis=1) == yc
            onehot = np.zeros_like(p)
            onehot[rows, yc] = 1.0
            stats["brier"][a : a + step] = ((p - onehot) ** 2).sum(axis=1)
            stats["conf"][a : a + step] = p.max(axis=1)
            stats["entropy"][a : a + step] = special.entr(p).sum(axis=1)
        frame = pd.DataFrame(stats)
        for k in ("loss", "correct", "brier"):
            frame.loc[~labelled, k] = np.nan
        frame["period"] = df["ts"].dt.to_period("W").dt.start_time.dt.strftime("%Y-%m-%d")
        frame["model_version"] = df["model_version"]
        frame["segment"] = df["segment"]
        frame["bin"] = np.searchsorted(inner_edges(), frame["conf"].to_numpy(), side="left")
        frame["conf_l"] = frame["conf"].where(labelled)
        keys = list(KEYS)
        out = frame.groupby(keys).agg(
            rows=("conf", "size"),
            labelled_rows=("loss", "count"),
            cross_entropy=("loss", "mean"),
            cross_entropy_se=("loss", "sem"),
            accuracy=("correct", "mean"),
            brier=("brier", "mean"),
            mean_confidence=("conf", "mean"),
            mean_entropy=("entropy", "mean"),
        )
        per_bin = frame.groupby(keys + ["bin"])[["correct", "conf_l"]].sum()
        gap = (per_bin["correct"] - per_bin["conf_l"]).abs().groupby(level=keys).sum()
        out["ece"] = gap / out["labelled_rows"]
        out = out.reset_index()
        return [
            {k: (v.item() if hasattr(v, "item") else v) for k, v in r.items()}
            for r in out[list(KEYS + METRICS)].to_dict("records")
        ]

    return run


# --- Incremental partials ------------------------------------------------------------


def partials_params(ctx) -> dict:
    return {
        "logs": ctx.scan,
        "segment_cols": "segment",
        "bins": str(BINS),
        "time_col": "ts",
        "scores_col": "logits",
        "label_col": "label",
        "version_col": "model_version",
        "scores_kind": "logits",
    }


def rollup_from_store(con, store) -> list:
    from dbmetrics.queries import run_query

    return rows_of(
        run_query(
            con, "rollup", {"partials": str(store), "segment_cols": "segment", "grain": "week"}
        )
    )


def partials_build(ctx):
    """Build a partials store from the whole log (every day), then roll it up."""
    import shutil
    from pathlib import Path

    from dbmetrics import partials

    con = connect(ctx, True)
    store = Path(ctx.temp_dir) / "bench_store_build"

    def run():
        shutil.rmtree(store, ignore_errors=True)
        partials.update(con, partials_params(ctx), store)
        return rollup_from_store(con, store)

    return run


def partials_one_day(ctx):
    """The weekly job once the store exists: recompute the newest day only (the time filter
    skips every other row group), then roll the store up. Setup builds the store, untimed."""
    from pathlib import Path

    from dbmetrics import partials

    con = connect(ctx, True)
    store = Path(ctx.temp_dir) / "bench_store_update"
    partials.update(con, partials_params(ctx), store, full=True)

    last = partials.describe(store)["last_day"]

    def run():
        partials.update(con, partials_params(ctx), store, since=dt.date.fromisoformat(last))
        return rollup_from_store(con, store)

    return run


LATE_DAYS = 7


def quoted_path(path) -> str:
    """A path as a SQL string literal (COPY ... TO takes no bound value)."""
    return "'" + str(path).replace("'", "''") + "'"


def partials_late_labels(ctx):
    """Labels arrive for 7 scattered old days: the update finds them by their label
    fingerprints and recomputes those 7 days only, then rolls the store up. Setup (untimed)
    writes a copy of the log whose labels on those days are NULL and builds a store on it;
    each run starts from a copy of that store (a few MB, copied inside the timed run)."""
    import glob
    import shutil
    from pathlib import Path

    from dbmetrics import partials

    con = connect(ctx, True)
    temp = Path(ctx.temp_dir)
    days = con.execute(
        "SELECT DISTINCT CAST(ts AS DATE) AS d FROM read_parquet($p) ORDER BY d", {"p": ctx.scan}
    ).fetchall()
    step = len(days) // (LATE_DAYS + 1)
    late = [days[step * (i + 1)][0] for i in range(LATE_DAYS)]
    unlabelled = temp / "bench_unlabelled"
    unlabelled.mkdir(exist_ok=True)
    for i, part in enumerate(sorted(glob.glob(ctx.scan))):
        con.execute(
            "COPY (SELECT * REPLACE (CASE WHEN CAST(ts AS DATE) IN (SELECT unnest($late)) "
            "THEN NULL ELSE label END AS label) FROM read_parquet($part)) TO "
            + quoted_path(unlabelled / f"part-{i:03d}.parquet")
            + " (FORMAT parquet)",
            {"late": late, "part": part},
        )
    pristine = temp / "bench_store_late_pristine"
    shutil.rmtree(pristine, ignore_errors=True)
    partials.update(con, {**partials_params(ctx), "logs": str(unlabelled / "*.parquet")}, pristine)
    store = temp / "bench_store_late"

    def run():
        shutil.rmtree(store, ignore_errors=True)
        shutil.copytree(pristine, store)
        done = partials.update(con, partials_params(ctx), store)
        assert done["days_written"] == LATE_DAYS, done
        return rollup_from_store(con, store)

    return run


# name -> (factory, kind, what it is); a factory returns a zero-argument run function
# (setup such as connecting and registering happens outside the timed runs).
METHODS = {
    "floor": (floor, "floor", "SELECT sum(list_sum(logits)): DuckDB scanning the scores"),
    "rollup": (rollup_template, "rollup", "dbmetrics' rollup (compiled route with numba)"),
    "rollup_numpy": (rollup_numpy_engine, "rollup", "dbmetrics' rollup without numba"),
    "rollup_udf_sql": (rollup_udf_sql, "rollup", "hand SQL over logit_row_stats (no template)"),
    "sql_lambda": (rollup_sql_lambda, "rollup", "hand DuckDB SQL, list lambdas, list_max hoisted"),
    "arrow_numpy": (rollup_arrow_numpy, "rollup", "pyarrow read_table -> numpy blocks (float64)"),
    "pandas_scipy": (rollup_pandas, "rollup", "pandas read_parquet + np.stack + scipy + groupby"),
    "ce_udf": (ce_udf, "ce", "avg(cross_entropy(logits, label))"),
    "ce_sql": (ce_sql, "ce", "avg of the SQL cross-entropy (b1)"),
    "ce_macro": (ce_macro, "ce", "avg(cross_entropy(logits, label)), the SQL macro"),
    "rollup_sql_state": (rollup_sql_state, "rollup", "rollup as plain SQL: state in DuckDB SQL"),
    "partials_build": (partials_build, "rollup", "dbmetrics partials: build the store, roll it up"),
    "partials_1day": (partials_one_day, "rollup", "partials update of the newest day + roll-up"),
    "partials_7late": (
        partials_late_labels,
        "rollup",
        "partials update after labels arrived for 7 scattered old days + roll-up",
    ),
}
