"""Writing results to files the user names: special files, links, permissions, error paths.

The shell's own redirection is the model: a FIFO or a device is written through, never replaced
by a regular file; a symbolic link stays a link and its target gets the new content (here
atomically); the file keeps its permission bits. dbmetrics writes files in one place only.
"""

import errno
import os
import stat
from pathlib import Path

import pytest

import dbmetrics
from dbmetrics import atomic

CSV = b'"x"\n1\n'


def test_a_fifo_is_written_through_and_stays_a_fifo(invoke, tmp_path):
    fifo = tmp_path / "pipe.csv"
    os.mkfifo(fifo)
    reader = os.open(fifo, os.O_RDONLY | os.O_NONBLOCK)  # a reader waits, as `cat pipe` would
    try:
        result = invoke("sql", "SELECT 1 AS x", "-o", str(fifo))
        assert result.exit_code == 0, result.output
        assert os.read(reader, 1000) == CSV
    finally:
        os.close(reader)
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)
    assert sorted(os.listdir(tmp_path)) == ["pipe.csv"]


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() != 0, reason="mknod needs root")
def test_a_device_node_is_written_through_and_stays_a_device(invoke, tmp_path):
    null = tmp_path / "null.csv"
    os.mknod(null, stat.S_IFCHR | 0o666, os.makedev(1, 3))  # the same device as /dev/null
    result = invoke("sql", "SELECT 1 AS x", "-o", str(null))
    assert result.exit_code == 0, result.output
    st = os.lstat(null)
    assert stat.S_ISCHR(st.st_mode) and st.st_rdev == os.makedev(1, 3)


def test_a_symlink_stays_a_link_and_its_target_is_replaced(invoke, tmp_path):
    (tmp_path / "reports").mkdir()
    target = tmp_path / "reports" / "weekly.csv"
    target.write_bytes(b"old\n")
    os.chmod(target, 0o640)
    link = tmp_path / "latest.csv"
    link.symlink_to(target)
    result = invoke("sql", "SELECT 1 AS x", "-o", str(link))
    assert result.exit_code == 0, result.output
    assert link.is_symlink() and os.readlink(link) == str(target)
    assert target.read_bytes() == CSV
    assert stat.S_IMODE(target.stat().st_mode) == 0o640
    assert sorted(os.listdir(tmp_path / "reports")) == ["weekly.csv"]


def test_a_dangling_symlink_creates_its_target(invoke, tmp_path):
    link = tmp_path / "latest.csv"
    link.symlink_to(tmp_path / "new.csv")
    assert invoke("sql", "SELECT 1 AS x", "-o", str(link)).exit_code == 0
    assert link.is_symlink() and (tmp_path / "new.csv").read_bytes() == CSV


def test_an_existing_file_keeps_its_permission_bits(invoke, tmp_path):
    target = tmp_path / "weekly.csv"
    target.write_bytes(b"old\n")
    os.chmod(target, 0o600)
    assert invoke("sql", "SELECT 1 AS x", "-o", str(target)).exit_code == 0
    assert target.read_bytes() == CSV
    assert stat.S_IMODE(target.stat().st_mode) == 0o600


def test_a_symlink_loop_is_one_line_naming_the_path(invoke, tmp_path):
    (tmp_path / "a.csv").symlink_to(tmp_path / "b.csv")
    (tmp_path / "b.csv").symlink_to(tmp_path / "a.csv")
    result = invoke("sql", "SELECT 1 AS x", "-o", "a.csv")
    assert result.exit_code == 1
    assert result.stderr == "Error: Too many levels of symbolic links: 'a.csv'\n"


@pytest.mark.parametrize(
    "where, problem",
    [("missing/weekly.csv", "No such file or directory"), ("folder.csv", "Is a directory")],
)
def test_errors_name_the_users_path_not_a_temp_file(invoke, tmp_path, where, problem):
    (tmp_path / "folder.csv").mkdir()
    result = invoke("sql", "SELECT 1 AS x", "-o", where)
    assert result.exit_code == 1
    assert result.stderr == f"Error: {problem}: '{where}'\n"
    assert sorted(os.listdir(tmp_path)) == ["folder.csv"]


def test_a_failed_write_names_the_file_being_written(tmp_path):
    target = tmp_path / "manifest.json"

    def full_disk(f):
        raise OSError(errno.ENOSPC, "No space left on device", f.name)

    with pytest.raises(OSError) as raised:
        atomic.atomic_write(target, full_disk)
    assert (raised.value.filename, raised.value.strerror) == (
        str(target),
        "No space left on device",
    )
    assert os.listdir(tmp_path) == []


def test_a_file_dbmetrics_owns_replaces_a_planted_link_instead_of_following_it(tmp_path):
    outside = tmp_path / "outside.txt"
    outside.write_bytes(b"not ours\n")
    own = tmp_path / "manifest.json"
    own.symlink_to(outside)
    atomic.atomic_write(own, lambda f: f.write(b"{}\n"))
    assert not own.is_symlink() and own.read_bytes() == b"{}\n"
    assert outside.read_bytes() == b"not ours\n"


def test_files_are_renamed_into_place_in_one_module_only():
    """dbmetrics/atomic.py is the only module that renames files: the partials store's publish
    step (staged files moved into place under the store lock) goes through it too."""
    package = Path(dbmetrics.__file__).parent
    renaming = sorted(
        path.relative_to(package).as_posix()
        for path in package.rglob("*.py")
        if "os.replace(" in path.read_text() or ".rename(" in path.read_text()
    )
    assert renaming == ["atomic.py"]


def test_a_new_file_is_complete_or_gone_and_gets_the_umask_bits(tmp_path):
    """atomic.new_file (the partials store's day files): a fresh name with the prefix, the
    content in full, permission bits 0o666 minus the umask; a failed write leaves nothing."""
    path = atomic.new_file(tmp_path, "state.", lambda f: f.write(b"day"))
    assert path.parent == tmp_path and path.name.startswith("state.") and path.suffix == ".tmp"
    assert path.read_bytes() == b"day"
    umask = os.umask(0)
    os.umask(umask)
    assert stat.S_IMODE(path.stat().st_mode) == 0o666 & ~umask

    def fails(f):
        f.write(b"half")
        raise OSError(errno.EIO, "Input/output error")

    with pytest.raises(OSError, match="Input/output error"):
        atomic.new_file(tmp_path, "state.", fails)
    assert os.listdir(tmp_path) == [path.name]
