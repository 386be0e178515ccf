"""Tests of loopcraft._files.atomic_write: what an overwrite keeps, and failures that change nothing.

The reference for "what a file gets" is what Python's own ``open(path, "w")`` does in the same
folder under the same umask (POSIX open(2): mode 0o666 less the umask; a symbolic link is
followed to its target).
"""

from __future__ import annotations

import errno
import os
import stat
import sys

import pytest

from loopcraft._files import atomic_write
from loopcraft.errors import FileWriteError, LoopcraftError

posix_only = pytest.mark.skipif(sys.platform == "win32", reason="POSIX permission bits and symbolic links")


def _mode(path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


@pytest.fixture
def umask():
    """Set a umask for one test and restore the old one."""
    saved = os.umask(0o022)
    os.umask(saved)

    def set_to(mask: int) -> None:
        os.umask(mask)

    yield set_to
    os.umask(saved)


def test_writes_exact_text_and_bytes(tmp_path):
    p = tmp_path / "a.txt"
    assert atomic_write(p, "line 1\r\nline 2\nµ Ω\n") == p
    assert p.read_bytes() == "line 1\r\nline 2\nµ Ω\n".encode()
    atomic_write(str(p), b"\x00\xff raw")
    assert p.read_bytes() == b"\x00\xff raw"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["a.txt"]


@posix_only
@pytest.mark.parametrize("mask", [0o022, 0o077, 0o002])
def test_new_file_gets_the_umask_default_like_open(tmp_path, umask, mask):
    umask(mask)
    ours = atomic_write(tmp_path / "ours.json", "{}")
    with open(tmp_path / "theirs.json", "w") as fh:  # the reference: open() under the same umask
        fh.write("{}")
    assert _mode(ours) == _mode(tmp_path / "theirs.json") == 0o666 & ~mask


@posix_only
@pytest.mark.parametrize("mode", [0o644, 0o640, 0o600, 0o664, 0o755, 0o444])
def test_overwrite_keeps_permission_bits(tmp_path, umask, mode):
    umask(0o077)  # would give 0600 to a fresh file: the kept bits must come from the old file
    p = tmp_path / "design.json"
    p.write_text("old", encoding="utf-8")
    os.chmod(p, mode)
    atomic_write(p, "new")
    assert p.read_text(encoding="utf-8") == "new"
    assert _mode(p) == mode


@posix_only
def test_symlink_is_followed_and_kept(tmp_path):
    real = tmp_path / "store" / "design.json"
    real.parent.mkdir()
    real.write_text("old", encoding="utf-8")
    os.chmod(real, 0o640)
    link = tmp_path / "link.json"
    link.symlink_to(os.path.relpath(real, tmp_path))  # a relative link, resolved from its own folder
    chain = tmp_path / "chain.json"
    chain.symlink_to(link)
    atomic_write(chain, "new")
    assert chain.is_symlink() and link.is_symlink()
    assert os.readlink(chain) == str(link)
    # The reference: open() on the link writes the same target.
    assert real.read_text(encoding="utf-8") == "new" and _mode(real) == 0o640
    with open(chain, "w", encoding="utf-8") as fh:
        fh.write("via open")
    assert real.read_text(encoding="utf-8") == "via open"
    assert sorted(x.name for x in real.parent.iterdir()) == ["design.json"]  # temp file went beside the target


@posix_only
def test_dangling_symlink_creates_its_target(tmp_path):
    link = tmp_path / "link.json"
    link.symlink_to(tmp_path / "later.json")
    atomic_write(link, "x")
    assert link.is_symlink() and (tmp_path / "later.json").read_text(encoding="utf-8") == "x"


@posix_only
def test_symlink_loop_is_an_error(tmp_path):
    a, b = tmp_path / "a", tmp_path / "b"
    a.symlink_to(b)
    b.symlink_to(a)
    with pytest.raises(FileWriteError, match="loop") as exc:
        atomic_write(a, "x")
    assert exc.value.path == str(a)
    assert a.is_symlink() and b.is_symlink()
    with pytest.raises(OSError):  # the reference: open() refuses a loop too (ELOOP)
        open(a, "w")


def test_failed_rename_keeps_the_old_file(tmp_path, monkeypatch):
    p = tmp_path / "keep.json"
    p.write_text("old", encoding="utf-8")

    def full(src, dst):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(os, "replace", full)
    with pytest.raises(FileWriteError, match="No space left on device") as exc:
        atomic_write(p, "new")
    err = exc.value
    assert isinstance(err, LoopcraftError) and isinstance(err, OSError)
    assert err.errno == errno.ENOSPC and err.path == str(p) and str(p) in str(err)
    assert p.read_text(encoding="utf-8") == "old"
    assert [x.name for x in tmp_path.iterdir()] == ["keep.json"]


def test_interrupt_mid_write_leaves_nothing_behind(tmp_path, monkeypatch):
    p = tmp_path / "keep.json"
    p.write_text("old", encoding="utf-8")

    def interrupted(fd):
        raise KeyboardInterrupt

    monkeypatch.setattr(os, "fsync", interrupted)
    with pytest.raises(KeyboardInterrupt):
        atomic_write(p, "new")
    assert p.read_text(encoding="utf-8") == "old"
    assert [x.name for x in tmp_path.iterdir()] == ["keep.json"]


def test_missing_folder_and_folder_at_path(tmp_path):
    with pytest.raises(FileWriteError, match="cannot write .*nowhere") as exc:
        atomic_write(tmp_path / "nowhere" / "x.json", "x")
    assert exc.value.errno == errno.ENOENT
    (tmp_path / "d.json").mkdir()
    with pytest.raises(FileWriteError, match="d.json"):
        atomic_write(tmp_path / "d.json", "x")
    assert (tmp_path / "d.json").is_dir()
    assert sorted(x.name for x in tmp_path.iterdir()) == ["d.json"]


@posix_only
@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0, reason="root ignores folder permissions")
def test_read_only_folder(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    (folder / "x.json").write_text("old", encoding="utf-8")
    os.chmod(folder, 0o555)
    try:
        with pytest.raises(FileWriteError, match="Permission denied"):
            atomic_write(folder / "x.json", "new")
        assert (folder / "x.json").read_text(encoding="utf-8") == "old"
    finally:
        os.chmod(folder, 0o755)


def test_lone_surrogate_text_is_refused_before_writing(tmp_path):
    p = tmp_path / "x.json"
    with pytest.raises(FileWriteError, match="surrogate"):
        atomic_write(p, "bad \udc80 text")
    assert list(tmp_path.iterdir()) == []


@posix_only
@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() != 0, reason="only root may give a file away")
def test_root_overwrite_keeps_owner_and_group(tmp_path):
    p = tmp_path / "theirs.json"
    p.write_text("old", encoding="utf-8")
    os.chown(p, 12345, 23456)
    os.chmod(p, 0o664)
    atomic_write(p, "new")
    st = os.stat(p)
    assert (st.st_uid, st.st_gid, stat.S_IMODE(st.st_mode)) == (12345, 23456, 0o664)
