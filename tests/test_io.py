"""Tests of refrender.io: EXR, PFM, PNG/HDR/TIFF/NPY reading, state files, atomic writes.

Numeric references are named beside each check; "§6a" is
IEC 61966-2-1:1999 (the sRGB transfer function).
"""

from __future__ import annotations

import json
import os
import warnings
import zipfile
from pathlib import Path

import numpy as np
import pytest

from refrender.errors import ImageError
from refrender.io import (
    PrecisionWarning,
    atomic_write,
    atomic_write_bytes,
    load_state,
    read_exr,
    read_image,
    save_state,
    srgb_decode,
    srgb_encode,
    state_path_for,
    write_exr,
    write_pfm,
    write_png_preview,
)

SEED = 20240611


def _one_line_error(excinfo, path) -> str:
    """The message of an ImageError: one line that names the file."""
    msg = str(excinfo.value)
    assert "\n" not in msg, msg
    assert Path(path).name in msg, msg
    return msg


def _no_temp_files(folder: Path) -> bool:
    return not [p for p in folder.iterdir() if p.name.endswith(".tmp")]


# ----------------------------------------------------------------------------- atomic writes


def test_atomic_write_replaces_target_and_leaves_no_temp(tmp_path):
    target = tmp_path / "out.bin"
    target.write_bytes(b"old")
    with atomic_write(target) as fh:
        fh.write(b"new content")
        # During the write the target still holds the old content.
        assert target.read_bytes() == b"old"
    assert target.read_bytes() == b"new content"
    assert _no_temp_files(tmp_path)
    atomic_write_bytes(target, b"\x00\x01")
    assert target.read_bytes() == b"\x00\x01"
    with atomic_write(tmp_path / "t.json", "w") as fh:
        fh.write("{\"é\": 1}")
    assert json.loads((tmp_path / "t.json").read_text(encoding="utf-8")) == {"é": 1}


def test_atomic_write_failure_keeps_target_untouched(tmp_path):
    target = tmp_path / "out.bin"
    target.write_bytes(b"precious")
    with pytest.raises(RuntimeError, match="writer failed"):
        with atomic_write(target) as fh:
            fh.write(b"half of the new")
            raise RuntimeError("writer failed")
    assert target.read_bytes() == b"precious"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.bin"]


def test_atomic_write_temp_name_and_missing_folder(tmp_path):
    target = tmp_path / "image.exr"
    with atomic_write(target) as fh:
        tmp_name = Path(fh.name).name
        assert Path(fh.name).parent == tmp_path
    assert tmp_name.startswith(".image.exr.") and tmp_name.endswith(".tmp")
    missing = tmp_path / "no_such_dir" / "x.bin"
    with pytest.raises(ImageError) as excinfo:
        atomic_write_bytes(missing, b"x")
    _one_line_error(excinfo, missing)


# ----------------------------------------------------------------------------- EXR


def test_exr_round_trip_by_name_with_views_variance_and_metadata(tmp_path):
    rng = np.random.default_rng(SEED)
    big = rng.standard_normal((9, 16, 3)).astype(np.float32) * 100.0
    mean = big[::2, ::3]  # non-contiguous view, shape (5, 6, 3)
    var_base = rng.random((3, 6, 5)).astype(np.float32)
    variance = var_base.transpose(2, 1, 0)  # non-contiguous transpose, shape (5, 6, 3)
    assert not mean.flags["C_CONTIGUOUS"] and not variance.flags["C_CONTIGUOUS"]
    x64 = 0.1 + 0.2
    assert float(np.float32(x64)) != x64  # a header float attribute would round this
    metadata = {
        "seed": 2**40,  # would wrap in an int32 header attribute
        "spp_total": 2**53 + 1,
        "exposure": x64,
        "tiles": [[0, 1, [2, 3]], {"a": [1.5, None, True]}],
        "scene": "cornell box é",
    }
    path = tmp_path / "render.exr"
    write_exr(path, mean, variance, metadata)
    assert _no_temp_files(tmp_path)

    img = read_exr(path)
    assert set(img.channels) == {"R", "G", "B", "variance.R", "variance.G", "variance.B"}
    for i, c in enumerate("RGB"):
        assert img.channels[c].dtype == np.float32
        np.testing.assert_array_equal(img.channels[c], mean[..., i])
        np.testing.assert_array_equal(img.channels[f"variance.{c}"], variance[..., i])
    np.testing.assert_array_equal(img.rgb(), mean)
    np.testing.assert_array_equal(img.layer("variance"), variance)
    assert img.layers() == ["variance"]
    assert img.shape == (5, 6)
    assert img.metadata == metadata
    assert img.metadata["exposure"] == x64
    # Readable per-key string attributes.
    assert img.header["refrender.seed"] == "1099511627776"
    assert img.header["refrender.scene"] == "cornell box é"
    assert json.loads(img.header["refrender.tiles"]) == metadata["tiles"]


def test_exr_float64_input_and_extra_layer(tmp_path):
    rng = np.random.default_rng(SEED + 1)
    mean = rng.random((4, 3, 3))  # float64
    albedo = rng.random((4, 3, 3))
    path = tmp_path / "a.exr"
    write_exr(path, mean, layers={"albedo": albedo})
    img = read_exr(path)
    np.testing.assert_array_equal(img.rgb(), mean.astype(np.float32))
    np.testing.assert_array_equal(img.layer("albedo"), albedo.astype(np.float32))
    assert img.metadata == {}
    with pytest.raises(ImageError, match="variance"):
        img.layer("variance")


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"mean": np.zeros((4, 4))}, "shape"),
        ({"mean": np.zeros((4, 4, 2))}, "shape"),
        ({"mean": np.zeros((4, 4, 3)), "variance": np.zeros((4, 5, 3))}, "variance"),
        ({"mean": np.zeros((4, 4, 3)), "metadata": {"bad": float("nan")}}, "JSON"),
        ({"mean": np.zeros((4, 4, 3)), "metadata": {"bad": object()}}, "JSON"),
        ({"mean": np.array([["a"]])}, "real"),
    ],
)
def test_write_exr_bad_input_is_one_line_and_leaves_target(tmp_path, kwargs, match):
    path = tmp_path / "keep.exr"
    path.write_bytes(b"previous")
    with pytest.raises(ImageError, match=match) as excinfo:
        write_exr(path, **kwargs)
    assert "\n" not in str(excinfo.value)
    assert path.read_bytes() == b"previous"
    assert _no_temp_files(tmp_path)


def test_read_exr_bad_files(tmp_path):
    good = tmp_path / "good.exr"
    write_exr(good, np.random.default_rng(SEED).random((64, 64, 3)))
    data = good.read_bytes()

    not_exr = tmp_path / "text.exr"
    not_exr.write_text("hello")
    with pytest.raises(ImageError, match="not an OpenEXR file") as excinfo:
        read_exr(not_exr)
    _one_line_error(excinfo, not_exr)

    for frac in (0.5, 0.95):
        truncated = tmp_path / f"trunc{int(frac * 100)}.exr"
        truncated.write_bytes(data[: int(len(data) * frac)])
        with pytest.raises(ImageError, match="truncated or corrupted") as excinfo:
            read_exr(truncated)
        _one_line_error(excinfo, truncated)

    missing = tmp_path / "missing.exr"
    with pytest.raises(ImageError, match="no such file") as excinfo:
        read_exr(missing)
    _one_line_error(excinfo, missing)


# ----------------------------------------------------------------------------- sRGB (§6a)

# (linear, encoded) pairs from IEC 61966-2-1:1999 (IEC 61966-2-1:1999), 6 significant digits.
_SRGB_ENCODE_TABLE = [
    (0.001, 0.0129200),
    (0.0031308, 0.0404499),
    (0.01, 0.0998528),
    (0.18, 0.461356),
    (0.5, 0.735357),
    (1.0, 1.00000),
]
_SRGB_DECODE_TABLE = [
    (0.02, 0.00154799),
    (0.04045, 0.00313080),
    (0.5, 0.214041),
    (128 / 255, 0.215861),
    (188 / 255, 0.502886),
    (1.0, 1.00000),
]


def test_srgb_encode_decode_match_iec_61966_2_1_table():
    lin, enc = np.array(_SRGB_ENCODE_TABLE).T
    np.testing.assert_allclose(srgb_encode(lin), enc, rtol=5e-6)
    enc2, lin2 = np.array(_SRGB_DECODE_TABLE).T
    np.testing.assert_allclose(srgb_decode(enc2), lin2, rtol=5e-6)
    assert srgb_encode(0.5).dtype == np.float64
    # §6a: the float64 round trip is exact to 4e-16.
    x = np.linspace(0.0, 1.0, 10001)
    np.testing.assert_allclose(srgb_decode(srgb_encode(x)), x, rtol=0, atol=1e-15)


# ----------------------------------------------------------------------------- PNG


def test_png_preview_8bit_levels_match_srgb_table(tmp_path):
    import imageio.v3 as iio

    img = np.zeros((2, 3, 3))
    img[0, 0] = 0.18  # §6a: 8-bit 118
    img[0, 1] = 0.5  # §6a: 8-bit 188
    img[0, 2] = [2.0, -1.0, 1.0]  # clamped to [0, 1]
    img[1, 0] = 0.09  # with exposure +1 below this becomes 0.18
    path = tmp_path / "preview.png"
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        write_png_preview(path, img)
    raw = iio.imread(path)
    assert raw.dtype == np.uint8 and raw.shape == (2, 3, 3)
    assert raw[0, 0].tolist() == [118, 118, 118]
    assert raw[0, 1].tolist() == [188, 188, 188]
    assert raw[0, 2].tolist() == [255, 0, 255]
    write_png_preview(path, img, exposure=1.0)
    assert iio.imread(path)[1, 0].tolist() == [118, 118, 118]
    assert _no_temp_files(tmp_path)


def test_png_preview_nan_inf_written_as_zero_with_one_warning(tmp_path):
    import imageio.v3 as iio

    img = np.full((3, 3, 3), 0.5)
    img[0, 0, 0] = np.nan
    img[1, 1] = np.inf
    img[2, 2, 2] = -np.inf
    path = tmp_path / "p.png"
    with pytest.warns(PrecisionWarning, match="3 pixel") as record:
        write_png_preview(path, img)
    assert len(record) == 1
    raw = iio.imread(path)
    assert raw[0, 0].tolist() == [0, 188, 188]
    assert raw[1, 1].tolist() == [0, 0, 0]
    assert raw[2, 2].tolist() == [188, 188, 0]


def test_read_png_warns_and_decodes_srgb(tmp_path):
    import imageio.v3 as iio

    raw = np.array([[[188, 128, 0], [255, 255, 255]]], dtype=np.uint8)
    path = tmp_path / "ref.png"
    iio.imwrite(path, raw)
    with pytest.warns(PrecisionWarning, match="8-bit"):
        lin = read_image(path)
    assert lin.shape == (1, 2, 3)
    # §6a: 188/255 -> 0.502886, 128/255 -> 0.215861.
    np.testing.assert_allclose(lin[0, 0], [0.502886, 0.215861, 0.0], rtol=5e-6)
    np.testing.assert_allclose(lin[0, 1], 1.0, rtol=1e-7)


def test_read_16bit_png_keeps_16_bits(tmp_path):
    cv2 = pytest.importorskip("cv2")
    rgb = np.array([[[30000, 1000, 65535], [12345, 0, 40000]]], dtype=np.uint16)
    path = tmp_path / "deep.png"
    assert cv2.imwrite(str(path), rgb[..., ::-1])  # OpenCV takes BGR
    with pytest.warns(PrecisionWarning, match="16-bit"):
        lin = read_image(path)
    # Decoding of the exact 16-bit codes (an 8-bit read would be off by up to ~1e-2).
    np.testing.assert_allclose(lin, srgb_decode(rgb / 65535.0), rtol=1e-6, atol=1e-9)


# ----------------------------------------------------------------------------- PFM


def test_pfm_round_trip_and_orientation(tmp_path):
    h, w = 4, 5
    rows = np.arange(h, dtype=np.float32)[:, None] * np.ones((1, w), np.float32)
    img = np.stack([rows, rows + 10.0, rows * -0.5 + np.arange(w)], axis=-1)  # row 0 is the top
    path = tmp_path / "g.pfm"
    write_pfm(path, img)
    data = path.read_bytes()
    header = f"PF\n{w} {h}\n-1.0\n".encode()
    assert data.startswith(header)
    # PFM stores rows bottom-to-top (common practice; pitfalls.md): the first stored row is
    # the bottom row of the picture.
    first_row = np.frombuffer(data, "<f4", count=w * 3, offset=len(header)).reshape(w, 3)
    np.testing.assert_array_equal(first_row, img[-1])
    back = read_image(path)
    assert back.dtype == np.float32 and back.shape == (h, w, 3)
    np.testing.assert_array_equal(back, img)

    grey = tmp_path / "grey.pfm"
    write_pfm(grey, rows)
    np.testing.assert_array_equal(read_image(grey), rows[..., None])


def test_pfm_big_endian_and_bad_files(tmp_path):
    img = np.array([[1.0, 2.0], [3.0, 4.0]], np.float32)  # row 0 = top = [1, 2]
    path = tmp_path / "be.pfm"
    # Positive scale = big-endian (common practice); rows bottom-up.
    path.write_bytes(b"Pf\n2 2\n1.0\n" + img[::-1].astype(">f4").tobytes())
    np.testing.assert_array_equal(read_image(path)[..., 0], img)

    trunc = tmp_path / "t.pfm"
    trunc.write_bytes(b"PF\n2 2\n-1.0\n" + b"\x00" * 20)
    with pytest.raises(ImageError, match="truncated") as excinfo:
        read_image(trunc)
    _one_line_error(excinfo, trunc)
    bad = tmp_path / "b.pfm"
    bad.write_bytes(b"P6\n2 2\n255\n" + b"\x00" * 12)
    with pytest.raises(ImageError, match="not a PFM") as excinfo:
        read_image(bad)
    _one_line_error(excinfo, bad)


# ----------------------------------------------------------------------------- HDR, EXR, TIFF, NPY via read_image


def test_read_radiance_hdr_within_rgbe_precision(tmp_path):
    cv2 = pytest.importorskip("cv2")
    rng = np.random.default_rng(SEED + 2)
    rgb = np.empty((6, 7, 3), np.float32)
    rgb[..., 0] = rng.uniform(5.0, 10.0, (6, 7))  # distinct channel ranges catch a BGR swap
    rgb[..., 1] = rng.uniform(1.0, 2.0, (6, 7))
    rgb[..., 2] = rng.uniform(0.5, 1.0, (6, 7))
    path = tmp_path / "x.hdr"
    assert cv2.imwrite(str(path), np.ascontiguousarray(rgb[..., ::-1]))
    back = read_image(path)
    assert back.shape == (6, 7, 3) and back.dtype == np.float32
    # RGBE keeps an 8-bit mantissa per channel under a shared exponent (common practice):
    # error below ~1 % of the largest channel of each pixel.
    err = np.abs(back - rgb) / rgb.max(axis=-1, keepdims=True)
    assert err.max() < 0.01


def test_read_image_exr_variants(tmp_path):
    import OpenEXR

    rng = np.random.default_rng(SEED + 3)
    chans = {c: rng.random((3, 4)).astype(np.float32) for c in "RGBA"}
    header = {"compression": OpenEXR.ZIP_COMPRESSION, "type": OpenEXR.scanlineimage}
    rgba = tmp_path / "rgba.exr"
    # OpenEXR.File replaces the values of the dicts it is given: pass copies.
    with OpenEXR.File(dict(header), dict(chans)) as f:
        f.write(str(rgba))
    np.testing.assert_array_equal(read_image(rgba), np.stack([chans[c] for c in "RGBA"], -1))

    depth = tmp_path / "z.exr"
    with OpenEXR.File(dict(header), {"Z": chans["A"]}) as f:
        f.write(str(depth))
    np.testing.assert_array_equal(read_image(depth), chans["A"][..., None])

    layer_only = tmp_path / "layer.exr"
    with OpenEXR.File(dict(header), {f"diffuse.{c}": chans[c] for c in "RGB"}) as f:
        f.write(str(layer_only))
    np.testing.assert_array_equal(read_image(layer_only), np.stack([chans[c] for c in "RGB"], -1))

    two = tmp_path / "two.exr"
    with OpenEXR.File(dict(header), {"U": chans["R"], "V": chans["G"]}) as f:
        f.write(str(two))
    with pytest.raises(ImageError, match="no R,G,B") as excinfo:
        read_image(two)
    _one_line_error(excinfo, two)


def test_read_tiff_float_or_clear_error(tmp_path):
    path = tmp_path / "f.tif"
    img = np.random.default_rng(SEED + 4).random((3, 4, 3)).astype(np.float32)
    try:
        import tifffile
    except ImportError:
        path.write_bytes(b"II*\x00")
        with pytest.raises(ImageError, match="tifffile") as excinfo:
            read_image(path)
        _one_line_error(excinfo, path)
        return
    tifffile.imwrite(path, img)
    np.testing.assert_array_equal(read_image(path), img)


def test_read_npy(tmp_path):
    rng = np.random.default_rng(SEED + 5)
    grey = rng.random((3, 4))
    np.save(tmp_path / "g.npy", grey)
    out = read_image(tmp_path / "g.npy")
    assert out.shape == (3, 4, 1) and out.dtype == np.float64
    np.testing.assert_array_equal(out[..., 0], grey)
    colour = rng.random((3, 4, 3)).astype(np.float32)
    np.save(tmp_path / "c.npy", colour)
    np.testing.assert_array_equal(read_image(tmp_path / "c.npy"), colour)

    np.save(tmp_path / "v.npy", np.zeros(5))
    with pytest.raises(ImageError, match="shape") as excinfo:
        read_image(tmp_path / "v.npy")
    _one_line_error(excinfo, "v.npy")
    np.save(tmp_path / "o.npy", np.array([[{"a": 1}]], dtype=object), allow_pickle=True)
    with pytest.raises(ImageError) as excinfo:
        read_image(tmp_path / "o.npy")
    _one_line_error(excinfo, "o.npy")


def test_read_image_unknown_extension_missing_and_corrupt(tmp_path):
    odd = tmp_path / "picture.xyz"
    odd.write_bytes(b"data")
    with pytest.raises(ImageError, match="unsupported image format") as excinfo:
        read_image(odd)
    _one_line_error(excinfo, odd)

    missing = tmp_path / "gone.png"
    with pytest.raises(ImageError, match="no such file") as excinfo:
        read_image(missing)
    _one_line_error(excinfo, missing)

    for name in ("broken.png", "broken.hdr", "broken.jpg", "broken.exr"):
        bad = tmp_path / name
        bad.write_bytes(b"\x89PNG\r\n\x1a\n" + b"garbage" * 10)
        with pytest.raises(ImageError) as excinfo:
            read_image(bad)
        _one_line_error(excinfo, bad)


# ----------------------------------------------------------------------------- state files


def _state_arrays(seed: int = SEED) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    # Arbitrary bit patterns, including NaN payloads and subnormals, must survive bit-exactly.
    bits = rng.integers(0, 2**63, size=(5, 6, 3), dtype=np.int64).astype(np.uint64)
    return {
        "sum": bits.view(np.float64),
        "sum_sq": rng.random((5, 6, 3)) * 1e300,
        "count": rng.integers(0, 2**62, size=(5, 6), dtype=np.int64),
        "scalar": np.array(3.5),
    }


def test_state_round_trip_bit_exact(tmp_path):
    arrays = _state_arrays()
    meta = {"spp": 2**40, "seed": 12345678901234567890, "scene_hash": "ab" * 32, "x": 0.1 + 0.2}
    meta_before = dict(meta)
    path = tmp_path / "out.state"
    save_state(path, arrays, meta)
    assert meta == meta_before  # caller's dict not modified
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.state"]  # no ".npz" appended, no temp
    loaded, meta_out = load_state(path)
    assert set(loaded) == set(arrays)
    for name, arr in arrays.items():
        assert loaded[name].dtype == arr.dtype and loaded[name].shape == arr.shape
        assert loaded[name].tobytes() == arr.tobytes()
    assert meta_out["format"] == "refrender-state" and meta_out["format_version"] == 1
    assert len(meta_out["sha256"]) == 64
    assert {k: meta_out[k] for k in meta} == meta
    with zipfile.ZipFile(path) as zf:  # plain npz: only .npy members
        assert all(n.endswith(".npy") for n in zf.namelist())


def test_state_truncated_and_flipped_bytes(tmp_path):
    arrays = _state_arrays()
    path = tmp_path / "a.state"
    save_state(path, arrays, {"spp": 16})
    data = path.read_bytes()

    for cut in (len(data) - 1, len(data) // 2, 10, 0):
        bad = tmp_path / f"cut{cut}.state"
        bad.write_bytes(data[:cut])
        with pytest.raises(ImageError, match="not a refrender state file") as excinfo:
            load_state(bad)
        _one_line_error(excinfo, bad)

    # One flipped byte inside the float64 data.
    offset = data.find(arrays["sum_sq"].tobytes())
    assert offset > 0
    flipped = bytearray(data)
    flipped[offset + 77] ^= 0x01
    bad = tmp_path / "flip.state"
    bad.write_bytes(bytes(flipped))
    with pytest.raises(ImageError, match="corrupted") as excinfo:
        load_state(bad)
    _one_line_error(excinfo, bad)

    # Any flipped byte: either a one-line ImageError or (for zip fields that carry no
    # content, such as timestamps) the exact original content.
    rng = np.random.default_rng(SEED)
    for pos in rng.choice(len(data), size=60, replace=False):
        flipped = bytearray(data)
        flipped[pos] ^= 0xFF
        bad.write_bytes(bytes(flipped))
        try:
            loaded, _ = load_state(bad)
        except ImageError as exc:
            assert "\n" not in str(exc)
            continue
        assert all(loaded[k].tobytes() == arrays[k].tobytes() for k in arrays)


def test_state_checksum_mismatch_detected(tmp_path):
    """Arrays altered but stored with valid zip CRCs: only the SHA-256 can catch it."""
    arrays = _state_arrays()
    path = tmp_path / "a.state"
    save_state(path, arrays, {})
    with np.load(path) as npz:
        members = {k: npz[k] for k in npz.files}
    members["count"] = members["count"].copy()
    members["count"][0, 0] += 1
    forged = tmp_path / "forged.state"
    with open(forged, "wb") as fh:
        np.savez(fh, **members)
    with pytest.raises(ImageError, match=r"corrupted \(checksum mismatch\)") as excinfo:
        load_state(forged)
    _one_line_error(excinfo, forged)


def test_state_not_a_state_file(tmp_path):
    plain = tmp_path / "plain.state"
    with open(plain, "wb") as fh:
        np.savez(fh, a=np.zeros(3))
    with pytest.raises(ImageError, match="not a refrender state file") as excinfo:
        load_state(plain)
    _one_line_error(excinfo, plain)

    tagged = tmp_path / "tagged.state"
    meta = json.dumps({"format": "something-else", "format_version": 1}).encode()
    with open(tagged, "wb") as fh:
        np.savez(fh, __refrender_metadata__=np.frombuffer(meta, np.uint8))
    with pytest.raises(ImageError, match="not a refrender state file") as excinfo:
        load_state(tagged)
    _one_line_error(excinfo, tagged)

    single = tmp_path / "single.state"
    with open(single, "wb") as fh:
        np.save(fh, np.zeros(3))
    with pytest.raises(ImageError, match="not a refrender state file") as excinfo:
        load_state(single)
    _one_line_error(excinfo, single)

    with pytest.raises(ImageError, match="no such file"):
        load_state(tmp_path / "missing.state")


def test_save_state_rejects_bad_input_without_writing(tmp_path):
    path = tmp_path / "x.state"
    with pytest.raises(ImageError, match="reserved"):
        save_state(path, {"a": np.zeros(2)}, {"format": "mine"})
    with pytest.raises(ImageError, match="JSON"):
        save_state(path, {"a": np.zeros(2)}, {"bad": float("inf")})
    with pytest.raises(ImageError, match="numeric"):
        save_state(path, {"a": np.array([object()])}, {})
    assert list(tmp_path.iterdir()) == []


def test_state_path_for():
    assert state_path_for("out.exr") == Path("out.state")
    assert state_path_for(os.path.join("renders", "img.v2.exr")) == Path("renders", "img.v2.state")
    assert state_path_for(Path("noext")) == Path("noext.state")
