"""OpenUSD stages -> scene documents (read with usd-core, the ``pxr`` package).

:func:`translate_stage` opens a stage and writes the equivalent scene
document (the JSON vocabulary of ``scene-format.md``), which the normal
loader then validates and builds; :func:`load_usd_scene` does both.  Inside a
JSON scene, ``{"shape": "usd", "path": ..., "transform": ...}`` imports a
stage's geometry, materials and lights (its cameras are ignored).

World frame: positions are multiplied by the stage's ``metersPerUnit`` (scene
units are metres) and a ``upAxis = "Z"`` stage is turned by -90 degrees about
+X, so its +Z becomes this renderer's +Y (and its +Y becomes -Z).

Instancing: scene-graph instances are traversed as instance proxies and
``PointInstancer`` prototypes are copied per instance, all flattened into
world-space triangles (no shared geometry yet).

Everything the stage holds that is not imported is listed by
:meth:`Translation.report` (``refrender info shot.usda``).
"""
from __future__ import annotations

import math
import os
import tempfile
import warnings
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from ..errors import SceneError
from ._util import one_line
from . import usd_geometry as geo
from . import usd_shading as shading

__all__ = ["USD_SUFFIXES", "is_usd", "translate_stage", "load_usd_scene", "expand_usd_objects"]

USD_SUFFIXES = (".usd", ".usda", ".usdc", ".usdz")
#: film height when the stage has no UsdRender settings (the width follows the apertures)
DEFAULT_FILM_HEIGHT = 360


def is_usd(path) -> bool:
    return isinstance(path, (str, os.PathLike)) and Path(path).suffix.lower() in USD_SUFFIXES


def _pxr():
    try:
        from pxr import Gf, Sdf, Tf, Usd, UsdGeom, UsdLux, UsdRender, UsdShade  # noqa: F401
    except ImportError:
        raise SceneError("USD stages need usd-core: pip install 'refrender[usd]'") from None
    import pxr
    return pxr


# ----------------------------------------------------------------------------- report

@dataclass
class ImportLog:
    """What a translation imported, approximated and ignored, per prim path."""

    imported: list[str] = field(default_factory=list)
    approximated: list[str] = field(default_factory=list)
    ignored: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    shaders: dict[str, list[str]] = field(default_factory=dict)
    subdivided: list[str] = field(default_factory=list)

    def add(self, prim, what):
        self.imported.append(f"{prim.GetPath()}: {what}")

    def ignore(self, prim, why):
        self.ignored.append(f"{prim.GetPath()}: {why}")

    def approximate(self, prim, why):
        self.approximated.append(f"{prim.GetPath()}: {why}")

    def note(self, prim, why):
        self.notes.append(f"{prim.GetPath()}: {why}")

    def unsupported_shader(self, prim, ids):
        self.shaders[str(prim.GetPath())] = list(ids)

    def unsupported_input(self, prim, name, why):
        self.approximated.append(f"{prim.GetPath()}: UsdPreviewSurface inputs:{name}: {why}")

    def warn(self) -> None:
        """One warning per kind of loss (the details: refrender info)."""
        if self.subdivided:
            warnings.warn(f"{len(self.subdivided)} mesh(es) with a subdivisionScheme other than none "
                          f"rendered as their control cage (first: {self.subdivided[0]})", stacklevel=3)
        if self.shaders:
            ids = sorted({i for v in self.shaders.values() for i in v})
            warnings.warn(f"{len(self.shaders)} material(s) with shaders other than UsdPreviewSurface "
                          f"rendered as grey Lambertian: {', '.join(ids)}", stacklevel=3)
        links = [s for s in self.ignored if "ShadowAPI" in s or "linking" in s]
        if links:
            warnings.warn(f"shadow and light-linking controls ignored on {len(links)} light(s) "
                          f"(first: {links[0]})", stacklevel=3)
        shaping = [s for s in self.ignored if "ShapingAPI" in s]
        if shaping:
            warnings.warn(f"ShapingAPI (cone angle, softness, focus) ignored on {len(shaping)} light(s): "
                          f"they emit as unshaped lights (first: {shaping[0]})", stacklevel=3)
        rest = len(self.ignored) - len(links) - len(shaping) + len(self.approximated)
        if rest:
            warnings.warn(f"{rest} USD feature(s) ignored or approximated (list them with "
                          "'refrender info STAGE')", stacklevel=3)


@dataclass
class Translation:
    document: dict
    log: ImportLog
    layers: list[str]
    cameras: list[str]
    camera: str | None

    def report(self) -> dict:
        objects = self.document["objects"]
        return {
            "layers": self.layers, "cameras": self.cameras, "camera": self.camera,
            "objects": len(objects),
            "triangles": sum(len(o["indices"]) for o in objects if o["shape"] == "triangles"),
            "materials": len(self.document.get("materials", {})),
            "lights": len(self.document.get("lights", [])),
            "film": self.document.get("film"),
            "imported": self.log.imported, "approximated": self.log.approximated,
            "ignored": self.log.ignored + [f"{p}: shader(s) {', '.join(ids)} (grey Lambertian)"
                                           for p, ids in self.log.shaders.items()]
                       + [f"{p}: subdivisionScheme (control cage rendered)" for p in self.log.subdivided],
            "notes": self.log.notes,
        }


# ----------------------------------------------------------------------------- opening

@contextmanager
def _captured_stderr():
    """Collect what the USD libraries print on file descriptor 2 (their warnings)."""
    import sys
    sys.stderr.flush()
    saved = os.dup(2)
    with tempfile.TemporaryFile(mode="w+b") as tmp:
        os.dup2(tmp.fileno(), 2)
        box = []
        try:
            yield box
        finally:
            os.dup2(saved, 2)
            os.close(saved)
            tmp.seek(0)
            box.append(tmp.read().decode("utf-8", "replace"))


def _tf_message(exc: Exception) -> str:
    """The first quoted message of a Tf error (they come as ``Error in '...' ... : 'message'``)."""
    text = str(exc)
    for part in text.split("\n"):
        part = part.strip()
        if " : '" in part:
            return part.split(" : '", 1)[1].rstrip("'")
    return one_line(text)


def open_stage(path: Path):
    """Open a stage; composition errors (missing sublayers, references, payloads) are one line."""
    pxr = _pxr()
    label = str(path)
    if not path.exists():
        raise SceneError(f"{label}: USD stage not found")
    if not path.is_file():
        raise SceneError(f"{label}: not a file")
    with _captured_stderr():
        try:
            layer = pxr.Sdf.Layer.FindOrOpen(str(path))
        except pxr.Tf.ErrorException as exc:
            raise SceneError(one_line(f"{label}: cannot read USD layer: {_tf_message(exc)}")) from None
        if layer is None:
            raise SceneError(f"{label}: cannot read USD layer")
        try:
            stage = pxr.Usd.Stage.Open(layer, pxr.Usd.Stage.LoadAll)
        except pxr.Tf.ErrorException as exc:
            raise SceneError(one_line(f"{label}: cannot open USD stage: {_tf_message(exc)}")) from None
    errors = [str(e) for e in stage.GetCompositionErrors()]
    if errors:
        more = f" (and {len(errors) - 1} more composition error(s))" if len(errors) > 1 else ""
        raise SceneError(one_line(f"{label}: {errors[0]}{more}"))
    return stage


def _matrix(gf) -> np.ndarray:
    """A Gf.Matrix4d (row vectors, p' = p M) as a (4, 4) column-vector matrix."""
    return np.array(gf, dtype=np.float64).reshape(4, 4).T.copy()


def stage_frame(stage) -> np.ndarray:
    """(4, 4) matrix from stage coordinates to the renderer's world (metres, +Y up)."""
    pxr = _pxr()
    mpu = float(pxr.UsdGeom.GetStageMetersPerUnit(stage))
    m = np.diag([mpu, mpu, mpu, 1.0])
    if str(pxr.UsdGeom.GetStageUpAxis(stage)) == "Z":
        rx = np.array([[1.0, 0, 0, 0], [0, 0, 1.0, 0], [0, -1.0, 0, 0], [0, 0, 0, 1.0]])  # z -> y, y -> -z
        m = m @ rx
    return m


# ----------------------------------------------------------------------------- translation

class _Translator:
    def __init__(self, stage, frame: np.ndarray, prefix: str = ""):
        self.pxr = _pxr()
        self.stage = stage
        self.frame = frame
        self.prefix = prefix
        self.log = ImportLog()
        self.objects: list[dict] = []
        self.lights: list[dict] = []
        self.materials: dict[str, dict] = {}
        self.mat_cache: dict[str, tuple] = {}
        self.cameras: list = []
        self.render_settings = []
        self.dropped = 0
        usd = self.pxr.Usd
        self.time = (usd.TimeCode(stage.GetStartTimeCode()) if stage.HasAuthoredTimeCodeRange()
                     else usd.TimeCode.Default())
        self.xcache = self.pxr.UsdGeom.XformCache(self.time)

    # -- helpers
    def world(self, prim) -> np.ndarray:
        return self.frame @ _matrix(self.xcache.GetLocalToWorldTransform(prim))

    def get(self, prim, name, default=None):
        attr = prim.GetAttribute(name)
        if not attr:
            return default
        value = attr.Get(self.time)
        return default if value is None else value

    def resolve_asset(self, asset, prim, attr) -> str:
        resolved = asset.resolvedPath
        if not resolved:
            raise SceneError(one_line(f"{prim.GetPath()}.{attr}: cannot resolve asset @{asset.path}@"))
        if "[" in resolved:
            raise SceneError(one_line(f"{prim.GetPath()}.{attr}: files packaged inside a .usdz are not "
                                      f"supported ({resolved}); unpack the package"))
        return resolved

    # -- traversal
    def run(self) -> None:
        usd, geom, lux = self.pxr.Usd, self.pxr.UsdGeom, self.pxr.UsdLux
        shade, render = self.pxr.UsdShade, self.pxr.UsdRender
        it = iter(usd.PrimRange(self.stage.GetPseudoRoot(), usd.TraverseInstanceProxies(usd.PrimDefaultPredicate)))
        for prim in it:
            if prim.IsPseudoRoot():
                continue
            if prim.IsA(shade.Material) or prim.IsA(shade.Shader) or prim.IsA(shade.NodeGraph):
                it.PruneChildren()
                continue
            if prim.IsA(render.Settings):
                self.render_settings.append(prim)
                continue
            if prim.IsA(geom.Imageable) and not self._shown(prim):
                it.PruneChildren()
                continue
            if prim.IsA(geom.PointInstancer):
                self._instancer(prim)
                it.PruneChildren()
                continue
            if prim.IsA(geom.Camera):
                self.cameras.append(prim)
                continue
            if prim.IsA(lux.BoundableLightBase) or prim.IsA(lux.NonboundableLightBase):
                self._light(prim, self.world(prim))
                continue
            if prim.IsA(geom.Gprim):
                self._gprim(prim, self.world(prim))
                continue
            kind = str(prim.GetTypeName())
            if kind and kind not in ("Xform", "Scope") and not prim.IsA(render.Product) \
                    and not prim.IsA(render.Var) and not prim.IsA(render.Pass):
                self.log.ignore(prim, f"prim type {kind}")

    def _shown(self, prim) -> bool:
        img = self.pxr.UsdGeom.Imageable(prim)
        if img.ComputeVisibility(self.time) == self.pxr.UsdGeom.Tokens.invisible:
            self.log.ignore(prim, "invisible")
            return False
        purpose = str(img.ComputePurpose())
        if purpose not in ("default", "render"):
            self.log.ignore(prim, f"purpose {purpose}")
            return False
        return True

    def _instancer(self, prim) -> None:
        usd, geom = self.pxr.Usd, self.pxr.UsdGeom
        inst = geom.PointInstancer(prim)
        protos = inst.GetPrototypesRel().GetTargets()
        indices = inst.GetProtoIndicesAttr().Get(self.time)
        if not protos or indices is None:
            self.log.ignore(prim, "PointInstancer without prototypes or protoIndices")
            return
        xforms = inst.ComputeInstanceTransformsAtTime(self.time, self.time)
        mask = inst.ComputeMaskAtTime(self.time)
        base_raw = _matrix(self.xcache.GetLocalToWorldTransform(prim))
        count = 0
        for p, proto_path in enumerate(protos):
            root = self.stage.GetPrimAtPath(proto_path)
            if not root:
                raise SceneError(one_line(f"{prim.GetPath()}.prototypes: no prim at {proto_path}"))
            parent = _matrix(self.xcache.GetLocalToWorldTransform(root.GetParent()))
            gprims = []
            sub = iter(usd.PrimRange(root, usd.TraverseInstanceProxies(usd.PrimDefaultPredicate)))
            for d in sub:
                if d.IsA(geom.Imageable) and not self._shown(d):
                    sub.PruneChildren()
                    continue
                if d.IsA(geom.PointInstancer):
                    self.log.ignore(d, "PointInstancer nested in a prototype")
                    sub.PruneChildren()
                    continue
                if d.IsA(geom.Gprim):
                    rel = np.linalg.solve(parent, _matrix(self.xcache.GetLocalToWorldTransform(d)))
                    gprims.append((d, rel))
            for i in np.flatnonzero(np.asarray(indices) == p):
                if mask and not mask[int(i)]:
                    continue
                t = _matrix(xforms[int(i)])
                for d, rel in gprims:
                    self._gprim(d, self.frame @ base_raw @ t @ rel, quiet=True)
                count += 1
        self.log.add(prim, f"PointInstancer: {count} instances of {len(protos)} prototype(s), "
                     "flattened into world-space copies")

    # -- geometry
    def _gprim(self, prim, m, quiet=False) -> None:
        geom = self.pxr.UsdGeom
        kind = str(prim.GetTypeName())
        entry = None
        if prim.IsA(geom.Mesh):
            entry = self._mesh(prim, m, quiet)
        elif prim.IsA(geom.Sphere):
            r = float(self.get(prim, "radius", 1.0))
            s = geo.similarity_scale(m[:3, :3])
            if s is not None:
                entry = {"shape": "sphere", "center": geo.apply(m, np.zeros((1, 3)))[0].tolist(), "radius": r * s}
            else:
                entry = geo.solid_entry(*geo.sphere_mesh(r), m)
                if not quiet:
                    self.log.note(prim, f"Sphere under non-uniform scale: {geo.SPHERE_SEGMENTS} x "
                                  f"{geo.SPHERE_RINGS} facets")
        elif prim.IsA(geom.Cube):
            entry = geo.solid_entry(*geo.cube_mesh(float(self.get(prim, "size", 2.0))), m)
        elif prim.IsA(geom.Cylinder) or prim.IsA(geom.Cone):
            r, h = float(self.get(prim, "radius", 1.0)), float(self.get(prim, "height", 2.0))
            axis = str(self.get(prim, "axis", "Z"))
            pts, tris = geo.cylinder_mesh(r, h, axis, 0.0 if prim.IsA(geom.Cone) else None)
            entry = geo.solid_entry(pts, tris, m)
            if not quiet:
                self.log.note(prim, f"{kind} tessellated: {geo.ROUND_SEGMENTS} facets around the axis")
        elif prim.IsA(geom.Capsule):
            r, h = float(self.get(prim, "radius", 0.5)), float(self.get(prim, "height", 1.0))
            entry = geo.solid_entry(*geo.capsule_mesh(r, h, str(self.get(prim, "axis", "Z"))), m)
            if not quiet:
                self.log.note(prim, f"Capsule tessellated: {geo.ROUND_SEGMENTS} facets around the axis")
        elif prim.IsA(geom.Plane):
            entry = geo.solid_entry(*geo.plane_mesh(float(self.get(prim, "width", 2.0)),
                                                    float(self.get(prim, "length", 2.0)),
                                                    str(self.get(prim, "axis", "Z"))), m)
        else:
            if not quiet:
                self.log.ignore(prim, f"prim type {kind} (not a surface this renderer draws)")
            return
        if entry is None:
            if not quiet:
                self.log.ignore(prim, f"{kind} with no area")
            return
        self.dropped += entry.pop("_dropped", 0)
        if not self._surface(prim, entry, quiet):
            return
        self.objects.append(entry)
        if not quiet:
            size = f"{len(entry['indices'])} triangles" if entry["shape"] == "triangles" else entry["shape"]
            self.log.add(prim, f"{kind} -> {size}")

    def _mesh(self, prim, m, quiet):
        geom = self.pxr.UsdGeom
        mesh = geom.Mesh(prim)
        points = mesh.GetPointsAttr().Get(self.time)
        counts = mesh.GetFaceVertexCountsAttr().Get(self.time)
        corner = mesh.GetFaceVertexIndicesAttr().Get(self.time)
        if points is None or counts is None or corner is None or len(counts) == 0:
            return None
        counts, corner = np.asarray(counts), np.asarray(corner)
        if counts.sum() != len(corner):
            raise SceneError(one_line(f"{prim.GetPath()}: faceVertexCounts sum to {counts.sum()} but "
                                      f"faceVertexIndices has {len(corner)} entries"))
        if len(corner) and (corner.min() < 0 or corner.max() >= len(points)):
            raise SceneError(one_line(f"{prim.GetPath()}.faceVertexIndices: index out of range "
                                      f"({len(points)} points)"))
        scheme = str(self.get(prim, "subdivisionScheme", "catmullClark"))
        if scheme != "none" and not quiet:
            self.log.subdivided.append(str(prim.GetPath()))
        left = str(self.get(prim, "orientation", "rightHanded")) == "leftHanded"
        holes = self.get(prim, "holeIndices", None)
        if not quiet and (mesh.GetNormalsAttr().HasAuthoredValue()
                          or geom.PrimvarsAPI(prim).HasPrimvar("normals")):
            self.log.ignore(prim, "normals (shading normals are not modelled; geometric normals used)")
        uv, interp = None, None
        uv_set = self._uv_set(prim)
        if uv_set:
            pv = geom.PrimvarsAPI(prim).GetPrimvar(uv_set)
            if pv and pv.HasValue():
                uv = pv.ComputeFlattened(self.time)
                interp = str(pv.GetInterpolation())
            elif not quiet:
                self.log.note(prim, f"textured material but no primvar {uv_set}: barycentric coordinates")
        return geo.mesh_entry(points, counts, corner, m, left_handed=left,
                              holes=None if holes is None else np.asarray(holes), uv=uv, uv_interpolation=interp)

    def _binding(self, prim):
        shade = self.pxr.UsdShade
        mat = shade.MaterialBindingAPI(prim).ComputeBoundMaterial()[0]
        return mat if mat else None

    def _material(self, mat):
        key = str(mat.GetPath())
        if key not in self.mat_cache:
            result = shading.preview_surface(mat, self.log, self.resolve_asset)
            name = None
            if result.entry is not None:
                name = f"{self.prefix}{key}"
                entry = dict(result.entry)
                if isinstance(entry.get("base_color"), list):
                    entry["base_color"] = [min(1.0, max(0.0, float(c))) for c in entry["base_color"]]
                self.materials[name] = entry
                self.log.add(mat.GetPrim(), f"material -> {entry['type']}")
            self.mat_cache[key] = (name, result)
        return self.mat_cache[key]

    def _uv_set(self, prim):
        mat = self._binding(prim)
        if mat is None:
            return None
        name, result = self._material(mat)
        return result.uv_set if result.entry is not None and _textured(result.entry) else None

    def _surface(self, prim, entry, quiet) -> bool:
        """Material, emission and sides of one gprim's entry; False to drop it (cut out)."""
        mat = self._binding(prim)
        if mat is not None:
            name, result = self._material(mat)
            if result.cutout_hidden:
                if not quiet:
                    self.log.ignore(prim, "opacity below opacityThreshold (cut out entirely)")
                return False
            entry["material"] = name
            if result.emission is not None:
                entry["emission"] = result.emission
                entry["emits_both_sides"] = bool(self.get(prim, "doubleSided", False))
            return True
        colour = self._display_color(prim, quiet)
        name = f"{self.prefix}displayColor({colour[0]:.6g}, {colour[1]:.6g}, {colour[2]:.6g})"
        self.materials.setdefault(name, {"type": "lambertian", "albedo": colour})
        entry["material"] = name
        return True

    def _display_color(self, prim, quiet) -> list:
        pv = self.pxr.UsdGeom.PrimvarsAPI(prim).GetPrimvar("displayColor")
        if not (pv and pv.HasValue()):
            return list(shading.NEUTRAL_GREY)
        values = np.asarray(pv.ComputeFlattened(self.time), dtype=np.float64).reshape(-1, 3)
        if len(values) == 0:
            return list(shading.NEUTRAL_GREY)
        if len(values) > 1 and not quiet and not np.all(values == values[0]):
            self.log.approximate(prim, f"displayColor with {pv.GetInterpolation()} interpolation: "
                                 "its mean is used")
        return [float(min(1.0, max(0.0, c))) for c in values.mean(axis=0)]

    # -- lights
    def _light(self, prim, m) -> None:
        lux = self.pxr.UsdLux
        if prim.HasAPI(lux.ShadowAPI):
            self.log.ignore(prim, "ShadowAPI (shadow colour, distance and falloff are not modelled)")
        if prim.HasAPI(lux.ShapingAPI):
            self.log.ignore(prim, "ShapingAPI (cone angle and softness are not modelled)")
        if prim.HasAPI(lux.LightAPI):
            light = lux.LightAPI(prim)
            coll = light.GetLightLinkCollectionAPI()
            if coll and (coll.GetIncludesRel().GetTargets() or coll.GetExcludesRel().GetTargets()):
                self.log.ignore(prim, "light linking (the light reaches every surface)")
            if light.GetShadowLinkCollectionAPI().GetExcludesRel().GetTargets():
                self.log.ignore(prim, "shadow linking (every surface casts shadows)")
        kind = str(prim.GetTypeName())
        if prim.IsA(lux.RectLight):
            objs, lights = shading.rect_light(prim, m, self.log), []
        elif prim.IsA(lux.DiskLight):
            objs, lights = shading.disk_light(prim, m, self.log), []
        elif prim.IsA(lux.SphereLight):
            objs, lights = shading.sphere_light(prim, m, self.log)
        elif prim.IsA(lux.CylinderLight):
            objs, lights = shading.cylinder_light(prim, m, self.log), []
        elif prim.IsA(lux.DistantLight):
            objs, lights = [], shading.distant_light(prim, m, self.log)
        elif prim.IsA(lux.DomeLight) or kind == "DomeLight_1":
            pole = np.eye(3)
            if kind == "DomeLight_1":
                axis = str(self.get(prim, "poleAxis", "scene"))
                if axis == "scene":
                    axis = str(self.pxr.UsdGeom.GetStageUpAxis(self.stage))
                if axis == "Z":   # the map's pole on +Z, longitude 0 toward -Y: +90 degrees about +X
                    pole = np.array([[1.0, 0, 0], [0, 0, -1.0], [0, 1.0, 0]])
            objs, lights = [], shading.dome_light(prim, m, pole, self.log, self.resolve_asset)
        else:
            self.log.ignore(prim, f"light type {kind}")
            return
        for o in objs:
            self.dropped += o.pop("_dropped", 0)
        self.objects.extend(objs)
        self.lights.extend(lights)
        if objs or lights:
            what = ", ".join([o["shape"] for o in objs] + [li["type"] for li in lights])
            self.log.add(prim, f"{kind} -> {what}")

    # -- camera and film
    def camera(self, which: str | None):
        names = [str(c.GetPath()) for c in self.cameras]
        if which is None:
            for rs in self.render_settings:
                targets = self.pxr.UsdRender.Settings(rs).GetCameraRel().GetTargets()
                if targets:
                    which = str(targets[0])
                    break
        if which is None:
            if not self.cameras:
                raise SceneError(f"{self.stage.GetRootLayer().identifier}: the stage has no camera "
                                 "(UsdGeom.Camera)")
            prim = self.cameras[0]
        else:
            prim = self.stage.GetPrimAtPath(which) if which.startswith("/") else None
            if not prim or not prim.IsA(self.pxr.UsdGeom.Camera):
                known = ", ".join(names) if names else "the stage has none"
                raise SceneError(one_line(f"--camera: no camera prim {which} (cameras: {known})"))
        return prim, self._camera_entry(prim)

    def _camera_entry(self, prim) -> tuple[dict, float]:
        m = self.world(prim)
        lin = m[:3, :3]
        if np.linalg.det(lin) <= 0.0:
            raise SceneError(one_line(f"{prim.GetPath()}: camera transform mirrors or is singular"))
        rot = lin / np.linalg.norm(lin, axis=0)
        if not np.allclose(rot.T @ rot, np.eye(3), atol=1e-6):
            raise SceneError(one_line(f"{prim.GetPath()}: camera transform has shear"))
        c2w = np.eye(4)
        c2w[:3, :3], c2w[:3, 3] = rot, m[:3, 3]
        mpu = float(self.pxr.UsdGeom.GetStageMetersPerUnit(self.stage))
        tenth_mm = 100.0 * mpu               # a tenth of a scene unit in millimetres
        h_ap = float(self.get(prim, "horizontalAperture", 20.955))
        v_ap = float(self.get(prim, "verticalAperture", 15.2908))
        for off in ("horizontalApertureOffset", "verticalApertureOffset"):
            if float(self.get(prim, off, 0.0)) != 0.0:
                self.log.ignore(prim, f"{off} (a shifted film back is not modelled; centred)")
        cam = {"camera_to_world": (c2w + 0.0).tolist()}
        if str(self.get(prim, "projection", "perspective")) == "orthographic":
            cam.update(projection="orthographic", view_height=v_ap * 0.1 * mpu)
        else:
            cam.update(focal_length=float(self.get(prim, "focalLength", 50.0)) * tenth_mm,
                       sensor_height=v_ap * tenth_mm)
            f_stop = float(self.get(prim, "fStop", 0.0))
            focus = float(self.get(prim, "focusDistance", 0.0))
            if f_stop > 0.0:
                if focus > 0.0:
                    cam["lens"] = {"f_number": f_stop, "focus_distance": focus * mpu}
                else:
                    self.log.ignore(prim, "fStop without a focusDistance (pinhole used)")
        for attr in ("clippingRange", "clippingPlanes", "shutter:open", "shutter:close", "exposure"):
            a = prim.GetAttribute(attr)
            if a and a.HasAuthoredValue():
                self.log.ignore(prim, f"camera {attr}")
        return cam, h_ap / v_ap

    def film(self, aspect: float, height: int | None = None) -> dict:
        """The render settings' resolution; with *height* (or without settings) that many
        rows and the apertures' aspect."""
        if height is None:
            for rs in self.render_settings:
                res = self.pxr.UsdRender.Settings(rs).GetResolutionAttr().Get()
                if res is not None:
                    return {"width": int(res[0]), "height": int(res[1])}
            height = DEFAULT_FILM_HEIGHT
        return {"width": max(1, round(height * aspect)), "height": int(height)}


def _textured(entry: dict) -> bool:
    return any(isinstance(v, dict) for v in entry.values())


def _layers(stage) -> list[str]:
    return [layer.realPath for layer in stage.GetUsedLayers() if layer.realPath]


def translate_stage(path, *, camera: str | None = None, with_camera: bool = True,
                    root_matrix: np.ndarray | None = None, prefix: str = "",
                    film_height: int | None = None) -> Translation:
    """The scene document of a USD stage, with the log of what was imported and ignored.

    Parameters
    ----------
    path
        A .usd, .usda, .usdc or .usdz file.
    camera
        Prim path of the camera (default: the UsdRender settings' camera, else
        the first camera in traversal order).
    with_camera
        False for a stage placed in a JSON scene (no camera or film entries).
    root_matrix
        (4, 4) matrix applied after the stage frame (the JSON ``transform``).
    prefix
        Prepended to material names.
    film_height
        Film rows (the width follows the apertures); default: the render
        settings' resolution, else DEFAULT_FILM_HEIGHT.
    """
    path = Path(path)
    stage = open_stage(path)
    frame = stage_frame(stage)
    if root_matrix is not None:
        frame = root_matrix @ frame
    t = _Translator(stage, frame, prefix)
    t.run()
    if t.dropped:
        t.log.notes.append(f"{t.dropped} zero-area triangle(s) dropped")
    if not t.objects and not t.lights:
        raise SceneError(f"{path}: the stage has no renderable prims (meshes, gprims or lights)")
    doc = {"version": 1, "materials": t.materials, "objects": t.objects}
    if t.lights:
        doc["lights"] = t.lights
    chosen = None
    if with_camera:
        prim, (cam, aspect) = t.camera(camera)
        chosen = str(prim.GetPath())
        doc["camera"] = cam
        doc["film"] = t.film(aspect, film_height)
        for c in t.cameras:
            if c != prim:
                t.log.note(c, "camera not rendered (choose it with --camera)")
    else:
        for c in t.cameras:
            t.log.note(c, "camera not used (a stage without its camera: the scene's camera renders)")
    return Translation(document=doc, log=t.log, layers=_layers(stage),
                       cameras=[str(c.GetPath()) for c in t.cameras], camera=chosen)


def load_usd_scene(path, *, camera: str | None = None, film_height: int | None = None, warn: bool = True,
                   assignments=(), film=None, crop=None):
    """Translate a stage (:func:`translate_stage`) and load it like a JSON scene.

    *assignments*, *film* and *crop* edit the translated document as
    ``--set``/``--film``/``--crop`` edit a JSON scene (refrender.scene.overrides).

    Texture paths in the document are absolute; the scene hash covers the
    document (all geometry is inline) and every texture file's bytes.
    """
    from .load import load_scene
    tr = translate_stage(path, camera=camera, film_height=film_height)
    if warn:
        tr.log.warn()
    doc = tr.document
    if assignments or film is not None or crop is not None:
        from .overrides import apply_overrides
        doc = apply_overrides(doc, assignments, film=film, crop=crop)
    scene = load_scene(doc, base_dir=Path(path).resolve().parent)
    return replace(scene, source_path=Path(path).resolve())


def expand_usd_objects(document: dict, files) -> dict:
    """A copy of *document* in which every ``{"shape": "usd"}`` object is replaced by the
    stage's objects (materials and lights are added); each stage file is hashed through *files*."""
    from ._shapes import transform_matrix
    out = dict(document)
    objects, materials, lights = [], dict(document.get("materials", {})), list(document.get("lights", []))
    for i, spec in enumerate(document["objects"]):
        if spec.get("shape") != "usd":
            objects.append(spec)
            continue
        where = ("objects", i)
        resolved, _ = files.read(spec["path"], where + ("path",))
        root = transform_matrix(spec.get("transform"), where + ("transform",))
        try:
            tr = translate_stage(resolved, with_camera=False, root_matrix=root, prefix=f"objects[{i}]:")
        except SceneError as exc:
            raise SceneError(one_line(f"objects[{i}].path: {exc}")) from None
        tr.log.warn()
        for layer in tr.layers:
            if Path(layer).resolve() != resolved:
                files.read(str(Path(layer).resolve()), where + ("path",))
        objects.extend(tr.document["objects"])
        materials.update(tr.document["materials"])
        lights.extend(tr.document.get("lights", []))
    out["objects"], out["materials"] = objects, materials
    if lights:
        out["lights"] = lights
    return out
