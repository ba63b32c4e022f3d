"""The project file (``dbmetrics.toml``): connection settings and parameter defaults.

Format::

    database = "metrics.duckdb"          # relative paths: to the project file's folder
    query_dirs = ["queries"]             # extra folders of saved queries (same rule)
    memory_limit = "4GB"
    threads = 2

    [params]                             # every query that declares the parameter
    logs = "demo_parquet/logs/**/*.parquet"
    segment_cols = ["region", "channel"] # a list is passed joined with commas

    [queries.drift]                      # one query only; wins over [params]
    ref_start = "2026-01-05"

Parameter values are passed as written: relative paths in them resolve against the
current directory, like every path given to DuckDB.

Precedence (`merge`): a query's defaults < ``[params]`` < ``[queries.NAME]`` < the values
given (``--set``, or ``run_query``'s params). A key of ``[params]`` that no saved query
declares, a ``[queries.NAME]`` for no saved query, or a key that query does not declare, is
an error naming the closest known one.
"""

from __future__ import annotations

import difflib
import os
from dataclasses import dataclass, field
from pathlib import Path

from dbmetrics.errors import DbmetricsError

FILE_NAME = "dbmetrics.toml"
_SETTINGS = {"database", "query_dirs", "memory_limit", "threads", "params", "queries"}
MAX_THREADS = 1024  # DuckDB starts every thread at connect: 100000 took half a minute, then hung


@dataclass(frozen=True)
class Project:
    """Settings read from a project file; empty when there is none."""

    path: Path | None = None
    database: str | None = None
    query_dirs: tuple[str, ...] = ()
    memory_limit: str | None = None
    threads: int | None = None
    params: dict[str, str] = field(default_factory=dict)
    queries: dict[str, dict[str, str]] = field(default_factory=dict)

    def params_for(self, name: str, declared: set[str]) -> dict[str, str]:
        """``[params]`` restricted to ``declared``, overridden by ``[queries.NAME]``."""
        merged = {k: v for k, v in self.params.items() if k in declared}
        merged.update(self.queries.get(name, {}))
        return merged


def open_project(project) -> Project:
    """A Project from a Project, a path to a project file, or None (an empty project)."""
    if project is None or isinstance(project, Project):
        return project or Project()
    return load(find(str(project)))


def merge(
    query: str, declared: list[str], project: Project, given: dict, known: dict | None = None
) -> dict:
    """Defaults < project ``[params]`` < ``[queries.QUERY]`` < ``given``; unknown keys refused.

    ``[queries.QUERY]`` keys are checked against ``declared``; with ``known`` (query name ->
    its parameter names, e.g. every saved query and the check) every ``[params]`` key and
    every ``[queries.NAME]`` table too. The query's own defaults are left to it.
    """
    unknown = [name for name in project.queries.get(query, {}) if name not in declared]
    if unknown:
        raise DbmetricsError(
            f"{project.path} [queries.{query}]: query '{query}' has no parameter '{unknown[0]}'"
            f"{closest(unknown[0], declared)}; "
            f"its parameters are: {', '.join(declared) or '(none)'}"
        )
    if known is not None:
        _check_keys(project, known)
    return {**project.params_for(query, set(declared)), **given}


def _check_keys(project: Project, known: dict) -> None:
    """Every ``[params]`` key and ``[queries.NAME]`` names something a query in ``known``
    declares."""
    every = sorted(set().union(*known.values()))
    for key in project.params:
        if key not in every:
            raise DbmetricsError(
                f"{project.path} [params]: no saved query has a parameter '{key}'"
                f"{closest(key, every)}"
            )
    for name, table in project.queries.items():
        if name not in known:
            raise DbmetricsError(
                f"{project.path} [queries.{name}]: there is no saved query '{name}'"
                f"{closest(name, list(known))}; queries are: {', '.join(sorted(known))}"
            )
        wrong = [k for k in table if k not in known[name]]
        if wrong:
            raise DbmetricsError(
                f"{project.path} [queries.{name}]: query '{name}' has no parameter "
                f"'{wrong[0]}'{closest(wrong[0], sorted(known[name]))}"
            )


def closest(word: str, choices: list[str]) -> str:
    """`; did you mean X?` for the closest choice, or empty.

    >>> closest("segmnet_cols", ["segment_cols", "logs"])
    ' (did you mean segment_cols?)'
    """
    found = difflib.get_close_matches(word, choices, n=1, cutoff=0.6)
    return f" (did you mean {found[0]}?)" if found else ""


def find(explicit: str | None) -> Path | None:
    """The project file: ``explicit`` (``--project``/``DBMETRICS_PROJECT``) or ``./dbmetrics.toml``."""
    if explicit:
        path = Path(explicit)
        if not path.is_file():
            raise DbmetricsError(f"--project: no project file at '{path}'")
        return path
    default = Path.cwd() / FILE_NAME
    return default if default.is_file() else None


def load(path: Path | None) -> Project:
    """Read and check a project file; ``None`` gives an empty project."""
    if path is None:
        return Project()
    data = _parse(path)
    unknown = sorted(set(data) - _SETTINGS)
    if unknown:
        raise DbmetricsError(
            f"{path}: unknown setting(s) {', '.join(unknown)}; "
            f"known settings are: {', '.join(sorted(_SETTINGS))}"
        )
    base = path.parent
    queries = _table(data, "queries", path)
    return Project(
        path=path,
        database=_path_value(data.get("database"), base, "database", path),
        query_dirs=tuple(
            _path_value(d, base, "query_dirs", path) for d in _list(data, "query_dirs", path)
        ),
        memory_limit=_scalar(data["memory_limit"], "memory_limit", path)
        if "memory_limit" in data
        else None,
        threads=_threads(data.get("threads"), path),
        params=_params(_table(data, "params", path), "params", path),
        queries={
            name: _params(_table(queries, name, path), f"queries.{name}", path) for name in queries
        },
    )


def _parse(path: Path) -> dict:
    try:
        import tomllib
    except ModuleNotFoundError:  # Python 3.10
        try:
            import tomli as tomllib
        except ModuleNotFoundError:
            raise DbmetricsError(
                f"{path}: reading a project file needs Python 3.11+ or the 'tomli' package; "
                "pip install tomli"
            ) from None
    try:
        with open(path, "rb") as f:
            return tomllib.load(f)
    except tomllib.TOMLDecodeError as e:
        raise DbmetricsError(f"{path}: not valid TOML: {e}") from None
    except RecursionError:  # the parser recurses once per level of [ or {
        raise DbmetricsError(f"{path}: not valid TOML: values nested too deeply") from None


def _table(data: dict, key: str, path: Path) -> dict:
    value = data.get(key, {})
    if not isinstance(value, dict):
        raise DbmetricsError(
            f"{path}: '{key}' must be a table ([{key}]), got {type(value).__name__}"
        )
    return value


def _list(data: dict, key: str, path: Path) -> list:
    value = data.get(key, [])
    if isinstance(value, str):
        return [value]
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise DbmetricsError(f"{path}: '{key}' must be a list of strings, got {value!r}")
    return value


def _path_value(value, base: Path, key: str, path: Path) -> str | None:
    if value is None:
        return None
    if not isinstance(value, str):
        raise DbmetricsError(f"{path}: '{key}' must be a string, got {value!r}")
    if value == ":memory:":
        return value
    return str(base / os.path.expanduser(value))


def _threads(value, path: Path) -> int | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value <= MAX_THREADS:
        raise DbmetricsError(
            f"{path}: 'threads' must be a positive integer up to {MAX_THREADS}, got {value!r}"
        )
    return value


def _params(table: dict, where: str, path: Path) -> dict[str, str]:
    return {name: _scalar(value, f"{where}.{name}", path) for name, value in table.items()}


def _scalar(value, where: str, path: Path) -> str:
    """A TOML value as the string a query parameter takes."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (str, int, float)):
        return str(value)
    if isinstance(value, list) and all(isinstance(v, str) for v in value):
        return ",".join(value)
    raise DbmetricsError(
        f"{path}: '{where}' must be a string, number, boolean or list of strings, got {value!r}"
    )
