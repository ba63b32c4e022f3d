"""The README tells the truth: its commands run, and it documents every SQL function."""

import re
import shlex
from pathlib import Path

from click.testing import CliRunner

from dbmetrics import FUNCTIONS
from dbmetrics.cli.main import cli
from dbmetrics.functions import markdown_table

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text()


def code_blocks(text: str) -> list:
    return re.findall(r"```sh\n(.*?)```", text, flags=re.S)


def test_the_readme_opens_with_the_job_and_gives_two_commands():
    first_paragraph = README.split("\n\n")[1]
    assert "classifier" in first_paragraph and "DuckDB" in first_paragraph
    main_job, tests = code_blocks(README)[:2]
    assert "pip install ." in main_job and "dbmetrics run" in main_job
    assert "pip install '.[test]'" in tests and "python -m pytest" in tests


def test_ci_calls_exactly_the_readme_test_command():
    readme_command = code_blocks(README)[1].strip().split("&&")[-1].strip()
    ci_lines = [ln.strip() for ln in (ROOT / ".ci/run").read_text().splitlines() if ln.strip()]
    assert ci_lines[-1] == readme_command


def test_the_main_job_command_runs_on_the_demo(monkeypatch):
    monkeypatch.chdir(ROOT)
    steps = [s.strip() for s in code_blocks(README)[0].split("&&")]
    project = next(s for s in steps if s.startswith("export DBMETRICS_PROJECT="))
    monkeypatch.setenv("DBMETRICS_PROJECT", project.split("=", 1)[1])
    runs = [shlex.split(s)[1:] for s in steps if s.startswith("dbmetrics ")]
    assert [r[:2] for r in runs] == [["run", "rollup"], ["run", "drift"]]
    for args in runs:
        result = CliRunner().invoke(cli, ["--quiet", *args])
        assert result.exit_code == 0, result.output
        assert "2026-06-29" in result.output and "v2" in result.output


def test_the_readme_function_table_is_the_catalogue():
    # Regenerate with `dbmetrics functions --markdown` when the catalogue changes.
    section = README.split("## SQL functions")[1].split("## What the numbers mean")[0]
    start = section.index("| function | returns | computes |")
    table = section[start : section.index("\n\n", start) + 1]
    assert table == markdown_table()
    for fn in FUNCTIONS:
        assert f"`{fn.signature}`" in table, fn.name
