"""The wheel ships every package and the top-level sql/ folder."""

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
# sql/ and each folder in it, as the wheel's dbmetrics.sql packages
SQL_PACKAGES = {"dbmetrics.sql"} | {
    "dbmetrics.sql." + str(p.relative_to(ROOT / "sql")).replace("/", ".")
    for p in (ROOT / "sql").rglob("*")
    if p.is_dir() and "__pycache__" not in p.parts
}


def test_pyproject_lists_every_package_of_the_source_tree():
    listed = set(
        tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"]
    )
    found = {
        str(p.parent.relative_to(ROOT)).replace("/", ".")
        for p in (ROOT / "dbmetrics").rglob("__init__.py")
    }
    assert found | SQL_PACKAGES == listed


def test_every_sql_folder_is_a_data_package_with_its_files():
    """setuptools warns about (and will ignore) a package-data folder that `packages` does
    not name: each folder of sql/ is listed, and its package data takes its .sql files."""
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    assert set(config["packages"]) >= SQL_PACKAGES
    assert config["package-dir"] == {"dbmetrics.sql": "sql"}
    assert config["package-data"] == {name: ["*.sql"] for name in SQL_PACKAGES}


def test_the_saved_queries_live_in_the_top_level_sql_folder():
    from dbmetrics.queries.catalog import BUILT_IN, list_queries

    assert BUILT_IN == ROOT / "sql"
    assert {q.name for q in list_queries()} >= {"rollup", "calibration", "drift", "segments"}
