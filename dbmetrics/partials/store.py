"""Layout of a partials store and its all-or-nothing updates.

    STORE/manifest.json                     column roles, generation, and the file of each day
    STORE/state/YYYY-MM-DD.G.parquet        STATE rows of that day (see queries/state_sql.py)
    STORE/class_state/YYYY-MM-DD.G.parquet  CLASS_STATE rows of that day

An update writes new files under a new generation G, then replaces manifest.json in one
os.replace, then deletes the files no longer listed. Readers take the file list from the
manifest, so they see the whole store before or after an update, never a mix; a crash
before the manifest is replaced leaves the old store intact (its stray files are removed
by the next update).
"""

import datetime as dt
import json
import os
from dataclasses import dataclass
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from dbmetrics.errors import DbmetricsError

FORMAT = "dbmetrics-partials/1"
KINDS = ("state", "class_state")


def atomic_write(path: Path, write) -> None:
    """Call write(tmp_path), flush it to disk, then move it over `path`: after a crash or a
    power loss `path` holds the old or the new content, never a part."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        write(tmp)
        with open(tmp, "rb+") as f:
            os.fsync(f.fileno())
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


@dataclass(frozen=True)
class Store:
    root: Path

    @property
    def manifest_path(self) -> Path:
        return self.root / "manifest.json"

    def manifest(self) -> dict | None:
        """The manifest, or None for a folder that holds no store yet."""
        if not self.manifest_path.exists():
            return None
        try:
            data = json.loads(self.manifest_path.read_text())
        except ValueError as exc:
            raise DbmetricsError(
                f"partials: {self.manifest_path} is not valid JSON ({exc})"
            ) from None
        if not isinstance(data, dict) or data.get("format") != FORMAT:
            raise DbmetricsError(
                f"partials: {self.manifest_path} is not a dbmetrics partials "
                f"manifest (expected format {FORMAT})"
            )
        return data

    def days(self) -> list:
        manifest = self.manifest() or {}
        return sorted(dt.date.fromisoformat(d) for d in manifest.get("days", {}))

    def files(self, kind: str) -> list:
        """Absolute paths of every day's file of `kind`, from the manifest."""
        manifest = self.manifest() or {}
        return [
            str(self.root / entry[kind]) for _, entry in sorted(manifest.get("days", {}).items())
        ]

    def write_day(self, kind: str, day: dt.date, generation: int, table: pa.Table) -> str:
        """Write a day's table under a new name; returns its path relative to the root."""
        relative = f"{kind}/{day.isoformat()}.{generation}.parquet"
        path = self.root / relative
        path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write(path, lambda tmp: pq.write_table(table, tmp, compression="zstd"))
        return relative

    def commit(self, manifest: dict) -> None:
        """Publish `manifest` in one step, then delete the files neither it nor the manifest
        it replaces lists (a query that read the old manifest can still read its files; they
        go at the next update), and stray temporary files of killed runs."""
        self.root.mkdir(parents=True, exist_ok=True)
        previous = self.manifest() or {}
        text = json.dumps({**manifest, "format": FORMAT}, indent=2, sort_keys=True)
        atomic_write(self.manifest_path, lambda tmp: tmp.write_text(text + "\n"))
        self.remove_unlisted([manifest, previous])

    def remove_unlisted(self, manifests: list) -> None:
        listed = {
            entry[kind] for m in manifests for entry in m.get("days", {}).values() for kind in KINDS
        }
        for kind in KINDS:
            folder = self.root / kind
            if folder.is_dir():
                for path in folder.iterdir():
                    if f"{kind}/{path.name}" not in listed:
                        path.unlink(missing_ok=True)
        for stray in self.root.glob(".manifest.json.*.tmp"):
            stray.unlink(missing_ok=True)


def describe(store) -> dict:
    """The manifest and the range of days held, for `dbmetrics partials show`."""
    s = Store(Path(store))
    manifest = s.manifest()
    if manifest is None:
        raise DbmetricsError(
            f"partials: `{store}` holds no store (no manifest.json); "
            "build one with `dbmetrics partials update`"
        )
    days = s.days()
    return {
        "store": str(s.root),
        "generation": manifest["generation"],
        "days": len(days),
        "first_day": days[0].isoformat() if days else None,
        "last_day": days[-1].isoformat() if days else None,
        **{f"column_roles.{k}": v for k, v in manifest["column_roles"].items()},
    }
