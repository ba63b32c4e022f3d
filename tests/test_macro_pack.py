"""The SQL macro pack: it defines exactly the catalogue's functions, runs in a process that
never imports dbmetrics, and agrees with the Python UDFs (the numpy kernels) on every example.

The full conformance suite (tests/test_core_*.py) runs against both implementations through
the `implementation` fixture in conftest.py; references there are scipy and scikit-learn.
"""

import json
import subprocess
import sys
import textwrap

import duckdb
import numpy as np
import pytest
from scipy import special

import dbmetrics
from dbmetrics import functions, macros
from dbmetrics.kernels import row_stats

ROOT_PACK = macros.PACK


def test_the_pack_defines_exactly_the_catalogue_functions():
    assert sorted(macros.public_names()) == sorted(f.name for f in dbmetrics.FUNCTIONS)


def test_the_pack_is_the_top_level_sql_file_the_wheel_ships():
    assert ROOT_PACK.parts[-3:] == ("sql", "macros", "dbmetrics_macros.sql")


def test_row_issue_codes_in_the_pack_header_are_the_kernel_constants():
    header = macros.pack_text().split("-- ---")[0]
    assert (
        f"score_issue  0 ok | {row_stats.MISSING} missing (NULL/empty) | "
        f"{row_stats.INVALID} invalid" in header
    )
    assert f"{row_stats.NOT_A_DISTRIBUTION} not a distribution" in header
    assert (
        f"label_issue  0 ok | {row_stats.UNLABELLED} unlabelled (NULL) | "
        f"{row_stats.LABEL_OUT_OF_RANGE} out of range" in header
    )


def test_the_pack_checks_probabilities_with_the_kernels_tolerance():
    # The one home of the tolerance is kernels/distributions.SUM_TOLERANCE; plain SQL cannot
    # import it, so the pack's two checks are held to it here.
    from dbmetrics.kernels.distributions import SUM_TOLERANCE

    text = macros.pack_text()
    assert text.count(f"abs(ad_t - 1.0) <= {SUM_TOLERANCE}") == 1
    assert text.count(f"abs(ps_c.t - 1.0) > {SUM_TOLERANCE}") == 1
    assert "1e-3" not in text.replace("1e-3 of 1", "")


def close(a, b) -> bool:
    if isinstance(a, dict):
        return a.keys() == b.keys() and all(close(a[k], b[k]) for k in a)
    if isinstance(a, list):
        return len(a) == len(b) and all(close(x, y) for x, y in zip(a, b))
    if isinstance(a, float) and b is not None:
        return bool(np.isclose(a, b, rtol=1e-12, atol=1e-15))
    return a == b


@pytest.mark.parametrize("fn", dbmetrics.FUNCTIONS, ids=lambda f: f.name)
def test_every_example_gives_the_same_value_from_macro_and_udf(fn):
    macro_con, udf_con = dbmetrics.connect(functions="macros"), dbmetrics.connect(functions="udf")
    query = f"SELECT {fn.example}"
    got, want = macro_con.sql(query).fetchall()[0][0], udf_con.sql(query).fetchall()[0][0]
    assert want is not None and close(got, want), (got, want)


def test_connect_registers_the_chosen_implementation_under_each_name():
    con = dbmetrics.connect()
    macro_names = {
        r[0]
        for r in con.sql(
            "SELECT function_name FROM duckdb_functions() WHERE function_type = 'macro'"
        ).fetchall()
    }
    for fn in dbmetrics.FUNCTIONS:
        assert (fn.name in macro_names) == (functions.chosen(fn) == "macro"), fn.name
    udf_only = dbmetrics.connect(functions="udf")
    names = {
        r[0]
        for r in udf_only.sql(
            "SELECT function_name FROM duckdb_functions() WHERE function_type = 'macro'"
        ).fetchall()
    }
    assert not names & {f.name for f in dbmetrics.FUNCTIONS}


def test_an_unknown_implementation_is_refused():
    with pytest.raises(ValueError, match="functions must be one of fastest, macros, udf"):
        dbmetrics.connect(functions="fast")


# ------------------------------------------------------------ a process without dbmetrics

CHILD = textwrap.dedent(
    """
    import json, sys

    class NoDbmetrics:
        def find_spec(self, name, path=None, target=None):
            if name == "dbmetrics" or name.startswith("dbmetrics."):
                raise ImportError("this process must not import dbmetrics")

    sys.meta_path.insert(0, NoDbmetrics())
    import duckdb

    cases = json.load(sys.stdin)
    con = duckdb.connect()
    con.execute(open(cases["pack"], encoding="utf-8").read())
    out = []
    for sql in cases["queries"]:
        try:
            out.append(["ok", con.sql(sql).fetchall()])
        except duckdb.Error as exc:
            out.append(["error", str(exc)])
    assert not [m for m in sys.modules if m.split(".")[0] == "dbmetrics"]
    json.dump(out, sys.stdout)
    """
)


def run_bare(queries: list) -> list:
    """Run each query on a fresh DuckDB connection in a child process that loaded only the
    pack (importing dbmetrics there raises)."""
    done = subprocess.run(
        [sys.executable, "-c", CHILD],
        input=json.dumps({"pack": str(ROOT_PACK), "queries": queries}),
        capture_output=True,
        text=True,
        timeout=300,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout)


def double(v) -> str:
    return f"'{float(v)!r}'::DOUBLE"


def test_the_pack_alone_matches_scipy_in_a_process_that_never_imports_dbmetrics():
    rng = np.random.default_rng(7)
    z = rng.normal(0, 3, (200, 7))
    z[::9, 2] = -np.inf  # masked classes
    y = rng.integers(0, 7, 200)
    t = rng.dirichlet(np.ones(7), 200)
    values = ", ".join(
        f"({i}, [{', '.join(double(v) for v in row)}], {lab}, "
        f"[{', '.join(repr(float(v)) for v in trow)}]::DOUBLE[])"
        for i, (row, lab, trow) in enumerate(zip(z, y, t))
    )
    table = f"(VALUES {values}) AS v(i, z, y, t)"
    queries = [
        f"SELECT list(cross_entropy(z, y) ORDER BY i) FROM {table}",
        f"SELECT list(logsumexp(z) ORDER BY i) FROM {table}",
        f"SELECT list(softmax_entropy(z) ORDER BY i) FROM {table}",
        f"SELECT list(kl_divergence(t, softmax(z)) ORDER BY i) FROM {table}",
        "SELECT cross_entropy([1.0, 2.0], 2)",
        "SELECT kl_divergence([0.5, 0.5], [1.0])",
    ]
    ce, lse, ent, kl, bad_label, bad_lengths = run_bare(queries)
    log_p = special.log_softmax(z, axis=1)
    p = np.exp(log_p)
    expect = {
        "ce": -log_p[np.arange(200), y],  # scipy.special.log_softmax
        "lse": special.logsumexp(z, axis=1),
        "ent": special.entr(p).sum(axis=1),
        "kl": special.rel_entr(t, p).sum(axis=1),
    }
    for (status, rows), name in zip((ce, lse, ent, kl), expect):
        assert status == "ok"
        got = np.array(rows[0][0], float)
        np.testing.assert_allclose(got, expect[name], rtol=1e-12, atol=1e-15, err_msg=name)
    assert bad_label[0] == "error" and "cross_entropy: label 2 is outside [0, 2)" in bad_label[1]
    assert (
        bad_lengths[0] == "error"
        and "kl_divergence: the first list has 2 classes" in (bad_lengths[1])
    )


def test_pack_loads_twice_and_replaces_itself():
    con = duckdb.connect()
    macros.load_macros(con)
    macros.load_macros(con)
    assert con.sql("SELECT predicted_class([0.1, 0.7, 0.2])").fetchall() == [(1,)]


# ------------------------------------------------------------ commands


def test_functions_command_lists_and_describes_the_catalogue():
    from click.testing import CliRunner

    from dbmetrics.cli.main import cli

    listing = CliRunner().invoke(cli, ["--quiet", "functions"])
    assert listing.exit_code == 0, listing.output
    assert all(f.signature in listing.output for f in dbmetrics.FUNCTIONS)
    one = CliRunner().invoke(cli, ["--quiet", "functions", "cross_entropy"])
    assert "cross_entropy(logits, label) -> DOUBLE" in one.output
    assert "SELECT cross_entropy([1.0, 2.0, 3.0], 2)" in one.output
    markdown = CliRunner().invoke(cli, ["--quiet", "functions", "--markdown"])
    assert markdown.output == functions.markdown_table()
    unknown = CliRunner().invoke(cli, ["--quiet", "functions", "nope"])
    assert unknown.exit_code == 2 and "no function 'nope'" in unknown.output


def test_macros_command_writes_the_pack(tmp_path):
    from click.testing import CliRunner

    from dbmetrics.cli.main import cli

    out = tmp_path / "pack.sql"
    result = CliRunner().invoke(cli, ["--quiet", "macros", "--output", str(out)])
    assert result.exit_code == 0, result.output
    assert out.read_text() == macros.pack_text()
    printed = CliRunner().invoke(cli, ["--quiet", "macros"])
    assert printed.output == macros.pack_text()


def test_a_rendered_saved_query_runs_on_a_bare_connection_with_the_pack(tmp_path, same_table):
    from click.testing import CliRunner

    from dbmetrics.cli.main import cli
    from dbmetrics.queries import run_query

    log = tmp_path / "log's.parquet"  # a quote in a value is written as a SQL literal
    con = dbmetrics.connect()
    con.execute(
        f"""COPY (SELECT TIMESTAMP '2026-01-05' + to_hours(i) AS ts, 'v' || (i % 2) AS model_version,
                  [i % 7 * 0.5, 1.0, -(i % 3)]::FLOAT[] AS logits,
                  CASE WHEN i % 9 = 0 THEN NULL ELSE i % 3 END AS label
           FROM range(500) t(i)) TO '{str(log).replace("'", "''")}' (FORMAT parquet)"""
    )
    args = ["--quiet", "render", "rollup", "--set", f"logs={log}", "--set", "grain=day"]
    result = CliRunner().invoke(cli, args)
    assert result.exit_code == 0, result.output
    assert "$" not in result.output.split("\n", 3)[3]  # every bound value written in
    assert "logit_row_stats(" not in result.output  # the state in SQL alone, no struct call
    bare = duckdb.connect()
    bare.execute(macros.pack_text())
    got = bare.sql(result.output).to_arrow_table()
    same_table(run_query(con, "rollup", {"logs": str(log), "grain": "day"}), got)
