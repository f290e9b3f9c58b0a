"""OpenEXR output of a render: mean radiance, per-pixel variance and metadata.

File layout written by :func:`write_exr` (one scanline part, ZIP compression,
which is lossless):

* channels ``R``, ``G``, ``B``: mean linear radiance, float32, W m^-2 sr^-1;
* channels ``variance.R``, ``variance.G``, ``variance.B`` (optional): the
  per-pixel variance of that mean, float32, (W m^-2 sr^-1)^2;
* optional extra layers ``<name>.R/G/B`` (names may be dotted, e.g.
  ``light.window`` and ``light.window.variance``) and single channels;
* the standard attribute ``chromaticities`` (CIE xy of the R, G, B primaries
  and the white point) naming the colour space of the RGB values;
* header attribute ``refrender``: the whole metadata dict as one JSON string;
* header attributes ``refrender.<key>``: each top-level metadata value as a
  string (a string value as itself, anything else as JSON), for people who
  look at the header with a generic EXR viewer.

Header numbers are never written as EXR ``int``/``float`` attributes, which
would wrap at int32 and round to float32; JSON text keeps ints of any size and
float64 values exactly (``repr`` round trip).

Channels are always read and written by name: the file stores them sorted
alphabetically, so positions mean nothing.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from refrender.errors import ImageError
from refrender.io.atomic import atomic_path
from refrender.io.metadata import check_metadata
from refrender.io.quiet import Captured, foreign_stderr

__all__ = ["ExrImage", "read_exr", "write_exr", "EXR_MAGIC", "METADATA_ATTRIBUTE"]

#: First four bytes of every OpenEXR file.
EXR_MAGIC = b"\x76\x2f\x31\x01"
#: Header attribute holding the metadata dict as JSON.
METADATA_ATTRIBUTE = "refrender"
_RGB = ("R", "G", "B")
#: ITU-R BT.709 primaries and D65 white (CIE 1931 xy), the OpenEXR default
REC709_CHROMATICITIES = (0.64, 0.33, 0.30, 0.60, 0.15, 0.06, 0.3127, 0.3290)


def _import_openexr():
    try:
        import OpenEXR
    except ImportError:  # pragma: no cover - declared dependency
        raise ImageError("writing or reading EXR needs the 'OpenEXR' package (pip install OpenEXR)") from None
    return OpenEXR


def _as_float32_image(name: str, array: Any, shape: tuple[int, ...] | None) -> np.ndarray:
    """Check an (H, W, 3) real array and return it as float32 (a copy if needed)."""
    arr = np.asarray(array)
    if arr.dtype.kind not in "fiub":
        raise ImageError(f"write_exr: {name} must be a real array, got dtype {arr.dtype}")
    if arr.ndim != 3 or arr.shape[2] != 3 or arr.shape[0] < 1 or arr.shape[1] < 1:
        raise ImageError(f"write_exr: {name} must have shape (H, W, 3), got {arr.shape}")
    if shape is not None and arr.shape != shape:
        raise ImageError(f"write_exr: {name} has shape {arr.shape}, mean has shape {shape}")
    return arr.astype(np.float32, copy=False)


def _metadata_attributes(metadata: Mapping[str, Any]) -> dict[str, str]:
    """Header string attributes for a metadata dict (see module docstring)."""
    if not isinstance(metadata, Mapping):
        raise ImageError(f"write_exr: metadata must be a dict, got {type(metadata).__name__}")
    bad = [k for k in metadata if not isinstance(k, str) or not k]
    if bad:
        raise ImageError(f"write_exr: metadata keys must be non-empty strings, got {bad[0]!r}")
    try:
        attrs = {METADATA_ATTRIBUTE: json.dumps(dict(metadata), allow_nan=False, sort_keys=True)}
        for key, value in metadata.items():
            text = value if isinstance(value, str) else json.dumps(value, allow_nan=False, sort_keys=True)
            attrs[f"{METADATA_ATTRIBUTE}.{key}"] = text
    except (TypeError, ValueError) as exc:
        raise ImageError(f"write_exr: metadata is not JSON-serialisable: {exc}") from None
    return attrs


def write_exr(
    path: str | os.PathLike[str],
    mean: np.ndarray,
    variance: np.ndarray | None = None,
    metadata: Mapping[str, Any] | None = None,
    *,
    layers: Mapping[str, np.ndarray] | None = None,
    channels: Mapping[str, np.ndarray] | None = None,
    chromaticities: tuple | None = None,
) -> None:
    """Write a render to an OpenEXR file, atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Destination ``.exr`` file; its folder must exist.  Replaced atomically.
    mean : array_like, shape (H, W, 3), real
        Mean linear radiance (W m^-2 sr^-1), any real dtype; stored float32 as
        channels ``R``, ``G``, ``B``.  Views (non-contiguous) are fine.
    variance : array_like, shape (H, W, 3), optional
        Variance of the mean per pixel and channel; stored float32 as
        ``variance.R``, ``variance.G``, ``variance.B``.
    metadata : dict, optional
        JSON-serialisable values (no NaN/Inf; str keys).  Stored losslessly as
        the JSON attribute ``refrender`` and per top-level key as the string
        attribute ``refrender.<key>``.  Tuples read back as lists.
    layers : dict of str to array_like (H, W, 3), optional
        Extra float32 layers, stored as ``<name>.R``, ``<name>.G``, ``<name>.B``.
        Names must not be ``variance``; dotted names nest (``light.window``).
    channels : dict of str to array_like (H, W), optional
        Extra single float32 channels by full name (``depth.Z``).
    chromaticities : 8 floats, optional
        CIE xy of red, green, blue and white for the standard ``chromaticities``
        attribute; default: ITU-R BT.709 primaries with D65 (linear Rec. 709).

    Raises
    ------
    ImageError
        Bad shape or dtype, non-serialisable metadata, or the file cannot be
        written (one line; the target is untouched).
    """
    OpenEXR = _import_openexr()
    extra = channels
    mean32 = _as_float32_image("mean", mean, None)
    stacks: dict[str, np.ndarray] = {"": mean32}
    if variance is not None:
        stacks["variance"] = _as_float32_image("variance", variance, mean32.shape)
    for name, arr in (layers or {}).items():
        if (not isinstance(name, str) or not name or name in stacks or name in _RGB
                or any(not part for part in name.split("."))):
            raise ImageError(f"write_exr: invalid or duplicate layer name {name!r}")
        stacks[name] = _as_float32_image(f"layer {name!r}", arr, mean32.shape)

    channels: dict[str, np.ndarray] = {}
    for prefix, stack in stacks.items():
        for i, c in enumerate(_RGB):
            # Separate C-contiguous 2-D arrays: OpenEXR writes non-contiguous views wrongly.
            channels[f"{prefix}.{c}" if prefix else c] = np.ascontiguousarray(stack[..., i])
    for name, arr in (extra or {}).items():
        a = np.asarray(arr)
        if (not isinstance(name, str) or name in channels or a.shape != mean32.shape[:2]
                or a.dtype.kind not in "fiu"):
            raise ImageError(f"write_exr: invalid or duplicate channel {name!r}")
        channels[name] = np.ascontiguousarray(a, dtype=np.float32)

    header: dict[str, Any] = {
        "compression": OpenEXR.ZIP_COMPRESSION,
        "type": OpenEXR.scanlineimage,
        "chromaticities": tuple(float(v) for v in (chromaticities or REC709_CHROMATICITIES)),
    }
    header.update(_metadata_attributes(metadata or {}))

    with atomic_path(path) as tmp:
        try:
            with OpenEXR.File(header, channels) as exr:
                exr.write(tmp)
        except (RuntimeError, ValueError, TypeError) as exc:
            raise ImageError(f"{path}: cannot write EXR: {_first_line(exc)}") from None


@dataclass
class ExrImage:
    """Pixels, header and refrender metadata of one EXR file.

    Attributes
    ----------
    channels : dict of str to ndarray, shape (H, W)
        Every channel by its full name (``"R"``, ``"variance.G"``, ...).
        Half and float channels are float32; uint32 channels stay uint32.
    header : dict
        The raw header as returned by the ``OpenEXR`` package.
    metadata : dict
        The ``refrender`` JSON attribute parsed, or ``{}`` if absent.
    """

    channels: dict[str, np.ndarray]
    header: dict[str, Any] = field(default_factory=dict)
    metadata: dict[str, Any] = field(default_factory=dict)

    @property
    def shape(self) -> tuple[int, int]:
        """(H, W) of the image."""
        first = next(iter(self.channels.values()))
        return first.shape[0], first.shape[1]

    def _stack(self, names: list[str], what: str) -> np.ndarray:
        missing = [n for n in names if n not in self.channels]
        if missing:
            raise ImageError(f"EXR has no {what} (missing channels {', '.join(missing)}; "
                             f"has {', '.join(sorted(self.channels))})")
        return np.stack([self.channels[n] for n in names], axis=-1)

    def rgb(self) -> np.ndarray:
        """Channels ``R``, ``G``, ``B`` as an (H, W, 3) array (by name)."""
        return self._stack(list(_RGB), "RGB channels")

    def layer(self, name: str) -> np.ndarray:
        """Channels ``<name>.R/G/B`` as an (H, W, 3) array, e.g. ``layer("variance")``."""
        return self._stack([f"{name}.{c}" for c in _RGB], f"layer {name!r}")

    @property
    def chromaticities(self) -> tuple | None:
        """The standard ``chromaticities`` attribute (8 floats), or None if absent."""
        c = self.header.get("chromaticities")
        return None if c is None else tuple(float(v) for v in c)

    def layers(self) -> list[str]:
        """Sorted names of the dotted layers that have all of R, G and B."""
        prefixes = {n.rsplit(".", 1)[0] for n in self.channels if "." in n}
        return sorted(p for p in prefixes if all(f"{p}.{c}" in self.channels for c in _RGB))


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _check_magic(path: Path) -> None:
    try:
        with open(path, "rb") as fh:
            magic = fh.read(4)
    except FileNotFoundError:
        raise ImageError(f"{path}: no such file") from None
    except IsADirectoryError:
        raise ImageError(f"{path}: is a directory, not an EXR file") from None
    except OSError as exc:
        raise ImageError(f"{path}: cannot read: {exc.strerror or exc}") from None
    if magic != EXR_MAGIC:
        raise ImageError(f"{path}: not an OpenEXR file")


def read_exr(path: str | os.PathLike[str]) -> ExrImage:
    """Read every channel of an OpenEXR file by name.

    Parameters
    ----------
    path : str or os.PathLike
        The ``.exr`` file.  Only the first part of a multi-part file is read.

    Returns
    -------
    ExrImage
        Channels (H, W) by name, raw header and parsed refrender metadata.

    Raises
    ------
    ImageError
        Missing, non-EXR, truncated or corrupted file, or corrupted
        ``refrender`` metadata (one line naming the file).
    """
    OpenEXR = _import_openexr()
    path = Path(path)
    _check_magic(path)
    # On a damaged file the OpenEXR package prints a "Warning: ..." to stdout and
    # returns a File with no parts; capture the text so it becomes our error message.
    # The C++ library prints its own messages on stderr: captured too (io/quiet.py).
    captured = io.StringIO()
    foreign = Captured()
    try:
        with foreign_stderr() as foreign, contextlib.redirect_stdout(captured):
            exr = OpenEXR.File(os.fspath(path), separate_channels=True)
            with exr:
                if len(exr.parts) == 0:
                    raise ImageError("")
                header = dict(exr.header())
                raw = exr.channels()
                channels = {name: np.asarray(ch.pixels) for name, ch in raw.items()}
    except Exception as exc:  # noqa: BLE001 - the binding raises many types on damaged files
        reason = captured.getvalue().strip() or foreign.line or _first_line(exc)
        reason = reason.splitlines()[0].removeprefix("Warning: ") if reason else "unreadable"
        raise ImageError(f"{path}: truncated or corrupted EXR ({reason})") from None
    if not channels:
        raise ImageError(f"{path}: EXR file has no channels")
    for name, pix in channels.items():
        if pix.dtype == np.float16:
            channels[name] = pix.astype(np.float32)
        elif pix.dtype not in (np.float32, np.uint32):
            raise ImageError(f"{path}: channel {name!r} has unsupported pixel type {pix.dtype}")

    metadata: dict[str, Any] = {}
    text = header.get(METADATA_ATTRIBUTE)
    if text is not None:
        try:
            metadata = json.loads(text)
        except (TypeError, ValueError):
            raise ImageError(f"{path}: corrupted refrender metadata (attribute "
                             f"'{METADATA_ATTRIBUTE}' is not JSON)") from None
        if not isinstance(metadata, dict):
            raise ImageError(f"{path}: corrupted refrender metadata (not a JSON object)")
        check_metadata(metadata, path)
    return ExrImage(channels=channels, header=header, metadata=metadata)
