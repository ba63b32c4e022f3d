"""`dbmetrics run` and `dbmetrics queries` with saved queries in a user folder."""

import json
import textwrap

import pytest
from click.testing import CliRunner

from dbmetrics.cli.main import cli

ECHO = """\
-- name: echo
-- summary: The parameters it was given, as one row (a CLI test query).
-- param grain (choice(day|week|month), default week): period length
-- param note (text, default none): free text, bound as a value
-- param alert (text, default no): yes sets the flagged column
-- example: dbmetrics run echo --set grain=day
SELECT $grain AS grain, $note AS note, $alert = 'yes' AS flagged
"""

COUNT_BY = """\
-- name: count_by
-- summary: Rows per value of one column (a CLI test query).
-- param logs (source, required): a table or Parquet files
-- param by (column, default region): the column to count by
-- example: dbmetrics run count_by --set logs=logs.parquet --set by=region
SELECT {{by}} AS value, count(*) AS n FROM {{logs}} GROUP BY ALL ORDER BY ALL
"""


@pytest.fixture
def invoke(tmp_path, monkeypatch):
    """Run the CLI in tmp_path with saved queries in tmp_path/queries (via DBMETRICS_QUERY_PATH)."""
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("DBMETRICS_PROJECT", raising=False)
    monkeypatch.delenv("DBMETRICS_DATABASE", raising=False)
    (tmp_path / "queries").mkdir()
    (tmp_path / "queries" / "echo.sql").write_text(ECHO)
    (tmp_path / "queries" / "count_by.sql").write_text(COUNT_BY)
    monkeypatch.setenv("DBMETRICS_QUERY_PATH", str(tmp_path / "queries"))

    def run(*args):
        return CliRunner().invoke(cli, list(args))

    return run


def echoed(result) -> dict:
    assert result.exit_code == 0, result.output
    return json.loads(result.stdout)[0]


def test_run_prints_a_table_with_the_template_defaults(invoke):
    result = invoke("run", "echo")
    assert result.exit_code == 0, result.output
    assert result.stdout.splitlines() == [
        "grain  note  flagged",
        "-----  ----  -------",
        "week   none  false",
        "(1 row)",
    ]


def test_set_overrides_defaults(invoke):
    assert echoed(invoke("run", "echo", "--set", "grain=day", "-s", "note=hi", "-f", "json")) == {
        "grain": "day",
        "note": "hi",
        "flagged": False,
    }


def test_precedence_set_over_query_table_over_params_over_default(invoke, tmp_path):
    (tmp_path / "dbmetrics.toml").write_text(
        textwrap.dedent("""
        [params]
        grain = "month"
        note = "from params"
        logs = "ignored: echo declares no logs"
        [queries.echo]
        note = "from queries.echo"
        """)
    )
    assert echoed(invoke("run", "echo", "-f", "json")) == {
        "grain": "month",
        "note": "from queries.echo",
        "flagged": False,
    }
    assert echoed(invoke("run", "echo", "--set", "grain=day", "-f", "json"))["grain"] == "day"


def test_project_file_from_option_or_environment_with_its_own_query_dirs(
    invoke, tmp_path, monkeypatch
):
    monkeypatch.delenv("DBMETRICS_QUERY_PATH")
    proj = tmp_path / "elsewhere"
    proj.mkdir()
    (proj / "conf.toml").write_text('query_dirs = ["../queries"]\n[params]\nnote = "project"\n')
    assert (
        echoed(invoke("--project", str(proj / "conf.toml"), "run", "echo", "-f", "json"))["note"]
        == "project"
    )
    monkeypatch.setenv("DBMETRICS_PROJECT", str(proj / "conf.toml"))
    assert echoed(invoke("run", "echo", "-f", "json"))["note"] == "project"


def test_an_unknown_parameter_in_the_project_query_table_names_the_file(invoke, tmp_path):
    (tmp_path / "dbmetrics.toml").write_text('[queries.echo]\ncolour = "red"\n')
    result = invoke("run", "echo")
    assert result.exit_code == 1
    assert "dbmetrics.toml [queries.echo]: query 'echo' has no parameter 'colour'" in result.stderr


@pytest.mark.parametrize("alert, status", [("yes", 3), ("no", 0)])
def test_fail_on_flag_exit_status_after_the_file_is_written(invoke, tmp_path, alert, status):
    result = invoke("run", "echo", "--set", f"alert={alert}", "-o", "alert.json", "--fail-on-flag")
    assert result.exit_code == status, result.output
    assert json.loads((tmp_path / "alert.json").read_text())[0]["flagged"] is (alert == "yes")


@pytest.mark.parametrize("item", ["grain", "grain week", "=day", "gr;ain=day"])
def test_malformed_set_is_a_usage_error(invoke, item):
    result = invoke("run", "echo", "--set", item)
    assert result.exit_code == 2
    assert "Invalid value for '--set'" in result.stderr


def test_an_unknown_parameter_is_refused_with_the_known_ones(invoke):
    result = invoke("run", "echo", "--set", "colour=red")
    assert result.exit_code == 1
    assert "has no parameter colour; its parameters are: grain, note, alert" in result.stderr


def test_a_bad_choice_is_refused(invoke):
    result = invoke("run", "echo", "--set", "grain=fortnight")
    assert (result.exit_code, result.stderr.count("\n")) == (1, 1)
    assert "must be one of day, week, month" in result.stderr


def test_hostile_values_are_bound_never_pasted(invoke):
    hostile = "x'; DROP TABLE t; --"
    assert (
        echoed(invoke("run", "echo", "--set", f"note={hostile}", "-f", "json"))["note"] == hostile
    )


def test_hostile_identifiers_are_refused_with_the_columns_that_exist(invoke):
    logs = "SELECT * FROM (VALUES ('eu', 1), ('us', 2), ('eu', 3)) t(region, id)"
    setup = invoke("--database", "t.duckdb", "sql", f"CREATE TABLE logs AS {logs}")
    assert setup.exit_code == 0, setup.output
    ok = invoke("--database", "t.duckdb", "run", "count_by", "--set", "logs=logs", "-f", "csv")
    assert ok.stdout == '"value","n"\n"eu",2\n"us",1\n'
    for column in ['region" FROM logs; DROP TABLE logs; --', "nope"]:
        result = invoke(
            "--database",
            "t.duckdb",
            "run",
            "count_by",
            "--set",
            "logs=logs",
            "--set",
            f"by={column}",
        )
        assert result.exit_code == 1
        assert f"column `{column}` not found in logs; columns are: region, id" in result.stderr
    assert invoke(
        "--database", "t.duckdb", "sql", "SELECT count(*) FROM logs", "-f", "csv"
    ).stdout.endswith("3\n")


def test_a_missing_required_parameter_says_how_to_pass_it(invoke):
    result = invoke("run", "count_by")
    assert result.exit_code == 1
    assert "pass --set logs=..." in result.stderr


def test_an_unknown_query_lists_the_queries(invoke):
    result = invoke("run", "nope")
    assert result.exit_code == 1
    assert "no saved query `nope`; queries are: " in result.stderr and "echo" in result.stderr


def test_verbose_shows_the_rendered_sql_and_bound_values(invoke):
    result = invoke("-v", "run", "echo", "--set", "note=hi")
    assert result.exit_code == 0
    assert "SELECT $grain AS grain" in result.stderr and "'note': 'hi'" in result.stderr


def test_queries_lists_ours_and_the_users_with_a_description(invoke):
    result = invoke("queries")
    assert result.exit_code == 0, result.output
    lines = result.stdout.splitlines()
    assert lines[0].split() == ["query", "from", "description"]
    assert any(
        line.split()[:2] == ["echo", "user"] and line.endswith("(a CLI test query).")
        for line in lines
    )


def test_queries_name_shows_parameters_defaults_meaning_and_example(invoke):
    result = invoke("queries", "count_by")
    assert result.exit_code == 0, result.output
    text = result.stdout
    assert text.startswith("count_by: Rows per value of one column (a CLI test query).\n")
    assert "logs       source  (required)  a table or Parquet files" in text
    assert "by         column  region      the column to count by" in text
    assert text.endswith(
        "Example:\n  dbmetrics run count_by --set logs=logs.parquet --set by=region\n"
    )


def test_a_missing_query_folder_is_one_line(invoke, monkeypatch):
    monkeypatch.setenv("DBMETRICS_QUERY_PATH", "no/such/folder")
    result = invoke("queries")
    assert result.exit_code == 1
    assert result.stderr.count("\n") == 1 and "no/such/folder" in result.stderr
