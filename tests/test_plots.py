"""`dbmetrics plot`: reliability diagrams and metric trends as fixed-size PNG files."""

import datetime as dt
import shlex
import struct
import sys
import zlib
from importlib.util import find_spec
from pathlib import Path

import click
import numpy as np
import pyarrow as pa
import pytest
from scipy import stats as scipy_stats

from dbmetrics import plots
from dbmetrics.cli.main import cli
from dbmetrics.queries import run_query

DEMO = Path(__file__).parent.parent / "demo_parquet"
LABELLED = [
    "--set",
    f"logs={DEMO / 'logs'}",
    "--set",
    f"labels={DEMO / 'labels' / 'labels.parquet'}",
    "--set",
    "id_col=prediction_id",
]
SIZE = (1600, 1000)
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
MISSING = "plotting needs matplotlib: pip install 'dbmetrics[plot]'"

needs_matplotlib = pytest.mark.skipif(
    find_spec("matplotlib") is None, reason="needs the 'plot' extra"
)


def png_size(path: Path) -> tuple[int, int]:
    """(width, height) from the IHDR chunk, after checking the signature, the chunk CRC and IEND."""
    data = path.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert (length, kind) == (13, b"IHDR")
    body, crc = data[16 : 16 + length], struct.unpack(">I", data[16 + length : 20 + length])[0]
    assert zlib.crc32(kind + body) == crc
    assert data[-12:] == b"\x00\x00\x00\x00IEND\xaeB`\x82"
    return struct.unpack(">II", body[:8])


# --- the commands write PNGs of the expected size -------------------------------------------


@needs_matplotlib
def test_reliability_writes_a_1600_by_1000_png(invoke, tmp_path):
    result = invoke("plot", "reliability", *LABELLED, "--output", "reliability.png")
    assert result.exit_code == 0, result.output
    assert png_size(tmp_path / "reliability.png") == SIZE


@needs_matplotlib
@pytest.mark.parametrize(
    "args",
    [
        ["--query", "rollup", "--metric", "cross_entropy"],
        [
            "--query",
            "rollup",
            "--metric",
            "accuracy",
            "--by",
            "channel",
            "--only",
            "model_version=v2",
        ],
        [
            "--query",
            "drift",
            "--metric",
            "confidence_psi",
            "--by",
            "region",
            "--start",
            "2026-03-02",
        ],
        ["--query", "labels", "--metric", "p90_delay_days"],
    ],
    ids=["ce-by-version", "accuracy-by-channel", "drift-by-region", "label-delay"],
)
def test_trend_writes_a_1600_by_1000_png(invoke, tmp_path, args):
    result = invoke("plot", "trend", *args, *LABELLED, "--output", "trend.png")
    assert result.exit_code == 0, result.output
    assert png_size(tmp_path / "trend.png") == SIZE


@needs_matplotlib
def test_parameters_come_from_the_project_file_as_for_run(invoke, tmp_path):
    (tmp_path / "dbmetrics.toml").write_text(
        f'[params]\nlogs = "{DEMO / "logs"}"\nlabels = "{DEMO / "labels" / "labels.parquet"}"\n'
        'id_col = "prediction_id"\n[queries.calibration]\nbins = 10\n'
    )
    result = invoke("plot", "reliability", "--only", "model_version=v1", "-o", "v1.png")
    assert result.exit_code == 0, result.output
    assert png_size(tmp_path / "v1.png") == SIZE


def _plot_examples():
    group = cli.commands["plot"]
    for path, command in [("plot", group), *((f"plot {n}", c) for n, c in group.commands.items())]:
        with click.Context(command, info_name=f"dbmetrics {path}") as ctx:
            block = command.get_help(ctx).split("Example:\n", 1)[1].split("\n\n", 1)[0]
        yield path, " ".join(line.strip().rstrip("\\") for line in block.splitlines())


@needs_matplotlib
@pytest.mark.parametrize("name, example", list(_plot_examples()))
def test_every_plot_help_example_runs_as_written_and_writes_its_png(
    invoke, tmp_path, name, example
):
    (tmp_path / "demo_parquet").symlink_to(DEMO, target_is_directory=True)
    words = shlex.split(example)
    result = invoke(*words[1:])
    assert result.exit_code == 0, result.output
    assert png_size(tmp_path / words[words.index("--output") + 1]) == SIZE


# --- errors are one line, and leave the old file alone --------------------------------------


def test_without_matplotlib_the_error_is_the_install_hint(invoke, tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)
    monkeypatch.setitem(sys.modules, "matplotlib.figure", None)
    result = invoke("plot", "reliability", *LABELLED, "--output", "r.png")
    assert result.exit_code == 1
    assert result.stderr == f"Error: {MISSING}\n"
    assert not (tmp_path / "r.png").exists()


@needs_matplotlib
def test_an_unknown_metric_names_the_numeric_columns_and_keeps_the_old_file(invoke, tmp_path):
    (tmp_path / "trend.png").write_bytes(b"previous picture")
    result = invoke("plot", "trend", "--metric", "loss", *LABELLED, "--output", "trend.png")
    assert result.exit_code == 1
    assert len(result.stderr.splitlines()) == 1
    assert "--metric: the result has no numeric column 'loss'" in result.stderr
    assert "cross_entropy, cross_entropy_se" in result.stderr
    assert (tmp_path / "trend.png").read_bytes() == b"previous picture"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["trend.png"]


def test_the_output_must_be_a_png_path(invoke):
    result = invoke("plot", "trend", *LABELLED, "--output", "trend.pdf")
    assert result.exit_code == 2
    assert "expected a path ending in .png" in result.stderr


# --- pooling over periods adds counts and sums ----------------------------------------------


def calibration_rows(rows):
    """A calibration-shaped table from (period, version, bin, rows, mean_confidence, accuracy)."""
    columns = list(zip(*rows))
    bins = 10
    return pa.table(
        {
            "period": pa.array(columns[0], pa.date32()),
            "model_version": columns[1],
            "bin": pa.array(columns[2], pa.int32()),
            "bin_lower": [b / bins for b in columns[2]],
            "bin_upper": [(b + 1) / bins for b in columns[2]],
            "rows": pa.array(columns[3], pa.int64()),
            "mean_confidence": columns[4],
            "accuracy": columns[5],
        }
    )


def test_pooling_weights_each_period_by_its_rows_not_equally():
    week1, week2 = dt.date(2026, 1, 5), dt.date(2026, 1, 12)
    table = calibration_rows(
        [
            (week1, "v1", 5, 1, 0.50, 0.0),
            (week2, "v1", 5, 3, 0.70, 1.0),
            (week2, "v1", 8, 4, 0.85, 0.5),
        ]
    )
    [v1] = plots.pool_bins(table, "model_version")
    assert v1.rows.tolist() == [4, 4]
    assert v1.accuracy.tolist() == pytest.approx([0.75, 0.5])  # 3 of 4 correct, not (0 + 1) / 2
    assert v1.mean_confidence.tolist() == pytest.approx([0.65, 0.85])
    assert v1.ece == pytest.approx((4 * 0.10 + 4 * 0.35) / 8)


def test_weeks_pooled_equal_the_query_run_over_the_whole_month(con):
    rng = np.random.default_rng(3)
    n = 3000
    days = rng.integers(0, 30, n)  # June 2026: Monday 1st to Tuesday 30th, five weeks
    logs = pa.table(  # noqa: F841 (read by name through DuckDB's replacement scan)
        {
            "ts": pa.array(
                [dt.datetime(2026, 6, 1) + dt.timedelta(days=int(d), hours=9) for d in days]
            ),
            "model_version": rng.choice(["v1", "v2"], n).tolist(),
            "logits": pa.array((2 * rng.standard_normal((n, 4))).tolist(), pa.list_(pa.float32())),
            "label": pa.array(rng.integers(0, 4, n), pa.int64()),
        }
    )
    con.execute("CREATE TABLE logs AS SELECT * FROM logs")
    weekly = run_query(con, "calibration", {"logs": "logs", "grain": "week", "bins": "10"})
    monthly = run_query(con, "calibration", {"logs": "logs", "grain": "month", "bins": "10"})
    assert (
        len(set(weekly["period"].to_pylist())) == 5 and len(set(monthly["period"].to_pylist())) == 1
    )
    for pooled in plots.pool_bins(weekly, "model_version"):
        month = monthly.filter(pa.compute.equal(monthly["model_version"], pooled.group))
        assert pooled.rows.tolist() == month["rows"].to_pylist()
        assert pooled.accuracy == pytest.approx(month["accuracy"].to_numpy(), rel=1e-12)
        assert pooled.mean_confidence == pytest.approx(
            month["mean_confidence"].to_numpy(), rel=1e-12
        )
        assert pooled.ece == pytest.approx(month["ece"][0].as_py(), rel=1e-12)


def test_rows_are_kept_by_value_and_period_range():
    table = calibration_rows(
        [
            (dt.date(2026, 1, 5), "v1", 1, 1, 0.2, 0.0),
            (dt.date(2026, 1, 12), "v2", 1, 1, 0.2, 0.0),
            (dt.date(2026, 1, 19), "v2", 1, 1, 0.2, 0.0),
        ]
    )
    kept = plots.keep_rows(table, {"model_version": "v2"}, end=dt.date(2026, 1, 12))
    assert kept["period"].to_pylist() == [dt.date(2026, 1, 12)]


# --- what the pictures show -----------------------------------------------------------------


def drift_like(versions=("v1",), regions=("alpine", "north")):
    """Six weekly periods per version x region; the first two in the reference; alpine's last
    week flagged for prediction_js, north's for confidence_psi only."""
    rows = []
    for version in versions:
        for region in regions:
            for week in range(6):
                rows.append(
                    {
                        "period": dt.date(2026, 1, 5) + dt.timedelta(weeks=week),
                        "model_version": version,
                        "region": region,
                        "in_reference": week < 2,
                        "prediction_js": 0.001 * (week + 1),
                        "cross_entropy": 0.7,
                        "cross_entropy_se": 0.01 * (week + 1),
                        "flagged": region in ("alpine", "north") and week == 5,
                        "flag_reasons": {
                            "alpine": "cross_entropy +0.1 (z = 5.0, q = 1e-05); prediction_js 0.0060 (q = 0.002)",
                            "north": "confidence_psi 0.300",
                        }.get(region)
                        if week == 5
                        else None,
                    }
                )
    return pa.Table.from_pylist(rows)


@needs_matplotlib
def test_reliability_legend_gives_each_versions_pooled_ece_and_rows():
    table = calibration_rows(
        [
            (dt.date(2026, 1, 5), "v1", 5, 1, 0.50, 0.0),
            (dt.date(2026, 1, 12), "v1", 5, 3, 0.70, 1.0),
            (dt.date(2026, 1, 12), "v2", 9, 2, 0.95, 0.5),
        ]
    )
    figure = plots.reliability_figure(table, "model_version")
    legend = [t.get_text() for t in figure.axes[0].get_legend().get_texts()]
    assert legend == ["perfectly calibrated", "v1: ECE 0.100, 4 rows", "v2: ECE 0.450, 2 rows"]
    assert "2026-01-05 to 2026-01-12 pooled, 10 bins" in figure.axes[0].get_title()


@needs_matplotlib
def test_trend_rings_exactly_the_rows_flagged_for_the_measure_and_shades_the_reference():
    from dbmetrics.plots.trend import FLAGGED, REFERENCE

    figure = plots.trend_figure(
        drift_like(), "prediction_js", "region", ("model_version", "region")
    )
    ax = figure.axes[0]
    [ring] = [c for c in ax.collections if c.get_label() == FLAGGED]
    assert ring.get_offsets().tolist() == [[ax.convert_xunits(np.datetime64("2026-02-09")), 0.006]]
    assert [p.get_label() for p in ax.patches] == [REFERENCE]
    assert ax.get_ylabel() == "prediction JS divergence (nats)"


@needs_matplotlib
def test_cross_entropy_gets_95_percent_error_bars_from_its_standard_error():
    figure = plots.trend_figure(drift_like(regions=("north",)), "cross_entropy", "model_version")
    ax = figure.axes[0]
    [bars] = ax.containers
    lengths = [y1 - y0 for (_, y0), (_, y1) in bars.lines[2][0].get_segments()]
    z = scipy_stats.norm.ppf(0.975)  # the 95% two-sided normal quantile, from scipy
    assert lengths == pytest.approx([2 * z * 0.01 * (w + 1) for w in range(6)], rel=1e-12)
    assert ax.get_ylabel() == "cross-entropy (nats)"


@needs_matplotlib
def test_every_line_differs_in_marker_or_line_style_so_it_reads_in_greyscale():
    table = drift_like(versions=("v1", "v2"), regions=("alpine", "east", "north", "south", "west"))
    figure = plots.trend_figure(table, "prediction_js", "region", ("model_version", "region"))
    lines = [line for line in figure.axes[0].get_lines() if not line.get_label().startswith("_")]
    assert len(lines) == 10
    assert len({(line.get_marker(), line.get_linestyle()) for line in lines}) == 10
    assert "by region and model_version" in figure.axes[0].get_title()


@needs_matplotlib
def test_png_bytes_have_the_fixed_size_whatever_the_content(tmp_path):
    for figure in (
        plots.trend_figure(drift_like(), "prediction_js", "region", ("model_version", "region")),
        plots.trend_figure(drift_like(), "cross_entropy", "model_version", title="x" * 200),
    ):
        (tmp_path / "f.png").write_bytes(plots.png_bytes(figure))
        assert png_size(tmp_path / "f.png") == (plots.WIDTH, plots.HEIGHT) == SIZE


@needs_matplotlib
def test_trend_draws_the_measures_own_threshold_from_the_parameters():
    from dbmetrics.plots.trend import FLAGGED

    figure = plots.trend_figure(
        drift_like(),
        "prediction_js",
        "region",
        ("model_version", "region"),
        params={"js_threshold": "0.004", "psi_threshold": "0.25"},
    )
    ax = figure.axes[0]
    dashed = [
        line.get_ydata()[0]
        for line in ax.get_lines()
        if line.get_label().startswith("_")
        and len(set(line.get_ydata())) == 1
        and line.get_linestyle() == "--"
    ]
    assert dashed == [0.004]
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "threshold js_threshold = 0.004" in legend and FLAGGED in legend
    psi = drift_like().append_column("confidence_psi", pa.array([0.1] * 12))
    figure = plots.trend_figure(
        psi,
        "confidence_psi",
        "region",
        ("model_version", "region"),
        params={"psi_threshold": "0.25"},
    )
    [ring] = [c for c in figure.axes[0].collections if c.get_label() == FLAGGED]
    assert len(ring.get_offsets()) == 1  # north's week 6, flagged for confidence_psi only
    ece = drift_like().append_column("ece_delta", pa.array([0.01] * 12))
    figure = plots.trend_figure(
        ece, "ece_delta", "region", ("model_version", "region"), params={"ece_threshold": "0.1"}
    )
    levels = sorted(
        line.get_ydata()[0]
        for line in figure.axes[0].get_lines()
        if line.get_linestyle() == "--" and len(line.get_ydata()) == 2
    )
    assert levels == [-0.1, 0.1]
    # the cross-entropy test has a q-value and no fixed limit: nothing is drawn
    zs = drift_like().append_column("cross_entropy_z", pa.array([1.0] * 12))
    figure = plots.trend_figure(zs, "cross_entropy_z", "region", ("model_version", "region"))
    legend = [t.get_text() for t in figure.axes[0].get_legend().get_texts()]
    assert not [text for text in legend if text.startswith("threshold")]


@needs_matplotlib
def test_titles_and_axes_name_the_grain():
    monthly = drift_like(regions=("north",))
    figure = plots.trend_figure(monthly, "cross_entropy", "model_version", grain="month")
    assert figure.axes[0].get_title().startswith("Cross-entropy (nats) per month, by model_version")
    assert figure.axes[0].get_xlabel() == "month"
    weekly = plots.trend_figure(monthly, "cross_entropy", "model_version")
    assert weekly.axes[0].get_xlabel() == "week (starting Monday)"
    one = calibration_rows([(dt.date(2026, 3, 1), "v1", 5, 1, 0.5, 0.0)])
    for grain, words in (
        ("month", "month 2026-03,"),
        ("week", "week of 2026-03-01,"),
        ("day", "day 2026-03-01,"),
    ):
        title = plots.reliability_figure(one, "model_version", grain=grain).axes[0].get_title()
        assert words in title and " to " not in title


def test_confidence_gap_pools_the_bins_of_each_period_by_their_rows():
    table = calibration_rows(
        [
            (dt.date(2026, 1, 5), "v1", 5, 3, 0.70, 1 / 3),  # 3 rows: confidence 2.1, correct 1
            (dt.date(2026, 1, 5), "v1", 9, 1, 0.95, 1.0),  # 1 row: confidence 0.95, correct 1
            (dt.date(2026, 1, 12), "v1", 5, 2, 0.60, 0.5),
        ]
    )
    gaps = plots.confidence_gap(table, ("model_version",))
    assert gaps["period"].to_pylist() == [dt.date(2026, 1, 5), dt.date(2026, 1, 12)]
    assert gaps["evaluated_rows"].to_pylist() == [4, 2]
    assert gaps["confidence_gap"].to_pylist() == pytest.approx([(2.1 + 0.95 - 2) / 4, 0.1])


@needs_matplotlib
def test_heatmap_crosses_cells_flagged_for_the_measure_and_dots_the_others():
    from dbmetrics.plots.heatmap import CROSS, DOT

    figure = plots.heatmap_figure(drift_like(), "prediction_js", ("model_version", "region"))
    ax = figure.axes[0]
    marks = {
        c.get_label(): c.get_offsets().tolist()
        for c in ax.collections
        if c.get_label() in (CROSS, DOT)
    }
    assert marks == {CROSS: [[5, 0]], DOT: [[5, 1]]}  # column = week 6, row 0 alpine, 1 north
    assert [t.get_text() for t in ax.get_yticklabels()] == ["v1 · alpine", "v1 · north"]
    assert ax.get_xlabel() == "week (starting Monday)"
    assert figure.axes[1].get_ylabel() == "prediction JS divergence (nats)"


@needs_matplotlib
def test_reliability_bars_are_the_wilson_intervals_of_the_pooled_bins():
    from scipy.stats import binomtest

    table = calibration_rows(
        [
            (dt.date(2026, 1, 5), "v1", 5, 40, 0.55, 0.5),
            (dt.date(2026, 1, 12), "v1", 5, 10, 0.56, 0.8),
            (dt.date(2026, 1, 12), "v1", 9, 7, 0.95, 1.0),
        ]
    )
    figure = plots.reliability_figure(table, "model_version")
    [bars] = [c for c in figure.axes[0].collections if len(c.get_segments()) == 2]
    # pooled bin 5: 28 of 50 correct; bin 9: 7 of 7 (Wilson 1927, as scipy computes it)
    for segment, (k, n) in zip(bars.get_segments(), [(28, 50), (7, 7)]):
        ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
        np.testing.assert_allclose(sorted(segment[:, 1]), [ci.low, ci.high], rtol=1e-12)
