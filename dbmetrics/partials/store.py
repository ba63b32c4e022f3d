"""Layout of a partials store, its lock, and the publish step every writer goes through.

    STORE/manifest.json                 what the store holds (queries/store_manifest.py)
    STORE/KIND/STEM.G.parquet           one file per day per state kind (queries/state_kinds.py),
                                        for generation G
    STORE/.lock                         held (fcntl.flock) by the writer that publishes
    STORE/.staging/XXXX/                one writer's staged files, and its own held .lock
    STORE/.pending.json                 files being moved into place by a publish in progress

Publishing (`Publisher`, used by `partials update` and open to any other writer of day
states, such as a Spark job):

    with Store(root).locked():                          # optional: commit() takes it too
        pub = Publisher(store, base_generation)         # generation the writer started from
        pub.stage("state", "2026-01-05", table)         # one file per day per kind
        pub.stage("class_state", "2026-01-05", table)
        pub.commit(days, column_roles=..., logs=..., stale=...)

`commit` takes the store lock, refuses (DbmetricsError, nothing published) when the
manifest's generation is no longer `base_generation`, lists the final names in
.pending.json, renames the staged files into place, fsyncs them and their folders, and
replaces manifest.json in one os.replace. Readers take the file list from the manifest, so
they see the whole store before or after a publish, never a mix; after a kill -9 at any
moment the store is the old or the new one. The files the new manifest no longer lists are
recorded as `retired` and deleted by the next publish (a reader still on the previous
manifest can finish).

Safety: a store folder is used only if it is new, empty, or holds a manifest. Files are
written as dbmetrics writes every file (dbmetrics/atomic.py): created with O_EXCL |
O_NOFOLLOW under random names, written through their descriptor, flushed to disk, then
renamed, their folders flushed; a symlink where the store expects one of its folders is
refused. Only files a
manifest or .pending.json names, and dbmetrics' own temporary names, are ever deleted:
foreign files in the folder are left alone. Leftovers of dead writers (their staging folder
is no longer locked) are removed under the store lock.
"""

import contextlib
import errno
import fcntl
import json
import os
import re
import secrets
import shutil
import stat
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from dbmetrics.atomic import atomic_write, fsync_dir, is_temp, new_file, replace
from dbmetrics.errors import DbmetricsError
from dbmetrics.queries.state_kinds import KIND_NAMES, conform
from dbmetrics.queries.store_manifest import (
    DAY_FILE,
    FORMAT,
    MANIFEST,
    day_file,
    is_day_key,
    listed_files,
    missing_files,
    read_manifest,
    sort_key,
)

LOCK = ".lock"
STAGING = ".staging"
PENDING = ".pending.json"
OLD_TEMP = re.compile(r"\..+\.[0-9]+\.tmp")  # format 1 wrote `.NAME.PID.tmp`
OWN_ENTRIES = {LOCK, STAGING, PENDING}


def _is_own_temp(name: str) -> bool:
    """A temp file of the manifest or of .pending.json (atomic.atomic_write's names)."""
    return is_temp(name, MANIFEST) or is_temp(name, PENDING)


def _real_dir(path: Path, create: bool = False) -> Path:
    """`path` as a folder of the store: refused if it is a symlink or not a folder."""
    try:
        mode = os.lstat(path).st_mode
    except FileNotFoundError:
        if not create:
            raise
        path.mkdir(mode=0o777, exist_ok=True)
        mode = os.lstat(path).st_mode
    if stat.S_ISLNK(mode) or not stat.S_ISDIR(mode):
        raise DbmetricsError(
            f"partials: {path} is not a plain folder (a symbolic link or a file); "
            "the store does not write through it"
        )
    return path


def _try_lock(fd: int, wait: bool) -> bool:
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | (0 if wait else fcntl.LOCK_NB))
        return True
    except OSError as exc:
        if exc.errno in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
            return False
        raise


def _open_lock(path: Path) -> int:
    flags = os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | getattr(os, "O_CLOEXEC", 0)
    try:
        return os.open(path, flags, 0o666)
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise DbmetricsError(
                f"partials: {path} is a symbolic link; the store does not write through it"
            ) from None
        raise DbmetricsError(
            f"partials: cannot open the lock file {path} ({exc.strerror})"
        ) from None


class Store:
    """A store folder. `locked()` is re-entrant within one Store object."""

    def __init__(self, root):
        self.root = Path(root)
        self._lock_fd = None
        self._depth = 0

    @property
    def manifest_path(self) -> Path:
        return self.root / MANIFEST

    def manifest(self) -> dict | None:
        """The manifest (validated, in the version-2 shape), or None for a folder that holds
        no store yet."""
        return read_manifest(self.root)

    def files(self, kind: str, manifest: dict | None = None) -> list:
        """Absolute paths of every day's file of `kind`, from the manifest."""
        return listed_files(self.root, kind, manifest or self.manifest() or {"days": {}})

    def missing_files(self, manifest: dict) -> list:
        """Files the manifest lists that are not in the store (relative paths)."""
        return missing_files(self.root, manifest)

    @contextlib.contextmanager
    def locked(self, waiting=None):
        """Hold the store's lock file (fcntl.flock; the OS releases it if the process dies).
        waiting(message) is called once if another writer holds it and we wait."""
        if self._depth:
            self._depth += 1
            try:
                yield self
            finally:
                self._depth -= 1
            return
        self.check_folder()
        self.make_root()
        fd = _open_lock(self.root / LOCK)
        try:
            if not _try_lock(fd, wait=False):
                if waiting is not None:
                    waiting(f"partials: {self.root} is being updated by another process; waiting")
                _try_lock(fd, wait=True)
            self._lock_fd, self._depth = fd, 1
            self.remove_leftovers()
            yield self
        finally:
            self._lock_fd, self._depth = None, 0
            os.close(fd)  # releases the lock

    def make_root(self) -> None:
        """The store folder, created with its parents if absent (it may be a symlink: the
        user named it)."""
        try:
            self.root.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise DbmetricsError(
                f"partials: cannot create the store folder {self.root} ({exc.strerror})"
            ) from None

    def check_folder(self) -> None:
        """Refuse a folder that holds something and no store: the store would share it."""
        if not self.root.exists() or self.manifest_path.exists():
            return
        if not self.root.is_dir():
            raise DbmetricsError(f"partials: {self.root} is not a folder")
        pending = self.pending()
        foreign = []
        for entry in self.root.iterdir():
            if entry.name in OWN_ENTRIES or _is_own_temp(entry.name):
                continue
            if (
                entry.name in KIND_NAMES
                and entry.is_dir()
                and not entry.is_symlink()
                and all(f"{entry.name}/{f.name}" in pending for f in entry.iterdir())
            ):
                continue
            foreign.append(entry.name)
        if foreign:
            raise DbmetricsError(
                f"partials: {self.root} is not empty and holds no partials store "
                f"(no manifest.json; found {', '.join(sorted(foreign)[:3])}); "
                "give a new or empty folder"
            )

    def pending(self) -> set:
        try:
            listed = json.loads((self.root / PENDING).read_text())
        except (OSError, ValueError):
            return set()
        if not isinstance(listed, list):
            return set()
        return {p for p in listed if isinstance(p, str) and DAY_FILE.fullmatch(p)}

    def remove_leftovers(self) -> None:
        """Under the lock: files a dead publish moved into place but never listed, the
        staging folders of dead writers, and temporary files of dead runs."""
        manifest = self.manifest() or {"days": {}, "retired": []}
        listed = {rel for e in manifest["days"].values() for rel in e["files"].values()}
        listed.update(manifest["retired"])
        for rel in self.pending() - listed:
            _unlink_plain(self.root / rel)
        (self.root / PENDING).unlink(missing_ok=True)
        for entry in self.root.iterdir():
            if _is_own_temp(entry.name) or OLD_TEMP.fullmatch(entry.name):
                _unlink_plain(entry)
        for kind in KIND_NAMES:
            folder = self.root / kind
            if folder.is_dir() and not folder.is_symlink():
                for entry in folder.iterdir():
                    if OLD_TEMP.fullmatch(entry.name):
                        _unlink_plain(entry)
        staging = self.root / STAGING
        if staging.is_dir() and not staging.is_symlink():
            for folder in staging.iterdir():
                _remove_if_abandoned(folder)


def _unlink_plain(path: Path) -> None:
    """Remove a file (a symlink itself, never its target)."""
    with contextlib.suppress(FileNotFoundError, IsADirectoryError, PermissionError):
        if not stat.S_ISDIR(os.lstat(path).st_mode):
            path.unlink()


def _remove_if_abandoned(folder: Path) -> None:
    """Remove a staging folder whose writer is gone (its lock file is not held)."""
    if folder.is_symlink() or not folder.is_dir():
        _unlink_plain(folder)
        return
    try:
        fd = os.open(folder / LOCK, os.O_RDWR | os.O_NOFOLLOW)
    except OSError:
        fd = None
    try:
        if fd is None or _try_lock(fd, wait=False):
            shutil.rmtree(folder, ignore_errors=True)
    finally:
        if fd is not None:
            os.close(fd)


class Publisher:
    """Stage day files, then publish them with one manifest swap (see the module docstring).

    base_generation: the manifest generation the writer's work started from (0 for a new
    store); commit refuses if another writer published since.
    """

    def __init__(self, store: Store, base_generation: int):
        self.store = store
        self.base = base_generation
        store.check_folder()
        store.make_root()
        self.folder = _real_dir(store.root / STAGING, create=True) / f"w{secrets.token_hex(8)}"
        self.folder.mkdir(mode=0o777)
        self._lock = _open_lock(self.folder / LOCK)
        _try_lock(self._lock, wait=True)
        self.staged = {}  # (kind, key) -> staged path

    def stage(self, kind: str, key: str, table: pa.Table) -> None:
        """Write `table`, cast to the declared schema (state_kinds.py), as the day `key`'s file of
        state kind `kind`."""
        self._check(kind, key)
        path = write_day_file(self.folder, kind, table)
        self._put(kind, key, path)

    def stage_written(self, kind: str, key: str, path) -> None:
        """Take in a file another process wrote into this publisher's folder with
        `write_day_file(publisher.folder, ...)` (a Spark task), as the day `key`'s file."""
        self._check(kind, key)
        path = Path(path)
        if path.parent != self.folder or not path.is_file():
            raise DbmetricsError(f"partials: {path} is not a file staged in {self.folder}")
        self._put(kind, key, path)

    def stage_file(self, kind: str, key: str, parquet_file) -> None:
        """Copy an already written Parquet file in as the day `key`'s file of `kind`."""
        self._check(kind, key)
        with open(parquet_file, "rb") as src:
            path = new_file(self.folder, f"{kind}.", lambda f: shutil.copyfileobj(src, f))
        self._put(kind, key, path)

    def _check(self, kind: str, key: str) -> None:
        if kind not in KIND_NAMES:
            raise DbmetricsError(f"partials: no state kind `{kind}` (kinds: {KIND_NAMES})")
        if not is_day_key(key):
            raise DbmetricsError(f"partials: `{key}` is not a day key (YYYY-MM-DD or null)")

    def _put(self, kind: str, key: str, path: Path) -> None:
        old = self.staged.pop((kind, key), None)
        if old is not None:
            old.unlink(missing_ok=True)
        self.staged[(kind, key)] = path

    def commit(
        self, days: dict, column_roles: dict, logs: str | None = None, stale: dict | None = None
    ) -> int:
        """Publish: the store then holds exactly `days` (key -> {"files": {kind: path} of a
        day kept as stored, or {} for a staged day, "fingerprint": ...}). Returns the new
        generation.

        A day's fingerprint is what `fingerprint.fingerprints(con, roles)` gives for it (in
        DuckDB, reading only the time, id and label columns), cut in the store's time zone;
        None means unknown, and the next `partials update` recomputes that day."""
        with self.store.locked():
            current = self.store.manifest() or {"generation": 0, "days": {}, "retired": []}
            if current["generation"] != self.base:
                raise DbmetricsError(
                    f"partials: {self.store.root} moved from generation {self.base} to "
                    f"{current['generation']} while this update ran (another writer "
                    "published); nothing was published: run the update again"
                )
            generation = self.base + 1
            moves, out_days = {}, {}
            for key, entry in days.items():
                files = dict(entry.get("files") or {})
                for kind in KIND_NAMES:
                    if (kind, key) in self.staged:
                        files[kind] = day_file(kind, key, generation)
                        moves[files[kind]] = self.staged[(kind, key)]
                missing = [k for k in KIND_NAMES if k not in files]
                if missing:
                    raise DbmetricsError(
                        f"partials: day {key} has no {', '.join(missing)} file to publish"
                    )
                out_days[key] = {"files": files, "fingerprint": entry.get("fingerprint")}
            listed = {rel for e in out_days.values() for rel in e["files"].values()}
            before = {rel for e in current["days"].values() for rel in e["files"].values()}
            root = self.store.root
            _write_json(root, PENDING, sorted(moves))
            for kind in {rel.split("/")[0] for rel in moves}:
                _real_dir(root / kind, create=True)
            for rel, staged in moves.items():
                replace(staged, root / rel)
            for kind in {rel.split("/")[0] for rel in moves}:
                fsync_dir(root / kind)
            manifest = {
                "format": FORMAT,
                "generation": generation,
                "column_roles": column_roles,
                "logs": logs,
                "days": out_days,
                "stale": {k: v for k, v in (stale or {}).items() if k in out_days},
                "retired": sorted(before - listed),
            }
            for rel in set(current["retired"]) - listed:  # before the swap: a kill after
                _unlink_plain(root / rel)  # it leaves them named (retired) for the next one
            _write_json(root, MANIFEST, manifest)
            (root / PENDING).unlink(missing_ok=True)
            return generation

    def close(self) -> None:
        """Remove what is still staged (after a commit: nothing but the folder)."""
        if self._lock is not None:
            shutil.rmtree(self.folder, ignore_errors=True)
            os.close(self._lock)
            self._lock = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


def write_day_file(folder: Path, kind: str, table: pa.Table) -> Path:
    """Write a day's table of state kind `kind` in the declared schema, under a new name."""
    table = conform(kind, table)
    return new_file(folder, f"{kind}.", lambda f: pq.write_table(table, f, compression="zstd"))


def _write_json(root: Path, name: str, data) -> None:
    """Replace root/name with `data` as JSON in one step (new file, fsync, rename)."""
    text = json.dumps(data, indent=2, sort_keys=True) + "\n"
    atomic_write(root / name, lambda f: f.write(text.encode()))


def describe(store) -> dict:
    """The manifest, the days held, stale days and missing files, for `partials show`."""
    s = Store(store)
    manifest = s.manifest()
    if manifest is None:
        raise DbmetricsError(
            f"partials: `{store}` holds no store (no manifest.json); "
            "build one with `dbmetrics partials update`"
        )
    keys = sorted(manifest["days"], key=sort_key)
    missing = s.missing_files(manifest)
    return {
        "store": str(s.root),
        "format": manifest["format"],
        "generation": manifest["generation"],
        "days": len(keys),
        "first_day": keys[0] if keys else None,
        "last_day": keys[-1] if keys else None,
        "stale_days": "; ".join(f"{k}: {why}" for k, why in sorted(manifest["stale"].items()))
        or None,
        "missing_files": ", ".join(missing) or None,
        **{f"column_roles.{k}": v for k, v in sorted(manifest["column_roles"].items())},
    }
