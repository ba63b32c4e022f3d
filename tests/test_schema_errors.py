"""Errors that teach the schema: every missing column role at once with candidate columns,
ids of incompatible types named with both columns, a bad memory size naming its option, and
Python parameter values (lists, dates, numbers) accepted as the CLI's text."""

import datetime as dt

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

from dbmetrics import DbmetricsError
from dbmetrics.cli.main import cli
from dbmetrics.queries import run_query


@pytest.fixture
def foreign(tmp_path):
    """A log whose columns carry none of the default names."""
    path = tmp_path / "foreign.parquet"
    pq.write_table(
        pa.table(
            {
                "request_id": [1, 2, 3],
                "predicted_at": [dt.datetime(2026, 1, 5, h) for h in (1, 2, 3)],
                "model": ["m1", "m1", "m2"],
                "region": ["n", "s", "n"],
                "probabilities": [[0.25, 0.75], [0.5, 0.5], [0.9, 0.1]],
                "outcome": [1, 0, None],
            }
        ),
        path,
    )
    return str(path)


def test_every_missing_role_is_named_at_once_with_candidates(con, foreign):
    with pytest.raises(DbmetricsError) as err:
        run_query(con, "rollup", {"logs": foreign, "scores_kind": "probs"})
    message = str(err.value)
    assert message.startswith("4 column roles name no column: ")
    for part in (
        "time_col `ts` not in logs (candidates: predicted_at)",
        "scores_col `logits` not in logs (candidates: request_id, probabilities, outcome)",
        "version_col `model_version` not in logs (candidates: request_id, model, region, outcome)",
        "label_col `label` not in logs (candidates: request_id, model, region, outcome)",
    ):
        assert part in message
    assert "\n" not in message
    fixed = {
        "logs": foreign,
        "scores_kind": "probs",
        "time_col": "predicted_at",
        "scores_col": "probabilities",
        "version_col": "model",
        "label_col": "outcome",
    }
    assert run_query(con, "rollup", fixed).column("rows").to_pylist() == [2, 1]


def test_ids_typed_text_in_the_logs_and_numbers_in_the_labels(con, foreign, tmp_path):
    labels = tmp_path / "labels.parquet"
    pq.write_table(pa.table({"request_id": ["1", "2"], "y": [0, 1]}), labels)
    params = {
        "logs": foreign,
        "labels": str(labels),
        "id_col": "request_id",
        "label_col": "y",
        "time_col": "predicted_at",
        "scores_col": "probabilities",
        "scores_kind": "probs",
        "version_col": "model",
    }
    with pytest.raises(DbmetricsError) as err:
        run_query(con, "rollup", params)
    assert str(err.value).startswith(
        "id_col: `request_id` is BIGINT in logs but `request_id` is VARCHAR in labels"
    )


@pytest.mark.filterwarnings("ignore:drift. the reference window")  # an empty window, on purpose
def test_python_values_lists_dates_and_numbers(con, foreign):
    params = {
        "logs": foreign,
        "scores_kind": "probs",
        "time_col": "predicted_at",
        "scores_col": "probabilities",
        "version_col": "model",
        "label_col": "outcome",
    }
    as_text = run_query(
        con,
        "drift",
        {**params, "segment_cols": "region", "ref_start": "2026-01-05", "ref_end": "2026-01-04"},
    )
    typed = run_query(
        con,
        "drift",
        {
            **params,
            "segment_cols": ["region"],
            "ref_start": dt.date(2026, 1, 5),
            "ref_end": dt.datetime(2026, 1, 4),
        },
    )
    assert repr(typed.to_pylist()) == repr(as_text.to_pylist())  # NaN equal to NaN
    assert run_query(con, "rollup", {**params, "bins": 10, "segment_cols": ("region",)})
    with pytest.raises(DbmetricsError, match="parameter `bins` takes text, a number, a date"):
        run_query(con, "rollup", {**params, "bins": {"n": 3}})


def test_a_bad_memory_limit_names_the_option(foreign):
    result = CliRunner().invoke(
        cli, ["--memory-limit", "lots", "run", "rollup", "--set", f"logs={foreign}"]
    )
    assert result.exit_code == 1
    assert result.stderr.startswith("Error: --memory-limit: `lots` is not a memory size")
    assert result.stderr.count("\n") == 1
