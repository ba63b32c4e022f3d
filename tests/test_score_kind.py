"""A scores_kind that contradicts the scores is a warning (run) and a problem (check)."""

import datetime as dt
import warnings

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

import dbmetrics
from dbmetrics import DbmetricsWarning
from dbmetrics.check import check_log
from dbmetrics.cli.main import cli
from dbmetrics.queries import notes, run_query

N, K = 300, 4


def write_log(path, scores, labels):
    day = dt.datetime(2026, 1, 5)
    table = pa.table(
        {
            "ts": [day + dt.timedelta(hours=i) for i in range(len(scores))],
            "model_version": ["v1"] * len(scores),
            "scores": scores,
            "label": pa.array(labels, pa.int64()),
        }
    )
    pq.write_table(table, path)
    return str(path)


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    """The same model's outputs as logits, probabilities, percentages, and binary scores."""
    rng = np.random.default_rng(17)
    z = rng.normal(0, 2, (N, K))
    p = np.exp(z) / np.exp(z).sum(1, keepdims=True)
    y = rng.integers(0, K, N)
    folder = tmp_path_factory.mktemp("kinds")
    zb = rng.normal(0, 2, N)
    return {
        "logits": write_log(folder / "logits.parquet", z.tolist(), y),
        "probs": write_log(folder / "probs.parquet", p.tolist(), y),
        "percent": write_log(folder / "percent.parquet", (100 * p).tolist(), y),
        "binary_logit": write_log(folder / "bl.parquet", zb.tolist(), y % 2),
        "binary_prob": write_log(folder / "bp.parquet", (1 / (1 + np.exp(-zb))).tolist(), y % 2),
    }


def kind_warnings(con, logs, kind):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        run_query(con, "rollup", {"logs": logs, "scores_col": "scores", "scores_kind": kind})
    return [str(w.message) for w in caught if issubclass(w.category, DbmetricsWarning)]


@pytest.mark.parametrize(
    ("log", "kind", "likely"),
    [
        ("probs", "logits", "set scores_kind=probs"),
        ("logits", "probs", "they look like logits: set scores_kind=logits"),
        ("percent", "probs", "they look like percentages: divide them by 100"),
        ("binary_prob", "binary_logit", "set scores_kind=binary_prob"),
        ("binary_logit", "binary_prob", "set scores_kind=binary_logit"),
    ],
)
def test_a_contradicted_kind_warns_naming_the_likely_kind(con, logs, log, kind, likely):
    found = kind_warnings(con, logs[log], kind)
    (message,) = [m for m in found if m.startswith("scores_kind=")]
    assert message.startswith(f"scores_kind={kind}, but ") and likely in message
    # every row is then invalid: that is said too
    assert found[1:] == ([notes.no_usable_scores(N)] if kind == "probs" else [])


@pytest.mark.parametrize("log", ["logits", "probs", "binary_logit", "binary_prob"])
def test_the_right_kind_gives_no_warning(con, logs, log):
    assert kind_warnings(con, logs[log], log) == []


def test_check_reports_the_kind_as_a_problem(con, logs):
    params = {"logs": logs["probs"], "scores_col": "scores"}
    report = check_log(con, params)
    (issue,) = [i for i in report.issues if i.reason == "scores_kind_mismatch"]
    assert (issue.count, issue.problem, report.clean) == (N, True, False)
    assert f"every one of the {N} scored rows is a probability distribution" in issue.detail
    right = check_log(con, {**params, "scores_kind": "probs"})
    assert [i.count for i in right.issues if i.reason == "scores_kind_mismatch"] == [0]


def test_cli_prints_the_warning_as_one_line_on_stderr(logs):
    result = CliRunner().invoke(
        cli, ["run", "rollup", "--set", f"logs={logs['probs']}", "--set", "scores_col=scores"]
    )
    assert result.exit_code == 0
    lines = [line for line in result.stderr.splitlines() if "warning" in line]
    assert len(lines) == 1 and lines[0].startswith("dbmetrics: warning: scores_kind=logits, ")
    assert "set scores_kind=probs" in lines[0]
    checked = CliRunner().invoke(
        cli, ["check", "--set", f"logs={logs['probs']}", "--set", "scores_col=scores"]
    )
    assert checked.exit_code == 4 and "scores_kind_mismatch" in checked.output


def test_the_sample_is_bounded(con, tmp_path, monkeypatch):
    """Only the first SAMPLE_ROWS scores are read: logits after them are not seen."""
    from dbmetrics.queries import score_kind

    monkeypatch.setattr(score_kind, "SAMPLE_ROWS", 10)
    mixed = [[0.25, 0.75]] * 10 + [[3.0, -1.0]] * 10
    path = write_log(tmp_path / "mixed.parquet", mixed, [0] * 20)
    assert len(kind_warnings(con, path, "logits")) == 1
    assert dbmetrics.DbmetricsWarning is DbmetricsWarning
