"""`dbmetrics demo DIR`: a new or empty folder, a project file in it, and the next command."""

from click.testing import CliRunner

from dbmetrics.cli.main import cli

SMALL = ["--weeks", "2", "--rows-per-day", "40", "--seed", "3"]


def invoke(*args):
    return CliRunner().invoke(cli, list(args))


def test_demo_writes_a_project_file_so_run_works_from_the_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    for name in ("DBMETRICS_PROJECT", "DBMETRICS_DATABASE", "DBMETRICS_QUERY_PATH"):
        monkeypatch.delenv(name, raising=False)
    result = invoke("demo", "try it", *SMALL)
    assert result.exit_code == 0, result.output
    assert result.stdout == "next: cd 'try it' && dbmetrics run rollup\n"
    assert (tmp_path / "try it" / "dbmetrics.toml").is_file()
    monkeypatch.chdir(tmp_path / "try it")
    rollup = invoke("run", "rollup", "-f", "csv")
    assert rollup.exit_code == 0, rollup.output
    lines = rollup.stdout.splitlines()
    assert lines[0].startswith('"period","model_version","rows","labelled_rows"')
    assert len(lines) == 3  # two weeks of v1, labelled through the id join
    assert all(int(line.split(",")[3]) > 0 for line in lines[1:])


def test_demo_refuses_a_folder_that_is_not_empty_unless_forced(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "busy").mkdir()
    (tmp_path / "busy" / "notes.txt").write_text("mine")
    result = invoke("demo", "busy", *SMALL)
    assert result.exit_code == 1
    assert "'busy' is not empty" in result.stderr and "--force" in result.stderr
    assert sorted(p.name for p in (tmp_path / "busy").iterdir()) == ["notes.txt"]
    (tmp_path / "busy" / "dbmetrics.toml").write_text("# my own\n")
    result = invoke("demo", "busy", *SMALL, "--force")
    assert result.exit_code == 0, result.output
    assert (tmp_path / "busy" / "notes.txt").read_text() == "mine"
    assert (tmp_path / "busy" / "dbmetrics.toml").read_text() == "# my own\n"
    assert (tmp_path / "busy" / "labels" / "labels.parquet").is_file()
    assert "kept its dbmetrics.toml" in result.stderr


def test_demo_refuses_a_file(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    (tmp_path / "f").write_text("x")
    result = invoke("demo", "f", *SMALL)
    assert result.exit_code == 1 and "'f' is a file" in result.stderr
