"""Period filters (`run --since/--until/--last`, `run_query(periods=...)`): which periods a
scheduled run shows, and that --fail-on-flag judges only those."""

import csv
import datetime as dt
import io
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

import dbmetrics
from dbmetrics.cli.main import cli
from dbmetrics.errors import DbmetricsError
from dbmetrics.queries import periods, run_query
from dbmetrics.queries.periods import keep
from dbmetrics.queries.render import rendered

ROOT = Path(__file__).resolve().parents[1]
PROJECT = ROOT / "demo_parquet" / "dbmetrics.toml"
D = dt.date


@pytest.fixture(scope="module")
def con():
    return dbmetrics.connect()


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    """Ten weeks from Monday 2026-01-05, 30 rows a day, two versions, a region."""
    rng = np.random.default_rng(5)
    n = 70 * 30
    days = np.repeat(np.arange(70), 30)
    path = tmp_path_factory.mktemp("periods") / "logs.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": np.datetime64("2026-01-05") + days.astype("timedelta64[D]"),
                "model_version": rng.choice(["v1", "v2"], n),
                "region": rng.choice(["a", "b"], n),
                "logits": pa.array(list(rng.normal(size=(n, 3))), pa.list_(pa.float64())),
                "label": rng.integers(0, 3, n),
            }
        ),
        path,
    )
    return str(path)


def shown(con, logs, query="rollup", **chosen) -> list:
    params = {"logs": logs, **chosen.pop("params", {})}
    table = run_query(con, query, params, periods=periods(**chosen))
    return sorted({r["period"] for r in table.to_pylist()})


def weeks(first: D, count: int) -> list:
    return [first + dt.timedelta(weeks=i) for i in range(count)]


def test_since_and_until_keep_the_periods_whose_first_day_lies_between(con, logs):
    assert shown(con, logs) == weeks(D(2026, 1, 5), 10)
    # 2026-01-14 is a Wednesday: its week started before `since` and is left out
    assert shown(con, logs, since="2026-01-14", until="2026-02-02") == weeks(D(2026, 1, 19), 3)
    assert shown(con, logs, until=D(2026, 1, 12)) == weeks(D(2026, 1, 5), 2)
    assert shown(con, logs, since="2026-03-10") == []


def test_last_counts_calendar_periods_back_from_until_or_the_latest(con, logs):
    assert shown(con, logs, last=1) == [D(2026, 3, 9)]
    assert shown(con, logs, last="3", until="2026-02-04") == weeks(D(2026, 1, 19), 3)
    assert shown(con, logs, last=4, since="2026-02-23") == weeks(D(2026, 2, 23), 3)
    # a week after the data: nothing, not the last week that has rows
    assert shown(con, logs, last=1, until="2026-03-22") == []
    month = {"grain": "month"}
    assert shown(con, logs, last=2, params=month) == [D(2026, 2, 1), D(2026, 3, 1)]
    assert shown(con, logs, last=12, until="2026-01-31", params=month) == [D(2026, 1, 1)]
    assert shown(con, logs, last=3, until="2026-01-06", params={"grain": "day"}) == [
        D(2026, 1, 4) + dt.timedelta(days=i) for i in range(1, 3)
    ]


def test_periods_are_the_days_of_the_timezone(con, tmp_path):
    """A prediction at 23:30 UTC on Sunday 2026-01-11 is Monday in Tokyo (UTC+9)."""
    path = tmp_path / "zoned.parquet"
    ts = pa.array(
        [dt.datetime(2026, 1, 11, 23, 30, tzinfo=dt.timezone.utc)] * 2, pa.timestamp("us", "UTC")
    )
    logits = pa.array([[2.0, 0.0], [0.0, 2.0]], pa.list_(pa.float64()))
    pq.write_table(pa.table({"ts": ts, "model_version": ["v1"] * 2, "logits": logits}), path)
    params = {"logs": str(path), "label_col": ""}
    since = periods(since="2026-01-12")
    assert run_query(con, "rollup", params, periods=since).num_rows == 0
    tokyo = run_query(con, "rollup", {**params, "timezone": "Asia/Tokyo"}, periods=since)
    assert tokyo["period"].to_pylist() == [D(2026, 1, 12)]


@pytest.fixture(scope="module")
def zoned(tmp_path_factory):
    """Ten weeks of predictions at any hour (TIMESTAMPTZ), so days cut in a time zone move."""
    rng = np.random.default_rng(8)
    n = 4000
    start = dt.datetime(2026, 1, 5, tzinfo=dt.timezone.utc)
    hours = np.sort(rng.integers(0, 70 * 24, n))
    path = tmp_path_factory.mktemp("zoned") / "logs.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array(
                    [start + dt.timedelta(hours=int(h), minutes=30) for h in hours],
                    pa.timestamp("us", "UTC"),
                ),
                "model_version": rng.choice(["v1", "v2"], n),
                "logits": pa.array(list(rng.normal(size=(n, 3))), pa.list_(pa.float64())),
                "label": rng.integers(0, 3, n),
            }
        ),
        path,
    )
    return str(path)


def same_rows(mine: list, theirs: list) -> None:
    """Equal rows; floats to the last digits (sums in another order)."""
    assert [r.keys() for r in mine] == [r.keys() for r in theirs]
    for a, b in zip(mine, theirs, strict=True):
        for key, value in a.items():
            if isinstance(value, float):
                assert value == pytest.approx(b[key], rel=1e-9, nan_ok=True), key
            else:
                assert value == b[key], key


@pytest.mark.parametrize("zone", ["America/Los_Angeles", "Asia/Tokyo"])
@pytest.mark.parametrize(
    "grain, chosen",
    [
        ("week", {"since": "2026-01-21", "until": "2026-02-09"}),
        ("week", {"until": "2026-02-15", "last": 2}),
        ("day", {"since": "2026-02-01", "until": "2026-02-03"}),
        ("month", {"since": "2026-02-01", "last": 1}),
    ],
)
def test_a_scan_cut_to_the_periods_gives_the_periods_of_the_whole_scan(
    con, zoned, zone, grain, chosen
):
    params = {"logs": zoned, "timezone": zone, "grain": grain, "segment_cols": ""}
    cut = periods(**chosen)
    whole = keep(run_query(con, "rollup", params), cut, grain, "rollup").to_pylist()
    assert whole, "the chosen periods have rows"
    same_rows(run_query(con, "rollup", params, periods=cut).to_pylist(), whole)


def test_the_scan_is_cut_only_for_queries_whose_periods_are_independent(con, logs, zoned):
    chosen = periods(since="2026-01-14", until="2026-02-04", last=2)
    naive = rendered(con, "rollup", {"logs": logs}, periods=chosen).bound
    # weeks of 2026-01-26 and 2026-02-02: from the first's Monday to the Monday after the last
    assert (naive["period_scan_first"], naive["period_scan_after"]) == (
        D(2026, 1, 26),
        D(2026, 2, 9),
    )
    aware = rendered(con, "calibration", {"logs": zoned}, periods=chosen).bound
    # a TIMESTAMPTZ is compared in the session's zone: a day more on each side
    assert (aware["period_scan_first"], aware["period_scan_after"]) == (
        D(2026, 1, 25),
        D(2026, 2, 10),
    )
    assert "period_scan_first" not in rendered(con, "drift", {"logs": logs}, periods=chosen).bound
    assert "period_scan_first" not in rendered(con, "rollup", {"logs": logs}).bound
    # --last alone needs the data's latest period: nothing is cut
    assert (
        "period_scan_first"
        not in rendered(con, "rollup", {"logs": logs}, periods=periods(last=1)).bound
    )


def test_drift_reference_window_is_not_cut_by_since(con, logs):
    params = {"logs": logs, "segment_cols": "region", "min_rows": "20"}
    whole = run_query(con, "drift", params).to_pylist()
    late = run_query(con, "drift", params, periods=periods(since="2026-02-09")).to_pylist()
    same_rows(late, [r for r in whole if r["period"] >= D(2026, 2, 9)])
    assert all(r["ref_scored_rows"] > 0 for r in late)


@pytest.mark.parametrize(
    "chosen, message",
    [
        ({"since": "2026-02-30"}, "since: `2026-02-30` is not a date; expected YYYY-MM-DD"),
        ({"until": "last week"}, "until: `last week` is not a date"),
        ({"last": 0}, "last: expected at least 1 period, got 0"),
        ({"last": "two"}, "last: expected a number of periods, got `two`"),
        ({"since": "2026-03-02", "until": "2026-03-01"}, "since 2026-03-02 is after until"),
    ],
)
def test_bad_periods_are_refused_with_the_reason(chosen, message):
    with pytest.raises(DbmetricsError, match=message):
        periods(**chosen)


def test_a_result_without_periods_cannot_be_cut(con, tmp_path):
    (tmp_path / "total.sql").write_text(
        "-- name: total\n-- summary: One number (a test query without periods).\n"
        "-- example: dbmetrics run total\nSELECT 1 AS n\n"
    )
    assert run_query(con, "total", {}, query_dirs=[str(tmp_path)]).num_rows == 1
    with pytest.raises(DbmetricsError, match="query `total` has no period column"):
        run_query(con, "total", {}, query_dirs=[str(tmp_path)], periods=periods(last=1))


@pytest.fixture
def demo(monkeypatch):
    """`dbmetrics run` from the repository root on the demo project."""
    monkeypatch.chdir(ROOT)
    monkeypatch.setenv("DBMETRICS_PROJECT", str(PROJECT))
    monkeypatch.delenv("DBMETRICS_QUERY_PATH", raising=False)

    def run(*args):
        return CliRunner().invoke(
            cli, ["--quiet", "run", "drift", "--set", "segment_cols=region", *args]
        )

    return run


def test_weekly_cron_exits_3_only_when_the_latest_week_is_flagged(demo):
    """The demo's v2 (from week 9) is over-confident: its weeks are flagged, v1's weeks
    between the reference and week 9 are clean; earlier flags do not count."""
    clean = demo("--until", "2026-03-01", "--last", "1", "-f", "csv", "--fail-on-flag")
    assert clean.exit_code == 0, clean.output
    rows = list(csv.DictReader(io.StringIO(clean.stdout)))
    assert {r["period"] for r in rows} == {"2026-02-23"} and len(rows) == 5
    assert not any(r["flagged"] == "true" for r in rows)
    flagged = demo("--until", "2026-04-26", "--last", "1", "-f", "csv", "--fail-on-flag")
    assert flagged.exit_code == 3, flagged.output
    rows = list(csv.DictReader(io.StringIO(flagged.stdout)))
    assert {r["period"] for r in rows} == {"2026-04-20"}
    # later weeks have flags: without --last the same run would fail
    assert demo("--since", "2026-02-23", "-f", "csv", "--fail-on-flag").exit_code == 3


@pytest.mark.parametrize(
    "args, message",
    [
        (["--since", "2026-13-01"], "since: `2026-13-01` is not a date"),
        (["--last", "0"], "last: expected at least 1 period"),
        (["--since", "2026-04-01", "--until", "2026-03-01"], "since 2026-04-01 is after until"),
    ],
)
def test_run_refuses_bad_periods_in_one_line(demo, args, message):
    result = demo(*args)
    assert result.exit_code == 1
    assert message in result.stderr and "Traceback" not in result.output
