"""One declared schema for the store's day files, whoever writes them.

Specification: every day file is written in the declared column order and types (day, the
version and segment columns, the kind's keys, its columns; `bin` INTEGER, `class` and counts
BIGINT, `sum_*` DOUBLE; text keys as `string` whatever Arrow flavour the writer had), and a
query refuses a store holding a file that is not.
"""

import json

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from dbmetrics import partials
from dbmetrics.demo import generate
from dbmetrics.errors import DbmetricsError
from dbmetrics.queries import run_query
from dbmetrics.queries import state_kinds as kinds


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """Two weeks of the demo log (invented data), labels in a separate table."""
    paths = generate(tmp_path_factory.mktemp("demo"), rows_per_day=30, weeks=2)
    return {"logs": str(paths["logs"]), "labels": str(paths["labels"]), "id_col": "prediction_id"}


def first_files(store):
    manifest = json.loads((store / "manifest.json").read_text())
    return {k: store / rel for k, rel in next(iter(manifest["days"].values()))["files"].items()}


def test_day_files_have_the_declared_schema(con, demo, tmp_path):
    partials.update(con, {**demo, "segment_cols": "region"}, tmp_path / "store")
    files = first_files(tmp_path / "store")
    state = pq.read_schema(files["state"])
    assert state.names[:3] == ["day", "model_version", "region"]
    assert state.names[3:] == ["bin", *kinds.KINDS_BY_NAME["state"].columns]
    assert state.field("bin").type == pa.int32() and state.field("rows").type == pa.int64()
    assert state.field("sum_loss").type == pa.float64()
    classes = pq.read_schema(files["class_state"])
    assert classes.names[3:] == ["class", *kinds.KINDS_BY_NAME["class_state"].columns]
    assert classes.field("class").type == pa.int64()


def test_a_store_with_a_file_of_another_schema_is_refused(con, demo, tmp_path):
    store = tmp_path / "store"
    partials.update(con, demo, store)
    path = first_files(store)["state"]
    table = pq.read_table(path)
    i = table.column_names.index("bin")
    pq.write_table(table.set_column(i, "bin", table.column("bin").cast(pa.int64())), path)
    with pytest.raises(DbmetricsError, match="does not have the declared state schema"):
        run_query(con, "rollup", {"partials": str(store)})


def test_a_table_is_cast_to_the_declared_order_and_types():
    columns = kinds.KINDS_BY_NAME["class_state"].columns

    def declared(c):
        return pa.float64() if c.startswith("sum_") else pa.int64()

    def loose(c):  # the right values in a narrower type, columns in another order
        return pa.array([0.5], pa.float32()) if c.startswith("sum_") else pa.array([1], pa.int32())

    table = pa.table(
        {
            **{c: loose(c) for c in reversed(columns)},
            "model_version": pa.array(["v1"], pa.large_string()),
            "class": pa.array([0], pa.int32()),
            "day": pa.array([0], pa.date32()),
        }
    )
    conformed = kinds.conform("class_state", table)
    assert conformed.schema == pa.schema(
        [
            ("day", pa.date32()),
            ("model_version", pa.string()),
            ("class", pa.int64()),
            *((c, declared(c)) for c in columns),
        ]
    )
    with pytest.raises(DbmetricsError, match="lacks column"):
        kinds.conform("class_state", table.drop_columns(["sum_prob"]))
