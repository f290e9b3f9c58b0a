"""Write scenes/gltf/glass_desk.gltf: the glTF demo scene (an invented desk corner).

A tinted, absorbing glass block and a clear glass lens on a desk, three
instances of one brass cube, a spot lamp from above and a glowing panel
(an emissive surface with KHR_materials_emissive_strength) at the back.
Run ``python tools/make_gltf_demo.py``; the committed .gltf is its output.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from refrender.scene.gltf_write import Gltf, box

OUT = Path(__file__).resolve().parents[1] / "scenes" / "gltf" / "glass_desk.gltf"


def sphere(radius: float, n_lat: int = 16, n_lon: int = 32):
    """UV sphere: (positions, triangles) wound counter-clockwise seen from outside."""
    pts = [[0, radius, 0]]
    for i in range(1, n_lat):
        th = math.pi * i / n_lat
        for j in range(n_lon):
            ph = 2 * math.pi * j / n_lon
            pts.append([radius * math.sin(th) * math.cos(ph), radius * math.cos(th),
                        -radius * math.sin(th) * math.sin(ph)])
    pts.append([0, -radius, 0])
    tris = []
    ring = lambda i, j: 1 + (i - 1) * n_lon + (j % n_lon)  # noqa: E731
    for j in range(n_lon):
        tris.append([0, ring(1, j), ring(1, j + 1)])
        tris.append([len(pts) - 1, ring(n_lat - 1, j + 1), ring(n_lat - 1, j)])
    for i in range(1, n_lat - 1):
        for j in range(n_lon):
            a, b, c, d = ring(i, j), ring(i, j + 1), ring(i + 1, j), ring(i + 1, j + 1)
            tris += [[a, c, d], [a, d, b]]
    return np.array(pts), np.array(tris)


def build() -> Gltf:
    g = Gltf()
    for ext in ("KHR_materials_transmission", "KHR_materials_ior", "KHR_materials_volume",
                "KHR_materials_emissive_strength"):
        g.use(ext)
    desk = g.material(name="desk", pbrMetallicRoughness={
        "baseColorFactor": [0.55, 0.42, 0.3, 1], "metallicFactor": 0.0, "roughnessFactor": 0.7})
    wall = g.material(name="wall", pbrMetallicRoughness={
        "baseColorFactor": [0.7, 0.72, 0.75, 1], "metallicFactor": 0.0, "roughnessFactor": 1.0})
    brass = g.material(name="brass", pbrMetallicRoughness={
        "baseColorFactor": [0.9, 0.7, 0.35, 1], "metallicFactor": 1.0, "roughnessFactor": 0.3})
    green_glass = g.material(name="green glass", pbrMetallicRoughness={"roughnessFactor": 0.0},
                             extensions={"KHR_materials_transmission": {"transmissionFactor": 1.0},
                                         "KHR_materials_ior": {"ior": 1.52},
                                         "KHR_materials_volume": {"thicknessFactor": 0.12,
                                                                  "attenuationColor": [0.45, 0.85, 0.55],
                                                                  "attenuationDistance": 0.1}})
    clear_glass = g.material(name="clear glass", pbrMetallicRoughness={"roughnessFactor": 0.0},
                             extensions={"KHR_materials_transmission": {"transmissionFactor": 1.0},
                                         "KHR_materials_ior": {"ior": 1.5},
                                         "KHR_materials_volume": {"thicknessFactor": 0.2}})
    panel = g.material(name="panel", emissiveFactor=[1.0, 0.85, 0.6],
                       pbrMetallicRoughness={"baseColorFactor": [0, 0, 0, 1], "metallicFactor": 0.0},
                       extensions={"KHR_materials_emissive_strength": {"emissiveStrength": 3.0}})
    quad = [[-1, 0, -1], [1, 0, -1], [1, 0, 1], [-1, 0, 1]]
    plane = g.mesh(quad, [[0, 2, 1], [0, 3, 2]], material=desk)      # faces +Y
    g.node(mesh=plane, name="desk", scale=[2.0, 1.0, 1.5])
    wall_mesh = g.mesh([[-2, 0, 0], [2, 0, 0], [2, 2, 0], [-2, 2, 0]], [[0, 1, 2], [0, 2, 3]],
                       material=wall)                                  # faces +Z
    g.node(mesh=wall_mesh, name="wall", translation=[0, 0, -1.2])
    corners, tris = box([-0.06, 0, -0.06], [0.06, 0.12, 0.06])
    cube = g.mesh(corners, tris, material=brass)
    for k, (x, z, turn) in enumerate([(-0.75, -0.3, 0.3), (-0.55, 0.05, -0.5), (0.85, -0.45, 1.0)]):
        g.node(mesh=cube, name=f"brass cube {k}", translation=[x, 0, z],
               rotation=[0, math.sin(turn / 2), 0, math.cos(turn / 2)])
    corners, tris = box([-0.25, 0, -0.06], [0.25, 0.3, 0.06])
    g.node(mesh=g.mesh(corners, tris, material=green_glass), name="glass block",
           translation=[-0.1, 0, -0.25], rotation=[0, math.sin(0.2), 0, math.cos(0.2)])
    pts, tris = sphere(0.18)
    g.node(mesh=g.mesh(pts, tris, material=clear_glass), name="lens", translation=[0.45, 0.18, 0.15])
    panel_mesh = g.mesh([[-0.5, 0, 0], [0.5, 0, 0], [0.5, 0.3, 0], [-0.5, 0.3, 0]], [[0, 1, 2], [0, 2, 3]],
                        material=panel)
    g.node(mesh=panel_mesh, name="glowing panel", translation=[0.55, 0.3, -1.19])
    spot = g.light(type="spot", name="desk lamp", color=[1.0, 0.95, 0.85], intensity=2500.0,
                   spot={"innerConeAngle": 0.25, "outerConeAngle": 0.55})
    # the node's -Z points down: rotate -90 degrees about +X
    g.node(name="lamp", translation=[0.1, 2.0, 0.0],
           rotation=[-math.sin(math.pi / 4), 0, 0, math.cos(math.pi / 4)],
           extensions={"KHR_lights_punctual": {"light": spot}})
    cam = g.camera(type="perspective", name="view", perspective={"yfov": 0.6, "aspectRatio": 1.5,
                                                                 "znear": 0.05})
    tilt = -0.3
    g.node(name="camera", camera=cam, translation=[0.0, 0.9, 2.6],
           rotation=[math.sin(tilt / 2), 0, 0, math.cos(tilt / 2)])
    return g


if __name__ == "__main__":
    OUT.parent.mkdir(parents=True, exist_ok=True)
    build().write_gltf(OUT)
    print(f"wrote {OUT}")
