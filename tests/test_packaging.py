"""The wheel ships every package and the top-level sql/ folder."""

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_pyproject_lists_every_package_of_the_source_tree():
    listed = set(
        tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"]
    )
    found = {
        str(p.parent.relative_to(ROOT)).replace("/", ".")
        for p in (ROOT / "dbmetrics").rglob("__init__.py")
    }
    assert found | {"dbmetrics.sql"} == listed


def test_the_saved_queries_live_in_the_top_level_sql_folder():
    from dbmetrics.queries.catalog import BUILT_IN, list_queries

    assert BUILT_IN == ROOT / "sql"
    assert {q.name for q in list_queries()} >= {"rollup", "calibration", "drift", "segments"}
