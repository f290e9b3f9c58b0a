"""Capturing what foreign libraries print themselves on standard error.

OpenEXR (C++), OpenCV and other compiled libraries write messages straight to
file descriptor 2, before refrender can say anything; the user then sees
several lines for one problem.  :func:`foreign_stderr` points descriptor 2 at
a temporary file while a library call runs and hands back what was written, so
that the caller folds it into its own one-line error (or drops it when the
call succeeded).  Python-level ``sys.stderr`` writes in the block are captured
too.  Not for long calls: while it runs, other threads' stderr output (a
progress bar) is captured as well.
"""
from __future__ import annotations

import os
import sys
import tempfile
from contextlib import contextmanager

__all__ = ["foreign_stderr", "first_line"]


class Captured:
    """What a library wrote on stderr: ``text`` (set when the block has ended)."""

    text: str = ""

    @property
    def line(self) -> str:
        """The first non-empty line of the captured text, stripped ('' if none)."""
        return first_line(self.text)


def first_line(text: str, limit: int = 160) -> str:
    """The first non-empty line of *text*, at most *limit* characters."""
    for line in str(text).splitlines():
        line = " ".join(line.split())
        if line:
            return line if len(line) <= limit else line[: limit - 3] + "..."
    return ""


@contextmanager
def foreign_stderr():
    """Context manager yielding a :class:`Captured`; descriptor 2 goes to a temporary file."""
    box = Captured()
    try:
        sys.stderr.flush()
    except (AttributeError, OSError, ValueError):
        pass
    try:
        saved = os.dup(2)
    except OSError:                      # no descriptor 2 at all: nothing to capture
        yield box
        return
    with tempfile.TemporaryFile() as tmp:
        os.dup2(tmp.fileno(), 2)
        try:
            yield box
        finally:
            try:
                sys.stderr.flush()
            except (AttributeError, OSError, ValueError):
                pass
            os.dup2(saved, 2)
            os.close(saved)
            tmp.seek(0)
            box.text = tmp.read(65536).decode("utf-8", errors="replace")
