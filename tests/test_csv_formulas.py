"""CSV cells a spreadsheet would run as formulas are written as text by default.

Reference: OWASP, "CSV Injection" (cells starting with =, +, -, @, tab or carriage return are
interpreted as formulas by spreadsheet programs; prefixing a single quote makes them text).
Numbers stay numbers: only text cells (and column names) are touched.
"""

import io
import json

import pyarrow as pa
import pytest

from dbmetrics.cli.output import encode

SQL = (
    "SELECT * FROM (VALUES ('=HYPERLINK(\"http://x\")', -1.5, '-2'), "
    "('@SUM(A1)', 2.0, '+cmd|x'), ('plain', -3.0, '-1+2'), (NULL, NULL, NULL)) t(seg, gap, \"=n\")"
)


def test_csv_text_cells_that_would_run_get_a_leading_quote(invoke):
    result = invoke("sql", SQL, "-f", "csv")
    assert result.exit_code == 0, result.output
    assert result.stdout.splitlines() == [
        '"seg","gap","\'=n"',
        '"\'=HYPERLINK(""http://x"")",-1.5,"-2"',
        '"\'@SUM(A1)",2.0,"\'+cmd|x"',
        '"plain",-3.0,"\'-1+2"',
        ",,",
    ]


def test_csv_formulas_keeps_the_cells_as_they_are(invoke, tmp_path):
    result = invoke("sql", SQL, "-o", "out.csv", "--csv-formulas")
    assert result.exit_code == 0, result.output
    lines = (tmp_path / "out.csv").read_text().splitlines()
    assert lines[0] == '"seg","gap","=n"' and lines[2] == '"@SUM(A1)",2.0,"+cmd|x"'


def test_other_formats_keep_the_text_exactly(invoke):
    rows = json.loads(invoke("sql", SQL, "-f", "json").stdout)
    assert rows[1] == {"seg": "@SUM(A1)", "gap": 2.0, "=n": "+cmd|x"}


@pytest.mark.parametrize("cell", ["=1", "+1+1", "-1-1", "@A1", "\tx", "\rx"])
def test_every_formula_start_is_neutralised_also_in_dictionary_columns(cell):
    table = pa.table({"seg": pa.array([cell, "ok"]).dictionary_encode()})
    out = io.BytesIO()
    encode(table, "csv", out)
    assert out.getvalue().decode().splitlines()[1].startswith("\"'")
