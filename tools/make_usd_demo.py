"""Write the demo OpenUSD stage scenes/usd/seed_bench.usda (needs usd-core).

A potting bench in a greenhouse at dusk, authored the way a film layout is: a
Z-up stage in centimetres, pots as Cylinders and Cones, seedlings placed by a
PointInstancer, a grow lamp (RectLight, normalized, 4000 K), a low sun
(DistantLight of 0.53 degrees, 3200 K), a dim sky (DomeLight), a ball of twine
and a camera with a 35 mm lens at f/4.

    python tools/make_usd_demo.py
    refrender render scenes/usd/seed_bench.usda -o bench.exr --preview bench.png
"""
from __future__ import annotations

import math
from pathlib import Path

from pxr import Gf, Sdf, Usd, UsdGeom, UsdLux, UsdRender, UsdShade

OUT = Path(__file__).resolve().parent.parent / "scenes" / "usd" / "seed_bench.usda"


def surface(stage, name, **inputs):
    mat = UsdShade.Material.Define(stage, f"/Bench/Looks/{name}")
    sh = UsdShade.Shader.Define(stage, f"/Bench/Looks/{name}/Surface")
    sh.CreateIdAttr("UsdPreviewSurface")
    kinds = {tuple: Sdf.ValueTypeNames.Color3f, float: Sdf.ValueTypeNames.Float, int: Sdf.ValueTypeNames.Int}
    for key, value in inputs.items():
        sh.CreateInput(key, kinds[type(value)]).Set(value)
    mat.CreateSurfaceOutput().ConnectToSource(sh.ConnectableAPI(), "surface")
    return mat


def bind(prim, mat):
    UsdShade.MaterialBindingAPI.Apply(prim.GetPrim()).Bind(mat)


def place(prim, translate=(0.0, 0.0, 0.0), rotate=(0.0, 0.0, 0.0), scale=None):
    api = UsdGeom.XformCommonAPI(prim)
    api.SetTranslate(translate)
    api.SetRotate(rotate)
    if scale is not None:
        api.SetScale(scale)


def main() -> None:
    OUT.parent.mkdir(parents=True, exist_ok=True)
    stage = Usd.Stage.CreateNew(str(OUT))
    UsdGeom.SetStageUpAxis(stage, "Z")
    UsdGeom.SetStageMetersPerUnit(stage, 0.01)
    root = UsdGeom.Xform.Define(stage, "/Bench")
    stage.SetDefaultPrim(root.GetPrim())

    wood = surface(stage, "Plank", diffuseColor=(0.42, 0.28, 0.16), roughness=0.7)
    clay = surface(stage, "Terracotta", diffuseColor=(0.62, 0.30, 0.18), roughness=0.85)
    leaf = surface(stage, "Leaf", diffuseColor=(0.18, 0.42, 0.12), roughness=0.55)
    soil = surface(stage, "Soil", diffuseColor=(0.12, 0.08, 0.05), roughness=1.0)
    tin = surface(stage, "Tin", diffuseColor=(0.80, 0.80, 0.78), metallic=1.0, roughness=0.35)
    string = surface(stage, "Twine", diffuseColor=(0.70, 0.60, 0.42), roughness=0.9)

    floor = UsdGeom.Plane.Define(stage, "/Bench/Floor")
    floor.CreateWidthAttr(400.0)
    floor.CreateLengthAttr(400.0)
    floor.CreateDisplayColorAttr([(0.35, 0.33, 0.30)])
    top = UsdGeom.Cube.Define(stage, "/Bench/Top")
    place(top, (0.0, 0.0, 85.0), scale=(180.0, 60.0, 4.0))
    top.CreateSizeAttr(1.0)
    bind(top, wood)
    for k, (x, y) in enumerate([(-85, -25), (85, -25), (-85, 25), (85, 25)]):
        leg = UsdGeom.Cube.Define(stage, f"/Bench/Leg{k}")
        leg.CreateSizeAttr(1.0)
        place(leg, (x, y, 41.5), scale=(5.0, 5.0, 83.0))
        bind(leg, wood)

    for k, (x, r, h) in enumerate([(-55, 11.0, 18.0), (-20, 8.0, 14.0), (15, 12.0, 20.0)]):
        pot = UsdGeom.Cylinder.Define(stage, f"/Bench/Pot{k}")
        pot.CreateRadiusAttr(r)
        pot.CreateHeightAttr(h)
        place(pot, (x, 0.0, 87.0 + h / 2))
        bind(pot, clay)
        dirt = UsdGeom.Cylinder.Define(stage, f"/Bench/Soil{k}")
        dirt.CreateRadiusAttr(r * 0.9)
        dirt.CreateHeightAttr(0.5)
        place(dirt, (x, 0.0, 87.0 + h))
        bind(dirt, soil)

    can = UsdGeom.Cylinder.Define(stage, "/Bench/WateringCan")
    can.CreateRadiusAttr(9.0)
    can.CreateHeightAttr(22.0)
    place(can, (60.0, 8.0, 98.0))
    bind(can, tin)

    # seedlings: one cone prototype, scattered over the three pots
    sprouts = UsdGeom.PointInstancer.Define(stage, "/Bench/Seedlings")
    proto = UsdGeom.Cone.Define(stage, "/Bench/Seedlings/Prototypes/Sprout")
    proto.CreateRadiusAttr(1.6)
    proto.CreateHeightAttr(9.0)
    bind(proto, leaf)
    sprouts.CreatePrototypesRel().SetTargets([proto.GetPath()])
    positions = []
    for x, r, h in [(-55, 11.0, 18.0), (-20, 8.0, 14.0), (15, 12.0, 20.0)]:
        for j in range(7):
            a = 2 * math.pi * j / 7 + 0.4 * x
            rr = 0.55 * r * (0.4 + 0.6 * ((j * 37) % 7) / 6)
            positions.append(Gf.Vec3f(x + rr * math.cos(a), rr * math.sin(a), 87.0 + h + 4.5))
    sprouts.CreatePositionsAttr(positions)
    sprouts.CreateProtoIndicesAttr([0] * len(positions))
    sprouts.CreateScalesAttr([Gf.Vec3f(1.0, 1.0, 0.7 + 0.1 * (k % 5)) for k in range(len(positions))])

    # a ball of twine: a Sphere stays an exact sphere
    twine = UsdGeom.Sphere.Define(stage, "/Bench/Twine")
    twine.CreateRadiusAttr(6.0)
    place(twine, (38.0, -16.0, 93.0))
    bind(twine, string)

    lamp = UsdLux.RectLight.Define(stage, "/Bench/GrowLamp")
    lamp.CreateWidthAttr(90.0)
    lamp.CreateHeightAttr(12.0)
    lamp.CreateIntensityAttr(60.0)
    lamp.CreateNormalizeAttr(False)
    lamp.CreateEnableColorTemperatureAttr(True)
    lamp.CreateColorTemperatureAttr(4000.0)
    place(lamp, (-20.0, 0.0, 175.0))          # faces -Z: down onto the bench

    sun = UsdLux.DistantLight.Define(stage, "/Bench/Sun")
    sun.CreateAngleAttr(0.53)
    sun.CreateIntensityAttr(6.0)
    sun.CreateNormalizeAttr(True)               # intensity = irradiance on a facing surface
    sun.CreateEnableColorTemperatureAttr(True)
    sun.CreateColorTemperatureAttr(3200.0)
    place(sun, rotate=(75.0, 0.0, -60.0))

    sky = UsdLux.DomeLight.Define(stage, "/Bench/Sky")
    sky.CreateIntensityAttr(0.15)
    sky.CreateColorAttr((0.55, 0.65, 1.0))

    cam = UsdGeom.Camera.Define(stage, "/Bench/ShotCam")
    cam.CreateFocalLengthAttr(35.0)             # mm: tenths of a centimetre
    cam.CreateHorizontalApertureAttr(36.0)
    cam.CreateVerticalApertureAttr(24.0)
    cam.CreateFStopAttr(4.0)
    cam.CreateFocusDistanceAttr(210.0)
    place(cam, (0.0, -205.0, 150.0), rotate=(72.0, 0.0, 0.0))

    settings = UsdRender.Settings.Define(stage, "/Render/PreviewSettings")
    settings.CreateResolutionAttr(Gf.Vec2i(360, 240))
    settings.CreateCameraRel().SetTargets([cam.GetPath()])
    stage.GetRootLayer().customLayerData = {"renderSettingsPrimPath": "/Render/PreviewSettings"}
    stage.Save()
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
