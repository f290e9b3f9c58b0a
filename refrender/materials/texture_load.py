"""Python side of textures: loading image files and procedural checkers,
and packing them into the flat arrays of :mod:`refrender.materials.textures`."""
from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from ..errors import RefrenderError
from ..scene._util import scene_error
from .textures import (FILTER_BILINEAR, FILTER_NEAREST, TEX_CHECKER, TEX_IMAGE, TEX_INFO,
                       WRAP_CLAMP, WRAP_MIRROR, WRAP_REPEAT)

WRAPS = {"repeat": WRAP_REPEAT, "clamp": WRAP_CLAMP, "mirror": WRAP_MIRROR}
FILTERS = {"bilinear": FILTER_BILINEAR, "nearest": FILTER_NEAREST}
#: largest number of texels (all textures of a scene together)
MAX_TEXELS = 2 ** 28


@dataclass(frozen=True, eq=False)
class Texture:
    """An image (``data`` (H, W, C) float32, linear) or a checker (``data`` (2, 3) colours)."""
    kind: str                       # "image" | "checker"
    data: np.ndarray
    wrap: str = "repeat"
    filter: str = "bilinear"
    scale: tuple = (1.0, 1.0)
    offset: tuple = (0.0, 0.0)
    channel: int = 0
    source: str = field(default="")
    colour: bool = False            # a colour (RGB) parameter, converted to the working space
    encoding: str = "linear"        # "srgb": decoded from an 8-bit sRGB file, linear Rec. 709
    color_space: str | None = None  # space of the linear values; None: Rec. 709 for sRGB files,
                                    # else the working space


def load_texture(spec: dict, path: tuple, files, colour: bool) -> Texture:
    """A :class:`Texture` from a schema-valid texture object at field *path*.

    Colour textures must lie in [0, 1] (they scale a reflectance); scalar
    ones (roughness) must be >= 0.  PNG/JPEG are decoded from sRGB, EXR,
    PFM and HDR are linear (``refrender.io.read_image``).
    """
    common = dict(wrap=spec.get("wrap", "repeat"), filter=spec.get("filter", "bilinear"),
                  scale=tuple(float(s) for s in spec.get("scale", [1.0, 1.0])),
                  offset=tuple(float(s) for s in spec.get("offset", [0.0, 0.0])),
                  channel=int(spec.get("channel", 0)))
    space = spec.get("color_space")
    if "checker" in spec:
        data = np.array(spec["checker"], dtype=np.float32).reshape(2, 3)
        return Texture(kind="checker", data=data, source="checker", colour=colour,
                       color_space=space, **common)
    from ..io.images import PrecisionWarning, read_image
    where = path + ("texture",)
    resolved, _ = files.read(spec["texture"], where)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PrecisionWarning)   # 8-bit textures are the norm
            img = np.asarray(read_image(resolved), dtype=np.float64)
    except RefrenderError as exc:
        raise scene_error(where, f"cannot read texture: {exc}") from None
    if img.ndim == 2:
        img = img[:, :, None]
    if img.ndim != 3 or img.shape[0] == 0 or img.shape[1] == 0:
        raise scene_error(where, f"not an image of shape (height, width, channels): {resolved}")
    if not np.all(np.isfinite(img)):
        raise scene_error(where, f"texture has non-finite texels: {resolved}")
    lo, hi = float(img.min()), float(img.max())
    if colour and (lo < 0.0 or hi > 1.0):
        raise scene_error(where, f"a reflectance texture must lie in [0, 1], {resolved} spans "
                          f"[{lo:.4g}, {hi:.4g}]")
    if not colour and hi > 1e30:
        raise scene_error(where, f"a roughness texture must be <= 1e30, {resolved} has {hi:.4g}")
    if not colour and lo < 0.0:
        raise scene_error(where, f"a roughness texture must be >= 0, {resolved} has {lo:.4g}")
    if common["channel"] >= img.shape[2]:
        raise scene_error(path + ("channel",), f"{common['channel']} is out of range: {resolved} "
                          f"has {img.shape[2]} channel(s)")
    encoding = "srgb" if str(resolved).lower().endswith((".png", ".jpg", ".jpeg")) else "linear"
    return Texture(kind="image", data=np.ascontiguousarray(img, dtype=np.float32),
                   source=str(resolved), colour=colour, encoding=encoding, color_space=space,
                   **common)


def working_texels(tex: Texture, color_space: str) -> np.ndarray:
    """Texels (checker colours) in the working space: a colour texture's values
    are in ``tex.color_space`` (default: linear Rec. 709 for sRGB-decoded
    files, else the working space) and converted by the 3x3 matrix of
    refrender.color; scalar textures are as given."""
    src = tex.color_space or ("linear_rec709" if tex.encoding == "srgb" else color_space)
    if src == color_space or not tex.colour or tex.data.shape[-1] < 3:
        return tex.data
    from ..color import conversion
    m = conversion(src, color_space)
    out = np.array(tex.data, dtype=np.float64)
    out[..., :3] = out[..., :3] @ m.T
    return out.astype(np.float32)


def pack_textures(textures: list[Texture], color_space: str = "linear_rec709") -> tuple[np.ndarray, np.ndarray]:
    """(tex_info (T, TEX_INFO) float64, tex_data float32) of a list of textures."""
    info = np.zeros((max(len(textures), 1), TEX_INFO))
    chunks = []
    offset = 0
    for t, tex in enumerate(textures):
        flat = np.ascontiguousarray(working_texels(tex, color_space), dtype=np.float32).ravel()
        row = info[t]
        row[0] = TEX_CHECKER if tex.kind == "checker" else TEX_IMAGE
        row[1] = offset
        if tex.kind == "image":
            row[2], row[3], row[4] = tex.data.shape[1], tex.data.shape[0], tex.data.shape[2]
        row[5] = WRAPS[tex.wrap]
        row[6] = FILTERS[tex.filter]
        row[7:9] = tex.scale
        row[9:11] = tex.offset
        row[11] = tex.channel
        chunks.append(flat)
        offset += flat.size
    if offset > MAX_TEXELS:
        raise RefrenderError(f"materials: textures hold {offset} values, at most {MAX_TEXELS}")
    data = np.concatenate(chunks) if chunks else np.zeros(1, dtype=np.float32)
    return np.ascontiguousarray(info), np.ascontiguousarray(data, dtype=np.float32)
