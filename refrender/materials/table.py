"""The material table of the kernels: type codes, parameter rows and textures.

Python side of :mod:`refrender.materials.bsdf` (the row layouts are listed
there); called by :func:`refrender.geometry.compile.compile_scene`.
"""
from __future__ import annotations

import numpy as np

from . import bsdf as B
from .textures import TEX_COLOUR, TEX_ROUGHNESS
from .texture_load import pack_textures

#: floats per material row
MAT_PARAMS = 16

TYPE_CODES = {
    "lambertian": B.MAT_LAMBERTIAN,
    "mirror": B.MAT_MIRROR,
    "glass": B.MAT_SMOOTH_GLASS,
    "rough glass": B.MAT_ROUGH_GLASS,
    "metal": B.MAT_SMOOTH_METAL,
    "rough metal": B.MAT_ROUGH_METAL,
    "metallic_roughness": B.MAT_METALLIC_ROUGHNESS,
}


def material_row(mat, textures: list) -> tuple[int, np.ndarray]:
    """(type code, parameter row) of one :class:`refrender.scene.model.Material`;
    its textures are appended to *textures*."""
    p = mat.params
    row = np.zeros(MAT_PARAMS)

    def tex(key, column):
        t = p.get(key)
        if t is not None:
            textures.append(t)
            row[column] = len(textures)      # index + 1

    kind = mat.type
    rough = kind in ("glass", "metal") and (p["ggx_alpha"] is not None or p["ggx_alpha_texture"] is not None)
    if kind == "lambertian":
        row[0:3] = p["albedo"]
        tex("albedo_texture", TEX_COLOUR)
    elif kind == "mirror":
        row[0:3] = p["reflectance"]
    elif kind == "glass":
        row[0] = p["relative_ior"]
        row[B.ABSORPTION:B.ABSORPTION + 3] = p.get("absorption", 0.0)
    elif kind == "metal":
        if p.get("f0") is not None:
            row[0:3] = p["f0"]
            row[6] = 1.0
        else:
            row[0:3] = p["n"]
            row[3:6] = p["k"]
    elif kind == "metallic_roughness":
        row[0:3] = p["base_color"]
        row[3] = p["metallic"]
        row[4] = p["roughness"]
        tex("base_color_texture", TEX_COLOUR)
        tex("roughness_texture", TEX_ROUGHNESS)
    else:
        raise TypeError(f"material type {kind!r} has no kernel")
    if rough:
        alpha = p["ggx_alpha"]
        row[8], row[9] = alpha if alpha is not None else (1.0, 1.0)
        tex("ggx_alpha_texture", TEX_ROUGHNESS)
        kind = "rough " + kind
    return TYPE_CODES[kind], row


def material_table(materials: dict, color_space: str = "linear_rec709"):
    """name -> row index, mat_type (q,), mat_params (q, MAT_PARAMS), tex_info, tex_data.

    Row 0 is black (objects without a material)."""
    names = list(materials)
    mat_type = np.zeros(len(names) + 1, dtype=np.int32)
    params = np.zeros((len(names) + 1, MAT_PARAMS))
    textures: list = []
    for i, name in enumerate(names, start=1):
        mat_type[i], params[i] = material_row(materials[name], textures)
    tex_info, tex_data = pack_textures(textures, color_space)
    index = {name: i for i, name in enumerate(names, start=1)}
    return index, mat_type, params, tex_info, tex_data


def material_emission(mat) -> np.ndarray:
    """Radiance a material emits by itself (glTF ``emissive``), (3,) float64."""
    if mat is None:
        return np.zeros(3)
    return np.asarray(mat.params.get("emissive", np.zeros(3)), dtype=np.float64)
