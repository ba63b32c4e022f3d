"""The manifest of a partials store: its format, and the checks that turn a damaged or
hand-edited manifest into one clear line.

Format version 4 (`"format": "dbmetrics-partials/4"`; version 3 had the same layout, with
STATE files lacking `sum_brier_sq`; version 2 also lacked the per-class states):

    generation    whole number, +1 per published update
    column_roles  the column-role parameters the store was built with (and `timezone`)
    logs          the log the last update read
    days          day key -> {"files": {kind: "kind/STEM.G.parquet"},
                              "fingerprint": {rows, rows_hash, labels, labels_hash} or null}
    stale         day key -> why its state may no longer match the logs (left by the last update)
    retired       files the previous manifest listed and this one does not: kept for readers
                  still on the previous manifest, deleted by the next update

A day key is the day as DuckDB writes a DATE (`2026-01-05`, `12000-01-01`,
`0044-03-15 (BC)`, `infinity`), or `null` for rows whose time is NULL.

Earlier stores are read with the files they have, and the next update recomputes every day
still in the logs once and writes version 4 (their fingerprints are dropped on reading).
Version 1 stores (no fingerprints, no time zone) and version 2 stores (class_state without
the per-class sums, no class_bin_state, confusion_state, binary_state) are read with their
STATE only: queries of the other kinds ask for an update. A STATE file written before
version 4 lacks `sum_brier_sq` (state_kinds.py: `StateKind.added`): it reads as NaN, so the
Brier standard errors of the periods holding such a day are NULL; a day kept after its
rows left the logs keeps its file.
"""

import datetime as dt
import json
import re
from pathlib import Path

from dbmetrics.errors import DbmetricsError

from .state_kinds import KIND_NAMES

MANIFEST = "manifest.json"  # in the store folder
PREFIX = "dbmetrics-partials/"
VERSION = 4
FORMAT = f"{PREFIX}{VERSION}"
NULL_DAY = "null"
DAY_KEY = re.compile(r"null|-?infinity|[0-9]{4,}-[0-9]{2}-[0-9]{2}(?: \(BC\))?")
DAY_FILE = re.compile(r"([a-z_]+)/([0-9A-Za-z-]+)\.([0-9]+)\.parquet")
FINGERPRINT = ("rows", "rows_hash", "labels", "labels_hash")


def _file_stem(key: str) -> str:
    """The day key as a file-name stem: `0044-03-15 (BC)` -> `0044-03-15BC`."""
    return re.sub(r"[^0-9A-Za-z-]", "", key)


def is_day_key(key) -> bool:
    """A key DuckDB could have written for a DATE (a real calendar day), or `null`."""
    if not isinstance(key, str) or not DAY_KEY.fullmatch(key):
        return False
    if key[0].isdigit():
        year, month, day = (
            (int(x) for x in key[:-5].split("-"))
            if key.endswith("(BC)")
            else (int(x) for x in key.split("-"))
        )
        try:
            dt.date(2000 if year > 9999 or year == 0 else year, month, day)
        except ValueError:
            return False
    return True


def sort_key(key: str) -> tuple:
    """Day keys in calendar order: -infinity, BC days, days, infinity, null."""
    if key == NULL_DAY:
        return (4,)
    if key.endswith("infinity"):
        return (0,) if key.startswith("-") else (3,)
    if key.endswith("(BC)"):
        year, month, day = (int(x) for x in key[:-5].split("-"))
        return (1, -year, month, day)
    year, month, day = (int(x) for x in key.split("-"))
    return (2, year, month, day)


def day_file(kind: str, key: str, generation: int) -> str:
    """Path of a day's file of `kind`, relative to the store root."""
    return f"{kind}/{_file_stem(key)}.{generation}.parquet"


def validated(data, where: str) -> dict:
    """The manifest in the version-2 shape (and later), or a DbmetricsError naming what is
    wrong."""

    def bad(what: str):
        raise DbmetricsError(f"partials: {where}: {what}; rebuild the store or restore the file")

    if not isinstance(data, dict) or not str(data.get("format", "")).startswith(PREFIX):
        raise DbmetricsError(
            f"partials: {where} is not a dbmetrics partials manifest (expected format {FORMAT})"
        )
    version = data["format"][len(PREFIX) :]
    if version not in ("1", "2", "3", "4"):
        raise DbmetricsError(
            f"partials: {where} has format {data['format']}, written by a newer dbmetrics; "
            f"this one reads {PREFIX}1 to {FORMAT}"
        )
    generation = data.get("generation")
    if type(generation) is not int or generation < 0:
        bad(f"`generation` must be a whole number >= 0, not {generation!r}")
    roles = data.get("column_roles")
    if not isinstance(roles, dict) or not all(
        isinstance(k, str) and (v is None or isinstance(v, str)) for k, v in roles.items()
    ):
        bad("`column_roles` must map parameter names to text")
    days = data.get("days")
    if not isinstance(days, dict):
        bad("`days` must map day keys to the day's files")
    out_days = {}
    for key, entry in days.items():
        if not is_day_key(key):
            bad(f"`{key}` is not a day key (YYYY-MM-DD or null)")
        out_days[key] = _day_entry(entry, key, version, bad)
    stale = data.get("stale", {})
    if not isinstance(stale, dict) or not all(isinstance(v, str) for v in stale.values()):
        bad("`stale` must map day keys to reasons")
    retired = data.get("retired", [])
    if not isinstance(retired, list) or not all(
        isinstance(p, str) and DAY_FILE.fullmatch(p) for p in retired
    ):
        bad("`retired` must list day files (kind/STEM.G.parquet)")
    logs = data.get("logs")
    if logs is not None and not isinstance(logs, str):
        bad("`logs` must be text")
    return {
        "format": data["format"],
        "generation": generation,
        "column_roles": dict(roles),
        "logs": logs,
        "days": out_days,
        "stale": {k: v for k, v in stale.items() if k in out_days},
        "retired": list(retired),
    }


def _day_entry(entry, key: str, version: str, bad) -> dict:
    if version == "1":  # {"state": path, "class_state": path}
        files, fingerprint = entry, None
    else:
        if not isinstance(entry, dict):
            bad(f"day `{key}` must be an object with `files` and `fingerprint`")
        files, fingerprint = entry.get("files"), entry.get("fingerprint")
        if fingerprint is not None and not (
            isinstance(fingerprint, dict)
            and set(fingerprint) == set(FINGERPRINT)
            and all(type(fingerprint[k]) is int for k in ("rows", "labels"))
            and all(isinstance(fingerprint[k], str) for k in ("rows_hash", "labels_hash"))
        ):
            bad(f"day `{key}` has a malformed `fingerprint`")
    if not isinstance(files, dict) or not files:
        bad(f"day `{key}` lists no files")
    if version in ("1", "2"):  # only STATE has the columns of version 3
        files = {k: v for k, v in files.items() if k == "state"}
    if version != str(VERSION):  # the next update recomputes the day in the current format
        fingerprint = None
    for kind, path in files.items():
        match = DAY_FILE.fullmatch(path) if isinstance(path, str) else None
        if kind not in KIND_NAMES or match is None or match.group(1) != kind:
            bad(f"day `{key}`: `{kind}: {path}` is not a {'/'.join(KIND_NAMES)} day file")
    return {"files": dict(files), "fingerprint": fingerprint}


def read_manifest(root: Path) -> dict | None:
    """The manifest of the store folder `root` (validated, in the version-2 shape), or None
    for a folder that holds no store yet."""
    path = Path(root) / MANIFEST
    try:
        text = path.read_text()
    except (FileNotFoundError, NotADirectoryError):
        return None
    except ValueError as exc:  # a NUL in the path
        raise DbmetricsError(f"partials: `{root}` is not a usable path ({exc})") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise DbmetricsError(f"partials: cannot read {path} ({exc})") from None
    try:
        data = json.loads(text)
    except ValueError as exc:
        raise DbmetricsError(f"partials: {path} is not valid JSON ({exc})") from None
    return validated(data, str(path))


def listed_files(root: Path, kind: str, manifest: dict) -> list:
    """Absolute paths of every day's file of `kind` the manifest lists."""
    return [str(Path(root) / entry["files"][kind]) for entry in manifest["days"].values()]


def missing_files(root: Path, manifest: dict) -> list:
    """Files the manifest lists that are not in the store (relative paths)."""
    return sorted(
        rel
        for entry in manifest["days"].values()
        for rel in entry["files"].values()
        if not (Path(root) / rel).is_file()
    )
