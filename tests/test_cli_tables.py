"""Tables for people: key columns first, fitted to the terminal, numbers lined up, nothing unsafe."""

import csv
import io
import re
from pathlib import Path

import pyarrow as pa
import pytest
from click.testing import CliRunner

from dbmetrics.cli.main import cli
from dbmetrics.cli.textable import aligned, markdown, number, result_table, safe, width_of

ROOT = Path(__file__).resolve().parents[1]
PROJECT = ROOT / "demo_parquet" / "dbmetrics.toml"


@pytest.fixture
def invoke(monkeypatch):
    """The CLI from the repository root on the demo project, as on a 100-column terminal."""
    monkeypatch.chdir(ROOT)
    monkeypatch.setenv("DBMETRICS_PROJECT", str(PROJECT))
    monkeypatch.setenv("COLUMNS", "100")
    monkeypatch.delenv("DBMETRICS_QUERY_PATH", raising=False)

    def run(*args):
        result = CliRunner().invoke(cli, ["--quiet", *args])
        assert result.exit_code == 0, result.output
        return result.stdout

    return run


def reasons(invoke, *args) -> list[str]:
    """Every flag reason of the drift result, from its CSV (full text)."""
    rows = csv.DictReader(io.StringIO(invoke("run", "drift", *args, "-f", "csv")))
    return [r["flag_reasons"] for r in rows if r["flag_reasons"]]


@pytest.mark.parametrize("args", [[], ["--set", "segment_cols=region"]])
def test_at_100_columns_the_drift_table_fits_and_keeps_every_reason_whole(invoke, args):
    table = invoke("run", "drift", *args)
    lines = table.splitlines()
    assert max(width_of(line) for line in lines) <= 100
    segments = ["region"] if args else []
    expected = ["period", "model_version", *segments, "flagged", "flag_reasons"]
    assert lines[0].split()[: len(expected)] == expected
    found = reasons(invoke, *args)
    assert found, "the demo has flagged cells"
    # the reasons column, read down the table (a reason longer than the column wraps in it)
    start = lines[0].index("flag_reasons")
    width = len(lines[1][start:].split()[0])
    column = " ".join(line[start : start + width] for line in lines[2:])
    flat = " ".join(column.split())
    for reason in found:
        for piece in reason.split("; "):
            assert " ".join(piece.split()) in flat


def test_at_100_columns_the_rollup_table_fits_and_says_what_it_left_out(invoke):
    table = invoke("run", "rollup")
    lines = table.splitlines()
    assert max(width_of(line) for line in lines) <= 100
    assert lines[0].split()[:4] == ["period", "model_version", "rows", "label_coverage"]
    count = next(i for i, line in enumerate(lines) if re.fullmatch(r"\(\d+ rows\)", line))
    note = " ".join(lines[count + 1 :])
    assert "of 37 columns not shown:" in note
    assert "--all-columns" in note and "--columns" in note
    left_out = note.split("not shown: ")[1].split(". See")[0].split(", ")
    assert "infinite_loss_rows" in left_out and "cross_entropy" not in left_out
    assert note.split()[0] == str(len(left_out))


def test_columns_picks_and_orders_all_columns_shows_every_one(invoke):
    picked = invoke("run", "rollup", "--columns", "ece,period,rows").splitlines()
    assert picked[0].split() == ["ece", "period", "rows"]
    assert "not shown" not in picked[-1]
    every = invoke("run", "rollup", "--all-columns").splitlines()
    assert len(every[0].split()) == 37 and re.fullmatch(r"\(\d+ rows\)", every[-1])


def test_an_unknown_picked_column_is_one_line_naming_it(monkeypatch):
    monkeypatch.chdir(ROOT)
    result = CliRunner().invoke(cli, ["sql", "SELECT 1 AS a", "--columns", "a,nope"])
    assert result.exit_code == 1
    assert "--columns" in result.stderr and "'nope'" in result.stderr


def test_csv_keeps_every_column_at_full_precision(invoke):
    rows = list(csv.DictReader(io.StringIO(invoke("run", "rollup", "-f", "csv"))))
    assert len(rows[0]) == 37
    assert len(rows[0]["cross_entropy"]) > 10  # repr of a float64, not 4 digits


def test_numbers_have_four_significant_digits_and_line_up_on_the_point():
    assert number(0.0404) == "0.04040"
    assert number(9.71154e-05) == "9.712e-05"
    assert number(-1.03256) == "-1.033"
    assert number(9.99996) == "10.00"
    assert number(123456.7) == "123457"
    assert [number(v) for v in (float("nan"), float("inf"), float("-inf"))] == [
        "NaN",
        "inf",
        "-inf",
    ]
    column = aligned([number(v) for v in (0.0404, 12.5, -3.0, None, 9.71154e-05)])
    assert len({len(c) for c in column}) == 1
    assert len({c.index(".") for c in column if "." in c}) == 1
    assert column[3].strip() == "NULL"


def test_control_characters_from_the_data_are_shown_as_escapes(monkeypatch):
    monkeypatch.chdir(ROOT)
    sql = "SELECT 'a' || chr(27) || '[2J' || chr(13) || 'b' || chr(8238) AS s, 1 AS n"
    for fmt in ("table", "markdown"):
        out = CliRunner().invoke(cli, ["sql", sql, "-f", fmt]).stdout
        assert "\x1b" not in out and "\r" not in out and "\u202e" not in out
        assert "a\\x1b[2J\\rb\\u202e" in out
    assert safe("tab\there\nnew") == "tab\\there\\nnew"


def test_markdown_is_a_table_with_numbers_right_aligned(invoke, tmp_path):
    out = invoke("run", "rollup", "-f", "markdown", "--columns", "period,model_version,ece")
    lines = out.splitlines()
    assert lines[0] == "| period | model_version | ece |"
    assert lines[1] == "|---|---|---:|"
    assert lines[2].startswith("| 2026-01-05 | v1 | 0.0277")
    target = tmp_path / "rollup.md"
    invoke("run", "rollup", "-o", str(target))
    assert target.read_text().splitlines()[0].startswith("| period | model_version | rows |")
    table = pa.table({"a|b": ["x|y"]})
    assert markdown(table).splitlines()[2] == "| x\\|y |"


def test_text_columns_wrap_and_numbers_give_way_from_the_end():
    table = pa.table(
        {
            "key": ["k1", "k2"],
            "why": ["first reason 0.1; second reason 0.2; third reason 0.3", None],
            "a": [1.5, 2.25],
            "b": [10, 20],
        }
    )
    fitted = result_table(table, width=46)
    assert fitted.shown == ("key", "why", "a") and fitted.hidden == ("b",)
    lines = fitted.text.splitlines()
    assert max(width_of(line) for line in lines) <= 46
    assert [line[5:].strip() for line in lines[2:5]] == [
        "first reason 0.1;                   1.500",
        "second reason 0.2;",
        "third reason 0.3",
    ]
    wide = result_table(pa.table({"名前": ["東京"], "n": [1]}))
    assert wide.text.splitlines() == ["名前  n", "----  -", "東京  1", "(1 row)"]


def test_a_user_query_declares_its_key_columns(tmp_path, monkeypatch):
    (tmp_path / "three.sql").write_text(
        "-- name: three\n-- summary: Three columns (a test query).\n"
        "-- output a: first\n-- output b: second\n-- output c: third\n"
        "-- show: c, a\n-- example: dbmetrics run three\nSELECT 1 AS a, 2 AS b, 3 AS c\n"
    )
    monkeypatch.chdir(tmp_path)
    monkeypatch.setenv("DBMETRICS_QUERY_PATH", str(tmp_path))
    monkeypatch.delenv("DBMETRICS_PROJECT", raising=False)
    result = CliRunner().invoke(cli, ["run", "three"])
    assert result.stdout.splitlines()[0].split() == ["c", "a"]
    assert "1 of 3 columns not shown: b." in result.stdout
    (tmp_path / "three.sql").write_text(
        (tmp_path / "three.sql").read_text().replace("show: c, a", "show: c, nope")
    )
    result = CliRunner().invoke(cli, ["run", "three"])
    assert result.exit_code == 1 and "`-- show:` names nope" in result.stderr


def test_segments_says_how_many_cells_found_no_business_row(tmp_path, monkeypatch):
    monkeypatch.chdir(ROOT)
    monkeypatch.setenv("DBMETRICS_PROJECT", str(PROJECT))
    (tmp_path / "some.csv").write_text("region,margin_pct\nnorth,31.5\nsouth,28.0\n")
    result = CliRunner().invoke(
        cli,
        [
            "run",
            "segments",
            "--set",
            "segment_cols=region",
            "--set",
            "grain=month",
            "--set",
            f"business={tmp_path / 'some.csv'}",
            "-f",
            "csv",
        ],
    )
    assert result.exit_code == 0, result.output
    rows = list(csv.DictReader(io.StringIO(result.stdout)))
    missing = sum(r["business_found"] == "false" for r in rows)
    assert missing == sum(r["region"] not in ("north", "south") for r in rows) > 0
    assert f"{missing} of {len(rows)} cells found no business row" in result.stderr


def test_duckdb_never_prints_its_progress_bar_into_the_output():
    """DuckDB prints a bar to stdout (fd 1) for queries over 2 s unless told not to: that
    would land in a piped table or CSV, carriage returns and all."""
    from dbmetrics.cli.session import Session
    from dbmetrics.project import Project

    for quiet in (True, False):  # not a terminal under pytest: no progress of ours either
        session = Session(Project(), quiet=quiet)
        con = session.connect()
        assert con.sql("SELECT current_setting('enable_progress_bar_print')").fetchall() == [
            (False,)
        ]
        session.close()
