"""UsdLux lights and UsdShade materials -> scene-document entries.

Sources (usd-core's own schema files, read for this mapping):

* ``pxr/pluginfo/usdLux/resources/usdLux/schema.usda``: ``inputs:intensity``
  is the luminance L in nits, normatively scaled so that a directly visible
  light of intensity 1 gives a pixel value of 1: it maps 1:1 onto this
  renderer's radiance.  ``exposure`` multiplies by 2^exposure, ``color``
  multiplies, ``enableColorTemperature`` multiplies by a blackbody colour
  "calculated as an RGB color using a D65 white point ... normalized such
  that the default value of 6500 will always result in white".
  ``normalize`` divides by the world-space area of an area light, and for a
  DistantLight by pi sin^2(theta_max) (theta_max = angle / 2), which makes
  ``intensity`` the illuminance on a facing surface.  Rect, disk and distant
  lights emit along the local -Z axis; the DomeLight's lat-long map follows
  the OpenEXR convention (longitude +pi at the left edge, +Z at longitude 0,
  +X at longitude pi/2, +Y at the top).
* ``pxr/pluginfo/usdShaders/resources/shaders/shaderDefs.usda``: the
  ``UsdPreviewSurface`` inputs and their defaults (diffuseColor 0.18,
  metallic 0, roughness 0.5, ior 1.5, opacity 1, opacityThreshold 0, ...).
"""
from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

from .usd_geometry import apply, disk_mesh, similarity_scale, sphere_mesh, cylinder_side_mesh, solid_entry

#: colour of a surface whose shading network is not a UsdPreviewSurface: the
#: UsdPreviewSurface default diffuseColor (shaderDefs.usda), a neutral grey
NEUTRAL_GREY = [0.18, 0.18, 0.18]


# ----------------------------------------------------------------------------- blackbody

def _blackbody_rgb_raw(kelvin: float) -> np.ndarray:
    """Linear Rec. 709 RGB (D65 white, no adaptation) of a blackbody, luminance 1.

    Planck's law sampled by colour-science (``sd_blackbody``), integrated
    against the CIE 1931 2-degree observer (``sd_to_XYZ``), then the sRGB
    matrix (``XYZ_to_RGB``, encoding off).
    """
    import colour
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    sd = colour.sd_blackbody(float(kelvin), cmfs.shape)
    xyz = colour.sd_to_XYZ(sd, cmfs=cmfs, method="Integration") / 100.0
    rgb = colour.XYZ_to_RGB(xyz, "sRGB", apply_cctf_encoding=False)
    return np.asarray(rgb, dtype=np.float64) / float(xyz[1])


LUMA = np.array([0.2126, 0.7152, 0.0722])   # Rec. ITU-R BT.709 luminance weights


@lru_cache(maxsize=64)
def _blackbody_cached(kelvin: float) -> tuple:
    rgb = _blackbody_rgb_raw(kelvin) / _blackbody_rgb_raw(6500.0)
    return tuple(rgb / float(LUMA @ rgb))


def blackbody_rgb(kelvin: float) -> np.ndarray:
    """The UsdLux colour-temperature factor: exactly white at 6500 K, luminance 1.

    The blackbody's RGB (see :func:`_blackbody_rgb_raw`) divided per channel by
    that of 6500 K (the schema's "6500 will always result in white"), then
    scaled to luminance 1 so the factor changes hue, not brightness.
    Temperatures are clipped to the schema's valid range 1000-10000 K.
    """
    return np.array(_blackbody_cached(float(min(10000.0, max(1000.0, kelvin)))))


# ----------------------------------------------------------------------------- lights

def _input(light_prim, name, default):
    """The light's ``inputs:<name>`` (authored or the schema's fallback), else *default*."""
    attr = light_prim.GetAttribute(f"inputs:{name}")
    value = attr.Get() if attr else None
    return default if value is None else value


def light_scalar(prim) -> tuple[np.ndarray, bool]:
    """(intensity * 2^exposure * color * blackbody, normalize) of a UsdLux light."""
    intensity = float(_input(prim, "intensity", 1.0))
    exposure = float(_input(prim, "exposure", 0.0))
    color = np.array(_input(prim, "color", (1.0, 1.0, 1.0)), dtype=np.float64)
    value = intensity * 2.0 ** exposure * color
    if bool(_input(prim, "enableColorTemperature", False)):
        value = value * blackbody_rgb(float(_input(prim, "colorTemperature", 6500.0)))
    return value, bool(_input(prim, "normalize", False))


def _nonneg(v: np.ndarray) -> list:
    return [float(x) for x in np.maximum(v, 0.0)]


def rect_light(prim, matrix, log) -> list[dict]:
    """RectLight: a one-sided emitting rectangle facing local -Z (black: it reflects nothing)."""
    w, h = float(_input(prim, "width", 1.0)), float(_input(prim, "height", 1.0))
    value, normalize = light_scalar(prim)
    lin = matrix[:3, :3]
    e1, e2 = lin @ np.array([0.0, h, 0.0]) + 0.0, lin @ np.array([w, 0.0, 0.0]) + 0.0
    origin = apply(matrix, np.array([[-0.5 * w, -0.5 * h, 0.0]]))[0]
    if np.linalg.det(lin) < 0.0:
        e1, e2 = e2, e1
    area = float(np.linalg.norm(np.cross(e1, e2)))
    if area == 0.0:
        log.ignore(prim, "RectLight of zero area")
        return []
    radiance = value / area if normalize else value
    if _input(prim, "texture:file", None):
        log.ignore(prim, "RectLight inputs:texture:file (a uniform rectangle is rendered)")
    if abs(float(e1 @ e2)) > 1e-9 * float(np.linalg.norm(e1) * np.linalg.norm(e2)):
        pts = np.array([[-0.5 * w, -0.5 * h, 0], [0.5 * w, -0.5 * h, 0], [0.5 * w, 0.5 * h, 0],
                        [-0.5 * w, 0.5 * h, 0]], dtype=np.float64)
        entry = solid_entry(pts, np.array([(0, 2, 1), (0, 3, 2)]), matrix)   # faces -Z
        log.note(prim, "RectLight under shear: emitting triangles")
    else:
        entry = {"shape": "rectangle", "origin": origin.tolist(), "edge1": e1.tolist(), "edge2": e2.tolist()}
    entry["emission"] = _nonneg(radiance)
    return [entry]


def disk_light(prim, matrix, log) -> list[dict]:
    """DiskLight: a one-sided emitting disk facing local -Z (an ellipse as a fan of triangles)."""
    r = float(_input(prim, "radius", 0.5))
    value, normalize = light_scalar(prim)
    lin = matrix[:3, :3]
    ex, ey = lin[:, 0], lin[:, 1]
    normal_dir = np.cross(ex, ey)                      # image of +Z's plane normal
    area = math.pi * r * r * float(np.linalg.norm(normal_dir))
    if area == 0.0:
        log.ignore(prim, "DiskLight of zero area")
        return []
    radiance = value / area if normalize else value
    lx, ly = float(np.linalg.norm(ex)), float(np.linalg.norm(ey))
    if abs(lx - ly) <= 1e-9 * lx and abs(float(ex @ ey)) <= 1e-9 * lx * ly:
        entry = {"shape": "disk", "center": apply(matrix, np.zeros((1, 3)))[0].tolist(),
                 "normal": (0.0 - normal_dir / np.linalg.norm(normal_dir)).tolist(), "radius": r * lx}
    else:
        pts, tris = disk_mesh(r)
        entry = solid_entry(pts, tris, matrix)
        log.note(prim, f"DiskLight under non-uniform scale: an ellipse of {len(tris)} triangles")
    entry["emission"] = _nonneg(radiance)
    return [entry]


def sphere_light(prim, matrix, log) -> tuple[list[dict], list[dict]]:
    """SphereLight -> (objects, lights): an emitting sphere, or a point light for treatAsPoint.

    treatAsPoint keeps the sphere's far field: intensity I = L pi r^2 (W/sr)
    for radiance L and world radius r (so a normalized light gives I = value / 4).
    """
    r = float(_input(prim, "radius", 0.5))
    value, normalize = light_scalar(prim)
    lin = matrix[:3, :3]
    s = similarity_scale(lin)
    centre = apply(matrix, np.zeros((1, 3)))[0]
    attr = prim.GetAttribute("treatAsPoint")
    as_point = bool(attr.Get()) if attr and attr.Get() is not None else False
    if s is None:
        pts, tris = sphere_mesh(r)
        entry = solid_entry(pts, tris, matrix)
        area = _mesh_area(entry)
        entry["emission"] = _nonneg(value / area if normalize else value)
        log.note(prim, f"SphereLight under non-uniform scale: an ellipsoid of {len(entry['indices'])} triangles")
        return [entry], []
    radius = r * s
    area = 4.0 * math.pi * radius * radius
    if as_point:
        if radius == 0.0 and normalize:
            log.ignore(prim, "treatAsPoint SphereLight with radius 0 and normalize (undefined power)")
            return [], []
        radiance = value / area if normalize else value
        return [], [{"type": "point", "position": centre.tolist(),
                     "intensity": _nonneg(radiance * math.pi * radius * radius)}]
    if radius == 0.0:
        log.ignore(prim, "SphereLight of radius 0 (give treatAsPoint for a point light)")
        return [], []
    radiance = value / area if normalize else value
    return [{"shape": "sphere", "center": centre.tolist(), "radius": radius,
             "emission": _nonneg(radiance)}], []


def _mesh_area(entry: dict) -> float:
    p = np.asarray(entry["positions"])
    t = np.asarray(entry["indices"])
    return 0.5 * float(np.linalg.norm(np.cross(p[t[:, 1]] - p[t[:, 0]], p[t[:, 2]] - p[t[:, 0]]), axis=1).sum())


def cylinder_light(prim, matrix, log) -> list[dict]:
    """CylinderLight: its side (no caps, as the schema says) tessellated, emitting outward."""
    r, length = float(_input(prim, "radius", 0.5)), float(_input(prim, "length", 1.0))
    value, normalize = light_scalar(prim)
    pts, tris = cylinder_side_mesh(r, length)
    entry = solid_entry(pts, tris, matrix)
    if entry is None:
        log.ignore(prim, "CylinderLight of zero area")
        return []
    if normalize:
        lin = matrix[:3, :3]
        s = similarity_scale(lin)
        area = 2.0 * math.pi * r * length * s * s if s is not None else _mesh_area(entry)
        value = value / area
    entry["emission"] = _nonneg(value)
    log.note(prim, f"CylinderLight tessellated: {len(entry['indices'])} triangles")
    return [entry]


def distant_light(prim, matrix, log) -> list[dict]:
    """DistantLight -> a directional light; with angle > 0, a distant disc of that
    angular diameter (``angular_diameter``) and uniform radiance L.

    The scene format gives the irradiance E on a surface facing the light:
    E = L pi sin^2(theta_max) for theta_max = angle / 2 (the element-to-sphere
    configuration factor sin^2(theta_max) of Howell's catalogue), E = L for
    angle 0.  L is the light's value, divided by pi sin^2(theta_max) when
    normalized (usdLux schema.usda), so then E = value.
    """
    angle = min(max(float(_input(prim, "angle", 0.53)), 0.0), 360.0)
    theta = math.radians(angle) / 2.0
    value, normalize = light_scalar(prim)
    if theta > math.pi / 2:
        log.ignore(prim, f"DistantLight angle {angle:g} degrees (> 180: more than a hemisphere)")
        return []
    solid = math.pi * math.sin(theta) ** 2 if theta > 0.0 else 1.0
    irradiance = value if normalize else value * solid
    direction = matrix[:3, :3] @ np.array([0.0, 0.0, -1.0])
    entry = {"type": "directional", "direction": (direction / np.linalg.norm(direction) + 0.0).tolist(),
             "irradiance": _nonneg(irradiance)}
    if theta > 0.0:
        entry["angular_diameter"] = angle
    return [entry]


def _rotation_part(lin: np.ndarray) -> np.ndarray:
    u, _, vt = np.linalg.svd(lin)
    return u @ vt


def dome_light(prim, matrix, pole_fix: np.ndarray, log, resolve_asset) -> list[dict]:
    """DomeLight -> an environment: uniform, or the lat-long ``texture:file``.

    USD's map (OpenEXR lat-long: +Z at the image centre, +X at u = 1/4) is this
    renderer's image frame (-Z at the centre, +X at u = 3/4) turned by 180
    degrees about +Y; the dome's own rotation (times *pole_fix*, the
    DomeLight_1 pole alignment) must be a rotation about the world's +Y axis
    and adds to ``rotate_degrees``.
    """
    value, _ = light_scalar(prim)          # normalize is ignored for domes (schema)
    texture = _input(prim, "texture:file", None)
    fmt = str(_input(prim, "texture:format", "automatic"))
    if texture is None or not str(texture.path):
        return [{"type": "environment", "radiance": _nonneg(value)}]     # uniform: orientation moot
    if fmt not in ("automatic", "latlong"):
        log.ignore(prim, f"DomeLight texture:format {fmt} (only latlong maps): a uniform dome of the "
                   "light's colour")
        return [{"type": "environment", "radiance": _nonneg(value)}]
    rot = _rotation_part(matrix[:3, :3]) @ pole_fix
    if not np.allclose(rot[1], [0.0, 1.0, 0.0], atol=1e-6):
        from ._util import one_line
        from ..errors import SceneError
        raise SceneError(one_line(f"{prim.GetPath()}: DomeLight orientation: only rotations about the "
                                  "up axis are supported (the map's pole must be the world's up axis; "
                                  "on a Z-up stage rotate a DomeLight by 90 degrees about X, or use "
                                  "DomeLight_1)"))
    degrees = (math.degrees(math.atan2(rot[0, 2], rot[0, 0])) + 180.0) % 360.0
    path = resolve_asset(texture, prim, "inputs:texture:file")
    return [{"type": "environment", "image": path, "scale": _nonneg(value), "rotate_degrees": degrees}]


# ----------------------------------------------------------------------------- materials

_SURFACE_DEFAULTS = {"diffuseColor": (0.18, 0.18, 0.18), "emissiveColor": (0.0, 0.0, 0.0),
                     "useSpecularWorkflow": 0, "specularColor": (0.0, 0.0, 0.0), "metallic": 0.0,
                     "roughness": 0.5, "clearcoat": 0.0, "opacity": 1.0, "opacityThreshold": 0.0,
                     "ior": 1.5}


def _shader_id(shader) -> str:
    sid = shader.GetIdAttr().Get() if shader.GetIdAttr() else None
    return str(sid) if sid else f"(no id: {shader.GetPath()})"


class MaterialResult:
    """A translated material: the document entry, object emission and notes."""

    def __init__(self, entry, emission=None, cutout_hidden=False, uv_set=None):
        self.entry = entry
        self.emission = emission
        self.cutout_hidden = cutout_hidden
        self.uv_set = uv_set


def preview_surface(material, log, resolve_asset) -> MaterialResult:
    """UsdShade material -> :class:`MaterialResult` by the README's mapping table."""
    from pxr import UsdShade
    where = material.GetPrim()
    shader = material.ComputeSurfaceSource()[0] if material else None
    if not shader or _shader_id(shader) != "UsdPreviewSurface":
        ids = sorted({_shader_id(shader)} if shader else {"(no surface output)"})
        log.unsupported_shader(where, ids)
        return MaterialResult({"type": "lambertian", "albedo": list(NEUTRAL_GREY)})
    uv_set = [None]

    def value(name):
        inp = shader.GetInput(name)
        if inp and inp.HasConnectedSource():
            return None
        if inp and inp.Get() is not None:
            return inp.Get()
        return _SURFACE_DEFAULTS[name]

    def texture(name, colour):
        inp = shader.GetInput(name)
        if not (inp and inp.HasConnectedSource()):
            return None
        src = inp.GetConnectedSources()[0][0]
        tex = UsdShade.Shader(src.source.GetPrim())
        out_name = str(src.sourceName)
        if _shader_id(tex) != "UsdUVTexture":
            log.unsupported_input(where, name, f"connected to {_shader_id(tex)}")
            return None
        file_in = tex.GetInput("file")
        asset = file_in.Get() if file_in else None
        if asset is None or not str(asset.path):
            log.unsupported_input(where, name, "UsdUVTexture without a file")
            return None
        spec = {"texture": resolve_asset(asset, tex.GetPrim(), "inputs:file")}
        if not colour:
            spec["channel"] = {"r": 0, "g": 1, "b": 2, "a": 3}.get(out_name, 0)
        sc = tex.GetInput("scale")
        bias = tex.GetInput("bias")
        if bias and bias.Get() is not None and any(float(b) != 0.0 for b in bias.Get()):
            log.unsupported_input(where, name, "UsdUVTexture bias (ignored)")
        if sc and sc.Get() is not None:
            s = [float(x) for x in sc.Get()]
            if colour:
                spec["factor"] = [min(1.0, max(0.0, x)) for x in s[:3]]
            elif s[spec["channel"]] != 1.0:
                log.unsupported_input(where, name, "UsdUVTexture scale on a scalar input (ignored)")
        wrap = {"repeat": "repeat", "mirror": "mirror", "clamp": "clamp", "black": "clamp"}
        ws = tex.GetInput("wrapS")
        if ws and ws.Get() is not None and str(ws.Get()) in wrap:
            spec["wrap"] = wrap[str(ws.Get())]
        st = tex.GetInput("st")
        if st and st.HasConnectedSource():
            reader = UsdShade.Shader(st.GetConnectedSources()[0][0].source.GetPrim())
            if _shader_id(reader) == "UsdPrimvarReader_float2":
                var = reader.GetInput("varname")
                uv_set[0] = str(var.Get()) if var and var.Get() else "st"
            else:
                log.unsupported_input(where, name, f"st from {_shader_id(reader)} (primvar st used)")
        return spec

    for unsupported in ("normal", "displacement", "occlusion", "clearcoat"):
        inp = shader.GetInput(unsupported)
        if inp and (inp.HasConnectedSource() or (unsupported == "clearcoat" and inp.Get())):
            log.unsupported_input(where, unsupported, "not modelled (ignored)")
    base = texture("diffuseColor", True) or [float(x) for x in value("diffuseColor")]
    metallic = value("metallic")
    if metallic is None:
        log.unsupported_input(where, "metallic", "textured metallic (the factor 0 is used)")
        metallic = 0.0
    rough_tex = texture("roughness", False)
    rough = value("roughness")
    roughness = rough_tex if rough_tex is not None else float(rough if rough is not None else 0.5)
    if int(value("useSpecularWorkflow") or 0):
        log.approximate(where, "useSpecularWorkflow: specularColor replaced by the dielectric F0 0.04")
        metallic = 0.0
    ior = value("ior")
    opacity = value("opacity")
    threshold = float(value("opacityThreshold") or 0.0)
    emissive = value("emissiveColor")
    emission = None
    if emissive is None:
        log.unsupported_input(where, "emissiveColor", "textured emission (ignored)")
    elif any(float(x) > 0.0 for x in emissive):
        emission = [float(x) for x in emissive]
    if opacity is None:
        log.unsupported_input(where, "opacity", "textured opacity (rendered opaque)")
        opacity = 1.0
    opacity = float(opacity)
    if threshold > 0.0:
        if opacity < threshold:
            return MaterialResult(None, cutout_hidden=True)
    elif opacity < 1.0:
        alpha = float(roughness) ** 2 if not isinstance(roughness, dict) else 0.0
        if opacity > 0.0:
            log.approximate(where, f"opacity {opacity:g} rendered as clear glass (opacity 0)")
        return MaterialResult({"type": "glass", "ior": float(ior if ior is not None else 1.5),
                               "ggx_alpha": alpha}, emission, uv_set=uv_set[0])
    if ior is not None and abs(float(ior) - 1.5) > 1e-6:
        log.approximate(where, f"ior {float(ior):g}: the dielectric F0 stays 0.04 (ior 1.5)")
    entry = {"type": "metallic_roughness", "base_color": base,
             "metallic": float(min(1.0, max(0.0, metallic))), "roughness": roughness}
    return MaterialResult(entry, emission, uv_set=uv_set[0])
