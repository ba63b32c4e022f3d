"""`dbmetrics plot confusion`: the confusion query drawn as counts and row rates.

Specification: the counts drawn are the confusion query's rows summed over every period and
group (equal to sklearn.metrics.confusion_matrix of all evaluated rows); rates are each row
over its sum (sklearn confusion_matrix(normalize="true")); up to 20 classes are drawn as two
annotated matrices, more as bars of the most frequent off-diagonal pairs; the PNG is
1600 x 1000 pixels.
"""

from pathlib import Path

import numpy as np
import pyarrow as pa
import pytest
from click.testing import CliRunner
from sklearn.metrics import confusion_matrix

from dbmetrics.cli.main import cli
from dbmetrics.plots.confusion import (
    confusion_figure,
    pooled_matrix,
    row_rates,
    top_confusions,
)
from dbmetrics.queries import run_query

pytest.importorskip("matplotlib")
DEMO = Path(__file__).parent.parent / "demo_parquet"


def as_rows(y, pred, k):
    cm = confusion_matrix(y, pred, labels=range(k))
    t, p = np.nonzero(cm)
    return pa.table({"label": t, "predicted": p, "rows": cm[t, p]}), cm


def test_pooled_counts_and_rates_equal_sklearn_confusion_matrix(con):
    table = run_query(
        con,
        "confusion",
        {"logs": str(DEMO / "logs"), "labels": str(DEMO / "labels"), "id_col": "prediction_id"},
    )
    matrix = pooled_matrix(table)  # summed over every period x version cell
    rows = con.sql(
        f"""SELECT label, predicted_class(logits) AS pred
        FROM read_parquet('{DEMO / "logs"}/**/*.parquet') JOIN '{DEMO / "labels" / "labels.parquet"}'
        USING (prediction_id) WHERE label IS NOT NULL AND cross_entropy(logits, label) < 'inf'"""
    ).fetchnumpy()
    expected = confusion_matrix(rows["label"], rows["pred"], labels=range(6))  # sklearn.metrics
    np.testing.assert_array_equal(matrix, expected)
    np.testing.assert_allclose(
        row_rates(matrix),
        confusion_matrix(rows["label"], rows["pred"], labels=range(6), normalize="true"),
        rtol=1e-12,
    )


def test_up_to_twenty_classes_are_two_annotated_matrices():
    rng = np.random.default_rng(0)
    y = rng.integers(0, 20, 4000)
    pred = np.where(rng.random(4000) < 0.8, y, rng.integers(0, 20, 4000))
    table, cm = as_rows(y, pred, 20)
    figure = confusion_figure(table)
    counts, rates = figure.axes
    assert len(figure.axes) == 2
    shown = {
        (round(t.get_position()[1]), round(t.get_position()[0])): t.get_text() for t in counts.texts
    }
    assert shown[(3, 3)] == str(cm[3, 3]) and len(counts.get_xticklabels()) == 20


def test_more_classes_draw_the_most_frequent_confusions():
    rng = np.random.default_rng(1)
    y = rng.integers(0, 40, 20000)
    pred = np.where(rng.random(20000) < 0.9, y, (y + 1) % 40)
    pred[:300] = 7  # the largest confusion: many rows predicted as 7
    table, cm = as_rows(y, pred, 40)
    off = cm.copy()
    np.fill_diagonal(off, 0)
    pairs = top_confusions(cm, 5)
    assert [n for _, _, n, _ in pairs] == sorted(off.ravel())[::-1][:5]
    figure = confusion_figure(table, top=5)
    (ax,) = figure.axes
    assert len(ax.patches) == 5
    t, p, _, _ = pairs[0]
    assert ax.get_yticklabels()[0].get_text() == f"{t} -> {p}"


def test_the_cli_draws_a_png_and_uses_class_names(tmp_path):
    out = tmp_path / "cm.png"
    result = CliRunner().invoke(
        cli,
        [
            "plot", "confusion", "--only", "model_version=v1",
            "--set", f"logs={DEMO / 'logs'}", "--set", f"labels={DEMO / 'labels'}",
            "--set", "id_col=prediction_id", "--output", str(out),
        ],
    )  # fmt: skip
    assert result.exit_code == 0, result.output
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    names = ["a", "b", "c"]
    table, _ = as_rows(np.array([0, 1, 2, 2]), np.array([0, 2, 2, 1]), 3)
    ticks = [t.get_text() for t in confusion_figure(table, names).axes[0].get_yticklabels()]
    assert ticks == names
