"""Validated, immutable scene objects.

`refrender.scene.load.load_scene` turns a JSON document into these objects;
everything downstream (`refrender.geometry.compile`) reads only them.  All
vectors are float64 numpy arrays; all shapes are already in world space.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np


@dataclass(frozen=True)
class Camera:
    projection: str                 # "perspective" | "orthographic"
    camera_to_world: np.ndarray     # (4, 4); the camera looks down -Z, +Y up, +X right
    fov_y: float = 40.0             # degrees, full vertical field of view
    view_height: float = 1.0        # orthographic: height of the view in scene units
    focal_length: float | None = None   # mm: given, or implied by fov_y and sensor_height
    sensor_height: float = 24.0     # mm
    f_number: float | None = None   # lens: None = pinhole
    focus_distance: float = 1.0     # lens: distance of the plane in focus, scene units

    @property
    def lens_radius(self) -> float:
        """Radius of the thin lens's aperture in scene units (metres); 0 for a pinhole.

        Aperture diameter = focal length / f-number, the focal length in mm
        converted to metres (scene units are metres by convention)."""
        if self.f_number is None or self.projection != "perspective":
            return 0.0
        return 0.5 * (self.focal_length * 1e-3) / self.f_number


@dataclass(frozen=True)
class Film:
    width: int
    height: int
    crop: tuple[int, int, int, int] | None = None   # [x0, y0, x1, y1), pixels
    filter: str = "box"             # pixel filter (refrender.sampling.filters.FILTERS)
    filter_params: dict = field(default_factory=lambda: {"radius": 0.5})

    @property
    def window(self) -> tuple[int, int, int, int]:
        """The rendered pixel window (x0, y0, x1, y1), half-open."""
        return self.crop if self.crop is not None else (0, 0, self.width, self.height)


@dataclass(frozen=True)
class Material:
    type: str                       # "lambertian" (core); extensions: see refrender.materials
    params: dict[str, Any] = field(default_factory=dict)   # see scene._build._MATERIALS


@dataclass(frozen=True)
class Sphere:
    center: np.ndarray
    radius: float


@dataclass(frozen=True)
class Rectangle:
    origin: np.ndarray              # a corner
    edge1: np.ndarray
    edge2: np.ndarray               # perpendicular to edge1; front normal = normalize(edge1 x edge2)


@dataclass(frozen=True)
class Disk:
    center: np.ndarray
    normal: np.ndarray              # unit, front side
    radius: float


@dataclass(frozen=True)
class TriangleMesh:
    positions: np.ndarray           # (n, 3) float64, world space (transform applied)
    indices: np.ndarray             # (m, 3) int64
    source: str = "triangles"       # "triangles" or the mesh file path
    uvs: np.ndarray | None = None   # (n, 2) float64 texture coordinates per vertex, if any


Shape = Sphere | Rectangle | Disk | TriangleMesh


@dataclass(frozen=True)
class Object:
    shape: Shape
    material: str | None            # key into Scene.materials; None = black
    emission: np.ndarray            # (3,) radiance W m^-2 sr^-1
    emits_both_sides: bool = False
    group: str = "default"          # light group of the emission


@dataclass(frozen=True)
class PointLight:
    position: np.ndarray
    intensity: np.ndarray           # (3,) W sr^-1
    group: str = "default"


@dataclass(frozen=True)
class DirectionalLight:
    direction: np.ndarray           # unit, the way the light travels
    irradiance: np.ndarray          # (3,) W m^-2 on a surface facing the light
    group: str = "default"
    angular_diameter: float = 0.0   # degrees; > 0: a distant disc of radiance E / (pi sin^2(angle / 2))


@dataclass(frozen=True, eq=False)
class EnvironmentLight:
    radiance: np.ndarray            # (3,) uniform radiance from every direction (zero with an image)
    image: np.ndarray | None = None     # extension: (h, w, 3) float64 lat-long radiance (before scale)
    scale: np.ndarray | None = None     # (3,) factor on the image
    rotate_degrees: float = 0.0         # about +Y, right-handed (see sampling/envmap.py)
    image_path: str | None = None       # resolved file of the image


@dataclass(frozen=True)
class SpotLight:
    """A point light with the smooth cone falloff and the distance window of the
    glTF 2.0 extension KHR_lights_punctual (see refrender.scene.gltf._punctual).

    ``cone`` False: no angular falloff (a point light with a ``range``)."""
    position: np.ndarray
    direction: np.ndarray           # unit spot axis, the way the light travels
    intensity: np.ndarray           # (3,) W sr^-1 inside the inner cone
    cos_inner: float
    cos_outer: float
    cone: bool = True
    range: float = float("inf")     # no effect at distances >= range (inf: no window)
    group: str = "default"          # light group (for light-group layers)


Light = PointLight | DirectionalLight | EnvironmentLight | SpotLight


@dataclass(frozen=True)
class RenderSettings:
    spp: int = 64
    seed: int = 0
    max_bounces: int | None = None
    rr_start: int = 3
    strategy: str = "mis"           # "mis" | "nee" | "bsdf"
    light_sampling: str = "solid_angle"   # "solid_angle" | "area"
    color_space: str = "linear_rec709"    # working space (refrender.color.SPACES)
    layers: tuple = ()                    # layer requests (refrender.layers)


@dataclass(frozen=True)
class Scene:
    camera: Camera
    film: Film
    materials: dict[str, Material]
    objects: list[Object]
    lights: list[Light]
    render: RenderSettings
    sha256: str                     # hash of the canonical document and every file it references
    source_path: Path | None = None
    document: dict | None = None    # the validated JSON document (for metadata)
