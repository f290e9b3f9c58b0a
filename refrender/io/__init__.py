"""Image and state-file input/output for refrender.

* :mod:`refrender.io.exr`: the render output (mean, variance, metadata) as OpenEXR.
* :mod:`refrender.io.images`: reading comparison images (EXR, PFM, HDR, PNG/JPEG,
  TIFF, NPY), sRGB transfer functions, PFM and PNG-preview writers.
* :mod:`refrender.io.state`: float64 accumulators for merge/resume.
* :mod:`refrender.io.atomic`: atomic file replacement used by every writer.

Every failure a user can cause raises :class:`refrender.errors.ImageError` with
a one-line message naming the file; no writer ever leaves a partial file.
"""

from refrender.io.atomic import atomic_path, atomic_write, atomic_write_bytes
from refrender.io.exr import ExrImage, read_exr, write_exr
from refrender.io.images import (
    READABLE_EXTENSIONS,
    PrecisionWarning,
    read_image,
    srgb_decode,
    srgb_encode,
    write_pfm,
    write_png_preview,
)
from refrender.io.state import (
    STATE_FORMAT,
    STATE_FORMAT_VERSION,
    arrays_digest,
    load_state,
    save_state,
    state_path_for,
)

__all__ = [
    "ExrImage",
    "PrecisionWarning",
    "READABLE_EXTENSIONS",
    "STATE_FORMAT",
    "STATE_FORMAT_VERSION",
    "arrays_digest",
    "atomic_path",
    "atomic_write",
    "atomic_write_bytes",
    "load_state",
    "read_exr",
    "read_image",
    "save_state",
    "srgb_decode",
    "srgb_encode",
    "state_path_for",
    "write_exr",
    "write_pfm",
    "write_png_preview",
]
