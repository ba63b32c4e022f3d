"""The user's query folders: one unusable file is named with its problem and never breaks the
other queries; a query declares only the parameters it uses by name."""

import datetime as dt
import os

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

from dbmetrics.cli.main import cli
from dbmetrics.queries import get_query

GOOD = """\
-- name: per_version
-- summary: Rows per version, from the shared state.
-- param min_rows (integer, default 0): keep versions with at least this many rows
-- include: column_roles
-- output rows: rows
-- example: dbmetrics run per_version --set logs=logs/
SELECT {{version_col}}, sum(rows)::BIGINT AS rows
FROM ({{state}})
GROUP BY ALL
HAVING sum(rows) >= $min_rows
ORDER BY ALL
"""


@pytest.fixture
def folder(tmp_path, monkeypatch):
    """A query folder on DBMETRICS_QUERY_PATH holding one good query, and a small log."""
    monkeypatch.chdir(tmp_path)
    for name in ("DBMETRICS_PROJECT", "DBMETRICS_DATABASE"):
        monkeypatch.delenv(name, raising=False)
    queries = tmp_path / "queries"
    queries.mkdir()
    (queries / "per_version.sql").write_text(GOOD)
    monkeypatch.setenv("DBMETRICS_QUERY_PATH", str(queries))
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 1, 5)] * 3, pa.timestamp("us")),
                "model_version": ["v1", "v1", "v2"],
                "logits": [[0.0, 1.0]] * 3,
                "label": [1, 0, 1],
            }
        ),
        tmp_path / "logs.parquet",
    )
    return queries


def invoke(*args):
    return CliRunner().invoke(cli, list(args))


def assert_others_work(problem):
    """`queries` lists the rest and names the broken file; queries still run."""
    listed = invoke("queries")
    assert listed.exit_code == 0, listed.output
    names = [line.split()[0] for line in listed.stdout.splitlines()[2:]]
    assert "per_version" in names and "rollup" in names
    assert listed.stderr.splitlines() == [f"not listed: {problem}"]
    ran = invoke("run", "per_version", "--set", "logs=logs.parquet", "-f", "csv")
    assert ran.exit_code == 0, ran.output
    assert ran.stdout == '"model_version","rows"\n"v1",2\n"v2",1\n'


def test_a_file_that_is_not_utf8_is_named_and_left_out(folder):
    (folder / "latin.sql").write_bytes(GOOD.replace("per_version", "latin").encode() + b"-- \xe9\n")
    problem = f"{folder / 'latin.sql'}: not UTF-8 text (byte 0xe9 on line 12); save it as UTF-8"
    assert_others_work(problem)
    asked = invoke("run", "latin", "--set", "logs=logs.parquet")
    assert (asked.exit_code, asked.stderr) == (1, f"Error: {problem}\n")


def test_a_utf8_file_with_a_byte_order_mark_is_read(folder):
    (folder / "bom.sql").write_bytes(b"\xef\xbb\xbf" + GOOD.replace("per_version", "bom").encode())
    assert get_query("bom").summary == "Rows per version, from the shared state."


def test_a_symlink_loop_is_named_and_left_out(folder):
    (folder / "a.sql").symlink_to(folder / "b.sql")
    (folder / "b.sql").symlink_to(folder / "a.sql")
    problem = "cannot read: Too many levels of symbolic links"
    listed = invoke("queries")
    assert listed.exit_code == 0
    assert listed.stderr.splitlines() == [
        f"not listed: {folder / 'a.sql'}: {problem}",
        f"not listed: {folder / 'b.sql'}: {problem}",
    ]
    os.unlink(folder / "b.sql")
    assert_others_work(f"{folder / 'a.sql'}: cannot read: No such file or directory")


def test_a_40k_character_header_line_is_one_short_line(folder):
    long = "-- param wide (" + "x" * 40_000 + ": never closed\n"
    (folder / "wide.sql").write_text(
        GOOD.replace("per_version", "wide").replace("-- output", long + "-- output")
    )
    listed = invoke("queries")
    (line,) = listed.stderr.splitlines()
    assert line.startswith(f"not listed: {folder / 'wide.sql'}: cannot read `-- param wide (xxx")
    assert len(line) < 400 and line.endswith(
        "expected `-- param NAME (TYPE[, default VALUE | required]): meaning`"
    )


def test_a_column_role_declared_with_another_type_is_named(folder):
    text = GOOD.replace("per_version", "typo").replace(
        "-- output", "-- param label_col (integer, default 0): the label\n-- output"
    )
    (folder / "typo.sql").write_text(text)
    assert_others_work(
        f"{folder / 'typo.sql'}: parameter `label_col` is a column role and must have type "
        "column (as in rollup); got `integer`"
    )


def test_a_user_query_may_not_take_a_built_in_name(folder):
    (folder / "rollup.sql").write_text(GOOD.replace("per_version", "rollup"))
    problem = "query `rollup` is defined twice: "
    listed = invoke("queries")
    assert listed.exit_code == 0 and "per_version" in listed.stdout
    assert listed.stderr.startswith(f"not listed: {problem}")


def test_a_query_including_the_column_roles_lists_them_after_its_own(folder):
    info = get_query("per_version")
    assert [p.name for p in info.params][:3] == ["min_rows", "logs", "time_col"]
    assert info.param("bins").type == get_query("rollup").param("bins").type
    shown = invoke("queries", "per_version")
    assert shown.exit_code == 0 and "segment_cols" in shown.stdout


def test_an_including_query_gets_the_included_parameters(folder):
    (folder / "busy.sql").write_text(
        "-- name: busy\n-- summary: Versions with many rows.\n"
        "-- example: dbmetrics run busy --set logs=logs/ --set min_rows=2\n"
        "SELECT * FROM ({{query:per_version}})\n"
    )
    ran = invoke("run", "busy", "--set", "logs=logs.parquet", "--set", "min_rows=2", "-f", "csv")
    assert ran.exit_code == 0, ran.output
    assert ran.stdout == '"model_version","rows"\n"v1",2\n'
