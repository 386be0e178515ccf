"""Saving files (private): the one atomic writer behind :meth:`Design.save` and :meth:`DesignRecord.save`."""

from __future__ import annotations

import contextlib
import os
import secrets
import stat
from pathlib import Path

from .errors import FileWriteError

__all__ = ["atomic_write"]

_TRIES = 20


def _fail(path: str, reason: str, err: OSError | None = None) -> FileWriteError:
    if err is not None:
        reason = err.strerror or str(err)
    return FileWriteError(f"cannot write {path!r}: {reason}", path, getattr(err, "errno", None),
                          getattr(err, "strerror", None))


def _target(path: Path) -> Path:
    """The file actually written: ``path``, or the file a symlink at ``path`` leads to."""
    if not path.is_symlink():
        return path
    real = Path(os.path.realpath(path))
    if real.is_symlink():  # realpath stops at a loop and returns a link
        raise _fail(str(path), "the symbolic link at this path leads round in a loop")
    return real


def atomic_write(path: str | os.PathLike[str], text: str | bytes) -> Path:
    r"""Write a whole file so that readers see either the old content or the new, never a mix.

    The content goes to a new temporary file in the target's folder, is flushed to disk
    (``fsync``) and then renamed over the target (``os.replace``, atomic on POSIX and on
    Windows within one volume); the folder is synced too where the system allows. On any
    failure the temporary file is removed and the old file, if any, is left as it was.

    What is kept of the file replaced:

    * **Permission bits.** The new file gets the replaced file's mode (``chmod``), so a
      0644 file stays 0644. A new file gets ``0o666`` less the process umask, as ``open()``
      would give it.
    * **Symbolic links.** When ``path`` is a symbolic link, the file it leads to (resolved
      through every link, as ``open()`` would) is replaced and the link is kept; a dangling
      link gets its target created. A link loop is an error.
    * **Owner and group,** where the writer may set them (root keeps both, a member of the
      file's group keeps the group); otherwise the new file belongs to the writer.
    * **Not kept:** extended attributes and ACLs, and hard links (other names of the old file
      keep the old content).

    Parameters
    ----------
    path : str or path-like
        Where to write.
    text : str or bytes
        The content; text is encoded as UTF-8, its line ends written as they are.

    Returns
    -------
    Path
        ``path`` as given (not the resolved target).

    Raises
    ------
    FileWriteError
        The file cannot be written (missing folder, no permission, disk full, a folder at
        ``path``, a link loop) or the text is not valid Unicode (a lone surrogate); the message
        names the path and the reason. It is also an :class:`OSError`.
    """
    given = Path(path)
    shown = str(given)
    if isinstance(text, str):
        try:
            data = text.encode("utf-8")
        except UnicodeEncodeError as err:
            raise _fail(shown, f"the text holds {text[err.start]!r} at character {err.start + 1}, a lone "
                               "surrogate that UTF-8 cannot encode") from err
    else:
        data = bytes(text)
    try:
        target = _target(given)
        try:
            old: os.stat_result | None = os.stat(target)
        except FileNotFoundError:
            old = None
        folder = target.parent if str(target.parent) else Path(".")
        fd, tmp = _create_temp(folder, target.name)
    except OSError as err:
        raise _fail(shown, "", err) from err
    try:
        try:
            if old is not None:
                _keep_owner_and_mode(fd, tmp, old)
            view = memoryview(data)
            while view:
                view = view[os.write(fd, view):]
            os.fsync(fd)
        finally:
            os.close(fd)
        os.replace(tmp, target)
    except BaseException as err:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        if isinstance(err, OSError):
            raise _fail(shown, "", err) from err
        raise
    _sync_folder(folder)
    return given


def _keep_owner_and_mode(fd: int, tmp: str, old: os.stat_result) -> None:
    """Give the temporary file the replaced file's owner and group (where allowed) and permission bits."""
    if hasattr(os, "fchown") and (old.st_uid, old.st_gid) != (os.geteuid(), os.getegid()):
        try:  # root may keep both; a member of the old group may keep the group
            os.fchown(fd, old.st_uid, old.st_gid)
        except OSError:
            with contextlib.suppress(OSError):
                os.fchown(fd, -1, old.st_gid)
    mode = stat.S_IMODE(old.st_mode)  # after chown, which may clear set-id bits
    if hasattr(os, "fchmod"):
        os.fchmod(fd, mode)
    else:
        os.chmod(tmp, mode)


def _create_temp(folder: Path, name: str) -> tuple[int, str]:
    """A new, empty temporary file beside the target, created as ``open()`` would (umask applied)."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_BINARY", 0) | getattr(os, "O_NOFOLLOW", 0)
    for _ in range(_TRIES):
        tmp = os.path.join(folder, f".{name}.{secrets.token_hex(4)}.tmp")
        try:
            return os.open(tmp, flags, 0o666), tmp
        except FileExistsError:
            continue
    raise FileExistsError(f"no free temporary name beside {name!r} after {_TRIES} tries")


def _sync_folder(folder: Path) -> None:
    """Make the rename durable where the system allows opening a folder (POSIX)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
