"""The partials store under late labels, concurrency, retention, odd timestamps and hostile
files.

Specification: after every update the store rolls up to the same table as a scan of the logs
(or the update refuses with one clear line); an update recomputes exactly the days whose
rows or labels changed; a stored day is never lost because its source vanished; two writers
never lose each other's work; nothing outside the store's own files is ever touched.
"""

import datetime as dt
import json
import os
import threading

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest

from dbmetrics import partials
from dbmetrics.demo import generate
from dbmetrics.errors import DbmetricsError
from dbmetrics.partials.store import Publisher, Store
from dbmetrics.queries import run_query
from dbmetrics.queries.state_kinds import KIND_NAMES

START = dt.datetime(2026, 1, 5)


@pytest.fixture(scope="module")
def demo_tables(tmp_path_factory):
    """Ten weeks of the demo log (invented data): logs and a label table as Arrow tables."""
    paths = generate(tmp_path_factory.mktemp("demo"), rows_per_day=25, weeks=10)
    logs = pq.read_table(paths["logs"])
    logs = logs.drop_columns([c for c in ("month",) if c in logs.column_names])
    return logs, pq.read_table(paths["labels"])


def write(table: pa.Table, path) -> str:
    path.parent.mkdir(parents=True, exist_ok=True)
    pq.write_table(table, path)
    return str(path)


def store_equals_scan(con, same_table, params: dict, store, queries=("rollup",)) -> None:
    for query in queries:
        same_table(
            run_query(con, query, {**params, "grain": "day"}),
            run_query(con, query, {"partials": str(store), "grain": "day"}),
        )


def before(table: pa.Table, column: str, cut: dt.datetime) -> pa.Table:
    return table.filter(pc.less(table[column], pa.scalar(cut, pa.timestamp("us"))))


@pytest.mark.slow
@pytest.mark.parametrize("inline", [False, True])
def test_weekly_updates_with_labels_1_to_60_days_late_equal_the_scan(
    same_table, con, demo_tables, tmp_path, inline
):
    logs, labels = demo_tables
    rng = np.random.default_rng(17)
    ts = pc.cast(logs["ts"], pa.int64()).to_numpy()
    arrival = ts + rng.integers(1, 61, len(ts)) * 86_400_000_000
    by_id = dict(zip(labels["prediction_id"].to_pylist(), labels["label"].to_pylist()))
    label = pa.array([by_id.get(i) for i in logs["prediction_id"].to_pylist()], pa.int32())
    store, written = tmp_path / "store", []
    for week in range(1, 20):  # ten weeks of logs, then nine more weeks of labels
        cut = START + dt.timedelta(days=7 * week)
        cut_us = int((cut - dt.datetime(1970, 1, 1)).total_seconds() * 1e6)
        mask = ts < cut_us
        seen, known = logs.filter(pa.array(mask)), pa.array(arrival[mask] < cut_us)
        if inline:
            seen_label = pc.if_else(known, label.filter(pa.array(mask)), None)
            params = {"logs": write(seen.append_column("label", seen_label), tmp_path / "l.pq")}
        else:
            ids = seen["prediction_id"].filter(known)
            got = labels.filter(pc.is_in(labels["prediction_id"], ids))
            week_rows = logs.filter(pa.array(mask & (ts >= cut_us - 7 * 86_400_000_000)))
            if week_rows.num_rows:
                write(week_rows, tmp_path / f"logs/week{week}.parquet")
            params = {
                "logs": str(tmp_path / "logs"),
                "labels": write(got, tmp_path / "labels.parquet"),
                "id_col": "prediction_id",
            }
        summary = partials.update(con, params, store)
        assert summary["days_stale"] == 0
        store_equals_scan(con, same_table, params, store, ("rollup", "calibration"))
        written.append(summary["days_written"])
    assert 0 < max(written[10:]) < 70 and written[-1] == 0  # only days whose labels arrived


def test_an_update_recomputes_exactly_the_days_whose_labels_changed(
    con, demo_tables, tmp_path, same_table
):
    logs, labels = demo_tables
    params = {
        "logs": write(logs, tmp_path / "logs.parquet"),
        "labels": write(labels.slice(0, 600), tmp_path / "labels.parquet"),
        "id_col": "prediction_id",
    }
    store = tmp_path / "store"
    assert partials.update(con, params, store)["days_written"] == 70
    assert partials.update(con, params, store)["days_written"] == 0
    ids = logs.filter(pc.is_in(pc.strftime(logs["ts"], "%Y-%m-%d"), pa.array(["2026-01-20"])))
    late = labels.filter(pc.is_in(labels["prediction_id"], ids["prediction_id"]))
    write(pa.concat_tables([labels.slice(0, 600), late]), tmp_path / "labels.parquet")
    again = partials.update(con, params, store)
    assert again["days_written"] == 1
    store_equals_scan(con, same_table, params, store)


def test_a_relabel_bound_reports_the_days_it_leaves_stale(con, demo_tables, tmp_path):
    logs, labels = demo_tables
    path = tmp_path / "labels.parquet"
    params = {
        "logs": write(logs, tmp_path / "logs.parquet"),
        "labels": write(labels.slice(0, 100), path),
        "id_col": "prediction_id",
    }
    store = tmp_path / "store"
    partials.update(con, params, store)
    write(labels, path)
    warned = []
    summary = partials.update(con, params, store, relabel_days=7, warn=warned.append)
    assert summary["days_stale"] > 0 and "outside --relabel-days 7" in warned[0]
    shown = partials.describe(store)
    assert "not recomputed" in shown["stale_days"] and "2026-01-09" in shown["stale_days"]
    assert partials.update(con, params, store)["days_stale"] == 0
    assert partials.describe(store)["stale_days"] is None


def test_overlapping_updates_wait_for_the_lock_and_both_land(con, demo_tables, tmp_path):
    logs, labels = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    waited, done = [], []
    first = partials.Update(store, params, full=True)
    with first:
        first.compute(con)

        def second():
            import dbmetrics

            own = dbmetrics.connect()
            done.append(partials.update(own, params, store, waiting=waited.append))
            own.close()

        thread = threading.Thread(target=second)
        thread.start()
        thread.join(1.0)
        assert waited and not done  # the second update waits for the first
        first.publish()
    thread.join(60)
    assert done[0]["generation"] == 3
    manifest = Store(store).manifest()
    assert not Store(store).missing_files(manifest)
    assert sum(run_query(con, "rollup", {"partials": str(store)})["rows"].to_pylist()) == 1750


def test_a_publish_refuses_when_another_writer_moved_the_generation(con, demo_tables, tmp_path):
    logs, _ = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    before = (store / "manifest.json").read_text()
    day = partials.describe(store)["first_day"]
    table = pq.read_table(store / Store(store).manifest()["days"][day]["files"]["state"])
    with Publisher(Store(store), base_generation=0) as pub:  # started before the build
        pub.stage("state", day, table)
        with pytest.raises(DbmetricsError, match="moved from generation 0 to 1"):
            pub.commit({day: {"files": {}}}, {})
    assert (store / "manifest.json").read_text() == before
    assert not list((store / ".staging").iterdir())


def test_a_publish_by_another_writer_replaces_its_days(con, demo_tables, tmp_path, same_table):
    logs, _ = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    s = Store(store)
    manifest = s.manifest()
    days = {k: dict(e) for k, e in manifest["days"].items()}
    day = sorted(days)[3]
    with Publisher(s, manifest["generation"]) as pub:
        for kind in KIND_NAMES:
            copy = tmp_path / f"{kind}.parquet"
            pq.write_table(pq.read_table(store / days[day]["files"][kind]), copy)
            pub.stage_file(kind, day, copy)
        days[day] = {"files": {}, "fingerprint": days[day]["fingerprint"]}
        assert pub.commit(days, manifest["column_roles"], logs=manifest["logs"]) == 2
    assert s.manifest()["days"][day]["files"]["state"] == f"state/{day}.2.parquet"
    store_equals_scan(con, same_table, params, store)


def test_abandoned_staging_and_temp_files_are_removed_under_the_lock(con, demo_tables, tmp_path):
    logs, _ = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    dead = store / ".staging" / "wdead"
    dead.mkdir()
    (dead / "state.0123.tmp").write_bytes(b"x" * 1000)
    (store / ".manifest.json.4242.tmp").write_text("{}")  # format 1's temp name
    alive = Publisher(Store(store), 1)  # a writer still staging keeps its files
    alive.stage("state", "2026-01-05", pq.read_table(Store(store).files("state")[0]))
    partials.update(con, params, store)
    assert not dead.exists() and not (store / ".manifest.json.4242.tmp").exists()
    assert len(list(alive.folder.iterdir())) == 2
    alive.close()


def test_one_far_future_row_does_not_freeze_the_store(con, demo_tables, tmp_path, same_table):
    logs, _ = demo_tables
    early = before(logs, "ts", START + dt.timedelta(days=14))
    future = early.slice(0, 1).set_column(
        1, "ts", pa.array([dt.datetime(2099, 1, 1)], pa.timestamp("us"))
    )
    params = {"logs": str(tmp_path / "logs"), "label_col": ""}
    write(pa.concat_tables([early, future]), tmp_path / "logs/a.parquet")
    store = tmp_path / "store"
    warned = []
    partials.update(con, params, store, today=dt.date(2026, 1, 19), warn=warned.append)
    assert "dated after 2026-01-20" in warned[-1] and "2099-01-01" in warned[-1]
    write(
        logs.filter(pc.invert(pc.is_in(logs["prediction_id"], early["prediction_id"]))),
        tmp_path / "logs/b.parquet",
    )
    summary = partials.update(con, params, store, relabel_days=3, today=dt.date(2026, 3, 20))
    assert summary["days_written"] == 56
    store_equals_scan(con, same_table, params, store)


def test_a_vanished_source_never_drops_a_stored_day(con, demo_tables, tmp_path, same_table):
    logs, _ = demo_tables
    first, rest = before(logs, "ts", START + dt.timedelta(days=7)), logs.slice(175)
    whole = {"logs": write(logs, tmp_path / "whole.parquet"), "label_col": ""}
    params = {"logs": str(tmp_path / "logs"), "label_col": ""}
    write(first, tmp_path / "logs/old.parquet")
    write(rest, tmp_path / "logs/new.parquet")
    store = tmp_path / "store"
    partials.update(con, params, store)
    (tmp_path / "logs/old.parquet").unlink()  # retention
    warned = []
    partials.update(con, params, store, warn=warned.append)
    assert "7 stored day(s) lost rows" in warned[0] and "--drop-vanished" in warned[0]
    store_equals_scan(con, same_table, whole, store)  # nothing lost
    assert "gone from the logs" in partials.describe(store)["stale_days"]
    partials.update(con, params, store, drop_vanished=True)
    store_equals_scan(con, same_table, params, store)  # explicitly follows the logs


def test_a_folder_that_is_not_a_store_is_refused_and_foreign_files_are_kept(
    con, demo_tables, tmp_path
):
    logs, _ = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    folder = tmp_path / "mine"
    (folder / "state").mkdir(parents=True)
    (folder / "state" / "notes.txt").write_text("mine")
    with pytest.raises(DbmetricsError, match="not empty and holds no partials store"):
        partials.update(con, params, folder)
    assert (folder / "state" / "notes.txt").read_text() == "mine"
    store = tmp_path / "store"
    partials.update(con, params, store)
    (store / "state" / "2026-01-05.1.parquet.bak").write_text("mine")
    (store / "state" / "2026-01-06.9.parquet").write_text("mine")
    partials.update(con, params, store, full=True)
    partials.update(con, params, store, full=True)
    assert (store / "state" / "2026-01-05.1.parquet.bak").read_text() == "mine"
    assert (store / "state" / "2026-01-06.9.parquet").read_text() == "mine"


def test_planted_symlinks_are_never_written_through(con, demo_tables, tmp_path):
    logs, _ = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    victim = tmp_path / "victim.txt"
    victim.write_text("precious")
    store = tmp_path / "store"
    partials.update(con, params, store)
    for pid in range(os.getpid() - 2, os.getpid() + 3):
        (store / f".manifest.json.{pid}.tmp").symlink_to(victim)
    (store / ".pending.json").symlink_to(victim)
    partials.update(con, params, store, full=True)
    assert victim.read_text() == "precious"
    other = tmp_path / "other"
    other.mkdir()
    planted = tmp_path / "planted"
    (planted / "class_state").mkdir(parents=True)
    (planted / "state").symlink_to(other)
    (planted / "manifest.json").write_text((store / "manifest.json").read_text())
    with pytest.raises(DbmetricsError, match="not a plain folder"):
        partials.update(con, params, planted, full=True)
    assert not list(other.iterdir())


def test_a_query_refuses_column_roles_the_store_was_not_built_with(con, demo_tables, tmp_path):
    logs, labels = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    with pytest.raises(DbmetricsError, match="label_col=None; this query gives label_col='y'"):
        run_query(con, "rollup", {"partials": str(store), "label_col": "y"})
    with pytest.raises(DbmetricsError, match="scores_kind='logits'; this query gives"):
        run_query(con, "rollup", {"partials": str(store), "scores_kind": "probs"})
    with pytest.raises(DbmetricsError, match="labels=None"):
        run_query(
            con,
            "rollup",
            {"partials": str(store), "labels": write(labels, tmp_path / "l.parquet")},
        )
    same = run_query(con, "rollup", {"partials": str(store), "label_col": "", **params})
    assert sum(same["rows"].to_pylist()) == 1750


def test_null_out_of_range_and_nanosecond_times_are_stored(con, demo_tables, tmp_path, same_table):
    logs, _ = demo_tables
    ts = logs["ts"].to_pylist()
    ts[:10] = [None] * 10
    ns = pc.cast(pa.array(ts, pa.timestamp("us")), pa.timestamp("ns"))
    odd = logs.set_column(1, "ts", ns)
    params = {"logs": write(odd, tmp_path / "ns.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    assert "null" in Store(store).manifest()["days"]
    store_equals_scan(con, same_table, params, store)
    far = logs.set_column(
        1,
        "ts",
        pa.array(
            [dt.datetime(1, 1, 1)] * 5 + ts[5:-5] + [dt.datetime(9999, 12, 31, 12)] * 5,
            pa.timestamp("us"),
        ),
    )
    params = {"logs": write(far, tmp_path / "far.parquet"), "label_col": ""}
    partials.update(con, params, tmp_path / "far")
    assert {"0001-01-01", "9999-12-31"} <= set(Store(tmp_path / "far").manifest()["days"])
    store_equals_scan(con, same_table, params, tmp_path / "far")


def test_a_damaged_manifest_is_one_clear_line_and_missing_files_are_repaired(
    con, demo_tables, tmp_path, same_table
):
    logs, _ = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    good = json.loads((store / "manifest.json").read_text())
    cases = [
        ({k: v for k, v in good.items() if k != "generation"}, "`generation` must be"),
        ({**good, "days": {"2026-13-40": good["days"]["2026-01-05"]}}, "not a day key"),
        ({**good, "days": {"2026-01-05": {"files": {"state": "../x"}}}}, "not a state/"),
        ({**good, "format": "dbmetrics-partials/9"}, "written by a newer dbmetrics"),
    ]
    for manifest, message in cases:
        (store / "manifest.json").write_text(json.dumps(manifest))
        with pytest.raises(DbmetricsError, match=message) as info:
            partials.describe(store)
        assert "\n" not in str(info.value) and str(store) in str(info.value)
    (store / "manifest.json").write_text(json.dumps(good))
    lost = good["days"]["2026-01-07"]["files"]["state"]
    (store / lost).unlink()
    assert lost in partials.describe(store)["missing_files"]
    with pytest.raises(DbmetricsError, match="gone"):
        run_query(con, "rollup", {"partials": str(store)})
    assert partials.update(con, params, store)["days_written"] == 1
    store_equals_scan(con, same_table, params, store)


def test_the_time_zone_is_recorded_and_cuts_the_days(con, demo_tables, tmp_path):
    logs, _ = demo_tables
    zoned = logs.set_column(1, "ts", pc.assume_timezone(logs["ts"], "UTC"))
    params = {"logs": write(zoned, tmp_path / "logs.parquet"), "label_col": ""}
    con.execute("SET TimeZone = 'Asia/Tokyo'")  # the machine's zone must not matter
    partials.update(con, params, tmp_path / "utc")
    partials.update(con, {**params, "timezone": "America/Los_Angeles"}, tmp_path / "la")
    utc, la = (Store(tmp_path / s).manifest() for s in ("utc", "la"))
    assert utc["column_roles"]["timezone"] == "UTC" and min(utc["days"]) == "2026-01-05"
    assert min(la["days"]) == "2026-01-04"
    with pytest.raises(DbmetricsError, match="timezone='UTC', this update gives"):
        partials.update(con, {**params, "timezone": "Europe/Paris"}, tmp_path / "utc")


def test_a_format_1_store_is_read_and_migrated(con, demo_tables, tmp_path, same_table):
    logs, _ = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    manifest = json.loads((store / "manifest.json").read_text())
    old = {
        "format": "dbmetrics-partials/1",
        "generation": 1,
        "logs": manifest["logs"],
        "column_roles": {k: v for k, v in manifest["column_roles"].items() if k != "timezone"},
        "days": {k: e["files"] for k, e in manifest["days"].items()},
    }
    (store / "manifest.json").write_text(json.dumps(old))
    store_equals_scan(con, same_table, params, store)
    assert partials.update(con, params, store)["days_written"] == 70
    assert Store(store).manifest()["format"] == "dbmetrics-partials/4"


def test_a_format_3_store_answers_without_brier_standard_errors_until_migrated(
    con, demo_tables, tmp_path, same_table
):
    """Format 3 wrote STATE without sum_brier_sq. Such a store answers with the Brier standard
    errors NULL; the next update recomputes its days into format 4, and a day whose rows left
    the logs keeps its format-3 file: only the periods holding it lose the standard errors."""
    logs, labels = demo_tables
    week = pc.less(logs["ts"], pa.scalar(START + dt.timedelta(days=7), pa.timestamp("us")))
    write(logs.filter(week), tmp_path / "logs" / "first.parquet")
    write(logs.filter(pc.invert(week)), tmp_path / "logs" / "rest.parquet")
    labelled = {"labels": write(labels, tmp_path / "labels.parquet"), "id_col": "prediction_id"}
    params = {"logs": str(tmp_path / "logs"), **labelled}
    everything = {"logs": write(logs, tmp_path / "all.parquet"), **labelled}
    store = tmp_path / "store"
    partials.update(con, params, store)
    manifest = json.loads((store / "manifest.json").read_text())
    for entry in manifest["days"].values():
        path = store / entry["files"]["state"]
        pq.write_table(pq.read_table(path).drop_columns(["sum_brier_sq"]), path)
    manifest["format"] = "dbmetrics-partials/3"
    (store / "manifest.json").write_text(json.dumps(manifest))
    se = ("brier_se", "brier_low", "brier_high", "brier_multiclass_se")

    def rollups():
        scan = run_query(con, "rollup", everything)
        kept = run_query(con, "rollup", {"partials": str(store)})
        return scan, kept

    scan, old = rollups()
    same_table(scan.drop_columns(list(se)), old.drop_columns(list(se)))
    assert all(old[c].null_count == old.num_rows for c in se)
    for query in ("calibration", "class_metrics", "drift"):  # the other kinds kept format 3's
        same_table(run_query(con, query, params), run_query(con, query, {"partials": str(store)}))

    (tmp_path / "logs" / "first.parquet").unlink()  # retention
    summary = partials.update(con, params, store)
    assert summary["days_written"] == 63 and summary["days_stale"] == 7
    assert Store(store).manifest()["format"] == "dbmetrics-partials/4"
    scan, migrated = rollups()  # the stored first week still answers as the logs did
    first = pc.equal(migrated["period"], pa.scalar(START.date()))
    same_table(scan.filter(pc.invert(first)), migrated.filter(pc.invert(first)))
    same_table(
        scan.filter(first).drop_columns(list(se)), migrated.filter(first).drop_columns(list(se))
    )
    assert all(migrated.filter(first)[c].null_count == pc.sum(first).as_py() for c in se)


def test_the_cli_reuses_the_recorded_roles_and_ctrl_c_publishes_nothing(
    demo_tables, tmp_path, monkeypatch
):
    from click.testing import CliRunner

    from dbmetrics.cli.main import cli

    logs, labels = demo_tables
    store = str(tmp_path / "store")
    sets = {
        "logs": write(logs, tmp_path / "logs.parquet"),
        "labels": write(labels, tmp_path / "labels.parquet"),
        "id_col": "prediction_id",
    }
    args = [a for k, v in sets.items() for a in ("--set", f"{k}={v}")]
    runner = CliRunner()
    assert runner.invoke(cli, ["partials", "update", "--store", store, *args]).exit_code == 0
    again = runner.invoke(cli, ["partials", "update", "--store", store, "--full"])
    assert again.exit_code == 0, again.output
    manifest = (tmp_path / "store" / "manifest.json").read_text()
    calls = []

    def interrupted(self, *args):
        calls.append(args)
        if len(calls) == 3:
            raise KeyboardInterrupt

    monkeypatch.setattr(Publisher, "stage", interrupted)
    stopped = runner.invoke(cli, ["partials", "update", "--store", store, "--full"])
    assert stopped.exit_code == 130 and "Traceback" not in stopped.output
    assert (tmp_path / "store" / "manifest.json").read_text() == manifest
    assert not list((tmp_path / "store" / ".staging").iterdir())


def test_a_day_without_a_state_kind_is_refused_by_queries_reading_it_and_filled_by_an_update(
    con, demo_tables, tmp_path, same_table
):
    """A kind added to STATE_KINDS after a store was written: its days lack that file."""
    logs, _ = demo_tables
    params = {"logs": write(logs, tmp_path / "logs.parquet"), "label_col": ""}
    store = tmp_path / "store"
    partials.update(con, params, store)
    manifest = json.loads((store / "manifest.json").read_text())
    del manifest["days"]["2026-01-06"]["files"]["class_state"]
    (store / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(DbmetricsError, match="needs the partials store's {{class_state}}"):
        run_query(con, "drift", {"partials": str(store)})
    run_query(con, "calibration", {"partials": str(store)})  # reads no class state: answers
    assert partials.update(con, params, store)["days_written"] == 1
    store_equals_scan(con, same_table, params, store)
