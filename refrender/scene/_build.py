"""Turning a schema-valid scene document into the dataclasses of :mod:`.model`.

The JSON Schema has already checked types, required keys, ranges and unknown
keys; the checks here are the ones a schema cannot express (geometry,
cross-references, products of fields).
"""
from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from ..limits import SCENE_NUMBER_MAX
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
#: Largest deviation of R^T R from the identity accepted for camera.camera_to_world.
ORTHONORMAL_TOLERANCE = 1e-4


def _within_limit(values, path: tuple, what: str) -> None:
    """A product of fields must stay within SCENE_NUMBER_MAX (refrender/limits.py)."""
    if not np.all(np.abs(np.asarray(values, dtype=np.float64)) <= SCENE_NUMBER_MAX):
        raise scene_error(path, f"{what} exceeds {SCENE_NUMBER_MAX:g} (refrender's limit for radiometric "
                          "values, see README 'Limits')")


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


def _given_camera_to_world(rows: list) -> np.ndarray:
    """Validate camera.camera_to_world (a rigid motion) and re-orthonormalise it.

    Gram-Schmidt keeps the view axis (column 2) and then the right axis
    (column 0); the up axis is recomputed as Z x X.
    """
    path = ("camera", "camera_to_world")
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


#: Sensor height (mm) when a perspective camera gives none: the 24 mm height of
#: the 36 x 24 mm "full frame" format (common practice).
DEFAULT_SENSOR_HEIGHT = 24.0


def _field_of_view(spec: dict) -> tuple[float, float, float]:
    """(fov_y degrees, focal length mm, sensor height mm) of a perspective camera.

    fov_y = 2 atan(sensor_height / (2 focal_length)): the pinhole (or thin
    lens focused at infinity) relation between field of view and focal length.
    """
    sensor = float(spec.get("sensor_height", DEFAULT_SENSOR_HEIGHT))
    if "focal_length" in spec:
        if "fov_y" in spec:
            raise scene_error(("camera", "focal_length"), "give fov_y or focal_length (with sensor_height), "
                              "not both")
        focal = float(spec["focal_length"])
        fov = math.degrees(2.0 * math.atan(sensor / (2.0 * focal)))
        if not 0.0 < fov < 180.0:
            raise scene_error(("camera", "focal_length"), f"gives a field of view of {fov:g} degrees with "
                              f"sensor_height {sensor:g} mm; it must lie in (0, 180)")
        return fov, focal, sensor
    fov = float(spec.get("fov_y", 40.0))
    return fov, sensor / (2.0 * math.tan(math.radians(fov) / 2.0)), sensor


def build_camera(spec: dict) -> Camera:
    """The :class:`Camera` of a schema-valid ``camera`` entry."""
    if "camera_to_world" in spec:
        camera_to_world = _given_camera_to_world(spec["camera_to_world"])
    else:
        camera_to_world = _look_at_matrix(spec)
    projection = spec.get("projection", "perspective")
    if projection == "orthographic":
        return Camera(projection=projection, camera_to_world=camera_to_world,
                      view_height=float(spec.get("view_height", 1.0)))
    fov, focal, sensor = _field_of_view(spec)
    lens = spec.get("lens")
    camera = Camera(projection=projection, camera_to_world=camera_to_world, fov_y=fov, focal_length=focal,
                    sensor_height=sensor,
                    f_number=None if lens is None else float(lens["f_number"]),
                    focus_distance=1.0 if lens is None else float(lens["focus_distance"]))
    if lens is not None and not camera.lens_radius <= SCENE_NUMBER_MAX:
        raise scene_error(("camera", "lens", "f_number"), f"gives an aperture radius beyond "
                          f"{SCENE_NUMBER_MAX:g} (refrender's limit for lengths)")
    return camera


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
    from ..sampling.filters import resolve
    name, params = resolve(spec.get("filter", "box"))
    return Film(width=width, height=height, crop=crop, filter=name, filter_params=params)


# ----------------------------------------------------------------------------- materials, objects

def _colour(spec: dict, key: str, path: tuple, files: FileLog, default=None):
    """(factor (3,), texture or None) of a colour parameter: a 3-vector or a texture object."""
    from ..materials.texture_load import load_texture
    value = spec.get(key, default)
    if isinstance(value, dict):
        return (vec3(value.get("factor", [1.0, 1.0, 1.0])),
                load_texture(value, path + (key,), files, colour=True))
    return vec3(value), None


def _scalar(spec: dict, key: str, path: tuple, files: FileLog, default=None):
    """(factor, texture or None) of a scalar parameter: a number or a texture object."""
    from ..materials.texture_load import load_texture
    value = spec.get(key, default)
    if isinstance(value, dict):
        return float(value.get("factor", 1.0)), load_texture(value, path + (key,), files, colour=False)
    return float(value), None


def _ggx_alpha(spec: dict, path: tuple, files: FileLog) -> dict:
    """GGX alpha: a number (isotropic), [along_tangent, along_bitangent], or a scalar texture.

    Absent, 0 or [0, 0] is a perfectly smooth interface (``ggx_alpha`` None:
    the delta code paths); a texture always takes the microfacet path."""
    value = spec.get("ggx_alpha", 0.0)
    if isinstance(value, list):
        alpha = (float(value[0]), float(value[1]))
        return {"ggx_alpha": None if alpha == (0.0, 0.0) else alpha, "ggx_alpha_texture": None}
    factor, tex = _scalar(spec, "ggx_alpha", path, files, 0.0)
    if tex is None and factor == 0.0:
        return {"ggx_alpha": None, "ggx_alpha_texture": None}
    return {"ggx_alpha": (factor, factor), "ggx_alpha_texture": tex}


def _lambertian(spec: dict, path: tuple, files: FileLog) -> Material:
    albedo, tex = _colour(spec, "albedo", path, files)
    return Material(type="lambertian", params={"albedo": albedo, "albedo_texture": tex})


def _mirror(spec: dict, path: tuple, files: FileLog) -> Material:
    return Material(type="mirror", params={"reflectance": vec3(spec.get("reflectance", [1.0, 1.0, 1.0]))})


def _glass(spec: dict, path: tuple, files: FileLog) -> Material:
    relative_ior = float(spec.get("ior", 1.5)) / float(spec.get("exterior_ior", 1.0))
    return Material(type="glass", params={"relative_ior": relative_ior, **_ggx_alpha(spec, path, files)})


def _metal(spec: dict, path: tuple, files: FileLog) -> Material:
    from ..materials.presets import metal
    given = [k for k in ("preset", "n", "f0") if k in spec]
    if len(given) != 1:
        raise scene_error(path, "give exactly one of \"preset\", \"n\" with \"k\" (the complex "
                          f"refractive index n + ik), or \"f0\"; got {', '.join(given) or 'none'}")
    if "n" in spec and "k" not in spec:
        raise scene_error(path + ("k",), "required with \"n\" (the extinction coefficient)")
    if "k" in spec and "n" not in spec:
        raise scene_error(path + ("n",), "required with \"k\" (the real part of the refractive index)")
    exterior = float(spec.get("exterior_ior", 1.0))
    params = {"f0": None}
    if "preset" in spec:
        n, k = metal(spec["preset"])
        params.update(n=n / exterior, k=k / exterior)
    elif "n" in spec:
        params.update(n=vec3(spec["n"]) / exterior, k=vec3(spec["k"]) / exterior)
    else:
        params.update(f0=vec3(spec["f0"]), n=np.zeros(3), k=np.zeros(3))
    params.update(_ggx_alpha(spec, path, files))
    return Material(type="metal", params=params)


def _metallic_roughness(spec: dict, path: tuple, files: FileLog) -> Material:
    base, base_tex = _colour(spec, "base_color", path, files, [1.0, 1.0, 1.0])
    rough, rough_tex = _scalar(spec, "roughness", path, files, 1.0)
    emissive = vec3(spec.get("emissive", [0.0, 0.0, 0.0])) * float(spec.get("emissive_strength", 1.0))
    _within_limit(emissive, path + ("emissive_strength",), "emissive * emissive_strength")
    return Material(type="metallic_roughness", params={
        "base_color": base, "base_color_texture": base_tex, "metallic": float(spec.get("metallic", 1.0)),
        "roughness": rough, "roughness_texture": rough_tex, "emissive": emissive})


_MATERIALS = {
    "lambertian": _lambertian,
    "mirror": _mirror,
    "glass": _glass,
    "metal": _metal,
    "metallic_roughness": _metallic_roughness,
}


def build_materials(spec: dict, files: FileLog | None = None) -> dict[str, Material]:
    """Name -> :class:`Material` of the ``materials`` map; texture files are read through *files*."""
    files = files if files is not None else FileLog(Path.cwd())
    return {name: _MATERIALS[entry["type"]](entry, ("materials", name), files)
            for name, entry in spec.items()}


def _material_name(spec: dict, path: tuple, materials: dict) -> str | None:
    name = spec.get("material")
    if name is None or name in materials:
        return name
    known = ", ".join(json.dumps(n) for n in materials) if materials else "none are defined"
    raise scene_error(path + ("material",), f"unknown material {json.dumps(name)} (known: {known})")


def build_objects(specs: list, materials: dict, files: FileLog, imported: dict | None = None) -> list[Object]:
    """The :class:`Object` list of ``objects``; mesh files are read through *files*.

    ``imported`` maps the index of a ``gltf`` entry to its import
    (:func:`refrender.scene.gltf.expand_gltf_object`), whose objects take its place."""
    objects = []
    for i, spec in enumerate(specs):
        path = ("objects", i)
        if imported and i in imported:
            objects.extend(imported[i].objects)
            continue
        objects.append(Object(
            shape=build_shape(spec, path, files),
            material=_material_name(spec, path, materials),
            emission=vec3(spec.get("emission", [0.0, 0.0, 0.0])),
            emits_both_sides=bool(spec.get("emits_both_sides", False)),
            group=str(spec.get("group", "default")),
        ))
    return objects


# ----------------------------------------------------------------------------- lights, render

def _light(spec: dict, path: tuple, files: FileLog | None = None) -> Light:
    kind = spec["type"]
    if kind == "point":
        return PointLight(position=vec3(spec["position"]), intensity=vec3(spec["intensity"]),
                          group=str(spec.get("group", "default")))
    if kind == "directional":
        return DirectionalLight(direction=unit(spec["direction"], path + ("direction",)),
                                irradiance=vec3(spec["irradiance"]),
                                angular_diameter=float(spec.get("angular_diameter", 0.0)),
                                group=str(spec.get("group", "default")))
    return _environment(spec, path, files)


def _environment(spec: dict, path: tuple, files: FileLog | None) -> EnvironmentLight:
    """Uniform environment, or a lat-long image read through *files* (hashed)."""
    has_r, has_i = "radiance" in spec, "image" in spec
    if has_r == has_i:
        raise scene_error(path, "give exactly one of radiance (uniform) and image (lat-long map)")
    if has_r:
        for key in ("scale", "rotate_degrees"):
            if key in spec:
                raise scene_error(path + (key,), "applies only to an image environment")
        return EnvironmentLight(radiance=vec3(spec["radiance"]))
    if files is None:
        raise scene_error(path + ("image",), "image environments need a scene folder")
    where = path + ("image",)
    resolved, _ = files.read(spec["image"], where)
    from ..errors import RefrenderError
    from ..io import read_image
    try:
        img = np.asarray(read_image(resolved), dtype=np.float64)
    except RefrenderError as exc:
        raise scene_error(where, str(exc)) from None
    if img.ndim != 3 or img.shape[2] not in (1, 3, 4) or img.shape[0] < 1 or img.shape[1] < 1:
        raise scene_error(where, f"expected an RGB or grey image, got shape {img.shape}: {resolved}")
    img = np.repeat(img, 3, axis=2) if img.shape[2] == 1 else img[:, :, :3]
    if not np.isfinite(img).all():
        raise scene_error(where, f"image has non-finite values: {resolved}")
    if (img < 0).any():
        raise scene_error(where, f"image has negative values (min {img.min():.3g}): {resolved}")
    scale = spec.get("scale", 1.0)
    scale = np.full(3, float(scale)) if isinstance(scale, (int, float)) else vec3(scale)
    if float(img.max()) > SCENE_NUMBER_MAX:
        raise scene_error(where, f"image values exceed {SCENE_NUMBER_MAX:g} (refrender's limit for "
                          f"radiance): {resolved}")
    with np.errstate(over="ignore"):
        _within_limit(float(img.max()) * scale, path + ("scale",), "the image's largest value * scale")
    return EnvironmentLight(radiance=np.zeros(3), image=np.ascontiguousarray(img), scale=scale,
                            rotate_degrees=float(spec.get("rotate_degrees", 0.0)),
                            image_path=str(resolved))


def build_lights(specs: list, files: FileLog | None = None) -> list[Light]:
    """The light list; at most one environment light (an image is read through *files*)."""
    lights: list[Light] = []
    first_environment = None
    for i, spec in enumerate(specs):
        if spec["type"] == "environment":
            if first_environment is not None:
                raise scene_error(("lights", i), f"at most one environment light "
                                  f"(lights[{first_environment}] is one already)")
            first_environment = i
        lights.append(_light(spec, ("lights", i), files))
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
        color_space=spec.get("color_space", defaults.color_space),
        layers=tuple(spec.get("layers", defaults.layers)),
    )
