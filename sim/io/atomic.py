"""One way to write a file: atomically, durably, with the permissions a plain ``open()`` would give.

Every file HazardTrace writes (scenarios, exported tables, saved plots) goes through
:func:`write_atomic`: the bytes go to a hidden temporary file in the destination folder, are flushed
and synced to disk, and the temporary file is then moved over the destination in one step. Readers
never see a half-written file, and a failed or interrupted write leaves the destination as it was and
no temporary file behind.

Permissions
-----------
The temporary file is created with ``os.open(..., O_CREAT | O_EXCL, 0o666)``, so the kernel applies
the user's umask (and a folder's default ACL) exactly as for ``open(path, "w")`` on a new file:
mode ``0o666 & ~umask``, e.g. 0644 under umask 022. This needs no read of the umask, which in Python
is only possible by setting it (``os.umask``), a process-wide change that would race with other
threads creating files. (``tempfile.mkstemp`` is not used: its mode 0600 would stick to the output.)
Replacing an existing file gives the new file this mode too; the old file's mode is not kept.
Folder runs (:class:`sim.io.export.RunWriter`) are atomic at the folder level instead and create their
files with plain ``open``, hence with the same mode.

Errors
------
:class:`AtomicWriteError` is an :class:`OSError`: the problems it reports (destination exists, is a
folder, its folder is missing) are facts of the file system at the time of writing, not of the
values passed, and callers that already handle ``OSError`` (the desktop window's save actions)
handle it too. It carries ``path``, ``reason`` and the matching ``errno`` (``EEXIST``, ``EISDIR``,
``ENOENT``). Modules with an error class of their own translate it (``write_table`` raises
:class:`sim.io.export.ExportError`).
"""

from __future__ import annotations

import errno
import os
import shutil
import uuid
from collections.abc import Callable
from pathlib import Path
from typing import BinaryIO

__all__ = ["TEMP_PREFIX", "AtomicWriteError", "write_atomic", "write_text_atomic", "fsync_folder"]

TEMP_PREFIX = ".hazardtrace-"
"""Start of the name of every temporary file (hidden on POSIX, and recognisably this program's)."""

_OPEN_FLAGS = os.O_WRONLY | os.O_CREAT | os.O_EXCL | getattr(os, "O_CLOEXEC", 0) | getattr(os, "O_BINARY", 0)


class AtomicWriteError(OSError):
    """A file cannot be written where asked; the message names the path and the reason.

    Attributes
    ----------
    path : pathlib.Path
        The destination.
    reason : str
        What is wrong, in words ("exists; pass force=True to overwrite").
    errno : int or None
        ``errno.EEXIST``, ``errno.EISDIR`` or ``errno.ENOENT``.
    """

    def __init__(self, path: str | os.PathLike[str], reason: str, code: int | None = None) -> None:
        super().__init__(code, reason, os.fspath(path))
        self.path = Path(path)
        self.reason = reason

    def __str__(self) -> str:
        return f"{self.path}: {self.reason}"

    def __reduce__(self):  # picklable with its own arguments (OSError's would be (errno, strerror, filename))
        return (type(self), (self.path, self.reason, self.errno))


def fsync_folder(folder: str | os.PathLike[str]) -> None:
    """Make a rename inside ``folder`` durable (POSIX); a no-op where folders cannot be opened or synced."""
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


def replace_folder(tmp: str | os.PathLike[str], out: str | os.PathLike[str]) -> None:
    """Rename the finished folder ``tmp`` to ``out``, replacing whatever ``out`` is (checked by the caller).

    An existing ``out`` is first renamed to a hidden backup sibling, then ``tmp`` takes its name and
    the backup is removed; if the second rename fails the backup is renamed back, so ``out`` is never
    lost. The parent folder is synced so that the rename survives a crash.
    """
    tmp, out = Path(tmp), Path(out)
    if out.exists() or out.is_symlink():
        backup = out.parent / f".{out.name}.old-{uuid.uuid4().hex[:12]}"
        os.rename(out, backup)
        try:
            os.rename(tmp, out)
        except BaseException:
            os.rename(backup, out)
            raise
        if backup.is_dir() and not backup.is_symlink():
            shutil.rmtree(backup, ignore_errors=True)
        else:
            backup.unlink(missing_ok=True)
    else:
        os.rename(tmp, out)
    fsync_folder(out.parent)


def _exists(path: Path) -> AtomicWriteError:
    return AtomicWriteError(path, "exists; pass force=True to overwrite", errno.EEXIST)


def _check_destination(path: Path, force: bool) -> None:
    if path.is_dir():
        raise AtomicWriteError(path, "is a folder; give a file name", errno.EISDIR)
    if not force and (path.exists() or path.is_symlink()):
        raise _exists(path)
    if not path.parent.is_dir():
        raise AtomicWriteError(path, f"the folder {path.parent} does not exist; create it first", errno.ENOENT)


def write_atomic(path: str | os.PathLike[str], write: Callable[[BinaryIO], None], *, force: bool = True) -> Path:
    """Write a file through ``write(handle)`` atomically and durably.

    Parameters
    ----------
    path : path-like
        Destination file. Its folder must exist.
    write : callable
        Called once with a binary file handle open for writing; writes the whole content. It must not
        close the handle.
    force : bool
        Replace an existing ``path`` (default). Without it an existing ``path`` is an error, also when
        it appears while the content is being written.

    Returns
    -------
    pathlib.Path
        ``path``.

    Raises
    ------
    AtomicWriteError
        ``path`` is a folder, its folder is missing, or ``path`` exists and ``force`` is False.
    Exception
        Anything ``write`` raises, after the temporary file is removed; ``path`` is left as it was.

    Notes
    -----
    Steps: create ``<folder>/.hazardtrace-<name>.<random>.tmp`` with ``O_EXCL`` and mode
    ``0o666 & ~umask`` (see the module docstring), ``write``, flush, ``os.fsync``; then
    ``os.replace`` onto ``path`` (``force``) or, without ``force``, ``os.link`` (which fails if
    ``path`` exists, so a file created meanwhile is never clobbered) and unlink the temporary name,
    falling back to check-then-replace on file systems without hard links; finally fsync the folder
    so that the rename survives a crash.
    """
    path = Path(path)
    if not callable(write):
        raise TypeError(f"write: expected a callable taking a binary file handle, got {type(write).__name__}")
    _check_destination(path, force)
    tmp = path.parent / f"{TEMP_PREFIX}{path.name}.{uuid.uuid4().hex[:12]}.tmp"
    fd = os.open(tmp, _OPEN_FLAGS, 0o666)
    try:
        with os.fdopen(fd, "wb") as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        if force:
            os.replace(tmp, path)
        else:
            try:
                os.link(tmp, path)
            except FileExistsError:
                raise _exists(path) from None
            except OSError:  # file system without hard links
                if path.exists() or path.is_symlink():
                    raise _exists(path) from None
                os.replace(tmp, path)
            else:
                tmp.unlink()
        fsync_folder(path.parent)
    except BaseException:
        tmp.unlink(missing_ok=True)
        raise
    return path


def write_text_atomic(path: str | os.PathLike[str], text: str, *, force: bool = True,
                      encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` atomically, as :func:`write_atomic`.

    The text is encoded as is (``encoding``, UTF-8 by default): line endings are not translated, so
    the file holds exactly ``text``.
    """
    if not isinstance(text, str):
        raise TypeError(f"text: expected str, got {type(text).__name__}")
    data = text.encode(encoding)

    def write(handle: BinaryIO) -> None:
        handle.write(data)

    return write_atomic(path, write, force=force)
