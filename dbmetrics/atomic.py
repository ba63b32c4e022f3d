"""Writing files whole: the one home of dbmetrics' atomic file writing.

A file dbmetrics writes appears complete under its name or not at all: the content goes to a
fresh temp file beside it (``tempfile.mkstemp``: a new name opened with ``O_EXCL``, never
through a symbolic link), is flushed to disk, gets its permission bits, and is renamed over
the name in one ``os.replace``; the folder is then flushed so the rename survives a power
loss. A failure or an interrupt removes the temp file and leaves the old file as it was.

``atomic_path`` and ``atomic_write`` are for files dbmetrics owns (a partials store, the
demo data): whatever is at the name, a symbolic link included, is replaced, never followed.
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
import stat
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import BinaryIO

TEMP_SUFFIX = ".tmp"


def temp_prefix(path: Path) -> str:
    """Temp files for ``path`` are named ``.NAME.<random>.tmp`` beside it."""
    return f".{path.name}."


@contextmanager
def atomic_path(path, mode: int | None = None) -> Iterator[Path]:
    """Yield a new empty temp file beside ``path`` to write by name; on success flush it to disk
    and rename it over ``path``, else delete it.

    mode: the permission bits of the result; default ``0o666`` minus the umask.
    """
    target = Path(path)
    with _naming(target, None):
        fd, name = tempfile.mkstemp(
            prefix=temp_prefix(target), suffix=TEMP_SUFFIX, dir=target.parent
        )
    os.close(fd)
    tmp = Path(name)
    try:
        with _naming(target, tmp):
            yield tmp
            with open(tmp, "rb+") as f:
                os.fsync(f.fileno())
            os.chmod(tmp, _default_mode() if mode is None else mode)
            os.replace(tmp, target)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    _fsync_dir(target.parent)


def atomic_write(path, write: Callable[[BinaryIO], None], mode: int | None = None) -> None:
    """Call ``write(f)`` on a binary file that becomes ``path`` only once it is complete."""
    with atomic_path(path, mode) as tmp, open(tmp, "wb") as f:
        write(f)


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
        if e.strerror and (_is_temp(e.filename, path) or _is_temp(e.filename2, path)):
            raise OSError(e.errno, e.strerror, str(path)) from None
        if tmp is not None and str(tmp) in str(e):  # e.g. pyarrow's "Failed to open ... '<tmp>'"
            raise OSError(e.errno, str(e).replace(str(tmp), str(path))) from None
        raise


def _is_temp(filename, path: Path) -> bool:
    name = os.path.basename(str(filename)) if filename is not None else ""
    return name.startswith(temp_prefix(path)) and name.endswith(TEMP_SUFFIX)


def _default_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # not possible on every platform; the rename is done
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
