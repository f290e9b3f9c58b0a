"""State file: a render's float64 accumulators, kept beside its EXR.

The EXR holds float32 means for people and tools; the state file holds the
exact float64 sums (and anything else the renderer needs) so that renders can
be merged or resumed without loss.  Format: an uncompressed ``.npz`` (zip of
``.npy`` arrays, no pickles) with one extra member ``__refrender_metadata__``,
a uint8 array holding UTF-8 JSON::

    {"format": "refrender-state", "format_version": 1,
     "sha256": "<hex digest of the arrays>", ...caller's metadata...}

The digest covers, for every array in name order, its name, dtype, shape and
raw bytes, so any damage to the pixel data or its description is detected on
load, in addition to the zip's own CRC-32.
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from refrender.errors import ImageError
from refrender.io.atomic import atomic_write

__all__ = ["STATE_FORMAT", "STATE_FORMAT_VERSION", "arrays_digest", "load_state", "save_state", "state_path_for"]

#: Value of the ``format`` metadata key of every state file.
STATE_FORMAT = "refrender-state"
#: Current (and highest readable) state format version.
STATE_FORMAT_VERSION = 1
_METADATA_KEY = "__refrender_metadata__"
_RESERVED = ("format", "format_version", "sha256")


def arrays_digest(arrays: Mapping[str, np.ndarray]) -> str:
    """SHA-256 hex digest over the names, dtypes, shapes and bytes of ``arrays``.

    Parameters
    ----------
    arrays : dict of str to ndarray
        Any arrays; hashed in sorted name order, each as C-order bytes.

    Returns
    -------
    str
        64 hexadecimal characters.
    """
    digest = hashlib.sha256()
    for name in sorted(arrays):
        arr = np.ascontiguousarray(arrays[name])
        description = json.dumps([name, arr.dtype.str, list(arr.shape)]).encode("utf-8")
        digest.update(len(description).to_bytes(8, "little"))
        digest.update(description)
        digest.update(arr.reshape(-1).view(np.uint8).data)
    return digest.hexdigest()


def save_state(path: str | os.PathLike[str], arrays: Mapping[str, np.ndarray], metadata: Mapping[str, Any]) -> None:
    """Write a state file atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Destination, usually :func:`state_path_for` of the EXR.  No suffix is
        added.  Replaced atomically.
    arrays : dict of str to ndarray
        The accumulators (any numeric dtype and shape; float64 sums are stored
        bit-exactly).  Names must be non-empty strings without ``/``.
    metadata : dict
        JSON-serialisable values (no NaN/Inf), e.g. sample counts, seeds and a
        scene hash.  The keys ``format``, ``format_version`` and ``sha256``
        are reserved and added by this function.  Not modified.

    Raises
    ------
    ImageError
        Bad array names or dtypes, reserved or non-serialisable metadata, or
        the file cannot be written (one line; the target is untouched).
    """
    checked: dict[str, np.ndarray] = {}
    for name, value in arrays.items():
        if not isinstance(name, str) or not name or "/" in name or name == _METADATA_KEY:
            raise ImageError(f"save_state: invalid array name {name!r}")
        arr = np.asarray(value)
        if arr.dtype.kind not in "biufc":
            raise ImageError(f"save_state: array {name!r} must be numeric, got dtype {arr.dtype}")
        checked[name] = arr
    clash = [k for k in _RESERVED if k in metadata]
    if clash:
        raise ImageError(f"save_state: metadata key {clash[0]!r} is reserved")
    meta = dict(metadata)
    meta.update(format=STATE_FORMAT, format_version=STATE_FORMAT_VERSION, sha256=arrays_digest(checked))
    try:
        text = json.dumps(meta, allow_nan=False, sort_keys=True)
    except (TypeError, ValueError) as exc:
        raise ImageError(f"save_state: metadata is not JSON-serialisable: {exc}") from None
    members = dict(checked)
    members[_METADATA_KEY] = np.frombuffer(text.encode("utf-8"), dtype=np.uint8)
    with atomic_write(path, "wb") as fh:
        # A file object, so numpy does not append ".npz"; no pickles.
        np.savez(fh, allow_pickle=False, **members)


def load_state(path: str | os.PathLike[str]) -> tuple[dict[str, np.ndarray], dict[str, Any]]:
    """Read and verify a state file written by :func:`save_state`.

    Parameters
    ----------
    path : str or os.PathLike
        The state file.

    Returns
    -------
    arrays : dict of str to ndarray
        The arrays, bit-identical to those saved (same dtypes and shapes).
    metadata : dict
        The caller's metadata plus ``format``, ``format_version`` and ``sha256``.

    Raises
    ------
    ImageError
        One line: ``<path>: no such file``, ``<path>: not a refrender state
        file (...)`` (truncated, not a zip, no metadata, wrong format tag),
        ``<path>: unsupported state format version N``, or ``<path>:
        corrupted (checksum mismatch)``.
    """
    path = Path(path)
    if not path.exists():
        raise ImageError(f"{path}: no such file")
    if path.is_dir():
        raise ImageError(f"{path}: is a directory, not a refrender state file")
    arrays: dict[str, np.ndarray] = {}
    try:
        loaded = np.load(path, allow_pickle=False)
        if not isinstance(loaded, np.lib.npyio.NpzFile):
            raise ImageError(f"{path}: not a refrender state file (a single .npy array)")
        with loaded as npz:
            if _METADATA_KEY not in npz.files:
                raise ImageError(f"{path}: not a refrender state file (no metadata)")
            raw_meta = npz[_METADATA_KEY]
            for name in npz.files:
                if name != _METADATA_KEY:
                    arrays[name] = npz[name]
    except ImageError:
        raise
    except Exception as exc:  # damaged zip/npy data raises many types (BadZipFile, ValueError, EOFError, ...)
        if "CRC" in str(exc):
            raise ImageError(f"{path}: corrupted (checksum mismatch)") from None
        text = str(exc).strip()
        reason = text.splitlines()[0] if text else type(exc).__name__
        if "pickle" in reason.lower():           # numpy's advice to allow pickles is wrong here
            reason = "it holds Python objects"
        raise ImageError(f"{path}: not a refrender state file ({reason})") from None

    try:
        if raw_meta.dtype != np.uint8 or raw_meta.ndim != 1:
            raise ValueError
        metadata = json.loads(raw_meta.tobytes().decode("utf-8"))
        if not isinstance(metadata, dict):
            raise ValueError
    except ValueError:  # includes UnicodeDecodeError and JSONDecodeError
        raise ImageError(f"{path}: corrupted (metadata is not valid JSON)") from None
    if metadata.get("format") != STATE_FORMAT:
        raise ImageError(f"{path}: not a refrender state file (format tag {metadata.get('format')!r})")
    version = metadata.get("format_version")
    if not isinstance(version, int) or not 1 <= version <= STATE_FORMAT_VERSION:
        raise ImageError(f"{path}: unsupported state format version {version!r} "
                         f"(this refrender reads up to {STATE_FORMAT_VERSION})")
    if metadata.get("sha256") != arrays_digest(arrays):
        raise ImageError(f"{path}: corrupted (checksum mismatch)")
    return arrays, metadata


def state_path_for(exr_path: str | os.PathLike[str]) -> Path:
    """Path of the state file that belongs to an EXR: ``out.exr`` -> ``out.state``.

    Parameters
    ----------
    exr_path : str or os.PathLike
        The EXR path (its last suffix, if any, is replaced; same folder).

    Returns
    -------
    pathlib.Path
    """
    return Path(exr_path).with_suffix(".state")
