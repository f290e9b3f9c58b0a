"""Working colour spaces, checked against colour-science (the field's reference
library): primaries and white points of each space as colour-science lists
them (its RGB_COLOURSPACES, which cite ITU-R BT.709, Academy S-2014-004 and
SMPTE EG 432-1), the normalised primary matrices, the Bradford adaptation and
the conversion matrices to 1e-6; the OpenEXR ``chromaticities`` attribute
(OpenEXR "ImfChromaticities": R, G, B and white xy, the Rec. 709 / D65 default
when absent) written and read; sRGB textures decoded to linear Rec. 709
(IEC 61966-2-1, colour-science's cctf) and converted.
"""
from __future__ import annotations

import colour
import numpy as np
import pytest

import refrender
from refrender import color as C
from refrender.io import read_exr

#: our names -> colour-science's RGB_COLOURSPACES keys
REFERENCE = {"linear_rec709": "ITU-R BT.709", "acescg": "ACEScg", "linear_p3_d65": "P3-D65"}
E_WHITE = colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["E"]


def _cs(name):
    if name == "cie_xyz":
        return None
    ref = colour.RGB_COLOURSPACES[REFERENCE[name]]
    # the matrices derived from the primaries (colour-science's "derived" mode)
    return colour.RGB_Colourspace(name, ref.primaries, ref.whitepoint,
                                  use_derived_matrix_RGB_to_XYZ=True, use_derived_matrix_XYZ_to_RGB=True)


@pytest.mark.parametrize("name", list(REFERENCE))
def test_primaries_and_white_match_colour_science(name):
    ref = colour.RGB_COLOURSPACES[REFERENCE[name]]
    c = np.array(C.SPACES[name])
    np.testing.assert_allclose(c[:6].reshape(3, 2), ref.primaries, atol=1e-12)
    np.testing.assert_allclose(c[6:], ref.whitepoint, atol=1e-12)


@pytest.mark.parametrize("name", list(REFERENCE))
def test_normalised_primary_matrix_matches_colour_science(name):
    ref = colour.RGB_COLOURSPACES[REFERENCE[name]]
    np.testing.assert_allclose(C.rgb_to_xyz(C.SPACES[name]),
                               colour.normalised_primary_matrix(ref.primaries, ref.whitepoint), atol=1e-6)


def test_bradford_matches_colour_science():
    src = colour.xy_to_XYZ(C.SPACES["linear_rec709"][6:])
    dst = colour.xy_to_XYZ(C.SPACES["acescg"][6:])
    np.testing.assert_allclose(C.bradford(src, dst),
                               colour.adaptation.matrix_chromatic_adaptation_VonKries(src, dst, "Bradford"),
                               atol=1e-6)


@pytest.mark.parametrize("src", list(C.SPACES))
@pytest.mark.parametrize("dst", list(C.SPACES))
def test_conversion_matrices_match_colour_science(src, dst):
    ours = C.conversion(src, dst)
    if src == dst:
        np.testing.assert_allclose(ours, np.eye(3), atol=1e-12)
        return
    if "cie_xyz" not in (src, dst):
        ref = colour.matrix_RGB_to_RGB(_cs(src), _cs(dst), chromatic_adaptation_transform="Bradford")
    else:
        # XYZ with white E (OpenEXR's XYZ chromaticities): RGB -> XYZ, Bradford to E, or back
        other = dst if src == "cie_xyz" else src
        cs = _cs(other)
        cat = colour.adaptation.matrix_chromatic_adaptation_VonKries(
            colour.xy_to_XYZ(cs.whitepoint), colour.xy_to_XYZ(E_WHITE), "Bradford")
        to_xyz = cat @ cs.matrix_RGB_to_XYZ
        ref = to_xyz if src != "cie_xyz" else np.linalg.inv(to_xyz)
    np.testing.assert_allclose(ours, ref, atol=1e-6)


def _doc(color_space=None, texture=None):
    albedo = {"texture": texture} if texture else [0.5, 0.4, 0.3]
    doc = {"version": 1,
           "camera": {"projection": "orthographic", "position": [0, 0, 1], "look_at": [0, 0, 0],
                      "up": [0, 1, 0], "view_height": 2.0},
           "film": {"width": 4, "height": 4},
           "materials": {"m": {"type": "lambertian", "albedo": albedo}},
           "objects": [{"shape": "rectangle", "origin": [-2, -2, 0], "edge1": [4, 0, 0],
                        "edge2": [0, 4, 0], "material": "m"}],
           "lights": [{"type": "environment", "radiance": [1, 1, 1]}],
           "render": {"spp": 4}}
    if color_space:
        doc["render"]["color_space"] = color_space
    return doc


@pytest.mark.parametrize("space", list(C.SPACES))
def test_every_exr_carries_its_chromaticities(tmp_path, space):
    res = refrender.render(refrender.load_scene(_doc(space)))
    res.save(tmp_path / "a.exr")
    img = read_exr(tmp_path / "a.exr")
    np.testing.assert_allclose(img.chromaticities, C.SPACES[space], atol=1e-7)   # float32 header
    assert C.space_of(img.chromaticities) == space
    assert (res.meta.get("color_space") or "linear_rec709") == space


def test_the_command_line_option_overrides_the_scene(tmp_path):
    res = refrender.render(refrender.load_scene(_doc()), color_space="acescg")
    assert res.meta["color_space"] == "acescg"
    from refrender.errors import RenderError
    with pytest.raises(RenderError, match="color_space"):
        refrender.render(refrender.load_scene(_doc()), color_space="srgb")


def test_srgb_textures_are_decoded_and_converted_to_the_working_space(tmp_path):
    import imageio.v3 as iio
    rng = np.random.default_rng(0)
    png = rng.integers(0, 256, size=(4, 4, 3), dtype=np.uint8)
    iio.imwrite(tmp_path / "t.png", png)
    (tmp_path / "s.json").write_text(__import__("json").dumps(_doc("acescg", "t.png")))
    sc = refrender.load_scene(tmp_path / "s.json")
    from refrender.geometry.compile import compile_scene
    S = compile_scene(sc)
    texels = S.tex_data[:48].reshape(4, 4, 3).astype(np.float64)
    linear709 = colour.cctf_decoding(png / 255.0, "sRGB")
    expected = colour.RGB_to_RGB(linear709, _cs("linear_rec709"), _cs("acescg"),
                                 chromatic_adaptation_transform="Bradford")
    np.testing.assert_allclose(texels, expected, atol=1e-6)      # float32 texels
    # in the default space the texels are the decoded values themselves
    sc709 = refrender.load_scene(_doc(None, str(tmp_path / "t.png")))
    np.testing.assert_allclose(compile_scene(sc709).tex_data[:48].reshape(4, 4, 3), linear709, atol=1e-6)


def test_a_texture_may_name_its_own_colour_space():
    """A checker (or linear image) is in the working space unless it says otherwise."""
    from refrender.geometry.compile import compile_scene
    colours = [[0.2, 0.5, 0.8], [0.9, 0.1, 0.3]]
    doc = _doc("acescg")
    doc["materials"]["m"]["albedo"] = {"checker": colours}
    plain = compile_scene(refrender.load_scene(doc)).tex_data[:6].reshape(2, 3)
    np.testing.assert_allclose(plain, colours, atol=1e-7)
    doc["materials"]["m"]["albedo"] = {"checker": colours, "color_space": "linear_rec709"}
    got = compile_scene(refrender.load_scene(doc)).tex_data[:6].reshape(2, 3)
    expected = colour.RGB_to_RGB(np.array(colours), _cs("linear_rec709"), _cs("acescg"),
                                 chromatic_adaptation_transform="Bradford")
    np.testing.assert_allclose(got, expected, atol=1e-6)
