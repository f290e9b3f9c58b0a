"""Turning a schema-valid scene document into the dataclasses of :mod:`.model`.

The JSON Schema has already checked types, required keys, ranges and unknown
keys; the checks here are the ones a schema cannot express (geometry,
cross-references, products of fields).
"""
from __future__ import annotations

import json

import numpy as np

from ._shapes import FileLog, affine_matrix, build_shape
from ._util import scene_error, show, unit, vec3
from .model import (
    Camera, DirectionalLight, EnvironmentLight, Film, Light, Material, Object, PointLight,
    RenderSettings,
)

#: Largest number of pixels of a film (width * height).
MAX_PIXELS = 2 ** 28
#: |sin| of the angle between camera.up and the view direction below which they are parallel.
PARALLEL_TOLERANCE = 1e-6
#: Largest deviation of R^T R from the identity accepted for camera.to_world.
ORTHONORMAL_TOLERANCE = 1e-4


# ----------------------------------------------------------------------------- camera

def _frame_matrix(right: np.ndarray, up: np.ndarray, back: np.ndarray, origin: np.ndarray) -> np.ndarray:
    """(4, 4) camera-to-world matrix with columns right, up, back (+Z), origin."""
    m = np.eye(4)
    m[:3, 0], m[:3, 1], m[:3, 2], m[:3, 3] = right, up, back, origin
    return m + 0.0  # turns -0.0 into 0.0, so equal frames print and hash alike


def _look_at_matrix(spec: dict) -> np.ndarray:
    """Camera-to-world matrix of position / look_at / up (up re-orthogonalised)."""
    position, target = vec3(spec["position"]), vec3(spec["look_at"])
    up = unit(spec.get("up", [0.0, 1.0, 0.0]), ("camera", "up"))
    forward = target - position
    distance = float(np.linalg.norm(forward))
    if distance == 0.0:
        raise scene_error(("camera", "look_at"), "must differ from camera.position")
    if not np.isfinite(distance):
        raise scene_error(("camera", "look_at"), "too far from camera.position (overflow)")
    forward /= distance
    right = np.cross(forward, up)
    sine = float(np.linalg.norm(right))
    if sine <= PARALLEL_TOLERANCE:
        raise scene_error(("camera", "up"), f"{show(spec.get('up', [0, 1, 0]))} is parallel to the view "
                          "direction (look_at - position)")
    right /= sine
    return _frame_matrix(right, np.cross(right, forward), -forward, position)


def _given_to_world(rows: list) -> np.ndarray:
    """Validate camera.to_world (a rigid motion) and re-orthonormalise it.

    Gram-Schmidt keeps the view axis (column 2) and then the right axis
    (column 0); the up axis is recomputed as Z x X.
    """
    path = ("camera", "to_world")
    m = affine_matrix(rows, path)
    r = m[:3, :3]
    if not np.allclose(r.T @ r, np.eye(3), rtol=0.0, atol=ORTHONORMAL_TOLERANCE):
        raise scene_error(path, "the 3x3 part must be a rotation (columns of unit length, perpendicular); "
                          "scale or shear is not allowed")
    if np.linalg.det(r) < 0.0:
        raise scene_error(path, "the 3x3 part must have determinant +1 (it mirrors the image)")
    back = r[:, 2] / np.linalg.norm(r[:, 2])
    right = r[:, 0] - (r[:, 0] @ back) * back
    right /= np.linalg.norm(right)
    return _frame_matrix(right, np.cross(back, right), back, m[:3, 3])


def build_camera(spec: dict) -> Camera:
    """The :class:`Camera` of a schema-valid ``camera`` entry."""
    to_world = _given_to_world(spec["to_world"]) if "to_world" in spec else _look_at_matrix(spec)
    return Camera(
        projection=spec.get("projection", "perspective"),
        to_world=to_world,
        fov_y=float(spec.get("fov_y", 40.0)),
        view_height=float(spec.get("view_height", 1.0)),
        aperture_radius=float(spec.get("aperture_radius", 0.0)),
        focus_distance=float(spec.get("focus_distance", 1.0)),
    )


# ----------------------------------------------------------------------------- film

def _check_crop(crop: list, width: int, height: int) -> tuple[int, int, int, int]:
    x0, y0, x1, y1 = (int(v) for v in crop)
    path = ("film", "crop")
    if x1 > width:
        raise scene_error(path, f"x1 = {x1} exceeds film.width = {width}")
    if y1 > height:
        raise scene_error(path, f"y1 = {y1} exceeds film.height = {height}")
    if x0 >= x1 or y0 >= y1:
        raise scene_error(path, f"must have x0 < x1 and y0 < y1, got {show(crop)}")
    return x0, y0, x1, y1


def build_film(spec: dict) -> Film:
    """The :class:`Film` of a schema-valid ``film`` entry (sizes in pixels)."""
    width, height = int(spec["width"]), int(spec["height"])
    if width * height > MAX_PIXELS:
        raise scene_error(("film",), f"too large: {width} x {height} = {width * height} pixels, "
                          f"at most {MAX_PIXELS} (2**28)")
    crop = _check_crop(spec["crop"], width, height) if "crop" in spec else None
    return Film(width=width, height=height, crop=crop)


# ----------------------------------------------------------------------------- materials, objects

def _diffuse(spec: dict) -> Material:
    return Material(type="diffuse", params={"albedo": vec3(spec["albedo"])})


_MATERIALS = {"diffuse": _diffuse}


def build_materials(spec: dict) -> dict[str, Material]:
    """Name -> :class:`Material` of the ``materials`` map."""
    return {name: _MATERIALS[entry["type"]](entry) for name, entry in spec.items()}


def _material_name(spec: dict, path: tuple, materials: dict) -> str | None:
    name = spec.get("material")
    if name is None or name in materials:
        return name
    known = ", ".join(json.dumps(n) for n in materials) if materials else "none are defined"
    raise scene_error(path + ("material",), f"unknown material {json.dumps(name)} (known: {known})")


def build_objects(specs: list, materials: dict, files: FileLog) -> list[Object]:
    """The :class:`Object` list of ``objects``; mesh files are read through *files*."""
    objects = []
    for i, spec in enumerate(specs):
        path = ("objects", i)
        objects.append(Object(
            shape=build_shape(spec, path, files),
            material=_material_name(spec, path, materials),
            emission=vec3(spec.get("emission", [0.0, 0.0, 0.0])),
            two_sided=bool(spec.get("two_sided", False)),
        ))
    return objects


# ----------------------------------------------------------------------------- lights, render

def _light(spec: dict, path: tuple) -> Light:
    kind = spec["type"]
    if kind == "point":
        return PointLight(position=vec3(spec["position"]), intensity=vec3(spec["intensity"]))
    if kind == "directional":
        return DirectionalLight(direction=unit(spec["direction"], path + ("direction",)),
                                irradiance=vec3(spec["irradiance"]))
    return EnvironmentLight(radiance=vec3(spec["radiance"]))


def build_lights(specs: list) -> list[Light]:
    """The light list; at most one environment light."""
    lights: list[Light] = []
    first_environment = None
    for i, spec in enumerate(specs):
        if spec["type"] == "environment":
            if first_environment is not None:
                raise scene_error(("lights", i), f"at most one environment light "
                                  f"(lights[{first_environment}] is one already)")
            first_environment = i
        lights.append(_light(spec, ("lights", i)))
    return lights


def build_render(spec: dict) -> RenderSettings:
    """The :class:`RenderSettings` of ``render`` (defaults for missing keys)."""
    defaults = RenderSettings()
    max_bounces = spec.get("max_bounces", defaults.max_bounces)
    return RenderSettings(
        spp=int(spec.get("spp", defaults.spp)),
        seed=int(spec.get("seed", defaults.seed)),
        max_bounces=None if max_bounces is None else int(max_bounces),
        rr_start=int(spec.get("rr_start", defaults.rr_start)),
        strategy=spec.get("strategy", defaults.strategy),
        light_sampling=spec.get("light_sampling", defaults.light_sampling),
    )
