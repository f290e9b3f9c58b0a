"""OpenUSD stages: the translation into the scene document, against the schema's
own statements, closed forms and an equivalent JSON scene.

Stages are authored here with the ``pxr`` API (usd-core).  Facts about USD
come from usd-core's own schema files (paths named on each check):
``pxr/pluginfo/usdGeom/resources/generatedSchema.usda`` (camera units, Plane
axes), ``pxr/pluginfo/usdLux/resources/usdLux/schema.usda`` (light units,
normalize, DistantLight angle, DomeLight lat-long orientation) and
``pxr/pluginfo/usdShaders/resources/shaders/shaderDefs.usda``
(UsdPreviewSurface defaults).
"""
import json
import math

import numpy as np
import pytest

pxr = pytest.importorskip("pxr", reason="usd-core is not installed (pip install 'refrender[usd]')")
from pxr import Gf, Sdf, Usd, UsdGeom, UsdLux, UsdRender, UsdShade  # noqa: E402

from refrender import load_scene, render, validation as V  # noqa: E402
from refrender.cli.main import main  # noqa: E402
from refrender.errors import SceneError  # noqa: E402
from refrender.scene.usd import translate_stage  # noqa: E402
from refrender.scene.usd_shading import blackbody_rgb, _blackbody_rgb_raw  # noqa: E402


def new_stage(path, mpu=1.0, up="Y"):
    stage = Usd.Stage.CreateNew(str(path))
    UsdGeom.SetStageMetersPerUnit(stage, mpu)
    UsdGeom.SetStageUpAxis(stage, up)
    return stage


def quad(stage, where, half, z=0.0, colour=None):
    """A Mesh square [-half, half]^2 in the plane z, facing +Z (counter-clockwise from +Z)."""
    m = UsdGeom.Mesh.Define(stage, where)
    m.CreatePointsAttr([(-half, -half, z), (half, -half, z), (half, half, z), (-half, half, z)])
    m.CreateFaceVertexCountsAttr([4])
    m.CreateFaceVertexIndicesAttr([0, 1, 2, 3])
    m.CreateSubdivisionSchemeAttr("none")
    if colour is not None:
        m.CreateDisplayColorAttr([colour])
    return m


def matrix_op(prim, rows):
    """xformOp:transform from row-vector rows (USD's convention: p' = p M)."""
    UsdGeom.Xformable(prim).AddTransformOp().Set(Gf.Matrix4d(*[v for r in rows for v in r]))


def receiver_stage(path):
    """The receiver of refrender.validation in USD: a Lambertian (displayColor RHO) square
    at the origin facing +Z, seen by an orthographic camera 1e-3 above it whose view is
    VIEW high (verticalAperture in tenths of a scene unit: generatedSchema.usda)."""
    stage = new_stage(path)
    quad(stage, "/W/Receiver", 0.05, colour=(V.RHO, V.RHO, V.RHO))
    cam = UsdGeom.Camera.Define(stage, "/W/Cam")
    cam.CreateProjectionAttr("orthographic")
    cam.CreateVerticalApertureAttr(V.VIEW * 10.0)
    cam.CreateHorizontalApertureAttr(V.VIEW * 10.0)
    UsdGeom.XformCommonAPI(cam).SetTranslate((0.0, 0.0, 1e-3))
    settings = UsdRender.Settings.Define(stage, "/Render/Settings")
    settings.CreateResolutionAttr(Gf.Vec2i(V.FILM, V.FILM))
    return stage


def usd_case(path, reference, spp=1024):
    """A validation Case whose scene is the translated stage at *path*."""
    doc = translate_stage(path).document
    doc["render"] = {"spp": spp, "seed": 1}
    return V.Case(reference.name + " (USD)", reference.expected, reference.source, doc)


# ----------------------------------------------------------------------------- closed forms

@pytest.mark.parametrize("strategy,sampling", V.COMBOS)
def test_rect_light_over_receiver_matches_howells_catalogue(tmp_path, strategy, sampling):
    """RectLight (emits along local -Z, width along X, height along Y: usdLux schema.usda)
    over an element: configuration factor of Howell's catalogue, corner formula with
    superposition (the formula of refrender.validation.rectangle_case)."""
    x1, x2, y1, y2, c = -0.3, 0.7, -0.2, 0.8, 1.0
    stage = receiver_stage(tmp_path / "rect.usda")
    light = UsdLux.RectLight.Define(stage, "/W/Key")
    light.CreateWidthAttr(x2 - x1)
    light.CreateHeightAttr(y2 - y1)
    light.CreateIntensityAttr(V.L_EMIT / 2.0)
    light.CreateExposureAttr(1.0)                # 2^1: L = intensity * 2^exposure
    UsdGeom.XformCommonAPI(light).SetTranslate(((x1 + x2) / 2, (y1 + y2) / 2, c))
    stage.Save()
    row = V.run_case(usd_case(tmp_path / "rect.usda", V.rectangle_case(x1, x2, y1, y2, c)),
                     strategy, sampling, target=0.01)
    assert row["passed"], row


@pytest.mark.parametrize("strategy,sampling", [("mis", "solid_angle"), ("nee", "area"), ("bsdf", "solid_angle")])
def test_sphere_light_beside_tilted_receiver(tmp_path, strategy, sampling):
    """SphereLight, normalize on (luminance divided by the world area 4 pi r^2: usdLux
    schema.usda), at 75 degrees from the receiver normal: Howell's sphere-to-element factor
    (refrender.validation.sphere_case); the light's own scale doubles its radius."""
    r, d, theta = 1.0, 2.0, 75.0
    stage = receiver_stage(tmp_path / "sphere.usda")
    light = UsdLux.SphereLight.Define(stage, "/W/Bulb")
    light.CreateRadiusAttr(r / 2)
    light.CreateNormalizeAttr(True)
    light.CreateIntensityAttr(V.L_EMIT * 4 * math.pi * r * r)
    th = math.radians(theta)
    api = UsdGeom.XformCommonAPI(light)
    api.SetTranslate((d * math.sin(th), 0.0, d * math.cos(th)))
    api.SetScale((2.0, 2.0, 2.0))
    stage.Save()
    row = V.run_case(usd_case(tmp_path / "sphere.usda", V.sphere_case(r, d, theta, spp=4096)),
                     strategy, sampling, target=0.01)
    assert row["passed"], row


@pytest.mark.parametrize("angle,incidence,normalize,strategies", [
    (0.53, 30.0, False, ("mis", "nee")),          # the sun: BSDF rays alone almost never find it
    (0.53, 30.0, True, ("mis",)),
    (40.0, 80.0, False, ("mis", "nee", "bsdf")),  # a wide disc cut by the receiver's horizon
])
def test_distant_light_as_a_distant_disc(tmp_path, angle, incidence, normalize, strategies):
    """DistantLight: angular diameter `angle` (usdLux schema.usda), radiance L = intensity,
    divided by pi sin^2(theta_max) when normalized (so intensity is then the irradiance on a
    facing surface).  Expected: L times Howell's element-to-sphere factor with
    r / d = sin(angle / 2) (refrender.validation.distant_disc_case)."""
    L = 50000.0 if angle < 1 else 2.0
    stage = receiver_stage(tmp_path / "sun.usda")
    sun = UsdLux.DistantLight.Define(stage, "/W/Sun")
    sun.CreateAngleAttr(angle)
    sun.CreateIntensityAttr(L)
    sun.CreateNormalizeAttr(normalize)
    UsdGeom.XformCommonAPI(sun).SetRotate((0.0, incidence, 0.0))   # -Z tilted toward -X
    stage.Save()
    a32 = float(np.float32(angle))
    E = L if normalize else math.pi * L * math.sin(math.radians(a32) / 2) ** 2
    ref = V.distant_disc_case(E, a32, incidence)
    for strategy in strategies:
        row = V.run_case(usd_case(tmp_path / "sun.usda", ref, spp=256), strategy, "solid_angle", target=0.01)
        assert row["passed"], row


# ----------------------------------------------------------------------------- JSON == USD

def _twin_stage(path):
    stage = new_stage(path)
    floor = quad(stage, "/W/Floor", 2.0, colour=(0.5, 0.5, 0.5))
    matrix_op(floor.GetPrim(), [[1, 0, 0, 0], [0, 0, -1, 0], [0, 1, 0, 0], [0, 0, 0, 1]])  # +Z -> +Y
    ball = UsdGeom.Sphere.Define(stage, "/W/Ball")
    ball.CreateRadiusAttr(0.5)
    UsdGeom.XformCommonAPI(ball).SetTranslate((0.0, 0.5, 0.0))
    mat = UsdShade.Material.Define(stage, "/W/Looks/Paint")
    sh = UsdShade.Shader.Define(stage, "/W/Looks/Paint/Surface")
    sh.CreateIdAttr("UsdPreviewSurface")
    sh.CreateInput("diffuseColor", Sdf.ValueTypeNames.Color3f).Set((0.75, 0.25, 0.5))
    mat.CreateSurfaceOutput().ConnectToSource(sh.ConnectableAPI(), "surface")
    UsdShade.MaterialBindingAPI.Apply(ball.GetPrim()).Bind(mat)
    key = UsdLux.RectLight.Define(stage, "/W/Key")
    key.CreateIntensityAttr(5.0)
    matrix_op(key.GetPrim(), [[1, 0, 0, 0], [0, 0, -1, 0], [0, 1, 0, 0], [0, 2.5, 0, 1]])  # faces -Y
    fill = UsdLux.DiskLight.Define(stage, "/W/Fill")
    fill.CreateRadiusAttr(0.25)
    fill.CreateIntensityAttr(3.0)
    UsdGeom.XformCommonAPI(fill).SetTranslate((1.0, 1.5, 2.0))
    bulb = UsdLux.SphereLight.Define(stage, "/W/Bulb")
    bulb.CreateRadiusAttr(0.5)
    bulb.CreateIntensityAttr(4.0)
    bulb.CreateTreatAsPointAttr(True)
    UsdGeom.XformCommonAPI(bulb).SetTranslate((-1.5, 1.0, 0.5))
    cam = UsdGeom.Camera.Define(stage, "/W/Cam")
    cam.CreateFocalLengthAttr(0.5)                       # tenths of a metre: 50 mm
    cam.CreateVerticalApertureAttr(0.25)
    cam.CreateHorizontalApertureAttr(0.375)
    UsdGeom.XformCommonAPI(cam).SetTranslate((0.0, 1.0, 5.0))
    UsdRender.Settings.Define(stage, "/Render/Settings").CreateResolutionAttr(Gf.Vec2i(12, 8))
    stage.Save()


TWIN_JSON = {
    "version": 1,
    "camera": {"camera_to_world": [[1, 0, 0, 0], [0, 1, 0, 1], [0, 0, 1, 5], [0, 0, 0, 1]],
               "focal_length": 50.0, "sensor_height": 25.0},
    "film": {"width": 12, "height": 8},
    "materials": {"grey": {"type": "lambertian", "albedo": [0.5, 0.5, 0.5]},
                  "paint": {"type": "metallic_roughness", "base_color": [0.75, 0.25, 0.5], "metallic": 0.0,
                            "roughness": 0.5}},
    "objects": [
        {"shape": "triangles", "positions": [[-2, 0, 2], [2, 0, 2], [2, 0, -2], [-2, 0, -2]],
         "indices": [[0, 1, 2], [0, 2, 3]], "material": "grey"},
        {"shape": "sphere", "center": [0, 0.5, 0], "radius": 0.5, "material": "paint"},
        {"shape": "rectangle", "origin": [-0.5, 2.5, 0.5], "edge1": [0, 0, -1], "edge2": [1, 0, 0],
         "emission": [5, 5, 5]},
        {"shape": "disk", "center": [1, 1.5, 2], "normal": [0, 0, -1], "radius": 0.25, "emission": [3, 3, 3]},
    ],
    "lights": [{"type": "point", "position": [-1.5, 1.0, 0.5], "intensity": [4.0 * math.pi * 0.5 * 0.5] * 3}],
}


def test_same_scene_as_json_and_as_usd_renders_bit_identically(tmp_path):
    """Every mapping in this scene is exact (float32 values that are exact in binary), so the
    stage and its hand-written JSON twin must give the same bits (mean and variance)."""
    _twin_stage(tmp_path / "twin.usda")
    a = render(load_scene(tmp_path / "twin.usda"), spp=4, seed=3)
    b = render(load_scene(TWIN_JSON), spp=4, seed=3)
    assert a.mean.any()
    assert np.array_equal(a.mean, b.mean) and np.array_equal(a.variance, b.variance)


def test_usd_shape_inside_a_json_scene(tmp_path):
    """{"shape": "usd"} places the stage's surfaces and lights under the JSON transform."""
    _twin_stage(tmp_path / "twin.usda")
    doc = {k: v for k, v in TWIN_JSON.items() if k not in ("objects", "lights", "materials")}
    doc["objects"] = [{"shape": "usd", "path": "twin.usda", "transform": {"translate": [10, 0, 0]}}]
    (tmp_path / "s.json").write_text(json.dumps(doc))
    scene = load_scene(tmp_path / "s.json")
    assert len(scene.objects) == 4 and len(scene.lights) == 1
    assert np.allclose(scene.objects[1].shape.center, [10, 0.5, 0])
    assert np.allclose(scene.lights[0].position, [8.5, 1.0, 0.5])
    bad = dict(doc, objects=[{"shape": "usd", "path": "missing.usda"}])
    with pytest.raises(SceneError, match=r"^objects\[0\]\.path: file not found"):
        load_scene(bad, base_dir=tmp_path)


# ----------------------------------------------------------------------------- units and frames

def test_camera_units_are_tenths_of_a_scene_unit(tmp_path):
    """focalLength and the apertures are in tenths of a scene unit (generatedSchema.usda:
    'Perspective focal length in tenths of a scene unit'): millimetres on a centimetre
    stage; focusDistance in scene units; fStop is the f-number."""
    stage = new_stage(tmp_path / "cm.usda", mpu=0.01)
    quad(stage, "/W/Card", 50.0)
    cam = UsdGeom.Camera.Define(stage, "/W/Cam")
    cam.CreateFocalLengthAttr(35.0)
    cam.CreateHorizontalApertureAttr(36.0)
    cam.CreateVerticalApertureAttr(24.0)
    cam.CreateFStopAttr(2.0)
    cam.CreateFocusDistanceAttr(250.0)
    UsdGeom.XformCommonAPI(cam).SetTranslate((0.0, 0.0, 300.0))
    stage.Save()
    tr = translate_stage(tmp_path / "cm.usda")
    c = tr.document["camera"]
    assert c["focal_length"] == pytest.approx(35.0, rel=1e-6)
    assert c["sensor_height"] == pytest.approx(24.0, rel=1e-6)
    assert c["lens"] == pytest.approx({"f_number": 2.0, "focus_distance": 2.5})
    assert c["camera_to_world"][2][3] == pytest.approx(3.0)            # 300 cm
    assert tr.document["film"]["width"] / tr.document["film"]["height"] == pytest.approx(1.5, abs=0.01)
    scene = load_scene(tr.document)
    assert scene.camera.lens_radius == pytest.approx(0.035 / 2.0 / 2.0)   # f / (2 N), metres
    assert scene.objects[0].shape.positions[:, 0].max() == pytest.approx(0.5)


def test_z_up_stage_is_turned_into_y_up(tmp_path):
    """upAxis Z: the stage's +Z becomes +Y (and +Y becomes -Z), a proper rotation."""
    stage = new_stage(tmp_path / "z.usda", up="Z")
    ball = UsdGeom.Sphere.Define(stage, "/W/Ball")
    UsdGeom.XformCommonAPI(ball).SetTranslate((1.0, 2.0, 3.0))
    cam = UsdGeom.Camera.Define(stage, "/W/Cam")
    UsdGeom.XformCommonAPI(cam).SetRotate((90.0, 0.0, 0.0))   # Z-up convention: look along +Y
    stage.Save()
    doc = translate_stage(tmp_path / "z.usda").document
    assert doc["objects"][0]["center"] == pytest.approx([1.0, 3.0, -2.0])
    c2w = np.array(doc["camera"]["camera_to_world"])
    assert c2w[:3, 2] == pytest.approx([0.0, 0.0, 1.0], abs=1e-12)   # looks along -Z (stage +Y)
    assert c2w[:3, 1] == pytest.approx([0.0, 1.0, 0.0], abs=1e-12)


def test_mesh_triangulation_orientation_and_uvs(tmp_path):
    """A quad and a pentagon (fan triangulation), leftHanded winding, faceVarying st
    (unwelded corners); area of the pentagon by the shoelace formula (common practice)."""
    stage = new_stage(tmp_path / "m.usda")
    m = UsdGeom.Mesh.Define(stage, "/W/M")
    pts = [(0, 0, 0), (1, 0, 0), (1, 1, 0), (0, 1, 0), (2, 0, 0), (3, 0, 0), (3.5, 1, 0), (2.5, 2, 0), (1.75, 1, 0)]
    m.CreatePointsAttr(pts)
    m.CreateFaceVertexCountsAttr([4, 5])
    m.CreateFaceVertexIndicesAttr([0, 1, 2, 3, 4, 5, 6, 7, 8])
    m.CreateOrientationAttr("leftHanded")
    st = UsdGeom.PrimvarsAPI(m).CreatePrimvar("st", Sdf.ValueTypeNames.TexCoord2fArray, UsdGeom.Tokens.faceVarying)
    st.Set([(i / 10, i / 20) for i in range(9)])
    mat = UsdShade.Material.Define(stage, "/W/Looks/T")
    sh = UsdShade.Shader.Define(stage, "/W/Looks/T/S")
    sh.CreateIdAttr("UsdPreviewSurface")
    tex = UsdShade.Shader.Define(stage, "/W/Looks/T/Tex")
    tex.CreateIdAttr("UsdUVTexture")
    from refrender.io import write_pfm
    write_pfm(tmp_path / "t.pfm", np.full((2, 2, 3), 0.5, dtype=np.float32))
    tex.CreateInput("file", Sdf.ValueTypeNames.Asset).Set("t.pfm")
    reader = UsdShade.Shader.Define(stage, "/W/Looks/T/St")
    reader.CreateIdAttr("UsdPrimvarReader_float2")
    reader.CreateInput("varname", Sdf.ValueTypeNames.String).Set("st")
    tex.CreateInput("st", Sdf.ValueTypeNames.Float2).ConnectToSource(reader.ConnectableAPI(), "result")
    sh.CreateInput("diffuseColor", Sdf.ValueTypeNames.Color3f).ConnectToSource(tex.ConnectableAPI(), "rgb")
    mat.CreateSurfaceOutput().ConnectToSource(sh.ConnectableAPI(), "surface")
    UsdShade.MaterialBindingAPI.Apply(m.GetPrim()).Bind(mat)
    stage.Save()
    tr = translate_stage(tmp_path / "m.usda", with_camera=False)
    obj = tr.document["objects"][0]
    p, t, uv = np.array(obj["positions"]), np.array(obj["indices"]), np.array(obj["uvs"])
    assert len(t) == 2 + 3 and len(p) == 15                    # unwelded: 3 corners per triangle
    normals = np.cross(p[t[:, 1]] - p[t[:, 0]], p[t[:, 2]] - p[t[:, 0]])
    assert np.all(normals[:, 2] < 0)                           # leftHanded: clockwise from +Z is front
    x, y = np.array(pts[4:])[:, 0], np.array(pts[4:])[:, 1]
    shoelace = 0.5 * abs(np.dot(x, np.roll(y, -1)) - np.dot(y, np.roll(x, -1)))
    assert 0.5 * np.linalg.norm(normals[2:], axis=1).sum() == pytest.approx(shoelace)
    # each corner keeps its own st: positions and uvs stay paired
    for k in range(len(p)):
        i = pts.index(tuple(float(v) for v in p[k]))
        assert uv[k] == pytest.approx([i / 10, i / 20], abs=1e-7)
    assert obj["material"] and tr.document["materials"][obj["material"]]["base_color"]["texture"].endswith("t.pfm")
    assert "subdivisionScheme" in " ".join(tr.report()["ignored"])   # default catmullClark: cage


def test_visibility_purpose_instances_and_point_instancer(tmp_path):
    """Invisible and guide/proxy prims are skipped; scene-graph instances and PointInstancer
    instances become world-space copies."""
    stage = new_stage(tmp_path / "i.usda")
    proto = stage.DefinePrim("/Proto", "Xform")
    stage.GetRootLayer().defaultPrim = "W"
    s = UsdGeom.Sphere.Define(stage, "/Proto/S")
    s.CreateRadiusAttr(0.25)
    for k, x in enumerate((0.0, 2.0)):
        inst = stage.DefinePrim(f"/W/Inst{k}", "Xform")
        inst.GetReferences().AddInternalReference("/Proto")
        inst.SetInstanceable(True)
        UsdGeom.XformCommonAPI(inst).SetTranslate((x, 0.0, 0.0))
    proto.SetSpecifier(Sdf.SpecifierClass)           # the prototype source itself is not drawn
    hidden = UsdGeom.Sphere.Define(stage, "/W/Hidden")
    hidden.CreateVisibilityAttr("invisible")
    guide = UsdGeom.Cube.Define(stage, "/W/Guide")
    guide.CreatePurposeAttr("guide")
    pi = UsdGeom.PointInstancer.Define(stage, "/W/Scatter")
    UsdGeom.Cube.Define(stage, "/W/Scatter/Protos/Box").CreateSizeAttr(0.5)
    pi.CreatePrototypesRel().SetTargets(["/W/Scatter/Protos/Box"])
    pi.CreateProtoIndicesAttr([0, 0, 0])
    pi.CreatePositionsAttr([(0, 5, 0), (1, 5, 0), (2, 5, 0)])
    UsdGeom.XformCommonAPI(pi).SetTranslate((0.0, 0.0, -1.0))
    stage.Save()
    tr = translate_stage(tmp_path / "i.usda", with_camera=False)
    objs = tr.document["objects"]
    spheres = sorted(o["center"][0] for o in objs if o["shape"] == "sphere")
    assert spheres == [0.0, 2.0]
    boxes = [np.array(o["positions"]).mean(axis=0) for o in objs if o["shape"] == "triangles"]
    assert sorted(b[0] for b in boxes) == pytest.approx([0.0, 1.0, 2.0])
    assert all(b[1:] == pytest.approx([5.0, -1.0]) for b in boxes)
    ignored = " ".join(tr.report()["ignored"])
    assert "/W/Hidden: invisible" in ignored and "/W/Guide: purpose guide" in ignored


def test_light_scalar_intensity_exposure_colour_and_normalize(tmp_path):
    """L = intensity * 2^exposure * color, divided by the world area when normalize is on
    (usdLux schema.usda); a RectLight scaled by 2 x 3 has area 6 w h."""
    stage = new_stage(tmp_path / "l.usda")
    rl = UsdLux.RectLight.Define(stage, "/W/R")
    rl.CreateIntensityAttr(3.0)
    rl.CreateExposureAttr(2.0)
    rl.CreateColorAttr((0.5, 1.0, 0.25))
    rl.CreateNormalizeAttr(True)
    rl.CreateWidthAttr(0.5)
    UsdGeom.XformCommonAPI(rl).SetScale((2.0, 3.0, 1.0))
    stage.Save()
    entry = translate_stage(tmp_path / "l.usda", with_camera=False).document["objects"][0]
    assert entry["emission"] == pytest.approx([3 * 4 * c / (6 * 0.5) for c in (0.5, 1.0, 0.25)])


def test_blackbody_colour(tmp_path):
    """6500 K is exactly white (the schema's normalisation); before that white balance our
    blackbody RGB has the chromaticity of Planck's law by colour-science
    (CCT_to_uv_Planck1900, CIE 1931 2-degree observer)."""
    import colour
    assert blackbody_rgb(6500.0) == pytest.approx([1.0, 1.0, 1.0], abs=1e-12)
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    for kelvin in (2700.0, 6500.0, 9000.0):
        xyz = colour.RGB_to_XYZ(_blackbody_rgb_raw(kelvin), "sRGB", apply_cctf_decoding=False)
        uv = colour.xy_to_UCS_uv(colour.XYZ_to_xy(xyz))
        assert uv == pytest.approx(colour.temperature.CCT_to_uv_Planck1900(kelvin, cmfs), abs=2e-4)
    warm = blackbody_rgb(2700.0)
    assert warm[0] > warm[1] > warm[2] and float(V_LUMA @ warm) == pytest.approx(1.0)


V_LUMA = np.array([0.2126, 0.7152, 0.0722])


@pytest.mark.parametrize("kind,turn,up,bright_dir", [
    ("DomeLight", 0.0, "Y", (1.0, 0.0, 0.0)),      # OpenEXR lat-long: longitude pi/2 is +X
    ("DomeLight", 90.0, "Y", (0.0, 0.0, -1.0)),    # the dome turned 90 degrees about +Y
    ("DomeLight_1", 0.0, "Z", (1.0, 0.0, 0.0)),    # poleAxis scene on a Z-up stage
])
def test_dome_light_orientation_with_one_bright_pixel(tmp_path, kind, turn, up, bright_dir):
    """A 16 x 8 lat-long map with one bright texel at latitude 0, longitude pi/2 (+X by the
    OpenEXR convention quoted in usdLux schema.usda).  A narrow camera looking at the
    expected world direction sees it; one looking the opposite way does not."""
    from refrender.io import write_pfm
    img = np.zeros((8, 16, 3), dtype=np.float32)
    # x in [0, 16): longitude = pi - 2 pi (x + 0.5) / 16 = pi/2 at x = 3.5: the texel x = 3 or 4
    # is 11.25 degrees off; use two texels straddling it so the direction lies on their edge
    img[3:5, 3:5] = 7.0
    write_pfm(tmp_path / "sky.pfm", img)
    stage = new_stage(tmp_path / "d.usda", up=up)
    dome = stage.DefinePrim("/W/Sky", kind)
    dome.CreateAttribute("inputs:texture:file", Sdf.ValueTypeNames.Asset).Set("sky.pfm")
    dome.CreateAttribute("inputs:texture:format", Sdf.ValueTypeNames.Token).Set("latlong")
    if turn:
        UsdGeom.XformCommonAPI(dome).SetRotate((0.0, turn, 0.0))
    stage.Save()
    doc = translate_stage(tmp_path / "d.usda", with_camera=False).document
    d = np.array(bright_dir)
    values = []
    for sign in (1.0, -1.0):
        up_hint = [0.0, 1.0, 0.0]
        doc2 = dict(doc, camera={"position": [0, 0, 0], "look_at": list(sign * d), "up": up_hint, "fov_y": 2.0},
                    film={"width": 2, "height": 2})
        res = render(load_scene(doc2, base_dir=tmp_path), spp=4, seed=0, max_bounces=0)
        values.append(float(res.mean.mean()))
    assert values == [pytest.approx(7.0), 0.0]


def test_preview_surface_mapping_table(tmp_path):
    """UsdPreviewSurface -> metallic_roughness (defaults from shaderDefs.usda), opacity 0 ->
    glass with the ior, opacity below opacityThreshold -> cut out, other shaders -> grey."""
    stage = new_stage(tmp_path / "p.usda")

    def material(name, shader_id="UsdPreviewSurface", **inputs):
        mat = UsdShade.Material.Define(stage, f"/W/Looks/{name}")
        sh = UsdShade.Shader.Define(stage, f"/W/Looks/{name}/S")
        sh.CreateIdAttr(shader_id)
        for key, (kind, value) in inputs.items():
            sh.CreateInput(key, kind).Set(value)
        mat.CreateSurfaceOutput().ConnectToSource(sh.ConnectableAPI(), "surface")
        return mat

    F, C = Sdf.ValueTypeNames.Float, Sdf.ValueTypeNames.Color3f
    mats = {"Default": material("Default"),
            "Metal": material("Metal", metallic=(F, 1.0), roughness=(F, 0.25), diffuseColor=(C, (1, 0.5, 0.25))),
            "Glass": material("Glass", opacity=(F, 0.0), ior=(F, 1.25), roughness=(F, 0.0)),
            "Cut": material("Cut", opacity=(F, 0.25), opacityThreshold=(F, 0.5)),
            "Lamp": material("Lamp", emissiveColor=(C, (2, 2, 2))),
            "Other": material("Other", shader_id="SomeVendorSurface")}
    for k, (name, mat) in enumerate(mats.items()):
        q = quad(stage, f"/W/{name}", 0.5, z=float(k))
        q.CreateDoubleSidedAttr(True)
        UsdShade.MaterialBindingAPI.Apply(q.GetPrim()).Bind(mat)
    stage.Save()
    import warnings
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        tr = translate_stage(tmp_path / "p.usda", with_camera=False)
        tr.log.warn()
    shaders = [str(w.message) for w in caught if "SomeVendorSurface" in str(w.message)]
    assert len(shaders) == 1, [str(w.message) for w in caught]      # one warning naming the id
    m = tr.document["materials"]
    assert m["/W/Looks/Default"] == {"type": "metallic_roughness", "base_color": pytest.approx([0.18] * 3),
                                     "metallic": 0.0, "roughness": 0.5}
    assert m["/W/Looks/Metal"]["metallic"] == 1.0 and m["/W/Looks/Metal"]["roughness"] == 0.25
    assert m["/W/Looks/Glass"] == {"type": "glass", "ior": 1.25, "ggx_alpha": 0.0}
    assert m["/W/Looks/Other"] == {"type": "lambertian", "albedo": [0.18] * 3}
    by_material = {o["material"]: o for o in tr.document["objects"]}
    assert "/W/Looks/Cut" not in by_material
    assert by_material["/W/Looks/Lamp"]["emission"] == [2.0, 2.0, 2.0]
    assert by_material["/W/Looks/Lamp"]["emits_both_sides"] is True


# ----------------------------------------------------------------------------- bad input, CLI

def _cli(tmp_path, stage_text, *extra, name="bad.usda"):
    (tmp_path / name).write_text(stage_text)
    out = tmp_path / "out.exr"
    return main(["render", str(tmp_path / name), "-o", str(out), "--spp", "1", "--quiet", *extra]), out


@pytest.mark.parametrize("text,match", [
    ("#usda 1.0\ndef Xform \"A\" {\n float x = \n", r"bad\.usda: cannot read USD layer: .*Expected"),
    ("#usda 1.0\n(\n subLayers = [@gone.usda@]\n)\ndef Sphere \"S\" {}\n", r"Could not load sublayer @gone\.usda@"),
    ("#usda 1.0\ndef Xform \"W\" (references = @nowhere.usda@) {}\n", r"Could not open asset @nowhere\.usda@"),
    ("#usda 1.0\ndef Xform \"W\" {}\n", r"no renderable prims"),
    ("#usda 1.0\ndef Sphere \"S\" {}\n", r"the stage has no camera"),
])
def test_bad_stages_fail_in_one_line(tmp_path, capsys, text, match):
    import re
    rc, out = _cli(tmp_path, text)
    err = capsys.readouterr().err.strip()
    assert rc == 2 and not out.exists() and not (tmp_path / "out.state").exists()
    assert len(err.splitlines()) == 1 and re.search(match, err), err


def test_cli_camera_path_and_info(tmp_path, capsys):
    text = ('#usda 1.0\ndef Sphere "S" {}\ndef Camera "Cam" {\n double3 xformOp:translate = (0, 0, 5)\n'
            ' uniform token[] xformOpOrder = ["xformOp:translate"]\n}\n')
    rc, out = _cli(tmp_path, text, "--camera", "/Nope", name="ok.usda")
    assert rc == 2 and "--camera: no camera prim /Nope (cameras: /Cam)" in capsys.readouterr().err
    assert main(["info", str(tmp_path / "ok.usda")]) == 0
    shown = capsys.readouterr().out
    assert "/S: Sphere -> sphere" in shown and "camera: /Cam" in shown
    rc, out = _cli(tmp_path, text, "--camera", "/Cam", name="ok.usda")
    assert rc == 0 and out.exists()


def test_gprims_tessellation_areas_and_facing(tmp_path):
    """Cube (exact: 6 s^2), Plane (exact, faces +axis), Cylinder (N facets: lateral area
    2 N r sin(pi/N) h, caps N r^2 sin(2 pi/N) / 2, exact polygon formulas), all facing outward
    (divergence theorem: sum of n A . centroid = 3 V > 0), and a Sphere under non-uniform scale."""
    from refrender.scene import usd_geometry as G
    stage = new_stage(tmp_path / "g.usda")
    UsdGeom.Cube.Define(stage, "/W/Cube").CreateSizeAttr(2.0)
    plane = UsdGeom.Plane.Define(stage, "/W/Plane")
    plane.CreateAxisAttr("Y")
    cyl = UsdGeom.Cylinder.Define(stage, "/W/Cyl")
    cyl.CreateAxisAttr("X")
    blob = UsdGeom.Sphere.Define(stage, "/W/Blob")
    UsdGeom.XformCommonAPI(blob).SetScale((1.0, 2.0, 1.0))
    UsdGeom.Capsule.Define(stage, "/W/Pill")
    stage.Save()
    objs = translate_stage(tmp_path / "g.usda", with_camera=False).document["objects"]

    def area_and_volume(o):
        p, t = np.array(o["positions"]), np.array(o["indices"])
        a, b, c = p[t[:, 0]], p[t[:, 1]], p[t[:, 2]]
        cr = np.cross(b - a, c - a)
        return 0.5 * np.linalg.norm(cr, axis=1).sum(), np.einsum("ij,ij->", cr, a) / 6.0

    cube, plane_o, cylinder, blob_o, pill = objs
    assert area_and_volume(cube) == pytest.approx((24.0, 8.0))
    p, t = np.array(plane_o["positions"]), np.array(plane_o["indices"])
    assert np.cross(p[t[0, 1]] - p[t[0, 0]], p[t[0, 2]] - p[t[0, 0]])[1] > 0       # +Y
    n, r, h = G.ROUND_SEGMENTS, 1.0, 2.0
    area, vol = area_and_volume(cylinder)
    assert area == pytest.approx(2 * n * r * math.sin(math.pi / n) * h + n * r * r * math.sin(2 * math.pi / n))
    assert vol == pytest.approx(0.5 * n * r * r * math.sin(2 * math.pi / n) * h)
    assert np.ptp(np.array(cylinder["positions"])[:, 0]) == pytest.approx(2.0)     # along X
    assert blob_o["shape"] == "triangles" and np.ptp(np.array(blob_o["positions"])[:, 1]) == pytest.approx(4.0)
    assert area_and_volume(blob_o)[1] > 0 and area_and_volume(pill)[1] > 0
    assert np.ptp(np.array(pill["positions"])[:, 2]) == pytest.approx(2.0)   # height 1 + 2 radii 0.5


def test_shaping_and_shadow_apis_are_ignored_with_one_warning_each(tmp_path):
    import warnings
    stage = new_stage(tmp_path / "s.usda")
    light = UsdLux.DiskLight.Define(stage, "/W/Spot")
    UsdLux.ShapingAPI.Apply(light.GetPrim()).CreateShapingConeAngleAttr(20.0)
    UsdLux.ShadowAPI.Apply(light.GetPrim()).CreateShadowEnableAttr(False)
    stage.Save()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        tr = translate_stage(tmp_path / "s.usda", with_camera=False)
        tr.log.warn()
    text = [str(w.message) for w in caught]
    assert sum("ShapingAPI" in t for t in text) == 1 and sum("shadow and light-linking" in t for t in text) == 1
    assert tr.document["objects"][0]["shape"] == "disk"


def test_cli_film_and_set_edit_the_translated_stage(tmp_path):
    """--film and --set apply to the document a stage translates into, as for a JSON scene."""
    from refrender.io import read_exr
    _twin_stage(tmp_path / "twin.usda")
    out = tmp_path / "o.exr"
    rc = main(["render", str(tmp_path / "twin.usda"), "-o", str(out), "--spp", "2", "--quiet",
               "--film", "6x4", "--set", "materials.grey.albedo=[0.25,0.25,0.25]"])
    assert rc == 2                                        # no material named grey: one-line error
    rc = main(["render", str(tmp_path / "twin.usda"), "-o", str(out), "--spp", "2", "--quiet",
               "--film", "6x4", "--set", "render.seed=5"])
    assert rc == 0 and read_exr(out).shape[:2] == (4, 6)
