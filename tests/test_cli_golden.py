"""The CLI end to end on the demo data: golden results and every --help example run as written.

Goldens live in tests/golden/; regenerate with DBMETRICS_UPDATE_GOLDEN=1 and review the diff.
"""

import math
import os
import shlex
from pathlib import Path

import click
import pyarrow.csv as pcsv
import pytest
from click.testing import CliRunner

from dbmetrics.cli.main import cli

GOLDEN = Path(__file__).parent / "golden"
DEMO = ["demo", "demo_parquet", "--weeks", "16", "--rows-per-day", "250", "--seed", "7"]
ROWS = 16 * 7 * 250
LABELLED = [
    "--set",
    "logs=demo_parquet/logs",
    "--set",
    "labels=demo_parquet/labels/labels.parquet",
    "--set",
    "id_col=prediction_id",
]


def invoke(*args):
    return CliRunner().invoke(cli, list(args))


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo")
    cwd = os.getcwd()
    os.chdir(folder)
    try:
        assert invoke(*DEMO).exit_code == 0
    finally:
        os.chdir(cwd)
    return folder


@pytest.fixture
def in_demo(demo_dir, monkeypatch):
    monkeypatch.chdir(demo_dir)
    for name in ("DBMETRICS_PROJECT", "DBMETRICS_DATABASE", "DBMETRICS_QUERY_PATH"):
        monkeypatch.delenv(name, raising=False)
    return demo_dir


def assert_matches_golden(path: Path, name: str):
    golden = GOLDEN / name
    if os.environ.get("DBMETRICS_UPDATE_GOLDEN"):
        golden.write_bytes(path.read_bytes())
    got, want = pcsv.read_csv(path), pcsv.read_csv(golden)
    assert got.column_names == want.column_names
    assert got.num_rows == want.num_rows
    for column in want.column_names:
        for g, w in zip(got[column].to_pylist(), want[column].to_pylist()):
            if isinstance(w, float) and isinstance(g, float):
                assert math.isclose(g, w, rel_tol=1e-9, abs_tol=1e-12), (column, g, w)
            else:
                assert g == w, (column, g, w)


def test_rollup_on_the_demo_data_matches_the_golden_file(in_demo):
    result = invoke("run", "rollup", *LABELLED, "--output", "rollup.csv")
    assert result.exit_code == 0, result.output
    table = pcsv.read_csv(in_demo / "rollup.csv")
    assert table.column_names[:3] == ["period", "model_version", "rows"]
    assert sum(table["rows"].to_pylist()) == ROWS
    assert set(table["model_version"].to_pylist()) == {"v1", "v2"}  # v2 rolls out from week 9
    assert all(0 < c <= 1 for c in table["label_coverage"].to_pylist())
    assert all(
        0 < ce < math.log(6) for ce in table["cross_entropy"].to_pylist()
    )  # better than uniform
    assert_matches_golden(in_demo / "rollup.csv", "rollup_demo.csv")


def test_drift_flags_the_over_confident_v2_and_exits_3_after_writing(in_demo):
    result = invoke("run", "drift", *LABELLED, "--output", "drift.csv", "--fail-on-flag")
    assert result.exit_code == 3, result.output
    flagged = pcsv.read_csv(in_demo / "drift.csv").to_pylist()
    flagged = [row for row in flagged if row["flagged"]]
    assert result.stderr == f"{len(flagged)} flagged rows in column 'flagged'\n"
    assert flagged and all(
        row["model_version"] == "v2" and not row["in_reference"] for row in flagged
    )
    assert_matches_golden(in_demo / "drift.csv", "drift_demo.csv")


def test_the_project_file_shortens_the_command_line(in_demo):
    (in_demo / "dbmetrics.toml").write_text(
        '[params]\nlogs = "demo_parquet/logs"\nlabels = "demo_parquet/labels/labels.parquet"\n'
        'id_col = "prediction_id"\n[queries.rollup]\ngrain = "month"\n'
    )
    try:
        result = invoke("run", "rollup", "--set", "segment_cols=region", "-o", "by_region.csv")
    finally:
        (in_demo / "dbmetrics.toml").unlink()
    assert result.exit_code == 0, result.output
    table = pcsv.read_csv(in_demo / "by_region.csv")
    assert {"period", "model_version", "region", "rows"} <= set(table.column_names)
    assert sum(table["rows"].to_pylist()) == ROWS


def _examples():
    """(command path, example command line) for the group and each command."""
    for name, command in [("", cli), *cli.commands.items()]:
        with click.Context(command, info_name=f"dbmetrics {name}".strip()) as ctx:
            text = command.get_help(ctx)
        block = text.split("Example:\n", 1)[1].split("\n\n", 1)[0]
        yield (
            name or "dbmetrics",
            " ".join(line.strip().rstrip("\\") for line in block.splitlines()),
        )


@pytest.mark.parametrize("name, example", list(_examples()))
def test_every_help_example_runs_as_written(tmp_path, monkeypatch, name, example):
    monkeypatch.chdir(tmp_path)
    assert invoke(*DEMO).exit_code == 0
    for part in example.split("&&"):
        words = shlex.split(part)
        assert words[0] == "dbmetrics"
        result = invoke(*words[1:])
        assert result.exit_code in (0, 3, 4), f"{part}: {result.output}"  # 4: check found problems
