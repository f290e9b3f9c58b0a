"""Loading the two frames of a comparison: colour, optional variance, crop, mask."""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import ImageError, RefrenderError


class CompareError(RefrenderError, ValueError):
    """A comparison request is invalid (sizes differ, bad crop, bad condition...)."""


@dataclass
class Frame:
    """A linear (H, W, 3) float64 image with the variance of its pixel means (or None)."""
    rgb: np.ndarray
    variance: np.ndarray | None
    path: str = ""
    source: str = ""
    metadata: dict = field(default_factory=dict)
    #: the OpenEXR ``chromaticities`` (8 floats) of the file, None if absent
    #: (OpenEXR then means Rec. 709 primaries with D65)
    chromaticities: tuple | None = None


def _as_rgb(arr: np.ndarray, path) -> np.ndarray:
    arr = np.asarray(arr, dtype=np.float64)
    if arr.ndim == 2:
        arr = arr[..., None]
    c = arr.shape[2]
    if c in (1, 2):                     # grey (+ alpha)
        return np.repeat(arr[..., :1], 3, axis=2)
    if c in (3, 4):                     # colour (+ alpha, ignored)
        return arr[..., :3].copy()
    raise ImageError(f"{path}: expected 1, 3 or 4 channels, got {c}")


def load_frame(path, *, layer: str | None = None, channels: str | None = None,
               variance_layer: str = "variance") -> Frame:
    """Read a frame for comparison.

    EXR: channels ``R, G, B`` (or the layer ``layer``, i.e. ``layer.R/G/B``, or
    three channels named in ``channels`` such as ``"diffuse.R,diffuse.G,diffuse.B"``)
    and, when present, the layer ``variance_layer`` as the variance of the mean.
    Other formats (PFM, HDR, float TIFF, NPY, PNG/JPEG decoded from sRGB with a
    warning) give colour only.  Alpha is ignored; grey is repeated.
    """
    path = Path(path)
    if path.suffix.lower() == ".exr":
        from ..io import read_exr
        img = read_exr(path)
        ch = img.channels
        if channels:
            names = [c.strip() for c in channels.split(",")]
            if len(names) not in (1, 3):
                raise CompareError(f"--channels: give 1 or 3 channel names, got {channels!r}")
        elif layer:
            names = [f"{layer}.{c}" for c in "RGB"]
        elif all(c in ch for c in "RGB"):
            names = ["R", "G", "B"]
        elif len(img.layers()) == 1:
            names = [f"{img.layers()[0]}.{c}" for c in "RGB"]
        elif "Y" in ch:
            names = ["Y"]
        else:
            raise CompareError(f"{path}: choose the layer or channels to compare with --layer or --channels "
                               f"(has {', '.join(sorted(ch))})")
        missing = [n for n in names if n not in ch]
        if missing:
            raise CompareError(f"{path}: no channel {missing[0]!r} (has {', '.join(sorted(ch))})")
        rgb = _as_rgb(np.stack([ch[n].astype(np.float64) for n in names], axis=-1), path)
        var = None
        if names == ["R", "G", "B"] and variance_layer in img.layers():
            var = img.layer(variance_layer).astype(np.float64)
        return Frame(rgb, var, str(path), "EXR " + ",".join(names), dict(img.metadata),
                     img.chromaticities)
    from ..io import read_image
    return Frame(_as_rgb(read_image(path), path), None, str(path), path.suffix.lower()[1:].upper())


def parse_crop(text: str, shape) -> tuple:
    """``"x0,y0,x1,y1"`` (half-open pixels) -> tuple, checked against (H, W)."""
    try:
        x0, y0, x1, y1 = (int(v) for v in text.split(","))
    except ValueError:
        raise CompareError(f"--crop: expected x0,y0,x1,y1 (integers), got {text!r}") from None
    h, w = shape[:2]
    if not (0 <= x0 < x1 <= w and 0 <= y0 < y1 <= h):
        raise CompareError(f"--crop: {text} is not inside the {w}x{h} image (half-open, x0 < x1, y0 < y1)")
    return x0, y0, x1, y1


def load_mask(path, shape) -> np.ndarray:
    """A mask image: pixels whose first channel is > 0 are compared."""
    from ..io import read_image
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")       # the sRGB decoding warning is irrelevant to a mask
        m = read_image(path)
    if m.shape[:2] != tuple(shape[:2]):
        raise CompareError(f"--mask: {path} is {m.shape[1]}x{m.shape[0]}, the images are {shape[1]}x{shape[0]}")
    mask = np.asarray(m[..., 0] > 0)
    if not mask.any():
        raise CompareError(f"--mask: {path} selects no pixel")
    return mask


def check_sizes(ref: Frame, test: Frame) -> None:
    if ref.rgb.shape != test.rgb.shape:
        raise CompareError(f"size mismatch: reference {ref.path} is {ref.rgb.shape[1]}x{ref.rgb.shape[0]}, "
                           f"test {test.path} is {test.rgb.shape[1]}x{test.rgb.shape[0]}")


def scene_of(frame: Frame):
    """The ``scene_sha256`` a frame's metadata records (None if it has none)."""
    v = frame.metadata.get("scene_sha256") if frame.metadata else None
    return v if isinstance(v, str) and v else None


def check_same_scene(reference_hash, test_hash, *, reference_name="reference", test_name="test",
                     allow: bool = False, option: str = "--allow-other-scene") -> str | None:
    """Refuse frames of different scenes (both hashes known and different).

    Returns a note when they differ and ``allow`` is set; raises CompareError
    (one line naming both files and ``option``) when they differ otherwise.
    """
    if not reference_hash or not test_hash or reference_hash == test_hash:
        return None
    msg = (f"scene_sha256 differs: {reference_name} is scene {reference_hash[:12]}…, {test_name} is "
           f"scene {test_hash[:12]}…")
    if allow:
        return msg + " (compared anyway: " + option + ")"
    raise CompareError(f"{msg}: they are renders of different scenes (add {option} to compare anyway)")
