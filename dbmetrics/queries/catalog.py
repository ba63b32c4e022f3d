"""Find saved queries: ours (the top-level sql/ folder, shipped in the wheel as dbmetrics/sql)
and the user's, from folders passed in and from DBMETRICS_QUERY_PATH (os.pathsep-separated).

A user's query may not reuse the name of a built-in one, nor two user folders hold the same
name: either is an error that names both files (an override would silently change what a
shared command means). Copy a built-in under a new name to change it.
"""

import os
from pathlib import Path

from dbmetrics.errors import DbmetricsError

from .header import QueryInfo, parse_query


def _built_in_folder() -> Path:
    """The copy a wheel ships inside the package, else sql/ beside the package (a source
    checkout or an editable install)."""
    package = Path(__file__).resolve().parent.parent
    for folder in (package / "sql", package.parent / "sql"):
        if (folder / "rollup.sql").is_file():
            return folder
    raise DbmetricsError(
        f"the saved queries are missing: no sql/ folder beside or inside {package}"
    )


BUILT_IN = _built_in_folder()
ENV_VAR = "DBMETRICS_QUERY_PATH"


def user_dirs(query_dirs=None) -> list:
    """Folders passed in, then those in DBMETRICS_QUERY_PATH; each must exist."""
    env = [d for d in os.environ.get(ENV_VAR, "").split(os.pathsep) if d.strip()]
    dirs = []
    for text in [*(query_dirs or []), *env]:
        try:
            d = Path(text).expanduser()
            exists = d.is_dir()
        except (RuntimeError, ValueError, OSError) as exc:
            raise DbmetricsError(f"query folder `{text}` is not a usable path ({exc})") from None
        dirs.append(d)
        if not exists:
            raise DbmetricsError(
                f"query folder `{d}` does not exist or is not a folder "
                f"(from query_dirs or {ENV_VAR}); create it or drop it"
            )
    return dirs


def list_queries(query_dirs=None) -> list:
    """Every saved query, built-in first, then user folders in order; sorted by name within each."""
    found = {}
    sources = [(BUILT_IN, "built-in")] + [(d, "user") for d in user_dirs(query_dirs)]
    for folder, origin in sources:
        for path in sorted(folder.glob("*.sql")):
            if path.resolve().parent == BUILT_IN and origin == "user":
                continue
            info = parse_query(path.read_text(encoding="utf-8"), path, origin)
            if info.name in found:
                raise DbmetricsError(
                    f"query `{info.name}` is defined twice: {found[info.name].path} and {path}; "
                    "rename the user query (built-in names cannot be overridden)"
                )
            found[info.name] = info
    return list(found.values())


def get_query(name: str, query_dirs=None) -> QueryInfo:
    """The saved query called `name`, or an error listing the names that exist."""
    queries = {q.name: q for q in list_queries(query_dirs)}
    if name not in queries:
        raise DbmetricsError(f"no saved query `{name}`; queries are: {', '.join(sorted(queries))}")
    return queries[name]
