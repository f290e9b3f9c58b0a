"""Exceptions raised by refrender.

Every error that a user can cause (a scene typo, a missing file, a bad option)
is a :class:`RefrenderError`; the command line turns one into a single line on
stderr and exit status 2.
"""


class RefrenderError(Exception):
    """Base class of all user-facing refrender errors."""


class SceneError(RefrenderError, ValueError):
    """A scene document is invalid.  The message starts with the field path,
    e.g. ``objects[2].radius: must be > 0, got -1``."""


class ImageError(RefrenderError, ValueError):
    """An image or state file cannot be read or written."""


class RenderError(RefrenderError, ValueError):
    """A render request is invalid (bad option, mismatched merge, ...)."""
