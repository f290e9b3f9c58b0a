"""Reading reference/comparison images and writing PFM files and PNG previews.

All images returned here are linear: 8/16-bit PNG, JPEG and integer TIFF
files are assumed to be sRGB-encoded and are decoded (with a
:class:`PrecisionWarning`); floating-point formats are returned as stored.
Shapes are always (H, W, C) with row 0 at the top of the picture.
"""

from __future__ import annotations

import importlib.util
import io
import os
import warnings
from pathlib import Path

import numpy as np

from refrender.io.quiet import foreign_stderr
from refrender.errors import ImageError
from refrender.io.atomic import atomic_write, atomic_write_bytes
from refrender.io.exr import read_exr

__all__ = [
    "PrecisionWarning",
    "READABLE_EXTENSIONS",
    "read_image",
    "srgb_decode",
    "srgb_encode",
    "write_pfm",
    "write_png_preview",
]

# IEC 61966-2-1:1999 sRGB transfer-function constants.
_SRGB_LINEAR_BREAK = 0.0031308
_SRGB_ENCODED_BREAK = 0.04045
_SRGB_SLOPE = 12.92
_SRGB_A = 0.055
_SRGB_GAMMA = 2.4

#: Extensions :func:`read_image` understands (lower case).
READABLE_EXTENSIONS = (".exr", ".pfm", ".hdr", ".pic", ".png", ".jpg", ".jpeg", ".tif", ".tiff", ".npy")


class PrecisionWarning(UserWarning):
    """An image was read or written with less precision than a reference needs."""


def srgb_encode(linear: np.ndarray | float) -> np.ndarray:
    """Apply the sRGB transfer function (IEC 61966-2-1:1999), linear -> encoded.

    Parameters
    ----------
    linear : array_like
        Linear values, nominally in [0, 1] (values outside are extended with
        the same piecewise formula; negatives stay on the linear segment).

    Returns
    -------
    ndarray, float64, same shape
        Encoded values ``12.92 L`` for ``L <= 0.0031308`` else
        ``1.055 L**(1/2.4) - 0.055``.  NaN stays NaN.
    """
    x = np.asarray(linear, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        curve = (1.0 + _SRGB_A) * np.power(np.maximum(x, _SRGB_LINEAR_BREAK), 1.0 / _SRGB_GAMMA) - _SRGB_A
        return np.where(x <= _SRGB_LINEAR_BREAK, _SRGB_SLOPE * x, curve)


def srgb_decode(encoded: np.ndarray | float) -> np.ndarray:
    """Invert the sRGB transfer function (IEC 61966-2-1:1999), encoded -> linear.

    Parameters
    ----------
    encoded : array_like
        Encoded values, nominally in [0, 1].

    Returns
    -------
    ndarray, float64, same shape
        ``V / 12.92`` for ``V <= 0.04045`` else ``((V + 0.055) / 1.055)**2.4``.
    """
    v = np.asarray(encoded, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        curve = np.power((np.maximum(v, _SRGB_ENCODED_BREAK) + _SRGB_A) / (1.0 + _SRGB_A), _SRGB_GAMMA)
        return np.where(v <= _SRGB_ENCODED_BREAK, v / _SRGB_SLOPE, curve)


# ----------------------------------------------------------------------------- readers


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _read_exr_image(path: Path) -> np.ndarray:
    """EXR -> (H, W, C) float32: R,G,B[,A]; else a single RGB layer; else one channel."""
    img = read_exr(path)
    ch = img.channels
    if all(c in ch for c in "RGB"):
        names = ["R", "G", "B"] + (["A"] if "A" in ch else [])
    elif len(img.layers()) == 1:
        layer = img.layers()[0]
        names = [f"{layer}.{c}" for c in "RGB"]
    elif len(ch) == 1:
        names = list(ch)
    elif "Y" in ch:
        names = ["Y"]
    else:
        raise ImageError(f"{path}: EXR has no R,G,B channels and no single layer to read "
                         f"(channels: {', '.join(sorted(ch))})")
    return np.stack([ch[n].astype(np.float32, copy=False) for n in names], axis=-1)


def _pfm_token(data: bytes, pos: int, path: Path) -> tuple[bytes, int]:
    """Next whitespace-separated header token of a PFM file and the position after
    its single terminating whitespace byte."""
    while pos < len(data) and data[pos : pos + 1].isspace():
        pos += 1
    start = pos
    while pos < len(data) and not data[pos : pos + 1].isspace():
        pos += 1
    if pos >= len(data) or pos - start > 32:
        raise ImageError(f"{path}: not a PFM file (bad header)")
    return data[start:pos], pos + 1


def _read_pfm(path: Path) -> np.ndarray:
    """PFM ('PF' colour, 'Pf' grey) -> (H, W, 3|1) float32, row 0 at the top.

    The sign of the scale gives the byte order (negative: little-endian); its
    magnitude is ignored, as is usual practice.
    """
    data = path.read_bytes()
    kind, pos = _pfm_token(data, 0, path)
    if kind not in (b"PF", b"Pf"):
        raise ImageError(f"{path}: not a PFM file (magic must be 'PF' or 'Pf')")
    try:
        w_tok, pos = _pfm_token(data, pos, path)
        h_tok, pos = _pfm_token(data, pos, path)
        s_tok, pos = _pfm_token(data, pos, path)
        width, height, scale = int(w_tok), int(h_tok), float(s_tok)
    except ValueError:
        raise ImageError(f"{path}: not a PFM file (bad width, height or scale)") from None
    if width < 1 or height < 1 or scale == 0.0 or not np.isfinite(scale):
        raise ImageError(f"{path}: not a PFM file (width {width}, height {height}, scale {scale})")
    nc = 3 if kind == b"PF" else 1
    count = width * height * nc
    if len(data) - pos < 4 * count:
        raise ImageError(f"{path}: truncated PFM file ({len(data) - pos} of {4 * count} pixel bytes)")
    dtype = np.dtype("<f4" if scale < 0 else ">f4")
    pix = np.frombuffer(data, dtype=dtype, count=count, offset=pos).reshape(height, width, nc)
    return np.ascontiguousarray(pix[::-1]).astype(np.float32)


def _import_cv2(what: str):
    try:
        import cv2
    except ImportError:
        raise ImageError(f"reading {what} needs the 'opencv-python-headless' package") from None
    return cv2


def _read_cv2(path: Path, what: str) -> np.ndarray:
    """Read with OpenCV (unchanged bit depth) and convert BGR(A) to RGB(A)."""
    cv2 = _import_cv2(what)
    arr = cv2.imread(os.fspath(path), cv2.IMREAD_UNCHANGED)
    if arr is None:
        raise ImageError(f"{path}: cannot read {what} (not a valid file or truncated)")
    if arr.ndim == 2:
        return arr[..., None]
    if arr.shape[2] in (3, 4):
        order = [2, 1, 0] + ([3] if arr.shape[2] == 4 else [])
        return np.ascontiguousarray(arr[..., order])
    return arr


def _read_hdr(path: Path) -> np.ndarray:
    return _read_cv2(path, "Radiance HDR").astype(np.float32, copy=False)


def _decode_integer_image(arr: np.ndarray, path: Path) -> np.ndarray:
    """uint8/uint16 (H, W[, C]) sRGB-encoded -> linear float32 (H, W, C); alpha stays linear."""
    if arr.dtype not in (np.uint8, np.uint16):
        raise ImageError(f"{path}: unsupported integer pixel type {arr.dtype}")
    bits = 8 * arr.dtype.itemsize
    if bits == 8:
        msg = (f"{path}: 8-bit image: precision is lost (256 levels) and the file is assumed "
               "sRGB-encoded; use EXR, PFM or HDR for reference comparisons")
    else:
        msg = f"{path}: 16-bit image assumed sRGB-encoded and decoded to linear"
    warnings.warn(msg, PrecisionWarning, stacklevel=4)
    if arr.ndim == 2:
        arr = arr[..., None]
    scaled = arr.astype(np.float64) / float(np.iinfo(arr.dtype).max)
    n_colour = {1: 1, 2: 1, 3: 3, 4: 3}.get(scaled.shape[2], scaled.shape[2])
    out = scaled.copy()
    out[..., :n_colour] = srgb_decode(scaled[..., :n_colour])
    return out.astype(np.float32)


def _png_bit_depth(path: Path) -> int | None:
    """Bit depth from the PNG IHDR chunk, or None if the file is not a PNG."""
    with open(path, "rb") as fh:
        head = fh.read(26)
    if len(head) < 26 or head[:8] != b"\x89PNG\r\n\x1a\n" or head[12:16] != b"IHDR":
        return None
    return head[24]


def _read_png_jpeg(path: Path) -> np.ndarray:
    suffix = path.suffix.lower()
    if suffix == ".png" and _png_bit_depth(path) == 16:
        # pillow (imageio's PNG reader) silently reduces 16-bit RGB to 8 bits; OpenCV does not.
        return _decode_integer_image(_read_cv2(path, "16-bit PNG"), path)
    import imageio.v3 as iio

    try:
        arr = np.asarray(iio.imread(path, extension=suffix))
    except Exception as exc:  # imageio/pillow raise many types on damaged files
        raise ImageError(f"{path}: cannot read {suffix[1:].upper()} image ({_first_line(exc)})") from None
    if arr.ndim not in (2, 3):
        raise ImageError(f"{path}: unexpected image shape {arr.shape}")
    if arr.dtype == np.bool_:
        arr = arr.astype(np.uint8) * 255
    return _decode_integer_image(arr, path)


def _read_tiff(path: Path) -> np.ndarray:
    if importlib.util.find_spec("tifffile") is None:
        raise ImageError(f"{path}: reading TIFF needs the 'tifffile' package (pip install tifffile)")
    import tifffile

    try:
        arr = np.asarray(tifffile.imread(path))
    except Exception as exc:  # tifffile raises many types on damaged files
        raise ImageError(f"{path}: cannot read TIFF ({_first_line(exc)})") from None
    if arr.size == 0:
        raise ImageError(f"{path}: cannot read TIFF (no image data)")
    if arr.ndim == 2:
        arr = arr[..., None]
    if arr.ndim != 3:
        raise ImageError(f"{path}: unsupported TIFF shape {arr.shape} (need one 2-D image)")
    if arr.dtype.kind == "f":
        return arr.astype(np.float32 if arr.dtype.itemsize <= 4 else np.float64, copy=False)
    return _decode_integer_image(arr, path)


def _read_npy(path: Path) -> np.ndarray:
    try:
        arr = np.load(path, allow_pickle=False)
    except Exception as exc:  # ValueError (pickled/bad header), EOFError, OSError ...
        raise ImageError(f"{path}: not a valid .npy array file ({_first_line(exc)})") from None
    if not isinstance(arr, np.ndarray) or arr.ndim not in (2, 3) or 0 in arr.shape:
        shape = getattr(arr, "shape", None)
        raise ImageError(f"{path}: .npy array must have shape (H, W) or (H, W, C), got {shape}")
    if arr.dtype.kind not in "fiub":
        raise ImageError(f"{path}: .npy array must be real numbers, got dtype {arr.dtype}")
    if arr.ndim == 2:
        arr = arr[..., None]
    if arr.dtype in (np.float32, np.float64):
        return arr
    return arr.astype(np.float64)


_READERS = {
    ".exr": _read_exr_image,
    ".pfm": _read_pfm,
    ".hdr": _read_hdr,
    ".pic": _read_hdr,
    ".png": _read_png_jpeg,
    ".jpg": _read_png_jpeg,
    ".jpeg": _read_png_jpeg,
    ".tif": _read_tiff,
    ".tiff": _read_tiff,
    ".npy": _read_npy,
}


def read_image(path: str | os.PathLike[str]) -> np.ndarray:
    """Read an image as linear values, chosen by file extension.

    Parameters
    ----------
    path : str or os.PathLike
        ``.exr`` (R,G,B[,A]; else a single layer ``x.R/G/B``; else one
        channel), ``.pfm``, ``.hdr``/``.pic`` (Radiance RGBE, about 1 %
        precision), ``.png``/``.jpg``/``.jpeg`` (8/16-bit, assumed sRGB and
        decoded to linear, with a :class:`PrecisionWarning`), ``.tif``/``.tiff``
        (float as stored; needs ``tifffile``), ``.npy`` ((H, W) or (H, W, C)).

    Returns
    -------
    ndarray, shape (H, W, C), float32 (float64 for float64/integer .npy and
    float64 TIFF)
        Row 0 is the top of the picture.  C is 1, 3 or 4 for image formats.

    Raises
    ------
    ImageError
        Unknown extension, missing, unreadable, truncated or malformed file
        (one line naming the file).
    """
    path = Path(path)
    suffix = path.suffix.lower()
    reader = _READERS.get(suffix)
    if reader is None:
        raise ImageError(f"{path}: unsupported image format {suffix or '(no extension)'!r} "
                         f"(supported: {', '.join(READABLE_EXTENSIONS)})")
    if not path.exists():
        raise ImageError(f"{path}: no such file")
    if path.is_dir():
        raise ImageError(f"{path}: is a directory, not an image")
    try:
        with foreign_stderr() as foreign:       # OpenCV, OpenEXR print their own messages
            return reader(path)
    except ImageError:
        raise
    except OSError as exc:
        raise ImageError(f"{path}: cannot read: {exc.strerror or _first_line(exc)}") from None
    except Exception as exc:  # noqa: BLE001 - the readers' libraries raise many types on damaged files
        raise ImageError(f"{path}: cannot read: {foreign.line or _first_line(exc)}") from None


# ----------------------------------------------------------------------------- writers


def write_pfm(path: str | os.PathLike[str], image: np.ndarray) -> None:
    """Write a float image as PFM (little-endian float32, rows bottom-up), atomically.

    Parameters
    ----------
    path : str or os.PathLike
        Destination file (any extension; ``.pfm`` by convention).
    image : array_like, shape (H, W, 3) colour or (H, W) / (H, W, 1) grey, real
        Linear values; stored as float32 (row 0 of ``image`` is the top).

    Raises
    ------
    ImageError
        Bad shape or dtype, or the file cannot be written (one line).
    """
    arr = np.asarray(image)
    if arr.dtype.kind not in "fiub":
        raise ImageError(f"write_pfm: image must be real numbers, got dtype {arr.dtype}")
    if arr.ndim == 2:
        arr = arr[..., None]
    if arr.ndim != 3 or arr.shape[2] not in (1, 3) or 0 in arr.shape:
        raise ImageError(f"write_pfm: image must have shape (H, W, 3), (H, W, 1) or (H, W), got {np.shape(image)}")
    height, width, nc = arr.shape
    header = f"{'PF' if nc == 3 else 'Pf'}\n{width} {height}\n-1.0\n".encode("ascii")
    pixels = np.ascontiguousarray(arr[::-1], dtype="<f4")
    with atomic_write(path, "wb") as fh:
        fh.write(header)
        fh.write(pixels.tobytes())


def write_png_preview(path: str | os.PathLike[str], linear_rgb: np.ndarray, exposure: float = 0.0) -> None:
    """Write an 8-bit sRGB PNG preview of a linear image, atomically.

    Each value is multiplied by ``2**exposure``, clamped to [0, 1], sRGB
    encoded (IEC 61966-2-1) and rounded to the nearest of 256 levels.  A
    preview is for looking at, not for comparisons (use the EXR).

    Parameters
    ----------
    path : str or os.PathLike
        Destination ``.png`` file.
    linear_rgb : array_like, shape (H, W, 3) or (H, W) / (H, W, 1), real
        Linear radiance.
    exposure : float
        Exposure adjustment in stops.

    Raises
    ------
    ImageError
        Bad shape or dtype, or the file cannot be written (one line).

    Warns
    -----
    PrecisionWarning
        Once per call if some pixels are NaN or infinite; they are written as 0.
    """
    arr = np.asarray(linear_rgb)
    if arr.dtype.kind not in "fiub":
        raise ImageError(f"write_png_preview: image must be real numbers, got dtype {arr.dtype}")
    if arr.ndim == 3 and arr.shape[2] == 1:
        arr = arr[..., 0]
    if arr.ndim not in (2, 3) or (arr.ndim == 3 and arr.shape[2] != 3) or 0 in arr.shape:
        raise ImageError(f"write_png_preview: image must have shape (H, W, 3) or (H, W), got {np.shape(linear_rgb)}")
    if not np.isfinite(exposure):
        raise ImageError(f"write_png_preview: exposure must be finite, got {exposure}")
    values = arr.astype(np.float64) * 2.0 ** float(exposure)
    bad = ~np.isfinite(values)
    if bad.any():
        n_bad = int(bad.any(axis=-1).sum()) if values.ndim == 3 else int(bad.sum())
        warnings.warn(f"{path}: {n_bad} pixel(s) are NaN or infinite; written as 0 in the preview",
                      PrecisionWarning, stacklevel=2)
        values[bad] = 0.0
    encoded = srgb_encode(np.clip(values, 0.0, 1.0))
    eight_bit = np.floor(encoded * 255.0 + 0.5).astype(np.uint8)

    import imageio.v3 as iio

    buffer = io.BytesIO()
    iio.imwrite(buffer, eight_bit, extension=".png")
    atomic_write_bytes(path, buffer.getvalue())
