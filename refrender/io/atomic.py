"""Atomic file writes: a reader sees either the old file or the complete new one.

Every output of refrender (EXR, state, PFM, PNG preview) is written to a
temporary file in the destination folder, flushed and ``fsync``-ed, then
renamed onto the target with :func:`os.replace` (atomic on POSIX and Windows
when both names are on the same file system, which is why the temporary file
lives in the same folder), and finally the folder itself is ``fsync``-ed so the
rename survives a power cut.  If anything fails before the rename, the
temporary file is removed and the target is left untouched.

Temporary names are ``.<basename>.<random>.tmp`` so they are hidden and easy
to recognise (and to clean up) if the process is killed with SIGKILL.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import IO, Any

from refrender.errors import ImageError

__all__ = ["atomic_path", "atomic_write", "atomic_write_bytes"]


def _current_umask() -> int:
    """Return the process umask (read once at import; setting it is not thread-safe)."""
    mask = os.umask(0)
    os.umask(mask)
    return mask


_FILE_MODE = 0o666 & ~_current_umask()


def _fsync_dir(folder: Path) -> None:
    """``fsync`` a directory so a rename inside it is durable (no-op where unsupported)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # e.g. Windows cannot open directories
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _fsync_file(path: str) -> None:
    """``fsync`` a file that another library has written and closed."""
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _remove_quietly(path: str) -> None:
    with contextlib.suppress(OSError):
        os.unlink(path)


def _one_line(exc: OSError) -> str:
    """Short reason of an OS error, e.g. ``No such file or directory``."""
    if exc.strerror:
        return exc.strerror
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[str]:
    """Yield a temporary path to write; rename it onto ``path`` on success.

    Use this for libraries that write to a file *name* (OpenEXR).  The writer
    must create and close the file inside the ``with`` block.

    Parameters
    ----------
    path : str or os.PathLike
        Final destination.  Its folder must exist.

    Yields
    ------
    str
        Path of an empty temporary file ``.<basename>.<random>.tmp`` in the
        destination folder.

    Raises
    ------
    ImageError
        The temporary file cannot be created, synced or renamed, or an
        :class:`OSError` (disk full, ...) is raised inside the block (one
        line).  Other exceptions raised inside the block propagate unchanged.
        In every failure case the temporary file is removed and the target is
        untouched.
    """
    target = Path(path)
    folder = target.parent
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise ImageError(f"{target}: cannot write: {_one_line(exc)}") from None
    os.close(fd)
    try:
        yield tmp
        _fsync_file(tmp)
        os.chmod(tmp, _FILE_MODE)  # mkstemp creates 0600; give the usual umask-based mode
        os.replace(tmp, target)
    except OSError as exc:
        _remove_quietly(tmp)
        raise ImageError(f"{target}: cannot write: {_one_line(exc)}") from None
    except BaseException:
        _remove_quietly(tmp)
        raise
    _fsync_dir(folder)


@contextlib.contextmanager
def atomic_write(path: str | os.PathLike[str], mode: str = "wb") -> Iterator[IO[Any]]:
    """Open a temporary file for writing; rename it onto ``path`` on success.

    Parameters
    ----------
    path : str or os.PathLike
        Final destination.  Its folder must exist.
    mode : {"wb", "w"}
        Binary (default) or text mode; text is written as UTF-8.

    Yields
    ------
    file object
        The open temporary file.  It is flushed, ``fsync``-ed and closed when
        the block ends without an exception, then renamed onto ``path`` and
        the folder is ``fsync``-ed.

    Raises
    ------
    ValueError
        ``mode`` is not a write mode.
    ImageError
        The file cannot be created, written, synced or renamed (one line).
        Other exceptions raised inside the block propagate unchanged.  In
        every failure case the temporary file is removed and the target is
        untouched.

    Examples
    --------
    >>> with atomic_write("out.json", "w") as f:  # doctest: +SKIP
    ...     f.write("{}")
    """
    if mode not in ("wb", "w"):
        raise ValueError(f"atomic_write: mode must be 'wb' or 'w', got {mode!r}")
    with atomic_path(path) as tmp:
        encoding = None if "b" in mode else "utf-8"
        try:
            fh = open(tmp, mode, encoding=encoding)
        except OSError as exc:
            raise ImageError(f"{path}: cannot write: {_one_line(exc)}") from None
        with fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes | bytearray | memoryview) -> None:
    """Write ``data`` to ``path`` atomically (see :func:`atomic_write`).

    Parameters
    ----------
    path : str or os.PathLike
        Final destination.  Its folder must exist.
    data : bytes-like
        Complete file content.

    Raises
    ------
    ImageError
        The file cannot be written (one line).
    """
    with atomic_write(path, "wb") as fh:
        fh.write(data)
