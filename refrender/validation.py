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
           "materials": {"receiver": {"type": "lambertian", "albedo": [RHO] * 3}},
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
                HOWELL + " (plane element to parallel disk)", scene)


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
                HOWELL + " (plane element to parallel rectangle, corner formula, superposition)", scene)


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
                HOWELL + " (plane element to sphere, tilted)", scene)


# --- delta lights ----------------------------------------------------------------

def point_case(intensity=10.0, d=2.0, theta_deg=60.0, spp=64) -> Case:
    """Point light at distance d and angle theta from the receiver normal: E = I cos / d^2."""
    th = math.radians(theta_deg)
    light = {"type": "point", "position": [d * math.sin(th), 0.0, d * math.cos(th)],
             "intensity": [intensity] * 3}
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver()], [light], spp=spp)
    E = intensity * math.cos(th) / d ** 2
    return Case(f"point I={intensity} d={d} theta={theta_deg}", RHO * E / math.pi,
                "inverse-square and cosine laws (Lambert 1760, Photometria)", scene)


def directional_case(irradiance=3.0, theta_deg=45.0, spp=64) -> Case:
    """Directional light at angle theta from the normal: E = E_perp cos theta."""
    th = math.radians(theta_deg)
    light = {"type": "directional", "direction": [-math.sin(th), 0.0, -math.cos(th)],
             "irradiance": [irradiance] * 3}
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver()], [light], spp=spp)
    return Case(f"directional E={irradiance} theta={theta_deg}",
                RHO * irradiance * math.cos(th) / math.pi,
                "Lambert's cosine law (common practice)", scene)


def _sphere_factor(r, d, th):
    """Howell's element-to-sphere configuration factor (sphere of radius r, centre at
    distance d and angle th from the element's normal), also when cut by the horizon."""
    H = d / r
    th_h = math.asin(r / d)
    if th <= math.pi / 2 - th_h:
        return (r / d) ** 2 * math.cos(th)
    x = math.sqrt(H * H - 1)
    return (0.5 - math.asin(x / (H * math.sin(th))) / math.pi
            + (math.cos(th) * math.acos(-x / math.tan(th)) - x * math.sqrt(1 - H * H * math.cos(th) ** 2))
            / (math.pi * H * H))


def distant_disc_case(irradiance=3.0, diameter_deg=0.53, theta_deg=30.0, spp=256) -> Case:
    """Directional light of finite angular diameter (a distant disc of radiance
    L = E / (pi sin^2 alpha), alpha the half-angle) at angle theta from the normal.
    The disc's cone of directions is the one a sphere with r / d = sin alpha
    subtends, so F is Howell's element-to-sphere factor, also when the horizon cuts it."""
    th = math.radians(theta_deg)
    alpha = math.radians(diameter_deg) / 2
    L = irradiance / (math.pi * math.sin(alpha) ** 2)
    F = _sphere_factor(math.sin(alpha), 1.0, th)
    light = {"type": "directional", "direction": [-math.sin(th), 0.0, -math.cos(th)],
             "irradiance": [irradiance] * 3, "angular_diameter": diameter_deg}
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver()], [light], spp=spp)
    return Case(f"distant disc E={irradiance} diameter={diameter_deg} theta={theta_deg}", RHO * L * F,
                HOWELL + " (plane element to sphere, r/d = sin of the half-angle)", scene)


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
                "(common practice)", scene)


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
                     "material": "receiver", "emission": [emission] * 3, "emits_both_sides": True}],
                   spp=spp, max_bounces=max_bounces)
    scene["materials"]["receiver"]["albedo"] = [albedo] * 3
    return Case(f"enclosure albedo={albedo} max_bounces={max_bounces}", L,
                "closed diffuse enclosure, radiosity equation (Goral et al. 1984); "
                "closed-enclosure radiosity: Goral, Torrance, Greenberg & Battaile 1984; Siegel & Howell, Thermal Radiation Heat Transfer", scene)


def perpendicular_rectangle_case(a=1.0, b=1.0, c=1.0, spp=1024) -> Case:
    """Element at the origin (normal +z); the rectangle lies in the plane x = c,
    0 <= y <= a along the line where the planes meet, 0 <= z <= b upward."""
    X, Y = a / c, b / c
    F = (math.atan(X) - math.atan(X / math.sqrt(1 + Y * Y)) / math.sqrt(1 + Y * Y)) / (2 * math.pi)
    # edge1 x edge2 = (0,0,b) x (0,a,0) = (-ab, 0, 0): the front faces the element
    rect = _emission({"shape": "rectangle", "origin": [c, 0.0, 0.0], "edge1": [0.0, 0.0, b],
                      "edge2": [0.0, a, 0.0]})
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver(), rect], spp=spp)
    return Case(f"perpendicular rectangle a={a} b={b} c={c}", RHO * L_EMIT * F,
                "Howell's catalog entry B-8 at 90 degrees (Hamilton & Morgan 1952), closed form "
                "derived from Lambert's polygon formula; Howell's catalog entry B-8 (Hamilton & Morgan 1952), 90° case", scene)


def integrating_sphere_case(R=1.0, power=4 * math.pi, albedo=0.9, port=0.02, spp=1024) -> Case:
    """Isotropic point source of the given power at the centre of a diffuse sphere
    of radius R whose area fraction ``port`` is a black spherical cap.

    The cap is made by a black disk across its base circle: every segment from
    the interior (on this side of the base plane) to the cap crosses that disk,
    so the two are the same to the light.  The wall radiance outside the cap is
    L = rho E / pi with E = power / (A (1 - rho (1 - f))), A = 4 pi R^2.
    """
    A = 4 * math.pi * R * R
    E = power / (A * (1 - albedo * (1 - port)))
    cos_a = 1 - 2 * port                 # cap fraction f = (1 - cos alpha) / 2
    objects = [{"shape": "sphere", "center": [0.0, 0.0, 0.0], "radius": R, "material": "receiver"}]
    if port > 0:
        objects.append({"shape": "disk", "center": [0.0, R * cos_a, 0.0], "normal": [0.0, -1.0, 0.0],
                        "radius": R * math.sqrt(max(0.0, 1 - cos_a * cos_a))})
    cam = {"projection": "perspective", "position": [0.0, 0.0, 0.0], "look_at": [0.0, -1.0, 0.0],
           "up": [1.0, 0.0, 0.0], "fov_y": 20.0}
    light = {"type": "point", "position": [0.0, 0.0, 0.0], "intensity": [power / (4 * math.pi)] * 3}
    scene = _scene(cam, objects, [light], spp=spp)
    scene["materials"]["receiver"]["albedo"] = [albedo] * 3
    return Case(f"integrating sphere rho={albedo} port={port}", albedo * E / math.pi,
                "integrating sphere, point source at the centre (Goebel, Applied Optics 1967; "
                "derivation after Goebel, Generalized Integrating-Sphere Theory, Appl. Opt. 6, 1967)", scene)


def _grid_triangles(x1, x2, y1, y2, c, n):
    """The rectangle [x1,x2] x [y1,y2] in the plane z = c as 2 n^2 triangles facing -z."""
    xs, ys = np.linspace(x1, x2, n + 1), np.linspace(y1, y2, n + 1)
    pos = [[float(x), float(y), c] for y in ys for x in xs]
    idx = []
    for j in range(n):
        for i in range(n):
            a, b, d = j * (n + 1) + i, j * (n + 1) + i + 1, (j + 1) * (n + 1) + i
            e = d + 1
            idx += [[a, d, b], [b, d, e]]      # (d - a) x (b - a) points to -z
    return {"shape": "triangles", "positions": pos, "indices": idx}


def mesh_emitter_case(x1=0.0, x2=1.0, y1=0.0, y2=1.0, c=1.0, n=8, spp=1024) -> Case:
    """The parallel-rectangle case with the emitter given as a mesh of 2 n^2 triangles
    (each triangle its own light): same configuration factor."""
    ref = rectangle_case(x1, x2, y1, y2, c)
    mesh = _emission(_grid_triangles(x1, x2, y1, y2, c, n))
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), [_receiver(), mesh], spp=spp)
    return Case(f"mesh emitter {2 * n * n} triangles [{x1},{x2}]x[{y1},{y2}] c={c}", ref.expected,
                ref.source, scene)


def mixed_emitters_case(spp=1024) -> Case:
    """A mesh rectangle (128 triangles), an off-axis disk, a sphere and a point light
    that do not hide one another from the receiver: the sum of their closed forms."""
    rect = mesh_emitter_case(0.5, 1.5, -0.5, 0.5, 1.0)
    disk = disk_case(0.5, 1.0, 1.5)          # its centre is at x = +1.5: mirror it to -1.5
    sph = sphere_case(0.5, math.sqrt(4.5), 45.0)
    E_point = 10.0 * (2 / math.sqrt(8)) / 8   # I = 10 at (0, 2, 2): cos 45 deg, d^2 = 8
    objects = [_receiver(), rect.scene["objects"][1],
               _emission({"shape": "disk", "center": [-1.5, 0.0, 1.0], "normal": [0.0, 0.0, -1.0],
                          "radius": 0.5}),
               _emission({"shape": "sphere", "center": [0.0, -1.5, 1.5], "radius": 0.5})]
    light = {"type": "point", "position": [0.0, 2.0, 2.0], "intensity": [10.0] * 3}
    scene = _scene(_receiver_camera((0, 0, 0), (0, 0, 1)), objects, [light], spp=spp)
    expected = rect.expected + disk.expected + sph.expected + RHO * E_point / math.pi
    return Case("mixed emitters (131 lights)", expected,
                HOWELL + " (rectangle, off-axis disk, sphere; superposition) and the "
                "inverse-square law; " + HOWELL + " (disk, rectangle, sphere entries)", scene)


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
    "perpendicular_rectangle": perpendicular_rectangle_case,
    "integrating_sphere": integrating_sphere_case,
    "mixed_emitters": mixed_emitters_case,
}

# --- the suite of `refrender validate` ---------------------------------------------------

#: |z| above which a case fails (4 standard errors; about 6e-5 false failures per case)
Z_MAX = 4.0
COMBOS = [(s, m) for s in ("mis", "nee", "bsdf") for m in ("solid_angle", "area")]


def _emitter_cases():
    return [disk_case(1.0, 1.0), disk_case(1.0, 1.0, 0.5), rectangle_case(0, 1, 0, 1, 1.0),
            rectangle_case(-0.3, 0.7, -0.2, 0.8, 1.0), sphere_case(1.0, 2.0, 30.0),
            sphere_case(1.0, 2.0, 75.0, spp=4096), perpendicular_rectangle_case(1.0, 1.0, 1.0),
            perpendicular_rectangle_case(1.0, 2.0, 0.5), mesh_emitter_case(-0.3, 0.7, -0.2, 0.8),
            mixed_emitters_case()]


def _other_cases(full):
    cases = [point_case(10.0, 2.0, 60.0), directional_case(3.0, 45.0), distant_disc_case(3.0, 0.53, 30.0),
             distant_disc_case(3.0, 40.0, 80.0), furnace_case(0.6),
             furnace_case(1.0), enclosure_case(0.8, 0.5, None), enclosure_case(0.8, 0.5, 5),
             integrating_sphere_case(1.0, 4 * math.pi, 0.5, 0.0),
             integrating_sphere_case(1.0, 4 * math.pi, 0.9, 0.02)]
    if full:
        cases += [enclosure_case(0.5, 0.5, None), enclosure_case(0.8, 0.5, 0),
                  enclosure_case(0.8, 0.5, 1), enclosure_case(0.5, 0.5, 3),
                  integrating_sphere_case(0.5, 10.0, 0.95, 0.01), point_case(10.0, 4.0, 45.0)]
    return cases


def suite(level="quick"):
    """[(case, strategy, light_sampling, target relative standard error)] of a level.

    quick: one strategy (mis, solid angle) per case, 0.5 % standard error.
    full: every emitter case under all six strategy x light-sampling
    combinations and more enclosure / sphere cases, 0.3 % standard error.
    """
    if level not in ("quick", "full"):
        raise ValueError(f"level: quick or full, got {level!r}")
    full = level == "full"
    target = 0.003 if full else 0.005
    rows = []
    for case in _emitter_cases():
        for s, m in (COMBOS if full else [("mis", "solid_angle")]):
            rows.append((case, s, m, target))
    for case in _other_cases(full):
        # delta lights have one estimator; BSDF sampling alone almost never finds a 0.53-degree disc
        single = case.name.startswith(("point", "directional")) or "diameter=0.53" in case.name
        combos = COMBOS if full and not single else [("mis", "solid_angle")]
        for s, m in combos:
            rows.append((case, s, m, target))
    return rows


def run_case(case: Case, strategy="mis", light_sampling="solid_angle", target=0.01, threads=None,
             max_factor=64):
    """Render a case until its standard error is at most ``target`` of the
    expected value (adding disjoint sample ranges, at most ``max_factor`` times
    the case's spp); returns a result dict."""
    import time

    from . import load_scene, merge, render
    from .geometry.compile import LUMINANCE
    t0 = time.perf_counter()
    scene = load_scene(case.scene)
    base = int(case.scene["render"]["spp"]) * (8 if strategy == "bsdf" else 1)
    opts = dict(case.render, strategy=strategy, light_sampling=light_sampling, threads=threads)
    res = render(scene, spp=base, **opts)
    done = base
    goal = target * abs(case.expected)

    def stats_of(r):
        y = r.mean @ LUMINANCE
        sy = np.sqrt(r.variance) @ LUMINANCE
        return float(y.mean()), float(math.sqrt(np.sum(sy ** 2)) / y.size)

    value, se = stats_of(res)
    while se > goal and done < base * max_factor:
        more = min(int(done * ((se / goal) ** 2 - 1) * 1.1) + 1, base * max_factor - done)
        res = merge([res, render(scene, spp=more, first_sample=done, **opts)])
        done += more
        value, se = stats_of(res)
    # floor of 2.5e-10 relative (4 floors = 1e-9, as in tests/test_radiometry.py): the
    # irradiance varies over the 1e-4 receiver footprint by far less, and an estimator
    # with (near) zero variance, e.g. a point light on a flat receiver, can then pass
    z = (value - case.expected) / max(se, 2.5e-10 * abs(case.expected), 1e-300)
    return dict(case=case.name, strategy=strategy, light_sampling=light_sampling,
                expected=case.expected, measured=value, std_error=se, z=z,
                passed=bool(abs(z) <= Z_MAX and res.stats["nonfinite_samples"] == 0),
                spp=done, seconds=time.perf_counter() - t0, source=case.source,
                nonfinite_samples=int(res.stats["nonfinite_samples"]))


def write_scene_files(folder: Path) -> None:
    folder.mkdir(parents=True, exist_ok=True)
    for name, builder in SCENE_FILES.items():
        case = builder()
        (folder / f"{name}.json").write_text(json.dumps(case.scene, indent=1) + "\n")


if __name__ == "__main__":
    write_scene_files(Path(__file__).resolve().parent.parent / "scenes" / "analytic")
