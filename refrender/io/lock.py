"""One writer per output: a lock file beside OUT.state.

``OUT.lock`` (beside ``OUT.exr`` and ``OUT.state``) is created with
``O_CREAT | O_EXCL`` (atomic on local file systems and NFSv3+), holding JSON
``{"pid": ..., "host": ..., "started": ...}``.  A second render or merge of
the same output finds it and is refused with one line.  The lock is removed
on every exit path of the holder (normal end, error, Ctrl-C, SIGTERM: the
``with`` block's ``finally``); a holder killed with SIGKILL leaves it behind,
and the next writer recognises it as stale when it names this host and a pid
that no longer runs, removes it and takes the output.
"""
from __future__ import annotations

import json
import os
import socket
import time
from pathlib import Path

from ..errors import RenderError

__all__ = ["OutputLock", "lock_path_for"]


def lock_path_for(exr_path) -> Path:
    """``out.exr`` -> ``out.lock`` (same folder)."""
    return Path(exr_path).with_suffix(".lock")


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:          # exists, owned by another user
        return True
    except (OverflowError, ValueError, OSError):
        return False
    return True


class OutputLock:
    """Context manager owning *exr_path*'s outputs; ``what`` names the option in errors."""

    def __init__(self, exr_path, what: str = "--output"):
        self.path = lock_path_for(exr_path)
        self.what = what
        self._held = False

    def _holder(self) -> dict | None:
        """The lock's content, or None if it cannot be read (being written, removed, garbage)."""
        try:
            data = json.loads(self.path.read_text("utf-8"))
        except (OSError, ValueError):
            return None
        return data if isinstance(data, dict) else None

    def _stale(self, holder: dict | None) -> bool:
        if holder is None:
            # unreadable: a writer between create and write, or garbage; garbage older
            # than a minute is stale
            try:
                return time.time() - self.path.stat().st_mtime > 60
            except OSError:
                return False
        pid = holder.get("pid")
        return (holder.get("host") == socket.gethostname() and isinstance(pid, int)
                and not isinstance(pid, bool) and not _pid_alive(pid))

    def acquire(self) -> None:
        record = json.dumps({"pid": os.getpid(), "host": socket.gethostname(),
                             "started": time.strftime("%Y-%m-%dT%H:%M:%S%z")}).encode()
        for _ in range(3):
            try:
                fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
            except FileExistsError:
                holder = self._holder()
                if self._stale(holder):
                    try:
                        self.path.unlink()
                    except FileNotFoundError:
                        pass
                    continue
                who = (f"pid {holder.get('pid')} on {holder.get('host')}, since {holder.get('started')}"
                       if holder else "a writer that is starting")
                raise RenderError(f"{self.what}: {self.path.with_suffix('.exr')} is being written by another "
                                  f"render ({who}); wait for it, or remove {self.path} if that "
                                  "process is gone") from None
            except OSError as exc:
                raise RenderError(f"{self.what}: cannot create the lock file {self.path}: "
                                  f"{exc.strerror or exc}") from None
            try:
                os.write(fd, record)
            finally:
                os.close(fd)
            self._held = True
            return
        raise RenderError(f"{self.what}: cannot take the lock file {self.path} (it keeps reappearing)")

    def release(self) -> None:
        if self._held:
            self._held = False
            try:
                holder = self._holder()
                if holder is None or holder.get("pid") == os.getpid():
                    self.path.unlink()
            except FileNotFoundError:
                pass

    def __enter__(self):
        self.acquire()
        return self

    def __exit__(self, *exc):
        self.release()
        return False
