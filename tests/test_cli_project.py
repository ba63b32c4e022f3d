"""The project file (dbmetrics.toml): settings, parameter defaults and precedence."""

import pytest

from dbmetrics.cli import project
from dbmetrics.cli.params import merge, parse_settings
from dbmetrics.errors import DbmetricsError

EXAMPLE = """
database = "metrics.duckdb"
query_dirs = ["queries", "/abs/queries"]
memory_limit = "4GB"
threads = 2

[params]
logs = "demo_parquet/logs/**/*.parquet"
grain = "week"
segment_cols = ["region", "channel"]
bins = 15

[queries.drift]
grain = "day"
"""


@pytest.fixture
def example(tmp_path):
    path = tmp_path / "proj" / "dbmetrics.toml"
    path.parent.mkdir()
    path.write_text(EXAMPLE)
    return project.load(path)


def test_settings_and_relative_paths_resolve_against_the_project_folder(example, tmp_path):
    assert example.database == str(tmp_path / "proj" / "metrics.duckdb")
    assert example.query_dirs == (str(tmp_path / "proj" / "queries"), "/abs/queries")
    assert (example.memory_limit, example.threads) == ("4GB", 2)


def test_values_become_parameter_strings(example):
    assert example.params == {
        "logs": "demo_parquet/logs/**/*.parquet",
        "grain": "week",
        "segment_cols": "region,channel",
        "bins": "15",
    }


def test_params_apply_only_to_declared_parameters_and_query_tables_win(example):
    assert example.params_for("rollup", {"logs", "grain"}) == {
        "logs": "demo_parquet/logs/**/*.parquet",
        "grain": "week",
    }
    assert example.params_for("drift", {"logs", "grain"})["grain"] == "day"


def test_command_line_wins_over_the_file_which_wins_over_defaults(example):
    declared = ["logs", "grain", "ref_start"]
    assert merge("drift", declared, example, {}) == {
        "logs": "demo_parquet/logs/**/*.parquet",
        "grain": "day",
    }
    assert merge("drift", declared, example, {"grain": "month"})["grain"] == "month"
    assert "ref_start" not in merge("drift", declared, example, {})  # left to the template default


def test_an_unknown_parameter_in_a_query_table_is_refused(example):
    with pytest.raises(
        DbmetricsError,
        match=r"\[queries.drift\]: query 'drift' has no parameter 'grain'; "
        r"its parameters are: logs",
    ):
        merge("drift", ["logs"], example, {})


def test_no_file_means_an_empty_project(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    assert project.find(None) is None
    assert project.load(None) == project.Project()
    (tmp_path / "dbmetrics.toml").write_text("threads = 1\n")
    assert project.find(None) == tmp_path / "dbmetrics.toml"


def test_an_explicit_project_file_must_exist(tmp_path):
    with pytest.raises(DbmetricsError, match="--project: no project file at"):
        project.find(str(tmp_path / "nope.toml"))


@pytest.mark.parametrize(
    "text, message",
    [
        ("colour = 1", "unknown setting(s) colour"),
        ("threads = 0", "'threads' must be a positive integer"),
        ("params = 3", "'params' must be a table"),
        (
            "[params]\nlogs = {a = 1}",
            "'params.logs' must be a string, number, boolean or list of strings",
        ),
        ("query_dirs = [1]", "'query_dirs' must be a list of strings"),
        ("threads = ", "not valid TOML"),
    ],
)
def test_bad_project_files_are_one_line_errors(tmp_path, text, message):
    path = tmp_path / "dbmetrics.toml"
    path.write_text(text)
    with pytest.raises(DbmetricsError) as caught:
        project.load(path)
    assert message in str(caught.value)
    assert "\n" not in str(caught.value)


def test_set_parses_name_value_pairs_and_the_last_wins():
    assert parse_settings(("grain=week", "logs=a=b.parquet", "grain=day", "note=")) == {
        "grain": "day",
        "logs": "a=b.parquet",
        "note": "",
    }


@pytest.mark.parametrize(
    "item", ["grain", "=week", "gr ain=week", "grain;drop=1", '"x"=1', "1st=a", "a.b=c"]
)
def test_set_refuses_malformed_or_hostile_names(item):
    import click

    with pytest.raises(click.BadParameter):
        parse_settings((item,))
