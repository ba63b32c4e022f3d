"""Score columns that are not numbers are refused by name and type, never scored."""

import datetime as dt

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import dbmetrics
from dbmetrics import DbmetricsError
from dbmetrics.queries import run_query


@pytest.mark.parametrize(
    "scores, kind, shown",
    [
        (pa.array([[True, False], [False, True]]), "logits", "BOOLEAN[]"),
        (pa.array([[True, False], [False, True]]), "probs", "BOOLEAN[]"),
        (pa.array([[[0.0, 1.0]], [[1.0, 0.0]]]), "logits", "DOUBLE[][]"),
        (
            pa.array([[[0.0, 1.0]], [[1.0, 0.0]]], pa.list_(pa.list_(pa.float32(), 2), 1)),
            "logits",
            "FLOAT[][]",  # Parquet keeps no fixed sizes
        ),
    ],
)
def test_boolean_and_nested_list_scores_are_refused(tmp_path, scores, kind, shown):
    path = tmp_path / "logs.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 1, 5)] * 2, pa.timestamp("us")),
                "model_version": ["v1", "v1"],
                "logits": scores,
                "label": [0, 1],
            }
        ),
        path,
    )
    with pytest.raises(DbmetricsError) as raised:
        run_query(dbmetrics.connect(), "rollup", {"logs": str(path), "scores_kind": kind})
    assert str(raised.value).startswith(
        f"scores_col: column `logits` is {shown}; scores_kind={kind} expects a list of numbers"
    )


def test_a_boolean_is_not_a_binary_score(tmp_path):
    path = tmp_path / "logs.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 1, 5)] * 2, pa.timestamp("us")),
                "model_version": ["v1", "v1"],
                "p": [True, False],
                "label": [0, 1],
            }
        ),
        path,
    )
    params = {"logs": str(path), "scores_col": "p", "scores_kind": "binary_prob"}
    with pytest.raises(DbmetricsError, match="scores_col: .*BOOLEAN.*a single number per row"):
        run_query(dbmetrics.connect(), "rollup", params)
