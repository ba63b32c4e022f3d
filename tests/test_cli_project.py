"""The project file (dbmetrics.toml): settings, parameter defaults and precedence."""

import pytest

from dbmetrics import project
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


def test_an_unknown_key_is_an_error_naming_the_closest_known_key(tmp_path):
    """A typo in [params] or [queries.NAME] is refused, never silently ignored."""
    path = tmp_path / "dbmetrics.toml"
    for text, message in [
        (
            "[params]\nsegmnet_cols = 'region'\n",
            "[params]: no saved query has a parameter 'segmnet_cols' (did you mean segment_cols?)",
        ),
        (
            "[queries.drift]\nmin_row = 10\n",
            "[queries.drift]: query 'drift' has no parameter 'min_row' (did you mean min_rows?)",
        ),
        (
            "[queries.drfit]\nz = 3\n",
            "[queries.drfit]: there is no saved query 'drfit' (did you mean drift?)",
        ),
        (
            "[queries.check]\ntolerence = 0.01\n",
            "[queries.check]: query 'check' has no parameter 'tolerence' (did you mean tolerance?)",
        ),
    ]:
        path.write_text(text)
        with pytest.raises(DbmetricsError) as err:
            merge("rollup", ["logs", "grain"], project.load(path), {})
        assert str(err.value).startswith(f"{path} {message}")
    path.write_text("[params]\ntolerance = 0.01\n[queries.check]\nrequire_labels = 'yes'\n")
    assert merge("rollup", ["logs"], project.load(path), {}) == {}  # known to the check


def test_run_query_reads_a_project_file(tmp_path, monkeypatch):
    """The API takes the project file as the CLI does: [params] < [queries.NAME] < params."""
    import dbmetrics
    from dbmetrics.queries import run_query

    queries = tmp_path / "mine"
    queries.mkdir()
    (queries / "echo.sql").write_text(
        "-- name: echo\n-- summary: echo\n-- param grain (text, default week): g\n"
        "-- param note (text): n\n-- output grain: g\n-- example: dbmetrics run echo\n"
        "SELECT $grain AS grain, $note AS note\n"
    )
    path = tmp_path / "dbmetrics.toml"
    path.write_text(
        'query_dirs = ["mine"]\n[params]\ngrain = "day"\n[queries.echo]\nnote = "from file"\n'
    )
    con = dbmetrics.connect()
    got = run_query(con, "echo", {"note": "given"}, project=str(path)).to_pylist()
    assert got == [{"grain": "day", "note": "given"}]
    got = run_query(con, "echo", {}, project=project.load(path)).to_pylist()
    assert got == [{"grain": "day", "note": "from file"}]


def test_partials_update_takes_the_column_roles_from_the_project_params(tmp_path, monkeypatch):
    """A store's column roles are the project's [params] under --set, over the defaults
    declared in queries/role_params.py; a [queries.NAME] table is one query's only."""
    import datetime as dt
    import json

    import pyarrow as pa
    import pyarrow.parquet as pq
    from click.testing import CliRunner

    from dbmetrics.cli.main import cli

    monkeypatch.chdir(tmp_path)
    for name in ("DBMETRICS_PROJECT", "DBMETRICS_DATABASE", "DBMETRICS_QUERY_PATH"):
        monkeypatch.delenv(name, raising=False)
    day = dt.datetime(2026, 1, 5)
    log = pa.table(
        {
            "when": [day, day + dt.timedelta(days=1)],
            "logits": [[0.0, 1.0], [2.0, 0.0]],
            "label": [1, 0],
            "model_version": ["v1", "v1"],
            "region": ["north", "south"],
        }
    )
    pq.write_table(log, tmp_path / "logs.parquet")
    (tmp_path / "dbmetrics.toml").write_text(
        '[params]\nlogs = "logs.parquet"\ntime_col = "when"\nsegment_cols = "region"\n'
        'grain = "day"\n[queries.rollup]\nbins = 10\n'
    )
    result = CliRunner().invoke(
        cli, ["partials", "update", "--store", "store", "--set", "time_col=when"]
    )
    assert result.exit_code == 0, result.output
    roles = json.loads((tmp_path / "store" / "manifest.json").read_text())["column_roles"]
    assert (roles["segment_cols"], roles["time_col"], roles["bins"]) == ("region", "when", "15")
