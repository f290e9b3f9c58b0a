"""Analytic check cases: scenes whose pixel value is known in closed form.

Each :class:`Case` is a small scene (a dict in the scene format), the exact
expected radiance of its pixels, and the published source of that value.  The
test suite renders them; ``scenes/analytic/`` holds one scene file per kind
of case, written from these builders (``python -m refrender.validation``).

The measured value of a case is the mean over its pixels of the BT.709
luminance; every case is grey, so the luminance equals each channel.  Its
standard error combines the per-pixel variances of the mean (pixels are
independent).

Receivers are small Lambertian disks of albedo RHO seen by an orthographic
camera whose footprint (VIEW wide) is so small that the irradiance is constant
over it to far below the statistical error.  Emitters are black (no material),
so nothing is reflected between emitter and receiver and the radiance leaving
the receiver is exactly L_o = rho * L * F for a configuration factor F
(Siegel & Howell; see the sources named on each case).
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

RHO = 0.5
L_EMIT = 2.0
VIEW = 1e-4
FILM = 4

HOWELL = "Howell, A Catalog of Radiation Heat Transfer Configuration Factors; Siegel & Howell"


@dataclass
class Case:
    name: str
    expected: float
    source: str
    scene: dict
    render: dict = field(default_factory=dict)


def _receiver_camera(center, normal):
    """Orthographic camera looking straight at the receiver point from 1e-3 away."""
    c = np.asarray(center, float)
    n = np.asarray(normal, float)
    n = n / np.linalg.norm(n)
    up = [0.0, 1.0, 0.0] if abs(n[1]) < 0.9 else [1.0, 0.0, 0.0]
    return {"projection": "orthographic", "position": list(c + 1e-3 * n), "look_at": list(c),
            "up": up, "view_height": VIEW}


def _scene(camera, objects, lights=(), spp=1024, **render):
    doc = {"version": 1, "camera": camera, "film": {"width": FILM, "height": FILM},
           "materials": {"receiver": {"type": "diffuse", "albedo": [RHO] * 3}},
           "objects": list(objects), "render": {"spp": spp, "seed": 1, **render}}
    if lights:
        doc["lights"] = list(lights)
    return doc


def _receiver(center=(0.0, 0.0, 0.0), normal=(0.0, 0.0, 1.0), radius=0.05):
    return {"shape": "disk", "center": list(center), "normal": list(normal), "radius": radius,
            "material": "receiver"}


def _emission(extra):
    d = {"emission": [L_EMIT] * 3}
    d.update(extra)
    return d


# --- configuration-factor cases ------------------------------------------------

def disk_case(R=1.0, h=1.0, a=0.0, spp=1024) -> Case:
    """Element at the origin (normal +z) under a parallel disk of radius R at height h,
    its axis displaced by a."""
    if a == 0.0:
        F = R * R / (R * R + h * h)
    else:
        F = 0.5 * (1.0 - (a * a + h * h - R * R) / math.sqrt((a * a + h * h + R * R) ** 2 - 4 * a * a * R * R))
    disk = _emission({"shape": "disk", "center": [a, 0.0, h], "normal": [0.0, 0.0, -1.0], "radius": R})
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver(), disk], spp=spp)
    return Case(f"disk R={R} h={h} a={a}", RHO * L_EMIT * F,
                HOWELL + " (plane element to parallel disk); validation-references 1a", scene)


def _corner_factor(X, Y):
    return (X / math.sqrt(1 + X * X) * math.atan(Y / math.sqrt(1 + X * X))
            + Y / math.sqrt(1 + Y * Y) * math.atan(X / math.sqrt(1 + Y * Y))) / (2 * math.pi)


def rectangle_case(x1=0.0, x2=1.0, y1=0.0, y2=1.0, c=1.0, spp=1024) -> Case:
    """Element at the origin under the rectangle [x1,x2] x [y1,y2] in the plane z = c,
    by the corner formula and signed superposition."""
    F = (_corner_factor(x2 / c, y2 / c) - _corner_factor(x1 / c, y2 / c)
         - _corner_factor(x2 / c, y1 / c) + _corner_factor(x1 / c, y1 / c))
    F = abs(F)
    # edge1 along y, edge2 along x: normal e1 x e2 = -z, facing the element
    rect = _emission({"shape": "rectangle", "origin": [x1, y1, c], "edge1": [0.0, y2 - y1, 0.0],
                      "edge2": [x2 - x1, 0.0, 0.0]})
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver(), rect], spp=spp)
    return Case(f"rectangle [{x1},{x2}]x[{y1},{y2}] c={c}", RHO * L_EMIT * F,
                HOWELL + " (plane element to parallel rectangle, corner formula, superposition); "
                "validation-references 1b", scene)


def sphere_case(r=1.0, d=2.0, theta_deg=30.0, spp=1024) -> Case:
    """Element at the origin (normal +z), sphere of radius r whose centre is at
    distance d and angle theta from the normal."""
    th = math.radians(theta_deg)
    H = d / r
    th_h = math.asin(r / d)
    if th <= math.pi / 2 - th_h:
        F = (r / d) ** 2 * math.cos(th)
    else:
        x = math.sqrt(H * H - 1)
        F = (0.5 - math.asin(x / (H * math.sin(th))) / math.pi
             + (math.cos(th) * math.acos(-x / math.tan(th)) - x * math.sqrt(1 - H * H * math.cos(th) ** 2))
             / (math.pi * H * H))
    center = [d * math.sin(th), 0.0, d * math.cos(th)]
    sphere = _emission({"shape": "sphere", "center": center, "radius": r})
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver(radius=0.02), sphere], spp=spp)
    return Case(f"sphere r={r} d={d} theta={theta_deg}", RHO * L_EMIT * F,
                HOWELL + " (plane element to sphere, tilted); validation-references 1c", scene)


# --- delta lights ----------------------------------------------------------------

def point_case(intensity=10.0, d=2.0, theta_deg=60.0, spp=64) -> Case:
    """Point light at distance d and angle theta from the receiver normal: E = I cos / d^2."""
    th = math.radians(theta_deg)
    light = {"type": "point", "position": [d * math.sin(th), 0.0, d * math.cos(th)],
             "intensity": [intensity] * 3}
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver()], [light], spp=spp)
    E = intensity * math.cos(th) / d ** 2
    return Case(f"point I={intensity} d={d} theta={theta_deg}", RHO * E / math.pi,
                "inverse-square and cosine laws (Lambert 1760); validation-references 7", scene)


def directional_case(irradiance=3.0, theta_deg=45.0, spp=64) -> Case:
    """Directional light at angle theta from the normal: E = E_perp cos theta."""
    th = math.radians(theta_deg)
    light = {"type": "directional", "direction": [-math.sin(th), 0.0, -math.cos(th)],
             "irradiance": [irradiance] * 3}
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver()], [light], spp=spp)
    return Case(f"directional E={irradiance} theta={theta_deg}",
                RHO * irradiance * math.cos(th) / math.pi,
                "Lambert's cosine law (common practice)", scene)


# --- furnace and enclosure --------------------------------------------------------

def furnace_case(albedo=0.6, radiance=1.0, spp=1024) -> Case:
    """Convex diffuse sphere in a uniform environment: it shows albedo * radiance."""
    scene = _scene({"projection": "orthographic", "position": [0.0, 0.0, 3.0],
                    "look_at": [0.0, 0.0, 0.0], "view_height": 0.2},
                   [{"shape": "sphere", "center": [0.0, 0.0, 0.0], "radius": 1.0,
                     "material": "receiver"}],
                   [{"type": "environment", "radiance": [radiance] * 3}], spp=spp)
    scene["materials"]["receiver"]["albedo"] = [albedo] * 3
    return Case(f"furnace albedo={albedo}", albedo * radiance,
                "white furnace: convex Lambertian object in a uniform environment "
                "(common practice); validation-references 3a", scene)


def enclosure_case(albedo=0.8, emission=0.5, max_bounces=None, spp=2048) -> Case:
    """Camera inside a closed, uniformly emitting diffuse sphere: L = Le / (1 - rho),
    or Le (1 - rho^(N+1)) / (1 - rho) when at most N bounces are followed."""
    if max_bounces is None:
        L = emission / (1 - albedo)
    else:
        L = emission * (1 - albedo ** (max_bounces + 1)) / (1 - albedo)
    scene = _scene({"projection": "perspective", "position": [0.0, 0.0, 0.0],
                    "look_at": [0.0, 0.0, -1.0], "fov_y": 60.0},
                   [{"shape": "sphere", "center": [0.0, 0.0, 0.0], "radius": 1.0,
                     "material": "receiver", "emission": [emission] * 3, "two_sided": True}],
                   spp=spp, max_bounces=max_bounces)
    scene["materials"]["receiver"]["albedo"] = [albedo] * 3
    return Case(f"enclosure albedo={albedo} max_bounces={max_bounces}", L,
                "closed diffuse enclosure, radiosity equation (Goral et al. 1984); "
                "validation-references 2a", scene)


def measure(case: Case, **overrides):
    """Render a case; returns (value, standard error, Result)."""
    from . import load_scene, render
    from .geometry.compile import LUMINANCE
    res = render(load_scene(case.scene), **{**case.render, **overrides})
    y = res.mean @ LUMINANCE
    # channels come from the same paths: combine their errors as fully correlated
    sy = np.sqrt(res.variance) @ LUMINANCE
    n = y.size
    return float(y.mean()), float(math.sqrt(np.sum(sy ** 2)) / n), res


#: one representative scene file per kind of case in scenes/analytic/
SCENE_FILES = {
    "disk_coaxial": disk_case,
    "rectangle_corner": rectangle_case,
    "sphere_tilted": sphere_case,
    "point_light": point_case,
    "directional_light": directional_case,
    "furnace_sphere": furnace_case,
    "closed_enclosure": enclosure_case,
}


def write_scene_files(folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for name, builder in SCENE_FILES.items():
        case = builder()
        (folder / f"{name}.json").write_text(json.dumps(case.scene, indent=1) + "\n")


if __name__ == "__main__":
    write_scene_files(Path(__file__).resolve().parent.parent / "scenes" / "analytic")
