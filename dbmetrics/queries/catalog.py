"""Find saved queries: ours (the top-level sql/ folder, shipped in the wheel as dbmetrics/sql)
and the user's, from folders passed in and from DBMETRICS_QUERY_PATH (os.pathsep-separated).

A user's query may not reuse the name of a built-in one, nor two user folders hold the same
name: either is an error that names both files (an override would silently change what a
shared command means). Copy a built-in under a new name to change it.

A user file that cannot be used (not UTF-8, a link loop, a bad header, a column-role parameter
of the wrong type, a repeated name) is reported with its problem and left out; the other
queries work as before, and asking for that name gives the problem.
"""

import os
import stat
from dataclasses import dataclass, replace
from pathlib import Path

from dbmetrics.errors import DbmetricsError

from .header import COLUMN_MAP, PLACEHOLDER, QueryInfo, parse_query

ROLES = (*COLUMN_MAP, "partials")  # parameter names reserved for their column role
MAX_BYTES = 1 << 20


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


def _user_dirs(query_dirs=None) -> list:
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


@dataclass(frozen=True)
class BrokenQuery:
    """A user's .sql file that is not a usable saved query, and why (one line naming it)."""

    path: Path
    problem: str

    @property
    def name(self) -> str:
        return self.path.stem


def scan_queries(query_dirs=None) -> tuple:
    """(queries, broken): every usable saved query, built-in first, then user folders in order
    (sorted by name within each), and the user files that could not be used, each with its
    problem. One broken file never hides the others.

    A query that includes another (`{{query:NAME}}`) gets the included query's parameters it
    does not declare.
    """
    found, broken = {}, []
    for path in sorted(BUILT_IN.glob("*.sql")):
        info = parse_query(path.read_text(encoding="utf-8"), path, "built-in")
        found[info.name] = info
    rollup = found["rollup"]
    for folder in _user_dirs(query_dirs):
        if _resolved(folder) == BUILT_IN:
            continue
        for path in sorted(folder.glob("*.sql")):
            try:
                info = parse_query(_read(path), path, "user")
                _check_roles(info, rollup)
                if info.name in found:
                    raise DbmetricsError(
                        f"query `{info.name}` is defined twice: {found[info.name].path} and "
                        f"{path}; rename the user query (built-in names cannot be overridden)"
                    )
            except DbmetricsError as exc:
                broken.append(BrokenQuery(path, " ".join(str(exc).split())))
                continue
            found[info.name] = info
    queries = [_with_included(info, found) for info in found.values()]
    return queries, broken


def list_queries(query_dirs=None) -> list:
    """Every usable saved query, built-in first (scan_queries; broken user files left out)."""
    return scan_queries(query_dirs)[0]


def get_query(name: str, query_dirs=None) -> QueryInfo:
    """The saved query called `name`, or an error: the problem of a broken file of that name,
    else the names that exist."""
    queries, broken = scan_queries(query_dirs)
    for bad in broken:
        if bad.name == name:
            raise DbmetricsError(bad.problem)
    by_name = {q.name: q for q in queries}
    if name not in by_name:
        raise DbmetricsError(f"no saved query `{name}`; queries are: {', '.join(sorted(by_name))}")
    return by_name[name]


def _read(path: Path) -> str:
    """The text of a user's .sql file: a regular file (after links) in UTF-8 (a BOM allowed)."""
    try:
        st = path.stat()
    except OSError as exc:  # a link loop, a dangling link, no permission
        raise DbmetricsError(f"{path}: cannot read: {exc.strerror or exc}") from None
    if not stat.S_ISREG(st.st_mode):
        raise DbmetricsError(f"{path}: not a regular file")
    if st.st_size > MAX_BYTES:
        raise DbmetricsError(
            f"{path}: {st.st_size} bytes; a saved query is at most {MAX_BYTES} bytes"
        )
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise DbmetricsError(f"{path}: cannot read: {exc.strerror or exc}") from None
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = data.count(b"\n", 0, exc.start) + 1
        raise DbmetricsError(
            f"{path}: not UTF-8 text (byte 0x{data[exc.start]:02x} on line {line}); "
            "save it as UTF-8"
        ) from None


def _resolved(folder: Path) -> Path | None:
    try:
        return folder.resolve()
    except (OSError, RuntimeError):  # a link loop: not the built-in folder
        return None


def _check_roles(info: QueryInfo, rollup: QueryInfo) -> None:
    """A parameter named like a column role has that role's type (the project file's
    [params] hands it the role's value): same kind, and for a choice, only rollup's options."""
    for p in info.params:
        if p.name not in ROLES:
            continue
        role = rollup.param(p.name)
        if p.kind != role.kind or not set(p.choices) <= set(role.choices):
            raise DbmetricsError(
                f"{info.path}: parameter `{p.name}` is a column role and must have type "
                f"{role.type} (as in rollup); got `{p.type}`"
            )


def _with_included(info: QueryInfo, found: dict) -> QueryInfo:
    """`info` plus the parameters of the queries it includes that it does not declare."""
    names = {p.name for p in info.params}
    extra = []
    for placeholder in PLACEHOLDER.findall(info.body):
        inner = (
            found.get(placeholder[len("query:") :]) if placeholder.startswith("query:") else None
        )
        for p in inner.params if inner is not None else ():
            if p.name not in names:
                names.add(p.name)
                extra.append(p)
    return replace(info, params=info.params + tuple(extra)) if extra else info
