"""Writing files whole: the one home of dbmetrics' atomic file writing.

A file dbmetrics writes appears complete under its name or not at all: the content goes to a
fresh temp file beside it (``.NAME.<random>.tmp``, created with ``O_EXCL | O_NOFOLLOW``: never
an existing file, never through a symbolic link; permission bits ``0o666`` minus the umask),
is flushed to disk, and is renamed over the name in one ``os.replace``; the folder is then
flushed so the rename survives a power loss. A failure or an interrupt removes the temp file
and leaves the old file as it was.

``atomic_path`` and ``atomic_write`` are for files dbmetrics owns (a partials store, the
demo data): whatever is at the name, a symbolic link included, is replaced, never followed.
A writer that moves several files into place at once (the partials store's publish) builds
on the same three steps: ``new_file`` (written through its descriptor and flushed),
``replace`` and ``fsync_dir``.
``write_output`` is for a path the user named (``--output``), where the file may be special:

- a FIFO, a character or block device (``/dev/null``, a terminal, ``/dev/stdout``) is opened
  and written through, as a shell redirection would; it is never replaced by a regular file;
- a symbolic link stays a link: the file it points to is replaced atomically;
- an existing regular file keeps its permission bits (and owner and group where allowed);
  a new file gets ``0o666`` minus the umask.

Errors name the user's path, never the temp file's.
"""

from __future__ import annotations

import errno
import os
import secrets
import stat
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import BinaryIO

TEMP_SUFFIX = ".tmp"
_CREATE = os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW | getattr(os, "O_CLOEXEC", 0)
# fsync of a folder where the platform or file system cannot do it
_NO_FOLDER_SYNC = {errno.EINVAL, errno.EBADF, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EROFS}


def _temp_prefix(path: Path) -> str:
    """Temp files for ``path`` are named ``.NAME.<random>.tmp`` beside it."""
    return f".{path.name}."


def is_temp(name, target_name: str) -> bool:
    """Whether the file name ``name`` is a temp file of a file named ``target_name``.

    >>> is_temp(".manifest.json.3f2a.tmp", "manifest.json"), is_temp("a.tmp", "manifest.json")
    (True, False)
    """
    name = os.path.basename(str(name)) if name is not None else ""
    return name.startswith(f".{target_name}.") and name.endswith(TEMP_SUFFIX)


def new_file(folder, prefix: str, write: Callable[[BinaryIO], None]) -> Path:
    """Call ``write(f)`` on a new file ``PREFIX<random>.tmp`` in ``folder`` (created with
    ``O_EXCL | O_NOFOLLOW``, written through that descriptor), flush it to disk and return its
    path; on failure it is removed."""
    fd, tmp = _create(Path(folder), prefix)
    try:
        with open(tmp, "wb", opener=lambda *_: fd) as f:  # the descriptor, named as tmp
            write(f)
            f.flush()
            os.fsync(f.fileno())
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return tmp


def replace(src: Path, target) -> None:
    """Rename the finished file ``src`` over ``target`` in one step: whatever is at
    ``target``, a symbolic link included, is replaced, never followed. ``fsync_dir`` on the
    folder makes it survive a power loss."""
    os.replace(src, target)


def fsync_dir(folder) -> None:
    """Flush a folder's entries (renames into it) to disk; nothing where the folder cannot be
    opened or the platform or file system cannot flush one."""
    try:
        fd = os.open(folder, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    except OSError:  # e.g. a folder this user may write but not read; the rename is done
        return
    try:
        os.fsync(fd)
    except OSError as exc:
        if exc.errno not in _NO_FOLDER_SYNC:
            raise
    finally:
        os.close(fd)


@contextmanager
def atomic_path(path, mode: int | None = None) -> Iterator[Path]:
    """Yield a new empty temp file beside ``path`` to write by name; on success flush it to disk
    and rename it over ``path``, else delete it.

    mode: the permission bits of the result; default ``0o666`` minus the umask.
    """
    target = Path(path)
    with _naming(target, None):
        fd, tmp = _create(target.parent, _temp_prefix(target))
    os.close(fd)
    try:
        with _naming(target, tmp):
            yield tmp
            with open(tmp, "rb+") as f:
                os.fsync(f.fileno())
            _publish(tmp, target, mode)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def atomic_write(path, write: Callable[[BinaryIO], None], mode: int | None = None) -> None:
    """Call ``write(f)`` on a binary file that becomes ``path`` only once it is complete."""
    target = Path(path)
    with _naming(target, None):
        tmp = new_file(target.parent, _temp_prefix(target), write)
    try:
        with _naming(target, tmp):
            _publish(tmp, target, mode)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise


def write_output(path, write: Callable[[BinaryIO], None]) -> None:
    """Write a file the user named: FIFOs and devices written through, a symbolic link's
    target replaced atomically, an existing file's permission bits kept (module docstring)."""
    given = Path(path)
    try:
        st = os.stat(given)  # follows links
    except FileNotFoundError:
        st = None  # a new file, or a link to a file still to be created
    except OSError as e:
        raise OSError(e.errno, e.strerror, str(given)) from None
    if st is not None and (
        stat.S_ISFIFO(st.st_mode) or stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode)
    ):
        _write_through(given, write)
        return
    if st is not None and stat.S_ISDIR(st.st_mode):
        raise OSError(errno.EISDIR, os.strerror(errno.EISDIR), str(given))
    if st is not None and not stat.S_ISREG(st.st_mode):
        raise OSError(errno.EINVAL, "not a regular file, FIFO or device", str(given))
    target = Path(os.path.realpath(given)) if given.is_symlink() else given
    mode = stat.S_IMODE(st.st_mode) & 0o777 if st is not None else None
    with atomic_path(target, mode) as tmp:
        if st is not None:
            _same_owner(tmp, st)
        with open(tmp, "wb") as f:
            write(f)


def _write_through(path: Path, write: Callable[[BinaryIO], None]) -> None:
    """Open an existing special file (no create, no truncate of a regular file) and write."""
    flags = os.O_WRONLY | getattr(os, "O_NOCTTY", 0)
    try:
        fd = os.open(path, flags)
    except OSError as e:
        raise OSError(e.errno, e.strerror, str(path)) from None
    with os.fdopen(fd, "wb") as f:
        write(f)


def _create(folder: Path, prefix: str) -> tuple:
    """(descriptor, path) of a new empty file ``PREFIX<random>.tmp`` in ``folder``."""
    while True:  # a name already taken (2^-64 per try) is passed over, as mkstemp does
        tmp = folder / f"{prefix}{secrets.token_hex(8)}{TEMP_SUFFIX}"
        try:
            return os.open(tmp, _CREATE, 0o666), tmp
        except FileExistsError:
            continue


def _publish(tmp: Path, target: Path, mode: int | None) -> None:
    """The last steps of a one-file write: permission bits, rename, folder flush."""
    if mode is not None:
        os.chmod(tmp, mode)
    replace(tmp, target)
    fsync_dir(target.parent)


def _same_owner(tmp: Path, st: os.stat_result) -> None:
    """Give the temp file the old file's owner and group, as far as this user may."""
    if (st.st_uid, st.st_gid) == (os.getuid(), os.getgid()):
        return
    for uid, gid in ((st.st_uid, st.st_gid), (-1, st.st_gid)):
        try:
            os.chown(tmp, uid, gid)
            return
        except OSError:
            continue


@contextmanager
def _naming(path: Path, tmp: Path | None):
    """Re-raise an OSError that names a temp file of ``path`` as one that names ``path``."""
    try:
        yield
    except OSError as e:
        if e.strerror and (is_temp(e.filename, path.name) or is_temp(e.filename2, path.name)):
            raise OSError(e.errno, e.strerror, str(path)) from None
        if tmp is not None and str(tmp) in str(e):  # e.g. pyarrow's "Failed to open ... '<tmp>'"
            raise OSError(e.errno, str(e).replace(str(tmp), str(path))) from None
        raise
