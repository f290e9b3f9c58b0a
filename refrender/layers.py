"""Layers beside the beauty image (the trade calls them AOVs or render passes).

Requests (``render.layers`` / ``--layers``):

* decomposition of the light transport, each layer an unbiased estimator
  with its own variance; the layers of one kind sum to the beauty in every
  sample (to float rounding):

  - ``transport``: ``direct`` (light that reached the camera after at most
    one scattering event: emitters seen directly and direct lighting) and
    ``indirect`` (two or more scattering events);
  - ``bounces`` / ``bounces:N``: ``bounce0`` (emitters seen directly),
    ``bounce1`` ... ``bounce<N-1>`` and ``bounce<N>plus`` (N = 3 by default),
    by the number of scattering events of the path;
  - ``light_groups``: ``light.<group>`` per light group (objects with
    emission and point/directional lights carry ``"group"``, default
    ``"default"``) and ``light.environment``;

* auxiliary first-hit values (means over the pixel's samples, weighted by
  the pixel filter like the beauty): ``normal`` (geometric normal facing its
  front side, world space), ``position`` (world space), ``depth`` (distance
  along the camera ray; 0 where the ray escapes), ``albedo`` (an unbiased
  estimate of the directional-hemispherical reflectance of the first
  surface: the first BSDF sample's weight f cos / pdf); ``object_id`` and
  ``material_id`` (of the surface seen through the pixel centre; -1 =
  nothing, names in the metadata).

EXR channels: ``<layer>.R/G/B`` and ``<layer>.variance.R/G/B`` for the
decomposition layers and albedo, ``normal.X/Y/Z``, ``position.X/Y/Z``,
``depth.Z``, ``object_id.index``, ``material_id.index``.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

import numpy as np

from .errors import RenderError

AUXILIARY = ("albedo", "normal", "depth", "position")
IDS = ("object_id", "material_id")
KINDS = ("transport", "bounces", "light_groups")
DEFAULT_BOUNCE_SPLIT = 3
_BOUNCES = re.compile(r"^bounces(?::([1-9][0-9]?))?$")


def parse_requests(value, where: str = "layers") -> tuple:
    """Validated layer requests from a list or a comma-separated string."""
    if value is None:
        return ()
    if isinstance(value, str):
        value = [v.strip() for v in value.split(",") if v.strip()]
    out = []
    for v in value:
        if not isinstance(v, str) or not (v in AUXILIARY or v in IDS or v in KINDS or _BOUNCES.match(v)):
            raise RenderError(f"{where}: unknown layer {v!r} (known: {', '.join(AUXILIARY + IDS + KINDS)}, "
                              "bounces:N)")
        if v.startswith("bounces") and any(o.startswith("bounces") for o in out):
            raise RenderError(f"{where}: give bounces at most once")
        if v not in out:
            out.append(v)
    return tuple(out)


def bounce_split(requests) -> int | None:
    for r in requests:
        m = _BOUNCES.match(r)
        if m:
            return int(m.group(1)) if m.group(1) else DEFAULT_BOUNCE_SPLIT
    return None


def light_groups(scene) -> list[str]:
    """Sorted light-group names of a scene's emitters (environment last)."""
    from .scene import model as m
    groups = {o.group for o in scene.objects if np.any(o.emission > 0)}
    groups |= {lt.group for lt in scene.lights if isinstance(lt, (m.PointLight, m.DirectionalLight, m.SpotLight))}
    out = sorted(groups)
    if any(isinstance(lt, m.EnvironmentLight) for lt in scene.lights):
        out.append("environment")
    return out


def decomposition(requests, groups=None) -> dict:
    """kind -> names of its layers, in slot order."""
    kinds = {}
    if "transport" in requests:
        kinds["transport"] = ["direct", "indirect"]
    n = bounce_split(requests)
    if n is not None:
        kinds["bounces"] = [f"bounce{k}" for k in range(n)] + [f"bounce{n}plus"]
    if "light_groups" in requests:
        kinds["light_groups"] = [f"light.{g}" for g in (groups or [])]
    return kinds


@dataclass
class LayerPlan:
    requests: tuple
    slots: list = field(default_factory=list)      # names of the accumulated slots
    kinds: dict = field(default_factory=dict)      # kind -> decomposition layer names
    aux_base: int = -1
    lay_depth: np.ndarray = None
    lay_obj: np.ndarray = None
    lay_light: np.ndarray = None
    lay_misc: np.ndarray = None

    @property
    def on(self) -> bool:
        return bool(self.slots)


def slot_names(requests, groups) -> tuple[list, dict, int]:
    kinds = decomposition(requests, groups)
    slots = [n for names in kinds.values() for n in names]
    aux_base = -1
    if any(a in requests for a in AUXILIARY):
        aux_base = len(slots)
        slots += ["normal", "position", "depth", "albedo"]     # AUX_* order of the kernel
    return slots, kinds, aux_base


def plan(scene, arrays, strategy: str, requests) -> LayerPlan:
    """Kernel arrays of the requested layers (empty arrays when none)."""
    from .geometry.compile import LIGHT_ENVIRONMENT, light_rows
    from .integrator.path import LAY_AUX, LAY_ENV, LAY_MISC_LEN, LAY_ON
    groups = light_groups(scene) if "light_groups" in requests else []
    slots, kinds, aux_base = slot_names(requests, groups)
    misc = np.zeros(LAY_MISC_LEN, dtype=np.int64)
    misc[LAY_ON] = 1 if slots else 0
    misc[LAY_ENV] = -1
    misc[LAY_AUX] = aux_base
    # scattering-count tables
    rows = []
    n = bounce_split(requests)
    top = max(2 if "transport" in kinds else 0, n or 0)
    if "transport" in kinds:
        d, i = slots.index("direct"), slots.index("indirect")
        rows.append([d if k <= 1 else i for k in range(top + 1)])
    if n is not None:
        base = slots.index("bounce0")
        rows.append([base + min(k, n) for k in range(top + 1)])
    lay_depth = np.array(rows, dtype=np.int64).reshape(len(rows), top + 1)
    lay_obj = np.zeros(0, dtype=np.int64)
    lay_light = np.zeros(0, dtype=np.int64)
    if "light_groups" in kinds:
        slot_of = {g: slots.index(f"light.{g}") for g in groups}
        lay_obj = np.array([slot_of.get(o.group, -1) for o in scene.objects], dtype=np.int64)
        table = []
        for typ, prim, _data, _power, src in light_rows(scene, arrays, strategy):
            if typ == LIGHT_ENVIRONMENT:
                table.append(slot_of["environment"])
            elif src < 0:
                table.append(int(lay_obj[arrays.prim_object[prim]]))
            else:
                table.append(slot_of[scene.lights[src].group])
        # then one entry per distant disc of LightArrays.cones (escaping rays that reach one)
        from .geometry.compile import cone_sources
        table += [slot_of[scene.lights[src].group] for src in cone_sources(scene)]
        lay_light = np.array(table, dtype=np.int64)
        if "environment" in slot_of:
            misc[LAY_ENV] = slot_of["environment"]
    return LayerPlan(tuple(requests), slots, kinds, aux_base, lay_depth, lay_obj, lay_light, misc)


def centre_rays(scene, x0, y0, x1, y1):
    """World rays through the pixel centres of a window (the lens centre for a
    thin lens), numpy twin of integrator.path.camera_ray."""
    from .geometry.compile import camera_array
    cam = camera_array(scene)
    w, h = cam[17], cam[18]
    yy, xx = np.mgrid[y0:y1, x0:x1]
    sx = (2.0 * (xx + 0.5) / w - 1.0).ravel()
    sy = (1.0 - 2.0 * (yy + 0.5) / h).ravel()
    aspect = w / h
    n = sx.size
    if cam[12] == 1.0:
        half = 0.5 * cam[14]
        o = np.stack([sx * half * aspect, sy * half, np.zeros(n)], axis=1)
        d = np.tile([0.0, 0.0, -1.0], (n, 1))
    else:
        t = cam[13]
        o = np.zeros((n, 3))
        d = np.stack([sx * t * aspect, sy * t, -np.ones(n)], axis=1)
    m = cam[:12].reshape(3, 4)
    wo = o @ m[:, :3].T + m[:, 3]
    wd = d @ m[:, :3].T
    wd /= np.linalg.norm(wd, axis=1, keepdims=True)
    return wo, wd


def id_images(scene, arrays, cam_window) -> dict:
    """object_id / material_id of the surface seen through each pixel centre
    (float32, -1 = nothing) and their names for the metadata."""
    from .query import trace
    x0, y0, x1, y1 = cam_window
    o, d = centre_rays(scene, x0, y0, x1, y1)
    hits = trace(scene, o, d, arrays=arrays)
    obj = hits.object.reshape(y1 - y0, x1 - x0).astype(np.int64)
    names = sorted(scene.materials)
    index = {n: i for i, n in enumerate(names)}
    mat_of = np.array([index.get(o.material, -1) if o.material is not None else -1
                       for o in scene.objects] + [-1], dtype=np.int64)
    mat = np.where(obj >= 0, mat_of[obj], -1)
    return {"object_id": obj.astype(np.float32), "material_id": mat.astype(np.float32),
            "names": {"object_id": [f"objects[{i}]" for i in range(len(scene.objects))],
                      "material_id": names}}
