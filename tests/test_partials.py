"""The partials store: per-day additive states that the saved queries roll up instead of logs.

Specification: rolled up from a store, every template returns the same table as the direct
computation (up to float rounding); an update reads only new days and days whose rows or
labels changed;
re-running a day replaces it (no double counting); an interrupted update leaves the previous
store intact; a store answers only for the keys it was built with.
"""

import datetime as dt
import json

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from dbmetrics import partials
from dbmetrics.demo import generate
from dbmetrics.errors import DbmetricsError
from dbmetrics.partials import store as store_module
from dbmetrics.queries import run_query
from dbmetrics.queries.state_kinds import KIND_NAMES


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """Three weeks of the demo log (invented data), labels in a separate table."""
    paths = generate(tmp_path_factory.mktemp("demo"), rows_per_day=60, weeks=3)
    return {"logs": str(paths["logs"]), "labels": str(paths["labels"]), "id_col": "prediction_id"}


@pytest.mark.parametrize(
    "query",
    ["rollup", "calibration", "drift", "class_metrics", "confusion", "class_calibration"],
)
@pytest.mark.parametrize(
    "stored, asked",
    [
        ("region,channel", "region,channel"),
        ("region,channel", "region"),
        ("region,channel", ""),
        ("", ""),
    ],
)
def test_saved_queries_from_a_store_equal_the_direct_computation(
    same_table, con, demo, tmp_path, query, stored, asked
):
    partials.update(con, {**demo, "segment_cols": stored}, tmp_path / "store")
    direct = run_query(con, query, {**demo, "segment_cols": asked})
    rolled = run_query(con, query, {"partials": str(tmp_path / "store"), "segment_cols": asked})
    same_table(direct, rolled)


def test_an_update_recomputes_only_changed_days_and_never_double_counts(
    same_table, con, demo, tmp_path
):
    store = tmp_path / "store"
    first = partials.update(con, demo, store)
    assert first["days_written"] == 21
    again = partials.update(con, demo, store)
    assert again["days_written"] == 0 and again["days_held"] == 21
    forced = partials.update(con, demo, store, since=dt.date(2026, 1, 23))
    assert forced["days_written"] == 3 and forced["days_held"] == 21
    rolled = run_query(con, "rollup", {"partials": str(store)})
    assert sum(rolled.column("rows").to_pylist()) == 21 * 60
    same_table(run_query(con, "rollup", demo), rolled)


def test_new_days_and_late_labels_are_picked_up(same_table, con, tmp_path):
    """A log that grows by a week and whose labels arrive late, as in production."""
    full = generate(tmp_path / "full", rows_per_day=40, weeks=2)
    logs = (
        pq.read_table(full["logs"]).drop_columns(["month"])
        if "month" in pq.read_table(full["logs"]).column_names
        else pq.read_table(full["logs"])
    )
    labels = pq.read_table(full["labels"])
    cut = dt.datetime(2026, 1, 12)
    pq.write_table(logs.filter(pa.compute.less(logs["ts"], cut)), tmp_path / "week1.parquet")
    early = labels.filter(pa.compute.less(labels["labelled_at"], cut))
    pq.write_table(early, tmp_path / "labels.parquet")
    params = {
        "logs": str(tmp_path / "week*.parquet"),
        "labels": str(tmp_path / "labels.parquet"),
        "id_col": "prediction_id",
    }
    partials.update(con, params, tmp_path / "store")
    pq.write_table(
        logs.filter(pa.compute.greater_equal(logs["ts"], cut)), tmp_path / "week2.parquet"
    )
    pq.write_table(labels, tmp_path / "labels.parquet")
    summary = partials.update(con, params, tmp_path / "store")
    assert summary["days_written"] == 14  # the new week, and the old days with new labels
    same_table(
        run_query(con, "rollup", params),
        run_query(con, "rollup", {"partials": str(tmp_path / "store")}),
    )


def test_an_interrupted_update_leaves_the_previous_store(
    same_table, con, demo, tmp_path, monkeypatch
):
    store = tmp_path / "store"
    partials.update(con, demo, store)
    before = run_query(con, "rollup", {"partials": str(store)})
    manifest = (store / "manifest.json").read_text()
    calls = []
    original = store_module.Publisher.stage

    def dies_midway(self, *args):
        calls.append(args)
        if len(calls) == 5:
            raise KeyboardInterrupt
        return original(self, *args)

    monkeypatch.setattr(store_module.Publisher, "stage", dies_midway)
    with pytest.raises(KeyboardInterrupt):
        partials.update(con, demo, store, full=True)
    monkeypatch.undo()
    assert (store / "manifest.json").read_text() == manifest
    same_table(before, run_query(con, "rollup", {"partials": str(store)}))

    def listed():
        return {
            e["files"][k]
            for e in json.loads((store / "manifest.json").read_text())["days"].values()
            for k in KIND_NAMES
        }

    kept = listed()
    partials.update(con, demo, store, full=True)  # removes the stray files, and keeps
    on_disk = {f"{p.parent.name}/{p.name}" for p in store.glob("*/*.parquet")}
    assert on_disk == listed() | kept  # the previous generation for readers still on it
    assert not list(store.glob(".*.tmp")) and not list((store / ".staging").iterdir())


def test_a_store_answers_only_for_its_own_keys_and_bins(con, demo, tmp_path):
    partials.update(con, {**demo, "segment_cols": "region"}, tmp_path / "store")
    with pytest.raises(DbmetricsError, match="cannot group by channel"):
        run_query(con, "rollup", {"partials": str(tmp_path / "store"), "segment_cols": "channel"})
    with pytest.raises(DbmetricsError, match="bins=15"):
        run_query(con, "rollup", {"partials": str(tmp_path / "store"), "bins": "10"})
    with pytest.raises(DbmetricsError, match="segment_cols='region'"):
        partials.update(con, {**demo, "segment_cols": "channel"}, tmp_path / "store")


def test_bad_stores_and_parameters_get_clear_errors(con, demo, tmp_path):
    with pytest.raises(DbmetricsError, match="holds no summarised days"):
        run_query(con, "rollup", {"partials": str(tmp_path / "nothing")})
    (tmp_path / "bad").mkdir()
    (tmp_path / "bad" / "manifest.json").write_text("{not json")
    with pytest.raises(DbmetricsError, match="not valid JSON"):
        run_query(con, "rollup", {"partials": str(tmp_path / "bad")})
    with pytest.raises(DbmetricsError, match="no parameter grain"):
        partials.update(con, {**demo, "grain": "day"}, tmp_path / "store")
    with pytest.raises(DbmetricsError, match="needs parameter `logs`"):
        run_query(con, "rollup", {})


def test_a_two_class_store_gives_the_binary_view_of_the_logs(same_table, con, tmp_path):
    import numpy as np

    rng = np.random.default_rng(2)
    n = 3000
    s = rng.normal(size=n) * 2
    pq.write_table(
        pa.table(
            {
                "ts": [
                    dt.date(2026, 3, 2) + dt.timedelta(days=int(d)) for d in rng.integers(0, 20, n)
                ],
                "model_version": rng.choice(["v1", "v2"], n),
                "region": rng.choice(["a", "b"], n),
                "score": s,
                "label": (rng.random(n) < 1 / (1 + np.exp(-s))).astype(np.int64),
            }
        ),
        tmp_path / "log.parquet",
    )
    roles = {"logs": str(tmp_path / "log.parquet"), "scores_col": "score"}
    roles["scores_kind"] = "binary_logit"
    partials.update(con, {**roles, "segment_cols": "region"}, tmp_path / "store")
    for query in ("binary", "class_metrics", "class_calibration"):
        direct = run_query(con, query, roles)
        assert direct.num_rows > 0
        store = {"partials": str(tmp_path / "store"), "scores_kind": "binary_logit"}
        same_table(direct, run_query(con, query, store))


def test_a_store_of_an_earlier_format_asks_for_an_update_which_migrates_it(
    same_table, con, demo, tmp_path
):
    """Format 2 had no per-class states: queries ask for an update, and the update
    recomputes every day into format 4."""
    store = tmp_path / "store"
    partials.update(con, demo, store)
    manifest = json.loads((store / "manifest.json").read_text())
    manifest["format"] = "dbmetrics-partials/2"
    (store / "manifest.json").write_text(json.dumps(manifest))
    with pytest.raises(DbmetricsError, match="class_state.*partials update"):
        run_query(con, "class_metrics", {"partials": str(store)})
    partials.update(con, demo, store)
    assert json.loads((store / "manifest.json").read_text())["format"] == "dbmetrics-partials/4"
    same_table(
        run_query(con, "class_metrics", demo),
        run_query(con, "class_metrics", {"partials": str(store)}),
    )


def test_the_cli_builds_shows_and_rolls_up_a_store(demo, tmp_path):
    from click.testing import CliRunner

    from dbmetrics.cli.main import cli

    store = str(tmp_path / "store")
    sets = [a for k, v in demo.items() for a in ("--set", f"{k}={v}")]
    runner = CliRunner()
    built = runner.invoke(
        cli,
        ["partials", "update", "--store", store, *sets, "--format", "json"]
        if False
        else ["partials", "update", "--store", store, *sets],
    )
    assert built.exit_code == 0, built.output
    shown = runner.invoke(cli, ["partials", "show", "--store", store])
    assert shown.exit_code == 0 and "2026-01-25" in shown.output
    rolled = runner.invoke(cli, ["run", "rollup", "--set", f"partials={store}", "--format", "csv"])
    assert rolled.exit_code == 0 and rolled.output.count("\n") == 4  # header + 3 weeks
