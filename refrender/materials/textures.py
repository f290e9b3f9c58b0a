"""Texture lookups (kernel side) and per-hit material parameters.

Textures reach the kernels as two flat arrays (built by
:mod:`refrender.materials.texture_load`):

* ``tex_data`` (float32): every image's texels, (H, W, C) row-major with row 0
  the top of the image, concatenated; a checker stores its two colours there.
* ``tex_info`` (T, TEX_INFO) float64, one row per texture:
  0 kind (0 image, 1 checker), 1 offset into tex_data, 2 width, 3 height,
  4 channels, 5 wrap (0 repeat, 1 clamp, 2 mirror), 6 filter (0 bilinear,
  1 nearest), 7-8 uv scale (su, sv), 9-10 uv offset (ou, ov), 11 channel read
  by scalar parameters.

Texture coordinates: u' = su u + ou, v' = sv v + ov.  Image: u' = 0 is the
left edge and v' = 0 the *bottom* edge (the convention of OBJ and PLY texture
coordinates); texel centres lie at half-integers, so x = u' W - 0.5 and
y = (1 - v') H - 0.5 in texel units.  Wrap modes act on texel indices.
Checker: colour 0 where floor(u') + floor(v') is even, colour 1 elsewhere.

Material rows reference textures in columns TEX_COLOUR (colour multiplier of
columns 0-2) and TEX_ROUGHNESS (multiplier of the roughness columns), as
texture index + 1 (0 = none).
"""
import math

import numpy as np

from .._jit import inline
from .bsdf import MAT_METALLIC_ROUGHNESS, MAT_ROUGH_METAL, MAT_ROUGH_GLASS

TEX_INFO = 12
TEX_IMAGE = 0
TEX_CHECKER = 1
WRAP_REPEAT = 0
WRAP_CLAMP = 1
WRAP_MIRROR = 2
FILTER_BILINEAR = 0
FILTER_NEAREST = 1
TEX_COLOUR = 14
TEX_ROUGHNESS = 15


@inline
def wrap_index(i, n, mode):
    """Integer texel index i wrapped into [0, n)."""
    if mode == WRAP_CLAMP:
        return min(max(i, 0), n - 1)
    if mode == WRAP_MIRROR:
        m = i % (2 * n)
        return 2 * n - 1 - m if m >= n else m
    return i % n


@inline
def _texel(data, off, w, c, x, y, ch):
    return data[off + (y * w + x) * c + ch]


@inline
def _image_channel(info, data, t, u, v, ch):
    off = int(info[t, 1])
    w = int(info[t, 2])
    h = int(info[t, 3])
    c = int(info[t, 4])
    mode = int(info[t, 5])
    ch = min(ch, c - 1)
    x = u * w - 0.5
    y = (1.0 - v) * h - 0.5
    if int(info[t, 6]) == FILTER_NEAREST:
        xi = wrap_index(int(math.floor(x + 0.5)), w, mode)
        yi = wrap_index(int(math.floor(y + 0.5)), h, mode)
        return float(_texel(data, off, w, c, xi, yi, ch))
    x0 = math.floor(x)
    y0 = math.floor(y)
    fx = x - x0
    fy = y - y0
    xa = wrap_index(int(x0), w, mode)
    xb = wrap_index(int(x0) + 1, w, mode)
    ya = wrap_index(int(y0), h, mode)
    yb = wrap_index(int(y0) + 1, h, mode)
    top = (1.0 - fx) * _texel(data, off, w, c, xa, ya, ch) + fx * _texel(data, off, w, c, xb, ya, ch)
    bot = (1.0 - fx) * _texel(data, off, w, c, xa, yb, ch) + fx * _texel(data, off, w, c, xb, yb, ch)
    return (1.0 - fy) * top + fy * bot


@inline
def texture_rgb(info, data, t, u, v):
    """Colour of texture t at (u, v); one- and two-channel images are grey."""
    su = info[t, 7] * u + info[t, 9]
    sv = info[t, 8] * v + info[t, 10]
    if int(info[t, 0]) == TEX_CHECKER:
        off = int(info[t, 1])
        k = 3 if (int(math.floor(su)) + int(math.floor(sv))) % 2 != 0 else 0
        return float(data[off + k]), float(data[off + k + 1]), float(data[off + k + 2])
    # np.int64(): constant channels would compile one specialisation each
    if int(info[t, 4]) < 3:
        g = _image_channel(info, data, t, su, sv, np.int64(0))
        return g, g, g
    return (_image_channel(info, data, t, su, sv, np.int64(0)),
            _image_channel(info, data, t, su, sv, np.int64(1)),
            _image_channel(info, data, t, su, sv, np.int64(2)))


@inline
def texture_scalar(info, data, t, u, v):
    """One channel (tex_info column 11) of texture t at (u, v)."""
    ch = int(info[t, 11])
    if int(info[t, 0]) == TEX_CHECKER:
        r, g, b = texture_rgb(info, data, t, u, v)
        return r if ch == 0 else (g if ch == 1 else b)
    su = info[t, 7] * u + info[t, 9]
    sv = info[t, 8] * v + info[t, 10]
    return _image_channel(info, data, t, su, sv, ch)


@inline
def is_textured(row):
    return row[TEX_COLOUR] > 0.0 or row[TEX_ROUGHNESS] > 0.0


@inline
def resolve_params(kind, row, info, data, u, v, out):
    """Copy a material row into ``out`` with its textures applied at (u, v)."""
    for i in range(row.shape[0]):
        out[i] = row[i]
    tc = int(row[TEX_COLOUR]) - 1
    if tc >= 0:
        r, g, b = texture_rgb(info, data, tc, u, v)
        out[0] *= r
        out[1] *= g
        out[2] *= b
    tr = int(row[TEX_ROUGHNESS]) - 1
    if tr >= 0:
        s = texture_scalar(info, data, tr, u, v)
        if kind == MAT_METALLIC_ROUGHNESS:
            out[4] *= s
        elif kind == MAT_ROUGH_METAL or kind == MAT_ROUGH_GLASS:
            out[8] *= s
            out[9] *= s
