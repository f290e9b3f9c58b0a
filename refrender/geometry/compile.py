"""Scene objects -> flat typed arrays for the kernels.

This is the only bridge between the Python scene model
(:mod:`refrender.scene.model`) and the numba kernels: after it, a scene is a
:class:`SceneArrays` (geometry, BVH, objects, materials) plus a
:class:`LightArrays` (the emitters and their selection probabilities).
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from ..scene import model as m
from .bvh import build_bvh, wide_bvh
from .intersect import DISK, RECTANGLE, SPHERE, TRIANGLE

#: BT.709 / sRGB relative-luminance weights of linear RGB (Rec. ITU-R BT.709-6).
LUMINANCE = np.array([0.2126, 0.7152, 0.0722])

# material type codes (row 0 of the material table is always black); the
# table itself is built by refrender.materials.table
from ..materials.bsdf import MAT_BLACK, MAT_LAMBERTIAN  # noqa: E402,F401
from ..materials.table import MAT_PARAMS, material_emission, material_table  # noqa: E402

# light type codes
LIGHT_SURFACE = 0
LIGHT_POINT = 1
LIGHT_DIRECTIONAL = 2
LIGHT_ENVIRONMENT = 3
LIGHT_SPOT = 4
#: floats per row of LightArrays.light_data
LIGHT_DATA = 12
LIGHT_DISTANT_CONE = 5   # a directional light with angular_diameter > 0

# camera projection codes
CAM_PERSPECTIVE = 0
CAM_ORTHOGRAPHIC = 1
CAM_THIN_LENS = 2      # a perspective camera with a lens (depth of field)
_PROJECTIONS = {"perspective": CAM_PERSPECTIVE, "orthographic": CAM_ORTHOGRAPHIC}


class SceneArrays(NamedTuple):
    """Geometry and materials, primitives in BVH order."""
    nodes: np.ndarray          # (64 r,) float32 8-wide BVH nodes (bvh.wide_bvh); view as int32 for refs
    prim_type: np.ndarray      # (n,) int8, see geometry.intersect
    prim_geom: np.ndarray      # (n, 9) float64
    prim_object: np.ndarray    # (n,) int32, index into scene.objects
    prim_index: np.ndarray     # (n,) int32, primitive index within its object
    prim_scale: np.ndarray     # (n,) float64, coordinate magnitude (ray offsets)
    prim_area: np.ndarray      # (n,) float64, m^2
    obj_material: np.ndarray   # (k,) int32, row of the material table
    obj_emission: np.ndarray   # (k, 3) float64 radiance
    obj_emits_both_sides: np.ndarray  # (k,) int32 (1 = emits from both sides)
    mat_type: np.ndarray       # (q,) int32
    mat_params: np.ndarray     # (q, MAT_PARAMS) float64
    center: np.ndarray         # (3,) centre of the bounding sphere of all geometry
    radius: float              # its radius (> 0)
    prim_uv: np.ndarray        # (n, 7) float64: has_uv, uv of a, b, c (mesh triangles);
                               # (1, 7) zeros when no primitive has UVs (read row min(k, len - 1))
    tex_info: np.ndarray       # (T, TEX_INFO) float64, see materials.textures
    tex_data: np.ndarray       # float32 texels of every texture, concatenated


class LightArrays(NamedTuple):
    """Emitters and their selection distribution (proportional to power)."""
    light_type: np.ndarray     # (L,) int32
    light_prim: np.ndarray     # (L,) int32 primitive (surface emitters), else -1
    light_data: np.ndarray     # (L, LIGHT_DATA) float64, per type (see build_lights)
    light_cdf: np.ndarray      # (L + 1,) float64, light_cdf[-1] == 1 (kept for tools)
    light_pmf: np.ndarray      # (L,) float64 selection probabilities
    prim_light_pmf: np.ndarray  # (n,) selection probability of primitive k as an emitter
    env: np.ndarray            # (8,) see sampling/envmap.py: rgb, pmf, kind, cos, sin, 0
    alias_prob: np.ndarray     # (L,) float64 Walker/Vose alias table of light_pmf
    alias_index: np.ndarray    # (L,) int32
    env_image: np.ndarray      # (h, w, 3) float64 lat-long image (1x1 when uniform)
    env_pmf: np.ndarray        # (h, w) pixel probabilities of the image distribution
    env_marg: np.ndarray       # (h + 1,) marginal cdf over rows
    env_cond: np.ndarray       # (h, w + 1) conditional cdf of each row
    cones: np.ndarray          # (K, 8) distant discs: axis toward the source, radiance rgb,
                               # 1 - cos(half angle), selection probability (0: not sampled)


def _shape_records(shape):
    """(types, geom rows, areas) of one object's primitives, in object order."""
    if isinstance(shape, m.Sphere):
        g = np.zeros((1, 9))
        g[0, :3] = shape.center
        g[0, 3] = shape.radius
        return np.array([SPHERE]), g, np.array([4.0 * math.pi * shape.radius ** 2])
    if isinstance(shape, m.Rectangle):
        g = np.concatenate([shape.origin, shape.edge1, shape.edge2])[None, :]
        area = np.linalg.norm(np.cross(shape.edge1, shape.edge2))
        return np.array([RECTANGLE]), g, np.array([area])
    if isinstance(shape, m.Disk):
        g = np.zeros((1, 9))
        g[0, :3] = shape.center
        g[0, 3:6] = shape.normal
        g[0, 6] = shape.radius
        return np.array([DISK]), g, np.array([math.pi * shape.radius ** 2])
    if isinstance(shape, m.TriangleMesh):
        p = np.asarray(shape.positions, dtype=np.float64)
        idx = np.asarray(shape.indices, dtype=np.int64)
        a, b, c = p[idx[:, 0]], p[idx[:, 1]], p[idx[:, 2]]
        g = np.concatenate([a, b - a, c - a], axis=1)
        area = 0.5 * np.linalg.norm(np.cross(b - a, c - a), axis=1)
        return np.full(len(idx), TRIANGLE), g, area
    raise TypeError(f"unknown shape {type(shape).__name__}")


def _bounds(types, g):
    """Per-primitive AABBs and coordinate magnitudes, vectorised by type."""
    n = len(types)
    bmin = np.empty((n, 3))
    bmax = np.empty((n, 3))
    scale = np.empty(n)
    for code in (TRIANGLE, RECTANGLE):
        sel = types == code
        if not sel.any():
            continue
        o, e1, e2 = g[sel, 0:3], g[sel, 3:6], g[sel, 6:9]
        corners = [o, o + e1, o + e2] + ([o + e1 + e2] if code == RECTANGLE else [])
        stack = np.stack(corners)
        bmin[sel] = stack.min(axis=0)
        bmax[sel] = stack.max(axis=0)
        scale[sel] = np.abs(stack).max(axis=(0, 2))
    sel = types == SPHERE
    if sel.any():
        c, r = g[sel, 0:3], g[sel, 3:4]
        bmin[sel] = c - r
        bmax[sel] = c + r
        scale[sel] = np.abs(c).max(axis=1) + r[:, 0]
    sel = types == DISK
    if sel.any():
        c, nrm, r = g[sel, 0:3], g[sel, 3:6], g[sel, 6:7]
        ext = r * np.sqrt(np.clip(1.0 - nrm * nrm, 0.0, 1.0))
        bmin[sel] = c - ext
        bmax[sel] = c + ext
        scale[sel] = np.abs(c).max(axis=1) + r[:, 0]
    return bmin, bmax, scale


def _prim_uv(shape, count):
    """(count, 7) rows [has_uv, ua, va, ub, vb, uc, vc] (only meshes with UVs have them)."""
    rows = np.zeros((count, 7))
    uvs = getattr(shape, "uvs", None)
    if isinstance(shape, m.TriangleMesh) and uvs is not None:
        idx = np.asarray(shape.indices, dtype=np.int64)
        rows[:, 0] = 1.0
        rows[:, 1:7] = np.asarray(uvs, dtype=np.float64)[idx].reshape(-1, 6)
    return rows


def compile_scene(scene: m.Scene) -> SceneArrays:
    """Flatten the scene's geometry and build the BVH."""
    index, mat_type, mat_params, tex_info, tex_data = material_table(
        scene.materials, getattr(scene.render, "color_space", "linear_rec709"))
    types, geoms, areas, objs, local, uvs = [], [], [], [], [], []
    obj_material = np.zeros(len(scene.objects), dtype=np.int32)
    obj_emission = np.zeros((len(scene.objects), 3))
    obj_emits_both_sides = np.zeros(len(scene.objects), dtype=np.int32)
    for i, obj in enumerate(scene.objects):
        t, g, a = _shape_records(obj.shape)
        types.append(t)
        geoms.append(g)
        areas.append(a)
        objs.append(np.full(len(t), i, dtype=np.int32))
        local.append(np.arange(len(t), dtype=np.int32))
        uvs.append(_prim_uv(obj.shape, len(t)))
        obj_material[i] = index[obj.material] if obj.material is not None else 0
        obj_emission[i] = obj.emission + material_emission(scene.materials.get(obj.material))
        obj_emits_both_sides[i] = 1 if obj.emits_both_sides else 0
    if types:
        types = np.concatenate(types).astype(np.int8)
        geoms = np.concatenate(geoms)
        areas = np.concatenate(areas)
        objs = np.concatenate(objs)
        local = np.concatenate(local)
        uvs = np.concatenate(uvs)
    else:
        types = np.zeros(0, np.int8)
        geoms = np.zeros((0, 9))
        areas = np.zeros(0)
        objs = np.zeros(0, np.int32)
        local = np.zeros(0, np.int32)
        uvs = np.zeros((0, 7))
    bmin, bmax, scale = _bounds(types, geoms)
    order, nb, noff, ncnt = build_bvh(bmin, bmax)
    if len(types):
        lo, hi = bmin.min(axis=0), bmax.max(axis=0)
        center = 0.5 * (lo + hi)
        radius = float(max(0.5 * np.linalg.norm(hi - lo), 1e-300))
    else:
        center, radius = np.zeros(3), 1.0
    c = np.ascontiguousarray
    return SceneArrays(
        nodes=wide_bvh(nb, noff, ncnt),
        prim_type=c(types[order]), prim_geom=c(geoms[order]),
        prim_object=c(objs[order]), prim_index=c(local[order]),
        prim_scale=c(scale[order]), prim_area=c(areas[order]),
        obj_material=obj_material, obj_emission=obj_emission, obj_emits_both_sides=obj_emits_both_sides,
        mat_type=mat_type, mat_params=mat_params, center=center, radius=radius,
        prim_uv=c(uvs[order]) if uvs[:, 0].any() else np.zeros((1, 7)),
        tex_info=tex_info, tex_data=tex_data)


def spot_falloff(light) -> tuple[float, float, float]:
    """(s, o, range) of a spot light for the kernel: the intensity toward a
    direction at angle theta from the axis is I * clamp(cos(theta) s + o, 0, 1)^2,
    with s = 1 / max(0.001, cos(inner) - cos(outer)) and o = -cos(outer) s
    (KHR_lights_punctual, "Inner and Outer Cone Angles"); no cone: s = 0, o = 1."""
    if not light.cone:
        return 0.0, 1.0, light.range
    s = 1.0 / max(0.001, light.cos_inner - light.cos_outer)
    return s, -light.cos_outer * s, light.range


def light_power(scene: m.Scene, arrays: SceneArrays):
    """Estimated emitted power (luminance-weighted, W) of every emitter.

    Surface primitive: pi * A * Y(L_e), doubled when two-sided.
    Point light: 4 pi * Y(I).  Directional light: pi R^2 * Y(E) and uniform
    environment: 4 pi^2 R^2 * Y(L), with R the radius of the scene's bounding
    sphere (the power that crosses that sphere).  Only the *selection
    probabilities* use these numbers, so their accuracy affects noise, never
    the expected value.
    """
    rows = []
    R2 = arrays.radius ** 2
    emissive = np.nonzero((arrays.obj_emission[arrays.prim_object] > 0).any(axis=1))[0]
    for k in emissive:
        obj = arrays.prim_object[k]
        y = float(LUMINANCE @ arrays.obj_emission[obj])
        sides = 2.0 if arrays.obj_emits_both_sides[obj] else 1.0
        data = np.zeros(LIGHT_DATA)
        data[:3] = arrays.obj_emission[obj]
        rows.append((LIGHT_SURFACE, int(k), data, math.pi * arrays.prim_area[k] * y * sides, -1))
    for src, light in enumerate(scene.lights):
        data = np.zeros(LIGHT_DATA)
        if isinstance(light, m.PointLight):
            data[:3], data[3:6] = light.position, light.intensity
            rows.append((LIGHT_POINT, -1, data, 4.0 * math.pi * float(LUMINANCE @ light.intensity), src))
        elif isinstance(light, m.SpotLight):
            data[:3], data[3:6], data[6:9] = light.position, light.intensity, light.direction
            data[9:12] = spot_falloff(light)
            # the cone's solid angle bounds the power (selection only)
            solid = 2.0 * math.pi * (1.0 - light.cos_outer) if light.cone else 4.0 * math.pi
            rows.append((LIGHT_SPOT, -1, data, solid * float(LUMINANCE @ light.intensity), src))
        elif isinstance(light, m.DirectionalLight) and light.angular_diameter > 0.0:
            data[:3], data[3:6], data[6] = light.direction, *cone_terms(light)
            rows.append((LIGHT_DISTANT_CONE, -1, data, math.pi * R2 * float(LUMINANCE @ light.irradiance),
                         src))
        elif isinstance(light, m.DirectionalLight):
            data[:3], data[3:6] = light.direction, light.irradiance
            rows.append((LIGHT_DIRECTIONAL, -1, data, math.pi * R2 * float(LUMINANCE @ light.irradiance),
                         src))
        elif isinstance(light, m.EnvironmentLight):
            if getattr(light, "image", None) is not None:
                data[:3] = light.scale
                # pi R^2 times the luminance integral of the radiance over the sphere
                power = math.pi * R2 * _env_tables(light)[3]
            else:
                data[:3] = light.radiance
                power = 4.0 * math.pi ** 2 * R2 * float(LUMINANCE @ light.radiance)
            rows.append((LIGHT_ENVIRONMENT, -1, data, power, src))
        else:
            raise TypeError(f"unknown light {type(light).__name__}")
    return rows


def cone_terms(light):
    """(radiance (3,), 1 - cos(half angle)) of a distant disc of the given irradiance.

    E = L pi sin^2(alpha) for a uniform disc of angular radius alpha wholly above
    the horizon of a surface facing it (the element-to-sphere configuration
    factor sin^2(alpha) of Howell's catalogue, with sin alpha = r / d).
    """
    half = math.radians(light.angular_diameter) / 2.0
    one_minus_cos = 2.0 * math.sin(half / 2.0) ** 2
    return np.asarray(light.irradiance, float) / (math.pi * math.sin(half) ** 2), one_minus_cos


def cone_sources(scene) -> list[int]:
    """Indices in scene.lights of the distant discs listed in LightArrays.cones, in order
    (directional lights with angular_diameter > 0 and some radiance)."""
    return [i for i, light in enumerate(scene.lights)
            if isinstance(light, m.DirectionalLight) and light.angular_diameter > 0.0
            and np.any(np.asarray(light.irradiance) > 0.0)]


_ENV_CACHE: dict = {}


def _env_tables(light):
    """Distribution tables of an image environment (cached per light object)."""
    from ..sampling.envmap import build_env_distribution
    key = id(light)
    hit = _ENV_CACHE.get(key)
    if hit is None or hit[0] is not light:
        hit = (light, build_env_distribution(light.image, light.scale))
        _ENV_CACHE.clear()
        _ENV_CACHE[key] = hit
    return hit[1]


def light_rows(scene: m.Scene, arrays: SceneArrays, strategy: str) -> list:
    """The rows of the light table, in table order: (type, primitive, data,
    power, index in scene.lights or -1 for a surface emitter)."""
    rows = light_power(scene, arrays)
    if strategy == "bsdf":
        rows = [r for r in rows if r[0] in (LIGHT_POINT, LIGHT_DIRECTIONAL, LIGHT_SPOT)]
    return [r for r in rows if r[3] > 0.0]


def build_lights(scene: m.Scene, arrays: SceneArrays, strategy: str) -> LightArrays:
    """Emitter table and power-proportional selection distribution.

    With ``strategy == "bsdf"`` only delta lights (point, directional) are
    sampled explicitly, since BSDF sampling can never hit them; every other
    emitter is then found by BSDF-sampled rays alone.

    ``light_data`` rows: surface emitter: radiance rgb; point: position,
    intensity; directional: travel direction, irradiance; distant cone: travel
    direction, radiance, 1 - cos(half angle); environment: radiance; spot:
    position, intensity, axis, falloff scale s, offset o, range (see
    spot_falloff).  Distant cones are also listed in ``cones`` (BSDF-sampled
    rays that escape into one see its radiance, whatever the strategy).
    """
    rows = light_rows(scene, arrays, strategy)
    n = len(rows)
    light_type = np.array([r[0] for r in rows], dtype=np.int32)
    light_prim = np.array([r[1] for r in rows], dtype=np.int32)
    light_data = np.array([r[2] for r in rows]).reshape(n, LIGHT_DATA)
    power = np.array([r[3] for r in rows], dtype=np.float64)
    pmf = power / power.sum() if n else power
    cdf = np.zeros(n + 1)
    cdf[1:] = np.cumsum(pmf)
    if n:
        cdf[-1] = 1.0
    prim_pmf = np.zeros(len(arrays.prim_type))
    env = np.zeros(8)
    env[5] = 1.0
    for i, r in enumerate(rows):
        if r[0] == LIGHT_SURFACE:
            prim_pmf[r[1]] = pmf[i]
        elif r[0] == LIGHT_ENVIRONMENT:
            env[3] = pmf[i]
    env_image = np.ones((1, 1, 3))
    env_pmf = np.ones((1, 1))
    env_marg = np.array([0.0, 1.0])
    env_cond = np.array([[0.0, 1.0]])
    for light in scene.lights:
        if isinstance(light, m.EnvironmentLight):
            if getattr(light, "image", None) is not None:
                env[:3] = light.scale
                env[4] = 1.0                   # ENV_IMAGE
                a = math.radians(light.rotate_degrees)
                env[5], env[6] = math.cos(a), math.sin(a)
                env_image = np.ascontiguousarray(light.image, dtype=np.float64)
                env_pmf, env_marg, env_cond, _ = _env_tables(light)
            else:
                env[:3] = light.radiance
    pmf_of_source = {r[4]: pmf[i] for i, r in enumerate(rows) if r[0] == LIGHT_DISTANT_CONE}
    cones = []
    for src in cone_sources(scene):
        radiance, omc = cone_terms(scene.lights[src])
        row = np.zeros(8)
        row[:3], row[3:6], row[6] = -np.asarray(scene.lights[src].direction, float), radiance, omc
        row[7] = pmf_of_source.get(src, 0.0)
        cones.append(row)
    cones = np.array(cones, dtype=np.float64).reshape(-1, 8)
    from ..sampling.alias import build_alias
    prob, alias = build_alias(pmf) if n else (np.ones(0), np.zeros(0, np.int32))
    c = np.ascontiguousarray
    return LightArrays(light_type, light_prim, c(light_data), cdf, pmf, prim_pmf, env,
                       c(prob), c(alias.astype(np.int32)), env_image, c(env_pmf), c(env_marg),
                       c(env_cond), c(cones))


def camera_array(scene: m.Scene) -> np.ndarray:
    """Camera as a float64 vector for the kernels.

    [0:12] rows 0-2 of the camera-to-world matrix, [12] projection code,
    [13] tan(fov_y / 2), [14] view height, [15] lens (aperture) radius,
    [16] focus distance, [17] full film width, [18] full film height.
    """
    cam = scene.camera
    v = np.zeros(19)
    v[0:12] = np.asarray(cam.camera_to_world, dtype=np.float64)[:3, :].ravel()
    v[12] = CAM_THIN_LENS if cam.lens_radius > 0.0 else _PROJECTIONS[cam.projection]
    v[13] = math.tan(math.radians(cam.fov_y) / 2.0)
    v[14] = cam.view_height
    v[15] = cam.lens_radius
    v[16] = cam.focus_distance
    v[17] = scene.film.width
    v[18] = scene.film.height
    return v
