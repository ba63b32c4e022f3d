"""The demo log generator: deterministic, as documented in demo_parquet/README.md, events planted."""

from datetime import date, datetime, timedelta
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as csv
import pyarrow.parquet as pq
import pytest

from dbmetrics import demo
from dbmetrics.demo import dataset
from dbmetrics.demo.__main__ import main
from dbmetrics.demo.scenario import CLASSES, REGIONS

COMMITTED = Path(__file__).resolve().parents[1] / "demo_parquet"
START, WEEKS, ROWS_PER_DAY = date(2026, 1, 5), 26, 250
AS_OF = datetime(2026, 7, 6)
MONTHS = [f"2026-{m:02d}" for m in range(1, 8)]
NOT_AS_DESCRIBED = CLASSES.index("not_as_described")


def read_demo(root: Path) -> dict:
    """Every table of a generated demo folder, keyed by its relative path."""
    tables = {
        p.relative_to(root).as_posix(): pq.read_table(p) for p in sorted(root.glob("**/*.parquet"))
    }
    tables["regions.csv"] = csv.read_csv(root / "regions.csv")
    return tables


def same(a: pa.Table, b: pa.Table) -> bool:
    """Table equality where the logits are compared by their bits, so that a NaN equals itself."""

    def bits(t):
        if "logits" not in t.column_names:
            return t
        z = t["logits"].combine_chunks()
        as_int = pa.ListArray.from_arrays(
            z.offsets, pa.array(z.values.to_numpy().view(np.uint32)), mask=z.is_null()
        )
        return t.set_column(t.column_names.index("logits"), "logits", as_int)

    return bits(a).equals(bits(b))


@pytest.fixture(scope="module")
def committed() -> dict:
    return read_demo(COMMITTED)


@pytest.fixture(scope="module")
def rows(committed) -> dict:
    """The committed logs as numpy arrays, one entry per prediction, with its label (-1 if none)."""
    logs = pa.concat_tables(committed[f"logs/month={m}/part-0.parquet"] for m in MONTHS)
    labels = committed["labels/labels.parquet"]
    at = pc.index_in(logs["prediction_id"], labels["prediction_id"])
    ts = logs["ts"].to_numpy()
    ok = pc.list_value_length(logs["logits"]).fill_null(0).to_numpy() == len(CLASSES)
    z = np.full((logs.num_rows, len(CLASSES)), np.nan)
    z[ok] = np.stack(logs["logits"].filter(pa.array(ok)).to_numpy(zero_copy_only=False))
    p = np.exp(z - z.max(axis=1, keepdims=True))
    return {
        "ts": ts,
        "week": (ts - np.datetime64(START)) // np.timedelta64(7, "D") + 1,
        "version": logs["model_version"].to_numpy(),
        "region": logs["region"].to_numpy(),
        "z": z,
        "p": p / p.sum(axis=1, keepdims=True),
        "label": pc.take(labels["label"], at).fill_null(-1).to_numpy(),
        "labelled_at": pc.take(labels["labelled_at"], at).to_numpy(),
    }


def scored(rows, mask):
    """Confidence, correctness and per-row loss of the labelled, finite-logit rows in ``mask``."""
    keep = mask & (rows["label"] >= 0) & np.isfinite(rows["z"]).all(axis=1)
    p, y = rows["p"][keep], rows["label"][keep]
    return p.max(axis=1), p.argmax(axis=1) == y, -np.log(p[np.arange(len(y)), y])


def ece(conf, correct, bins=15):
    """Expected calibration error; bin m holds m/B < c <= (m+1)/B (contract's calibration_bin)."""
    b = np.clip(np.ceil(conf * bins).astype(int) - 1, 0, bins - 1)
    n = np.bincount(b, minlength=bins)
    gap = np.abs(np.bincount(b, conf, bins) - np.bincount(b, correct.astype(float), bins))
    return gap.sum() / n.sum()


def psi(a, b):
    """Population stability index of two distributions."""
    return float(((b - a) * np.log(b / a)).sum())


def test_same_seed_gives_identical_tables_and_another_seed_does_not(tmp_path):
    for name, seed in [("a", 3), ("b", 3), ("c", 4)]:
        demo.generate(tmp_path / name, seed=seed, rows_per_day=30, weeks=5)
    first, again, other = (read_demo(tmp_path / name) for name in "abc")
    assert first.keys() == again.keys() == other.keys()
    assert all(same(first[k], again[k]) for k in first)
    assert not same(
        first["logs/month=2026-01/part-0.parquet"], other["logs/month=2026-01/part-0.parquet"]
    )


def test_committed_demo_equals_a_fresh_generation_with_the_defaults(tmp_path, committed):
    demo.generate(tmp_path)
    fresh = read_demo(tmp_path)
    assert fresh.keys() == committed.keys()
    for key in fresh:
        assert same(fresh[key], committed[key]), key


def test_generate_returns_the_paths_it_wrote(tmp_path):
    paths = demo.generate(tmp_path, rows_per_day=5, weeks=1)
    assert paths == {
        "logs": tmp_path / "logs",
        "labels": tmp_path / "labels" / "labels.parquet",
        "regions": tmp_path / "regions.csv",
    }
    assert sorted(p.name for p in tmp_path.glob("logs/*")) == ["month=2026-01"]


def test_schema_is_as_documented(committed):
    logs_schema = pa.schema(
        [
            ("prediction_id", pa.string()),
            ("ts", pa.timestamp("us")),
            ("model_version", pa.string()),
            ("region", pa.string()),
            ("channel", pa.string()),
            ("customer_tier", pa.string()),
            ("logits", pa.list_(pa.float32())),
        ]
    )
    for month in MONTHS:
        assert committed[f"logs/month={month}/part-0.parquet"].schema.equals(logs_schema)
    assert committed["labels/labels.parquet"].schema.equals(
        pa.schema(
            [
                ("prediction_id", pa.string()),
                ("label", pa.int32()),
                ("labelled_at", pa.timestamp("us")),
            ]
        )
    )
    assert committed["regions.csv"].schema.equals(
        pa.schema(
            [
                ("region", pa.string()),
                ("region_name", pa.string()),
                ("warehouse", pa.string()),
                ("margin_pct", pa.float64()),
            ]
        )
    )


def test_row_counts_months_and_ids_are_as_documented(committed, rows):
    assert sorted(k for k in committed if k.startswith("logs/")) == [
        f"logs/month={m}/part-0.parquet" for m in MONTHS
    ]
    for month in MONTHS:
        ts = committed[f"logs/month={month}/part-0.parquet"]["ts"].to_numpy()
        assert (ts.astype("datetime64[M]") == np.datetime64(month)).all()
    assert len(rows["ts"]) == ROWS_PER_DAY * 7 * WEEKS == 45_500
    assert committed["labels/labels.parquet"].num_rows == 41_807
    ids = pa.concat_tables(committed[f"logs/month={m}/part-0.parquet"] for m in MONTHS)[
        "prediction_id"
    ]
    assert pc.count_distinct(ids).as_py() == 45_500
    assert rows["ts"].min() >= np.datetime64(START) and rows["ts"].max() < np.datetime64(AS_OF)
    assert (
        set(rows["region"]) == set(REGIONS) == set(committed["regions.csv"]["region"].to_pylist())
    )


def test_a_few_rows_are_deliberately_dirty(rows):
    null = np.isnan(rows["z"]).all(axis=1)
    nan = np.isnan(rows["z"]).any(axis=1) & ~null
    assert (null.sum(), nan.sum()) == (23, 4)


def test_v2_ramps_from_week_9_to_all_traffic_by_week_13(rows):
    share = np.array(
        [(rows["version"][rows["week"] == w] == "v2").mean() for w in range(1, WEEKS + 1)]
    )
    assert (share[:8] == 0).all() and (share[12:] == 1).all()
    assert (share[8:12] > 0).all() and (share[8:12] < 1).all() and (np.diff(share[8:12]) > 0).all()


def test_v2_is_over_confident_at_similar_accuracy(rows):
    both = (rows["week"] >= 9) & (rows["week"] <= 12)
    (c1, ok1, ce1), (c2, ok2, ce2) = (
        scored(rows, both & (rows["version"] == v)) for v in ("v1", "v2")
    )
    assert 0.7 < ok1.mean() < 0.8 and abs(ok1.mean() - ok2.mean()) < 0.03
    assert c2.mean() > c1.mean() + 0.1
    assert ece(c1, ok1) < 0.03 and ece(c2, ok2) > 0.1
    assert ce2.mean() > ce1.mean() + 0.15


def test_alpine_predictions_shift_from_week_14_and_other_regions_do_not(rows):
    finite = np.isfinite(rows["z"]).all(axis=1)
    alpine, post = rows["region"] == "alpine", rows["week"] >= 14

    def mean_p(mask):
        return rows["p"][mask & finite].mean(axis=0)

    before, after = mean_p(alpine & ~post), mean_p(alpine & post)
    assert after[NOT_AS_DESCRIBED] > before[NOT_AS_DESCRIBED] + 0.15
    assert psi(before, after) > 0.2
    assert psi(mean_p(~alpine & ~post), mean_p(~alpine & post)) < 0.01
    v2 = rows["version"] == "v2"
    assert scored(rows, alpine & post)[2].mean() > scored(rows, alpine & ~post & v2)[2].mean() + 0.1


def test_arrived_late_recall_collapses_in_east_from_week_17_and_nowhere_else(rows):
    late = rows["label"] == CLASSES.index("arrived_late")
    east, post = rows["region"] == "east", rows["week"] >= 17
    v2 = rows["version"] == "v2"

    def recall(mask):
        return scored(rows, mask & late)[1].mean()

    assert recall(east & ~post & v2) > 0.55 and recall(east & post) < 0.3
    assert recall(~east & post) > 0.55 and abs(recall(~east & post) - recall(~east & ~post)) < 0.1
    other = (rows["label"] >= 0) & ~late  # the other classes in east keep their recall
    assert scored(rows, east & post & other)[1].mean() > 0.7


def test_labels_arrive_2_to_10_days_later_and_before_the_as_of_date(rows):
    labelled = rows["label"] >= 0
    delay = rows["labelled_at"][labelled] - rows["ts"][labelled]
    assert (delay >= np.timedelta64(2, "D")).all() and (delay <= np.timedelta64(10, "D")).all()
    assert (rows["labelled_at"][labelled] < np.datetime64(AS_OF)).all()


def test_recent_days_are_partly_unlabelled_and_about_5pct_never_are(rows):
    labelled, ts = rows["label"] >= 0, rows["ts"]
    settled = ts < np.datetime64(AS_OF - timedelta(days=10))
    assert 0.04 < 1 - labelled[settled].mean() < 0.06
    last_day = ts >= np.datetime64(AS_OF - timedelta(days=2))
    assert not labelled[last_day].any()
    assert 0.2 < labelled[~settled].mean() < 0.8


def test_interrupted_generate_leaves_only_complete_files(tmp_path, monkeypatch):
    real = dataset.simulate_day

    def fail_in_february(rng, day_index, day, rows, as_of):
        if day.month == 2:
            raise KeyboardInterrupt
        return real(rng, day_index, day, rows, as_of)

    monkeypatch.setattr(dataset, "simulate_day", fail_in_february)
    with pytest.raises(KeyboardInterrupt):
        demo.generate(tmp_path, rows_per_day=4, weeks=6)
    files = sorted(p.relative_to(tmp_path).as_posix() for p in tmp_path.rglob("*") if p.is_file())
    assert files == ["logs/month=2026-01/part-0.parquet"]
    assert pq.read_table(tmp_path / files[0]).num_rows == 4 * 27


def test_a_shorter_run_removes_month_files_of_a_longer_one(tmp_path):
    demo.generate(tmp_path, rows_per_day=2, weeks=9)
    demo.generate(tmp_path, rows_per_day=2, weeks=1)
    assert [p.name for p in (tmp_path / "logs").iterdir()] == ["month=2026-01"]


def test_module_entry_point_passes_its_options_to_generate(tmp_path, capsys):
    main([str(tmp_path), "--rows-per-day", "3", "--weeks", "1", "--seed", "11"])
    assert pq.read_table(tmp_path / "logs/month=2026-01/part-0.parquet").equals(
        pq.read_table(
            demo.generate(tmp_path / "api", rows_per_day=3, weeks=1, seed=11)["logs"]
            / "month=2026-01/part-0.parquet"
        )
    )
    assert "labels:" in capsys.readouterr().out


def test_every_parquet_file_says_the_data_is_invented(committed):
    from dbmetrics.demo.scenario import MARK, RETAILER

    assert RETAILER in MARK and MARK.startswith("Invented demo data")
    parquet = [name for name in committed if name.endswith(".parquet")]
    assert len(parquet) == len(MONTHS) + 1
    for name in parquet:
        metadata = pq.read_schema(COMMITTED / name).metadata
        assert metadata[b"dbmetrics.demo"].decode() == MARK, name
