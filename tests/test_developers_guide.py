"""The contributor guide (DEVELOPERS.md) names only files and folders that exist: every path
it writes in backticks, and every module its architecture table lists beside a folder."""

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
GUIDE = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
TOP = ("dbmetrics", "sql", "tests", "bench", "demo_parquet", "docs", ".ci")
PACKAGES = tuple(p.name for p in (ROOT / "dbmetrics").iterdir() if (p / "__init__.py").is_file())
# A path to check: no glob, no placeholder (`test_<feature>.py`; `sql/NAME.sql` is left out)
PATH = re.compile(r"[\w.-]+(?:/[\w.-]*)*")


def named_paths() -> set:
    """Backticked paths under the repository's top folders or the package's subpackages."""
    found = set()
    for token in re.findall(r"`([^`\s]+)`", GUIDE):
        token = token.removeprefix("./")
        if not PATH.fullmatch(token) or "NAME" in token:
            continue
        first = token.split("/")[0]
        if first in TOP and "/" in token:
            found.add(token)
        elif first in PACKAGES and "/" in token:
            found.add(f"dbmetrics/{token}")
    return found


def table_modules() -> set:
    """`dbmetrics/FOLDER/` rows of the architecture table: each `NAME.py` beside the folder."""
    found = set()
    for folder, what in re.findall(r"^\| `(dbmetrics/[\w/]+/)` \| (.*) \|$", GUIDE, re.M):
        found.update(folder + name for name in re.findall(r"`(\w+\.py)`", what))
    return found


def test_every_path_the_guide_names_exists():
    paths = named_paths()
    assert {"dbmetrics/atomic.py", "sql/macros/dbmetrics_macros.sql"} <= paths  # it reads them
    missing = sorted(p for p in paths if not (ROOT / p).exists())
    assert not missing, f"DEVELOPERS.md names paths that do not exist: {missing}"


def test_every_module_the_architecture_table_lists_exists():
    modules = table_modules()
    assert "dbmetrics/queries/render.py" in modules  # the table is read
    missing = sorted(m for m in modules if not (ROOT / m).is_file())
    assert not missing, f"DEVELOPERS.md's table lists modules that do not exist: {missing}"
