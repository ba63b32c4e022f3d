"""Out-of-range settings are one line naming the option, before any work starts."""

import pytest


def one_line_error(result, status: int) -> str:
    assert result.exit_code == status, result.output
    assert result.stdout == ""
    lines = [line for line in result.stderr.splitlines() if line.startswith("Error:")]
    assert len(lines) == 1  # after click's usage lines for a bad command line
    return lines[0]


def test_threads_beyond_the_maximum_name_the_option(invoke):
    line = one_line_error(invoke("--threads", "100000", "sql", "SELECT 1"), 2)
    assert line == "Error: Invalid value for '--threads': 100000 is not in the range 1<=x<=1024."


@pytest.mark.parametrize("value", ["100000", "99999999999999999999999"])
def test_huge_threads_in_the_project_file_name_the_setting(invoke, tmp_path, value):
    (tmp_path / "dbmetrics.toml").write_text(f"threads = {value}\n")
    line = one_line_error(invoke("sql", "SELECT 1"), 1)
    assert line == (
        f"Error: {tmp_path / 'dbmetrics.toml'}: 'threads' must be a positive integer up to 1024, "
        f"got {value}"
    )


def test_a_deeply_nested_project_value_is_one_line(invoke, tmp_path):
    depth = 100_000
    (tmp_path / "dbmetrics.toml").write_text("threads = " + "[" * depth + "]" * depth + "\n")
    line = one_line_error(invoke("sql", "SELECT 1"), 1)
    assert line == f"Error: {tmp_path / 'dbmetrics.toml'}: not valid TOML: values nested too deeply"


def test_huge_relabel_days_name_the_option(invoke):
    args = ("partials", "update", "--store", "s", "--set", "logs=x.parquet")
    line = one_line_error(invoke(*args, "--relabel-days", "1000000000"), 2)
    assert line == (
        "Error: Invalid value for '--relabel-days': 1000000000 is not in the range 0<=x<=100000."
    )
