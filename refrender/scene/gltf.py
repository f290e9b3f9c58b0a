"""glTF 2.0 scenes -> refrender's scene model (:mod:`refrender.scene.model`).

:func:`import_gltf` reads a ``.gltf``/``.glb`` file (:mod:`.gltf_read`) and
returns a :class:`GltfImport`: world-space objects, materials, lights,
cameras and a report of what was imported and what was ignored.  It is the
intermediate every importer shares; :func:`load_gltf_scene` makes a whole
:class:`Scene` of one file (``refrender render asset.glb``) and
:func:`expand_gltf_objects` places a file inside a JSON scene
(``{"shape": "gltf", ...}``).

Facts of the standard used here, with their status (see also the README
section "glTF scenes"):

- glTF 2.0 specification (from memory): a node's local transform is
  T * R * S, or ``matrix`` stored column-major; rotation is a quaternion
  (x, y, z, w); +Y up, metres; a camera looks down its local -Z; when a
  node's world matrix has a negative determinant the winding of its
  triangles is reversed (front faces stay outside); triangle strips
  {v_i, v_(i+1+i%2), v_(i+2-i%2)}, fans {v_(i+1), v_(i+2), v_0};
  texture coordinate (0, 0) is the top-left of an image; base colour
  textures are sRGB, the others linear; the metallic-roughness texture
  holds roughness in G and metallic in B; defaults baseColorFactor 1,
  metallicFactor 1, roughnessFactor 1, alphaCutoff 0.5.
- KHR_lights_punctual (verified): see :func:`_punctual`.
- KHR_materials_volume (from memory): sigma = -ln(attenuationColor) /
  attenuationDistance, thicknessFactor 0 = thin-walled.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..limits import SCENE_NUMBER_MAX
from ._shapes import zero_area
from .gltf_read import GltfFile, Ignored
from .model import Camera, DirectionalLight, Material, Object, PointLight, SpotLight, TriangleMesh

#: BT.709 relative luminance of linear RGB (Rec. ITU-R BT.709-6)
LUMINANCE = np.array([0.2126, 0.7152, 0.0722])
#: lm/W: luminous efficacy used to turn photometric light units into radiometric ones
#: (the SI definition of the candela at 540 THz)
LUMENS_PER_WATT = 683.0

#: refrender model names of the materials the importer makes (one table, so
#: that a change of the scene vocabulary is a one-line change here)
MODEL_TYPE = {"lambertian": "lambertian", "glass": "glass", "metallic_roughness": "metallic_roughness"}

#: extensions honoured (fully or as the README table says)
SUPPORTED = {"KHR_lights_punctual", "KHR_materials_emissive_strength", "KHR_materials_ior",
             "KHR_materials_transmission", "KHR_materials_volume", "KHR_texture_transform"}

MODES = {0: "points", 1: "lines", 2: "line loops", 3: "line strips"}
WRAPS = {10497: "repeat", 33071: "clamp", 33648: "mirror"}


@dataclass
class GltfCamera:
    name: str               # node name, else camera name, else "cameras[i]"
    camera: Camera
    aspect: float | None    # film width / height the camera asks for (None: any)


@dataclass
class GltfImport:
    objects: list[Object] = field(default_factory=list)
    materials: dict[str, Material] = field(default_factory=dict)
    lights: list = field(default_factory=list)
    cameras: list[GltfCamera] = field(default_factory=list)
    digests: list = field(default_factory=list)
    counts: dict = field(default_factory=dict)
    ignored: dict = field(default_factory=dict)

    def report(self) -> dict:
        """What was imported (counts) and every feature ignored or approximated."""
        return {**self.counts, "cameras": [c.name for c in self.cameras], "ignored": dict(self.ignored)}


# ----------------------------------------------------------------------------- transforms

def quaternion_matrix(q) -> np.ndarray:
    """(3, 3) rotation of the unit quaternion (x, y, z, w) (normalised first)."""
    x, y, z, w = np.asarray(q, dtype=np.float64) / np.linalg.norm(q)
    return np.array([
        [1 - 2 * (y * y + z * z), 2 * (x * y - z * w), 2 * (x * z + y * w)],
        [2 * (x * y + z * w), 1 - 2 * (x * x + z * z), 2 * (y * z - x * w)],
        [2 * (x * z - y * w), 2 * (y * z + x * w), 1 - 2 * (x * x + y * y)]])


def node_matrix(node) -> np.ndarray:
    """(4, 4) local transform of a node: ``matrix`` (column-major) or T * R * S."""
    if node.matrix is not None:
        return np.array(node.matrix, dtype=np.float64).reshape(4, 4).T
    m = np.eye(4)
    r = quaternion_matrix(node.rotation) if node.rotation is not None else np.eye(3)
    s = np.array(node.scale, dtype=np.float64) if node.scale is not None else np.ones(3)
    m[:3, :3] = r * s[None, :]
    if node.translation is not None:
        m[:3, 3] = node.translation
    return m


def _walk(f: GltfFile, roots: list[int], top: np.ndarray):
    """(node index, world matrix) of every node under *roots*, depth first."""
    out = []
    stack = [(r, top, ("scenes", "nodes"), ()) for r in reversed(roots)]
    while stack:
        i, parent, where, above = stack.pop()
        if not isinstance(i, int) or not 0 <= i < len(f.doc.nodes):
            raise f.error(where, f"node {i} does not exist ({len(f.doc.nodes)} nodes)")
        if i in above:
            raise f.error(("nodes", i, "children"), "the node hierarchy has a cycle")
        node = f.doc.nodes[i]
        world = parent @ node_matrix(node)
        if not np.all(np.isfinite(world)):
            raise f.error(("nodes", i), "transform is not finite")
        out.append((i, world))
        for c in reversed(node.children or []):
            stack.append((c, world, ("nodes", i, "children"), above + (i,)))
    return out


# ----------------------------------------------------------------------------- meshes

def _triangles(mode: int, n: int, idx: np.ndarray) -> np.ndarray:
    """(m, 3) triangles of an index list under a primitive mode (4, 5 or 6)."""
    if mode == 4:
        return idx[: n - n % 3].reshape(-1, 3)
    if n < 3:
        return np.zeros((0, 3), np.int64)
    i = np.arange(n - 2)
    if mode == 5:
        odd = i % 2
        return np.stack([idx[i], idx[i + 1 + odd], idx[i + 2 - odd]], axis=1)
    return np.stack([idx[i + 1], idx[i + 2], np.full(n - 2, idx[0])], axis=1)


def _primitive(f: GltfFile, m: int, p: int, prim, ignored: Ignored):
    """Object-space (positions, triangles, uvs or None, material index or None)."""
    where = ("meshes", m, "primitives", p)
    mode = 4 if prim.mode is None else prim.mode
    if mode in MODES:
        raise f.error(where + ("mode",), f"{MODES[mode]} are not supported (only triangles, "
                      "triangle strips and fans)")
    if mode not in (4, 5, 6):
        raise f.error(where + ("mode",), f"unknown primitive mode {mode}")
    attrs = prim.attributes
    if attrs.POSITION is None:
        raise f.error(where + ("attributes",), "has no POSITION")
    pos = f.accessor(attrs.POSITION, where + ("attributes", "POSITION"))
    if pos.shape[1] != 3:
        raise f.error(("accessors", attrs.POSITION), "POSITION must be VEC3")
    if not np.all(np.isfinite(pos)):
        bad = int(np.argwhere(~np.isfinite(pos))[0, 0])
        raise f.error(("accessors", attrs.POSITION), f"POSITION {bad} is not finite")
    if prim.indices is not None:
        idx = f.accessor(prim.indices, where + ("indices",))[:, 0]
        if len(idx) and (idx.min() < 0 or idx.max() >= len(pos)):
            raise f.error(("accessors", prim.indices), f"index {int(idx.max())} out of range "
                          f"({len(pos)} vertices)")
    else:
        idx = np.arange(len(pos), dtype=np.int64)
    tris = _triangles(mode, len(idx), idx)
    for name in ("NORMAL", "TANGENT", "COLOR_0", "JOINTS_0", "WEIGHTS_0"):
        if getattr(attrs, name, None) is not None:
            ignored.add(f"attribute {name}", "read but not used (the geometric normal shades; "
                        "see the README table)")
    if prim.targets:
        ignored.add("morph targets", "the base mesh is rendered")
    return pos, tris, prim.material


def _uvs(f: GltfFile, m: int, p: int, prim, tex_coord: int, count: int, cache: dict):
    """(count, 2) refrender texture coordinates (u, 1 - v) of TEXCOORD_<tex_coord>, or None."""
    key = ("uv", m, p, tex_coord)
    if key not in cache:
        acc = getattr(prim.attributes, f"TEXCOORD_{tex_coord}", None)
        uv = None
        if acc is not None:
            uv = f.accessor(acc, ("meshes", m, "primitives", p, "attributes", f"TEXCOORD_{tex_coord}"))
            if uv.shape != (count, 2) or not np.all(np.isfinite(uv)):
                raise f.error(("accessors", acc), f"TEXCOORD_{tex_coord} must be {count} finite VEC2")
            uv = np.stack([uv[:, 0], 1.0 - uv[:, 1]], axis=1).astype(np.float64)
        cache[key] = uv
    return cache[key]


# ----------------------------------------------------------------------------- materials

def _srgb_to_linear(c: np.ndarray) -> np.ndarray:
    """IEC 61966-2-1 sRGB decoding."""
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _texture(f: GltfFile, info, where: tuple, colour: bool, channel: int, ignored: Ignored):
    """A refrender Texture of a glTF textureInfo, and the texCoord set it reads."""
    import imageio.v3 as iio

    from ..materials.texture_load import Texture
    t = info.index
    if not 0 <= t < len(f.doc.textures):
        raise f.error(where + ("index",), f"texture {t} does not exist")
    tex = f.doc.textures[t]
    if tex.source is None:
        raise f.error(("textures", t), "has no source image (texture extensions are not supported)")
    raw = f.image_bytes(tex.source, ("textures", t, "source"))
    try:
        img = np.asarray(iio.imread(raw))
    except Exception as exc:  # noqa: BLE001 - any decoder failure is a bad image
        raise f.error(("images", tex.source), f"cannot decode image: {exc}") from None
    if img.ndim == 2:
        img = img[:, :, None]
    scale = float(np.iinfo(img.dtype).max) if img.dtype.kind in "ui" else 1.0
    data = img.astype(np.float64) / scale
    if colour:
        data = data[:, :, :3] if data.shape[2] >= 3 else np.repeat(data[:, :, :1], 3, axis=2)
        data = _srgb_to_linear(data)
    wrap, filt = "repeat", "bilinear"
    if tex.sampler is not None and 0 <= tex.sampler < len(f.doc.samplers):
        s = f.doc.samplers[tex.sampler]
        wrap = WRAPS.get(s.wrapS or 10497, "repeat")
        if (s.wrapT or 10497) != (s.wrapS or 10497):
            ignored.add("sampler wrapT different from wrapS", "wrapS is used for both axes")
        filt = "nearest" if s.magFilter == 9728 else "bilinear"
    tex_coord = info.texCoord or 0
    # glTF v runs down from the top row; refrender's v runs up from the bottom
    su, sv, ou, ov = 1.0, 1.0, 0.0, 0.0
    tt = (info.extensions or {}).get("KHR_texture_transform")
    if tt:
        su, sv = (float(x) for x in tt.get("scale", [1.0, 1.0]))
        ou, ov = (float(x) for x in tt.get("offset", [0.0, 0.0]))
        if float(tt.get("rotation", 0.0)) != 0.0:
            ignored.add("KHR_texture_transform rotation", "not supported: ignored")
        tex_coord = int(tt.get("texCoord", tex_coord))
    texture = Texture(kind="image", data=np.ascontiguousarray(data, dtype=np.float32), wrap=wrap,
                      filter=filt, scale=(su, sv), offset=(ou, 1.0 - sv - ov), channel=channel,
                      source=f"{f.label}#images[{tex.source}]")
    return texture, tex_coord


def _material(f: GltfFile, i: int | None, ignored: Ignored):
    """(Material, alpha mode, alpha, cutoff, double sided, texCoord set) of material *i*."""
    if i is None:
        mat = Material(type=MODEL_TYPE["metallic_roughness"], params={
            "base_color": np.ones(3), "base_color_texture": None, "metallic": 1.0, "roughness": 1.0,
            "roughness_texture": None, "emissive": np.zeros(3)})
        return mat, "OPAQUE", 1.0, 0.5, False, 0
    if not 0 <= i < len(f.doc.materials):
        raise f.error(("materials", i), f"material {i} does not exist")
    g = f.doc.materials[i]
    where = ("materials", i)
    ext = g.extensions or {}
    pbr = g.pbrMetallicRoughness
    factor = np.array(pbr.baseColorFactor if pbr and pbr.baseColorFactor else [1, 1, 1, 1], float)
    metallic = float(pbr.metallicFactor) if pbr and pbr.metallicFactor is not None else 1.0
    roughness = float(pbr.roughnessFactor) if pbr and pbr.roughnessFactor is not None else 1.0
    emissive = np.array(g.emissiveFactor or [0, 0, 0], float)
    emissive *= float(ext.get("KHR_materials_emissive_strength", {}).get("emissiveStrength", 1.0))
    base_tex = rough_tex = None
    tex_coord = 0
    if pbr and pbr.baseColorTexture is not None:
        base_tex, tex_coord = _texture(f, pbr.baseColorTexture, where + ("pbrMetallicRoughness",
                                       "baseColorTexture"), True, 0, ignored)
    if pbr and pbr.metallicRoughnessTexture is not None:
        rough_tex, tc = _texture(f, pbr.metallicRoughnessTexture, where + ("pbrMetallicRoughness",
                                 "metallicRoughnessTexture"), False, 1, ignored)
        ignored.add("metallicRoughnessTexture blue channel (metallic)",
                    "metallic is the factor alone; roughness (green) is honoured")
        if base_tex is not None and tc != tex_coord:
            ignored.add("textures on two texCoord sets in one material", "the base colour's set is used")
        tex_coord = tex_coord if base_tex is not None else tc
    for key in ("normalTexture", "emissiveTexture"):
        if getattr(g, key, None) is not None:
            ignored.add(key, "not supported yet: ignored")
    if g.occlusionTexture is not None:
        ignored.add("occlusionTexture", "ambient occlusion is not light transport: ignored")
    transmission = float(ext.get("KHR_materials_transmission", {}).get("transmissionFactor", 0.0))
    if transmission > 0.0:
        mat = _glass(f, ext, roughness, factor, transmission, ignored)
    else:
        mat = Material(type=MODEL_TYPE["metallic_roughness"], params={
            "base_color": np.clip(factor[:3], 0.0, 1.0), "base_color_texture": base_tex,
            "metallic": min(max(metallic, 0.0), 1.0), "roughness": min(max(roughness, 0.0), 1.0),
            "roughness_texture": rough_tex, "emissive": emissive})
    mode = g.alphaMode or "OPAQUE"
    cutoff = 0.5 if g.alphaCutoff is None else float(g.alphaCutoff)
    return mat, mode, float(factor[3]), cutoff, bool(g.doubleSided), tex_coord


def _glass(f: GltfFile, ext: dict, roughness: float, factor: np.ndarray, transmission: float,
           ignored: Ignored) -> Material:
    """A glass body (KHR_materials_transmission + _ior + _volume)."""
    ior = float(ext.get("KHR_materials_ior", {}).get("ior", 1.5))
    if transmission < 1.0:
        ignored.add("transmissionFactor < 1", "approximated as 1 (a clear dielectric)")
    if np.any(factor[:3] != 1.0):
        ignored.add("base colour of a transmitting material", "ignored (the interface is clear)")
    volume = ext.get("KHR_materials_volume")
    absorption = np.zeros(3)
    if volume is None or float(volume.get("thicknessFactor", 0.0)) == 0.0:
        ignored.add("thin-walled transmission", "approximated as the surface of a closed glass body")
    else:
        distance = float(volume.get("attenuationDistance", math.inf))
        colour = np.array(volume.get("attenuationColor", [1.0, 1.0, 1.0]), float)
        if math.isfinite(distance) and distance > 0.0:
            with np.errstate(divide="ignore"):
                absorption = -np.log(np.clip(colour, 1e-300, 1.0)) / distance
    alpha = roughness * roughness
    return Material(type=MODEL_TYPE["glass"], params={
        "relative_ior": ior, "ggx_alpha": (alpha, alpha) if alpha > 0.0 else None,
        "ggx_alpha_texture": None, "absorption": absorption})


# ----------------------------------------------------------------------------- lights

def _radiometric(colour, value: float, units: str) -> np.ndarray:
    """RGB whose BT.709 luminance is value / 683 (photometric) or colour * value (radiometric)."""
    c = np.array(colour if colour is not None else [1.0, 1.0, 1.0], float)
    if units == "radiometric":
        return c * value
    y = float(LUMINANCE @ c)
    return np.zeros(3) if y <= 0.0 else c * (value / LUMENS_PER_WATT / y)


def _punctual(spec: dict, world: np.ndarray, units: str, honour_range: bool):
    """A refrender light of a KHR_lights_punctual light placed by *world*.

    KHR_lights_punctual (verified): directional intensity in lux, point and
    spot in candela; lights shine along the node's -Z; spot falloff with
    s = 1 / max(0.001, cos(inner) - cos(outer)), o = -cos(outer) s,
    attenuation = clamp(cos(theta) s + o, 0, 1)^2; ``range`` windows the
    light by max(min(1 - (d / range)^4, 1), 0).  Node scale changes neither.
    """
    kind = spec.get("type")
    value = float(spec.get("intensity", 1.0))
    rgb = _radiometric(spec.get("color"), value, units)
    position = world[:3, 3].copy()
    axis = -world[:3, 2]
    axis = axis / np.linalg.norm(axis)
    if kind == "directional":
        return DirectionalLight(direction=axis, irradiance=rgb)
    rng = float(spec["range"]) if honour_range and spec.get("range") is not None else math.inf
    if kind == "point" and math.isinf(rng):
        return PointLight(position=position, intensity=rgb)
    if kind == "point":
        return SpotLight(position=position, direction=axis, intensity=rgb, cos_inner=-1.0,
                         cos_outer=-1.0, cone=False, range=rng)
    cone = spec.get("spot", {}) or {}
    inner = float(cone.get("innerConeAngle", 0.0))
    outer = float(cone.get("outerConeAngle", math.pi / 4))
    return SpotLight(position=position, direction=axis, intensity=rgb, cos_inner=math.cos(inner),
                     cos_outer=math.cos(outer), cone=True, range=rng)


# ----------------------------------------------------------------------------- cameras

def _camera(f: GltfFile, c: int, node, world: np.ndarray) -> GltfCamera:
    cam = f.doc.cameras[c]
    r = world[:3, :3]
    back = r[:, 2] / np.linalg.norm(r[:, 2])
    right = r[:, 0] - (r[:, 0] @ back) * back
    right /= np.linalg.norm(right)
    frame = np.eye(4)
    frame[:3, 0], frame[:3, 1], frame[:3, 2], frame[:3, 3] = right, np.cross(back, right), back, world[:3, 3]
    name = node.name or cam.name or f"cameras[{c}]"
    if cam.type == "orthographic" and cam.orthographic is not None:
        o = cam.orthographic
        return GltfCamera(name, Camera(projection="orthographic", camera_to_world=frame + 0.0,
                                       view_height=2.0 * float(o.ymag)), float(o.xmag) / float(o.ymag))
    if cam.perspective is None:
        raise f.error(("cameras", c), f"camera type {cam.type!r} has no parameters")
    p = cam.perspective
    return GltfCamera(name, Camera(projection="perspective", camera_to_world=frame + 0.0,
                                   fov_y=math.degrees(float(p.yfov))),
                      float(p.aspectRatio) if p.aspectRatio else None)


# ----------------------------------------------------------------------------- the file

def _check_extensions(f: GltfFile) -> None:
    required = set(f.doc.extensionsRequired or [])
    bad = sorted(required - SUPPORTED)
    if bad:
        raise f.error(("extensionsRequired",), f"extension {bad[0]} is required by the file and not "
                      "supported")
    for name in sorted(set(f.doc.extensionsUsed or []) - SUPPORTED):
        warnings.warn(f"{f.label}: extension {name} is not supported: ignored", stacklevel=3)


def import_gltf(path, *, label: str | None = None, gltf_scene: int | None = None,
                transform: np.ndarray | None = None, prefix: str = "",
                light_units: str = "photometric", light_range: str = "honour") -> GltfImport:
    """Read a glTF 2.0 file into world-space refrender objects (see the module docstring).

    Parameters
    ----------
    path
        ``.gltf`` (external or ``data:`` URIs) or ``.glb`` file.
    gltf_scene
        Index of the glTF scene; default the file's ``scene``, else 0.
    transform
        (4, 4) matrix placing the whole file (default identity).
    prefix
        Prepended to the material names (several files in one scene).
    light_units
        ``"photometric"`` (candela, lux, converted at 683 lm/W) or
        ``"radiometric"`` (the numbers taken as W/sr and W/m^2).
    light_range
        ``"honour"`` (KHR_lights_punctual's window) or ``"ignore"`` (physics).
    """
    f = GltfFile(path, label)
    _check_extensions(f)
    ignored = Ignored()
    out = GltfImport()
    scenes = f.doc.scenes or []
    index = gltf_scene if gltf_scene is not None else (f.doc.scene if f.doc.scene is not None else 0)
    if scenes and not 0 <= index < len(scenes):
        raise f.error(("scenes",), f"scene {index} does not exist ({len(scenes)} scenes)")
    roots = scenes[index].nodes or [] if scenes else list(range(len(f.doc.nodes)))
    top = np.eye(4) if transform is None else np.asarray(transform, float)
    lights = ((f.doc.extensions or {}).get("KHR_lights_punctual") or {}).get("lights", [])
    cache: dict = {}
    materials: dict = {}
    n_inst = n_tris = 0
    for ni, world in _walk(f, roots, top):
        node = f.doc.nodes[ni]
        if node.camera is not None:
            if not 0 <= node.camera < len(f.doc.cameras):
                raise f.error(("nodes", ni, "camera"), f"camera {node.camera} does not exist")
            out.cameras.append(_camera(f, node.camera, node, world))
        light_ref = (node.extensions or {}).get("KHR_lights_punctual")
        if light_ref is not None:
            li = light_ref.get("light")
            if not isinstance(li, int) or not 0 <= li < len(lights):
                raise f.error(("nodes", ni, "extensions", "KHR_lights_punctual", "light"),
                              f"light {li} does not exist ({len(lights)} lights)")
            out.lights.append(_punctual(lights[li], world, light_units, light_range == "honour"))
        if node.skin is not None:
            ignored.add("skins", "the mesh is rendered in its bind pose")
        if node.mesh is None:
            continue
        if not 0 <= node.mesh < len(f.doc.meshes):
            raise f.error(("nodes", ni, "mesh"), f"mesh {node.mesh} does not exist")
        n_inst += 1
        flip = np.linalg.det(world[:3, :3]) < 0.0
        for pi, prim in enumerate(f.doc.meshes[node.mesh].primitives):
            key = (node.mesh, pi)
            if key not in cache:
                cache[key] = _primitive(f, node.mesh, pi, prim, ignored)
            pos, tris, mi = cache[key]
            if mi not in materials:
                materials[mi] = _material(f, mi, ignored)
            mat, mode, alpha, cutoff, double, tex_coord = materials[mi]
            uvs = None
            if mat.params.get("base_color_texture") is not None or mat.params.get("roughness_texture") is not None:
                uvs = _uvs(f, node.mesh, pi, prim, tex_coord, len(pos), cache)
            if mode != "OPAQUE" and mat.params.get("base_color_texture") is not None:
                ignored.add("alpha from a base colour texture", "not read: the factor's alpha decides")
            if mode == "MASK" and alpha < cutoff:
                continue          # a constant alpha below the cutoff: the surface is not there
            if mode == "BLEND":
                ignored.add("alphaMode BLEND", "rendered opaque (stochastic pass-through not yet "
                            "implemented)")
            wpos = pos @ world[:3, :3].T + world[:3, 3]
            if not np.all(np.abs(wpos) <= SCENE_NUMBER_MAX):
                raise f.error(("nodes", ni, "mesh"), f"mesh {node.mesh} placed by this node has positions beyond "
                              f"{SCENE_NUMBER_MAX:g} (refrender's limit for lengths)")
            t = tris[:, ::-1] if flip else tris
            keep = ~zero_area(wpos, t) if len(t) else np.zeros(0, bool)
            t = t[keep]
            if len(t) == 0:
                continue
            name = f"{prefix}default" if mi is None else f"{prefix}materials[{mi}]"
            out.materials[name] = mat
            out.objects.append(Object(shape=TriangleMesh(positions=wpos, indices=t, uvs=uvs,
                                                         source=f"{f.label}#meshes[{node.mesh}]"),
                                      material=name, emission=np.zeros(3), emits_both_sides=double))
            n_tris += len(t)
    if f.doc.animations:
        ignored.add("animations", "the file's static pose is rendered")
    _check_radiometry(f, out)
    out.digests = f.digests
    prims = [k for k in cache if k[0] != "uv"]
    out.counts = {"meshes": len({k[0] for k in prims}), "primitives": len(prims),
                  "instances": n_inst, "triangles": n_tris, "materials": len(out.materials),
                  "lights": len(out.lights)}
    out.ignored = ignored.notes
    return out


# ----------------------------------------------------------------------------- whole scenes

#: film height (pixels) of a glTF scene rendered without a JSON film
DEFAULT_FILM_HEIGHT = 480


def select_camera(imp: GltfImport, camera: str | int | None, label: str) -> GltfCamera:
    """The camera named or numbered *camera* (node name, camera name or index in
    node order); None: the first in node order."""
    from ..errors import SceneError
    if not imp.cameras:
        raise SceneError(f"{label}: cameras: the file places no camera (render it from a JSON "
                         "scene with a camera)")
    if camera is None:
        return imp.cameras[0]
    text = str(camera)
    if text.lstrip("-").isdigit():
        k = int(text)
        if not 0 <= k < len(imp.cameras):
            raise SceneError(f"{label}: cameras: camera {k} does not exist ({len(imp.cameras)} "
                             "cameras placed by nodes)")
        return imp.cameras[k]
    for c in imp.cameras:
        if c.name == text:
            return c
    known = ", ".join(repr(c.name) for c in imp.cameras)
    raise SceneError(f"{label}: cameras: no camera named {text!r} (known: {known})")


def _check_radiometry(f, out: "GltfImport") -> None:
    """Emission and light values within SCENE_NUMBER_MAX, as for JSON scenes (refrender/limits.py)."""
    for name, mat in out.materials.items():
        emissive = np.asarray(mat.params.get("emissive", np.zeros(3)), dtype=np.float64)
        if not np.all(np.abs(emissive) <= SCENE_NUMBER_MAX):
            raise f.error(("materials",), f"{name}: emissive times emissiveStrength exceeds "
                          f"{SCENE_NUMBER_MAX:g} (refrender's limit for radiometric values)")
    for i, light in enumerate(out.lights):
        for key, value in vars(light).items():
            if isinstance(value, (np.ndarray, float, int)) and not isinstance(value, bool):
                v = np.asarray(value, dtype=np.float64)
                if key == "range":
                    v = np.where(np.isposinf(v), 0.0, v)        # no range: an infinite window
                if not np.all(np.abs(v) <= SCENE_NUMBER_MAX):
                    raise f.error(("extensions", "KHR_lights_punctual", "lights"),
                                  f"light {i}: {key} exceeds {SCENE_NUMBER_MAX:g} (refrender's limit)")


def load_gltf_scene(path, *, camera: str | int | None = None, gltf_scene: int | None = None,
                    film_height: int | None = None, light_units: str = "photometric",
                    light_range: str = "honour"):
    """A whole :class:`refrender.scene.model.Scene` of one glTF file.

    The camera is *camera* (see :func:`select_camera`); the film is
    *film_height* pixels high (default DEFAULT_FILM_HEIGHT) and as wide as the
    camera's aspect ratio asks (4:3 when it names none); render settings are
    the defaults of the scene format.
    """
    from .load import scene_sha256
    from .model import Film, RenderSettings, Scene
    label = str(path)
    imp = import_gltf(path, label=label, gltf_scene=gltf_scene, light_units=light_units,
                      light_range=light_range)
    cam = select_camera(imp, camera, label)
    height = int(film_height or DEFAULT_FILM_HEIGHT)
    width = max(1, int(round(height * (cam.aspect if cam.aspect else 4.0 / 3.0))))
    document = {"gltf": Path(path).name, "camera": cam.name, "gltf_scene": gltf_scene,
                "film": [width, height], "light_units": light_units, "light_range": light_range}
    return Scene(camera=cam.camera, film=Film(width=width, height=height), materials=imp.materials,
                 objects=imp.objects, lights=imp.lights, render=RenderSettings(),
                 sha256=scene_sha256(document, [d for _, d in imp.digests]),
                 source_path=Path(path).resolve(), document=document)


def expand_gltf_object(spec: dict, path: tuple, files) -> GltfImport:
    """Import the glTF file of a schema-valid ``{"shape": "gltf", ...}`` object
    (materials prefixed with its field path); its files join *files*' digests."""
    from ._shapes import transform_matrix
    from ._util import format_path
    where = path + ("path",)
    resolved = (files.base_dir / spec["path"]).resolve()
    if not resolved.is_file():
        from ._util import scene_error
        raise scene_error(where, f"file not found: {resolved}")
    imp = import_gltf(resolved, label=f"{format_path(where)}: {spec['path']}",
                      gltf_scene=spec.get("gltf_scene"),
                      transform=transform_matrix(spec.get("transform"), path + ("transform",)),
                      prefix=f"{format_path(path)}:", light_units=spec.get("light_units", "photometric"),
                      light_range=spec.get("light_range", "honour"))
    files.digests.extend(imp.digests)
    return imp
