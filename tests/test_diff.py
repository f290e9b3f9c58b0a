"""The diff tool (refrender.compare, tools/diff.py): metrics against
scikit-image, significance against both frames' noise, diagnosis of
injected faults, inputs, outputs and CI gating exit codes.

Renders are tiny (80 x 60 demo room, 64 x 48 plane) with fixed seeds.
"""
import json
import math
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import refrender
from refrender.compare import compare, diagnose, load_frame, metrics as M, significance as S
from refrender.compare.cli import main as diff_main
from refrender.compare.diagnose import shift_image
from refrender.io import srgb_encode, write_exr, write_pfm

ROOT = Path(__file__).resolve().parents[1]
skm = pytest.importorskip("skimage.metrics")


@pytest.fixture(autouse=True)
def _mpl(tmp_path, monkeypatch):
    monkeypatch.setenv("MPLCONFIGDIR", str(tmp_path / "mpl"))


@pytest.fixture(scope="module")
def room():
    """Reference (256 spp) and an independent test render (64 spp, other seed)."""
    doc = json.loads((ROOT / "scenes" / "reading_nook.json").read_text())
    doc["film"] = {"width": 80, "height": 60}
    scene = refrender.load_scene(doc, base_dir=ROOT / "scenes")
    ref = refrender.render(scene, spp=256, seed=1)
    test = refrender.render(scene, spp=64, seed=2)
    return ref.mean, ref.variance, test.mean, test.variance


# ----------------------------------------------------------------------------- metrics

def test_metrics_against_scikit_image():
    """MSE, PSNR (explicit data_range = our peak) and SSIM with the standard
    settings (gaussian_weights=True, sigma=1.5, use_sample_covariance=False)
    agree with scikit-image to float64 rounding."""
    rng = np.random.default_rng(7)
    ref = rng.gamma(2.0, 0.5, size=(37, 53, 3))
    test = ref * (1 + 0.1 * rng.standard_normal(ref.shape))
    assert M.mse(ref, test) == pytest.approx(skm.mean_squared_error(ref, test), rel=1e-12)
    assert M.rmse(ref, test) == pytest.approx(math.sqrt(skm.mean_squared_error(ref, test)), rel=1e-12)
    peak = float(ref.max())
    assert M.psnr(ref, test, peak=peak) == pytest.approx(
        skm.peak_signal_noise_ratio(ref, test, data_range=peak), rel=1e-12)
    a, b = M.tonemap(ref), M.tonemap(test)
    want = skm.structural_similarity(a, b, gaussian_weights=True, sigma=1.5, use_sample_covariance=False,
                                     data_range=1.0, channel_axis=2)
    assert M.ssim(ref, test) == pytest.approx(want, abs=1e-9)
    full = M.all_metrics(ref, test)
    for i, c in enumerate("RGB"):
        want_c = skm.structural_similarity(a[..., i], b[..., i], gaussian_weights=True, sigma=1.5,
                                           use_sample_covariance=False, data_range=1.0)
        assert full["ssim"][c] == pytest.approx(want_c, abs=1e-9)
        assert full["mse"][c] == pytest.approx(skm.mean_squared_error(ref[..., i], test[..., i]), rel=1e-12)
    y = M.luminance(ref)
    assert full["psnr_peak"] == pytest.approx(float(y.max()))


def test_metric_definitions_by_hand():
    """The stated formulas on two values, worked by hand (common practice definitions)."""
    r = np.array([1.0, 0.0])
    t = np.array([1.5, 0.1])
    eps = 1e-2
    assert M.relmse(r, t) == pytest.approx((0.25 / (1 + eps) + 0.01 / eps) / 2)
    assert M.mape(r, t) == pytest.approx((0.5 / 1.01 + 0.1 / 0.01) / 2)
    assert M.smape(r, t) == pytest.approx((1.0 / 2.51 + 0.2 / 0.11) / 2)
    assert M.bias(r, t) == pytest.approx(0.3)
    assert M.max_abs(r, t) == pytest.approx(0.5)
    assert M.psnr(r, r + 0.0, peak=1.0) == math.inf
    with pytest.raises(ValueError):
        M.psnr(r, t, peak=0.0)


def test_mask_selects_values():
    rng = np.random.default_rng(3)
    ref = rng.random((10, 12, 3))
    test = ref.copy()
    test[:5] += 1.0
    mask = np.zeros((10, 12), dtype=bool)
    mask[5:] = True
    assert M.mse(ref, test, mask=mask) == 0.0
    assert M.mse(ref, test) == pytest.approx(0.5)


# ----------------------------------------------------------------------------- significance

def _plane_scene(width=64, height=48):
    return refrender.load_scene({
        "version": 1, "camera": {"position": [0, 0, 1.5], "look_at": [0, 0, 0], "fov_y": 40},
        "film": {"width": width, "height": height},
        "materials": {"m": {"type": "lambertian", "albedo": [0.7, 0.5, 0.3]}},
        "objects": [{"shape": "rectangle", "origin": [-2, -2, 0], "edge1": [4, 0, 0], "edge2": [0, 4, 0],
                     "material": "m"},
                    {"shape": "rectangle", "origin": [-1, -1, 2], "edge1": [0, 2, 0], "edge2": [2, 0, 0],
                     "emission": [2, 2, 2]}],
        "render": {"spp": 64, "seed": 0, "max_bounces": 1}})


def test_null_case_chance_fraction():
    """Two independent unbiased renders of a smoothly lit plane: the fraction of
    channel values beyond |z| > 3 lies within 4 binomial standard errors of the
    normal tail erfc(3/sqrt 2) = 0.27 % (common practice), the pooled bias is
    within 4 standard errors, and the verdict is the null one."""
    scene = _plane_scene()
    ref = refrender.render(scene, spp=256, seed=11)
    test = refrender.render(scene, spp=256, seed=12)
    out = S.analyse(ref.mean, test.mean, ref.variance, test.variance, spp_ref=256, spp_test=256)
    n, p = out["n_values"], S.CHANCE_FRACTION
    assert n == 64 * 48 * 3
    assert abs(out["n_significant"] - n * p) <= 4 * math.sqrt(n * p * (1 - p)), out["n_significant"]
    assert abs(out["global_test"]["t"]) < 4
    assert out["significant"] is False
    assert out["verdict"] == "differences are consistent with the frames' noise"
    assert diagnose(ref.mean, test.mean, ref.variance, test.variance) == []
    # the same test frame 3 % too bright is flagged, globally
    biased = S.analyse(ref.mean, test.mean * 1.03, ref.variance, test.variance * 1.03 ** 2,
                       spp_ref=256, spp_test=256)
    assert biased["significant"] and "globally" in biased["verdict"]
    assert biased["relative_bias"]["value"] == pytest.approx(0.03, abs=4 * biased["relative_bias"]["se"] + 1e-3)


def test_null_case_demo_room(room):
    """Independent renders of the demo room: no diagnosis, null verdict."""
    rm, rv, tm, tv = room
    rep = compare(refrender.compare.Frame(rm, rv, "ref"), refrender.compare.Frame(tm, tv, "test"))
    assert rep["diagnoses"] == []
    assert rep["significance"]["significant"] is False, rep["verdict"]
    assert diagnose(rm, tm, rv, None) == []        # also when the test carries no variance


def test_regional_bias_is_located(room):
    """A 20 % darker corner (x 60–80, y 0–15) is flagged in the right cells only."""
    rm, rv, tm, tv = room
    t = tm.copy()
    t[0:15, 60:80] *= 0.8
    out = S.analyse(rm, t, rv, tv, grid=(4, 4), spp_ref=256, spp_test=64)
    flagged = [c for c in out["regions"] if c["flagged"]]
    finest = [c for c in flagged if c["grid"] == "4x4"]
    assert finest and all(c["x0"] >= 60 and c["y1"] <= 15 for c in finest)
    assert all(c["x1"] == 80 and c["y0"] == 0 for c in flagged)       # coarser cells hold the corner
    assert "significant difference, here" in out["verdict"]


def test_tolerance_warning(room):
    """A 1 % per-pixel tolerance cannot be resolved by a 256-spp 80 x 60 reference."""
    rm, rv, tm, tv = room
    out = S.analyse(rm, tm, rv, tv, tolerance=0.01)
    assert out["resolution"]["resolved"] is False
    assert any("too noisy" in n for n in out["notes"])
    assert S.analyse(rm, tm, rv, tv, tolerance=10.0)["resolution"]["resolved"] is True


# ----------------------------------------------------------------------------- diagnosis

def _faults(tm, tv):
    clamp = float(np.percentile(tm, 95))
    nan = tm.copy()
    nan[5, 7, 1] = np.nan
    return {
        "scale": (tm * math.pi, tv * math.pi ** 2, "scale", math.pi),
        "srgb": (srgb_encode(np.maximum(tm, 0)), None, "srgb_encoded", "sRGB"),
        "flip": (tm[::-1], tv[::-1], "flip_vertical", None),
        "mirror": (tm[:, ::-1], tv[:, ::-1], "flip_horizontal", None),
        "swap": (tm[..., [2, 1, 0]], tv[..., [2, 1, 0]], "channel_swap", "BGR"),
        "shift1": (shift_image(tm, 1, 0), shift_image(tv, 1, 0), "shift", (1.0, 0.0)),
        "shift05": (shift_image(tm, 0, 0.5), shift_image(tv, 0, 0.5, squared_weights=True), "shift", (0.0, 0.5)),
        "nan": (nan, tv, "non_finite", 1),
        "clamp": (np.minimum(tm, clamp), tv, "clamp", clamp),
    }


@pytest.mark.parametrize("with_test_variance", [True, False])
def test_injected_faults_are_diagnosed(room, with_test_variance):
    """Each classic fault, injected into an independent render, is the first
    diagnosis with the right parameter: scale within 4 standard errors or 1 %
    of π and named "π"; shifts within 0.1 px; the channel order; the clamp level."""
    rm, rv, tm, tv = room
    for name, (t, vt, fault, param) in _faults(tm, tv).items():
        vt = vt if with_test_variance else None
        found = diagnose(rm, t, rv, vt)
        assert found, name
        first = found[0]
        assert first["fault"] == fault, (name, found)
        assert first["confidence"] >= 0.9, (name, first)
        if fault == "scale":
            assert first["parameter"] == pytest.approx(param, rel=0.01)
            assert first["named"] == "π"
        elif fault == "shift":
            assert np.allclose(first["parameter"], param, atol=0.1), (name, first)
        elif fault == "clamp":
            assert first["parameter"] == pytest.approx(param)
        elif param is not None:
            assert first["parameter"] == param
        if fault != "non_finite":
            assert len(found) == 1, (name, found)


def test_named_scales():
    from refrender.compare.diagnose import name_scale
    assert name_scale(math.pi) == "π"
    assert name_scale(1 / math.pi) == "1/π"
    assert name_scale(0.5).startswith("1/2")
    assert name_scale(4.0).startswith("4 (+2 stops")
    assert name_scale(1.3) is None


# ----------------------------------------------------------------------------- command line

@pytest.fixture(scope="module")
def files(room, tmp_path_factory):
    d = tmp_path_factory.mktemp("diff")
    rm, rv, tm, tv = room
    write_exr(d / "ref.exr", rm, rv, {"program": "refrender"})
    write_exr(d / "test.exr", tm, tv, {})
    write_exr(d / "bright.exr", tm * 2.0, tv * 4.0, {})
    write_pfm(d / "test.pfm", tm)
    write_pfm(d / "small.pfm", tm[:50])
    np.save(d / "test.npy", tm.astype(np.float32))
    return d


def _run(argv, capsys):
    rc = diff_main([str(a) for a in argv])
    out = capsys.readouterr()
    return rc, out.out, out.err


def test_cli_pass_fail_and_json(files, capsys, tmp_path):
    f = files
    rc, out, err = _run([f / "ref.exr", f / "test.exr", "--json", tmp_path / "r.json",
                         "--fail-if", "relmse>0.5", "--fail-if", "significant"], capsys)
    assert rc == 0, err
    assert "verdict: differences are consistent" in out
    rep = json.loads((tmp_path / "r.json").read_text())
    assert set(M.METRICS) <= set(rep["metrics"])
    assert rep["significance"]["significant"] is False and rep["diagnoses"] == []
    assert rep["gating"]["failed"] == []
    rc, out, err = _run([f / "ref.exr", f / "bright.exr", "--fail-if", "relmse>0.01",
                         "--fail-if", "psnr<200", "--fail-if", "ssim.R<0"], capsys)
    assert rc == 1
    assert "relmse>0.01" in err and "psnr<200" in err and "ssim.R<0" not in err
    assert "scale" in out and "(+1 stop)" in out


def test_cli_input_errors_exit_2(files, capsys, tmp_path):
    f = files
    cases = [
        ([f / "ref.exr", f / "small.pfm"], "size mismatch"),
        ([f / "ref.exr", tmp_path / "missing.exr"], "no such file"),
        ([f / "ref.exr", f / "test.exr", "--fail-if", "nonsense>1"], "unknown quantity"),
        ([f / "ref.exr", f / "test.exr", "--fail-if", "relmse>>1"], "cannot parse"),
        ([f / "ref.exr", f / "test.exr", "--crop", "0,0,500,10"], "--crop"),
        ([f / "ref.exr", f / "test.exr", "--layer", "nolayer"], "nolayer.R"),
    ]
    for argv, text in cases:
        out_json = tmp_path / "never.json"
        rc, out, err = _run(argv + ["--json", out_json], capsys)
        assert rc == 2, (argv, err)
        assert text in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err, err
        assert not out_json.exists()


def test_cli_other_formats_crop_and_mask(files, capsys, tmp_path):
    """PFM and NPY test frames; crop and mask restrict the comparison; an 8-bit
    PNG is linearised with a precision warning."""
    f = files
    for name in ("test.pfm", "test.npy"):
        rc, out, err = _run([f / "ref.exr", f / name, "--json", tmp_path / "a.json"], capsys)
        assert rc == 0, err
        rep = json.loads((tmp_path / "a.json").read_text())
        assert rep["inputs"]["test_variance"] is False
        assert any("variance is taken as zero" in n for n in rep["significance"]["notes"])
    rc, out, err = _run([f / "ref.exr", f / "test.exr", "--crop", "10,5,50,45", "--json", tmp_path / "c.json"],
                        capsys)
    rep = json.loads((tmp_path / "c.json").read_text())
    assert rc == 0 and rep["inputs"]["pixels_compared"] == 40 * 40
    mask = np.zeros((60, 80), dtype=np.uint8)
    mask[:, :30] = 255
    import imageio.v3 as iio
    iio.imwrite(tmp_path / "mask.png", mask)
    rc, out, err = _run([f / "ref.exr", f / "test.exr", "--mask", tmp_path / "mask.png",
                         "--json", tmp_path / "m.json"], capsys)
    rep = json.loads((tmp_path / "m.json").read_text())
    assert rc == 0 and rep["inputs"]["pixels_compared"] == 60 * 30
    rm = load_frame(f / "ref.exr").rgb
    png8 = (np.clip(srgb_encode(np.clip(rm, 0, 1)), 0, 1) * 255 + 0.5).astype(np.uint8)
    iio.imwrite(tmp_path / "frame.png", png8)
    rc, out, err = _run([f / "ref.exr", tmp_path / "frame.png"], capsys)
    assert rc == 0 and "8-bit" in err


def _chromium():
    for name in ("chromium", "chromium-browser"):
        p = shutil.which(name) or (f"/usr/bin/{name}" if os.path.exists(f"/usr/bin/{name}") else None)
        if p:
            return p
    return None


def test_html_report_in_headless_browser(files, capsys, tmp_path):
    """--report writes the PNG maps and a self-contained page; real headless
    Chromium renders it (DOM dump shows the verdict, the diagnosis and the
    embedded images; the screenshot is a non-trivial PNG)."""
    f = files
    rep_dir = tmp_path / "report"
    rc, out, err = _run([f / "ref.exr", f / "bright.exr", "--report", rep_dir], capsys)
    assert rc == 0, err
    for name in ("reference", "test", "relative_error", "absolute_error", "z", "index"):
        assert (rep_dir / (name + (".html" if name == "index" else ".png"))).stat().st_size > 0
    page = (rep_dir / "index.html").read_text()
    assert "src=\"data:image/png;base64," in page
    assert 'src="file' not in page and 'src="http' not in page      # self-contained
    browser = _chromium()
    if browser is None:
        pytest.skip("no Chromium installed (.ci/run installs the Debian package 'chromium')")
    base = [browser, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            f"--user-data-dir={tmp_path / 'profile'}"]
    url = (rep_dir / "index.html").as_uri()
    dom = subprocess.run(base + ["--dump-dom", url], capture_output=True, text=True, timeout=120)
    assert dom.returncode == 0, dom.stderr[-500:]
    assert 'id="verdict"' in dom.stdout and "significant difference" in dom.stdout
    assert "scale" in dom.stdout and dom.stdout.count("data:image/png;base64,") >= 5
    shot = tmp_path / "shot.png"
    res = subprocess.run(base + ["--window-size=1000,1400", f"--screenshot={shot}", url],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0 and shot.exists(), res.stderr[-500:]
    import imageio.v3 as iio
    img = iio.imread(shot)
    assert img.shape[0] == 1400 and img.shape[1] == 1000
    assert img[..., :3].std() > 10        # text and pictures, not a blank page


def test_tools_script_runs(files, tmp_path):
    """``python tools/diff.py`` is the same command (exit 1 on a failed condition)."""
    f = files
    res = subprocess.run([sys.executable, str(ROOT / "tools" / "diff.py"), str(f / "ref.exr"),
                          str(f / "bright.exr"), "--quiet", "--fail-if", "relmse>0.01"],
                         capture_output=True, text=True, timeout=300,
                         env=dict(os.environ, MPLCONFIGDIR=str(tmp_path / "mpl")))
    assert res.returncode == 1 and "relmse>0.01" in res.stderr


def test_extra_noise_is_found_by_the_dispersion_test(room):
    """Extra zero-mean per-pixel noise (3 σ_test, fixed seed) leaves the mean
    unbiased but makes E[d² − v_ref − v_test] = 9 E[v_test] > 0: the dispersion
    statistic measures about 5x the expected squared difference and z > 3;
    without the noise z stays small.  (The self-normalised statistic is weak
    against mild extra noise: 0.7 σ_test gives z ≈ 0.2 here.)"""
    rm, rv, tm, tv = room
    noisy = tm + 3.0 * np.sqrt(tv) * np.random.default_rng(5).standard_normal(tm.shape)
    out = S.analyse(rm, noisy, rv, tv, spp_ref=256, spp_test=64)
    assert out["significant"]
    assert out["dispersion"]["ratio"] > 4 and out["dispersion"]["z"] > 3
    clean = S.analyse(rm, tm, rv, tv, spp_ref=256, spp_test=64)
    assert clean["dispersion"]["z"] < 2 and not clean["tests"][2]["significant"]


def _heavy_tailed_pixels(rng, shape, n, scale):
    """Means and variances of the mean of n samples per pixel: zero with
    probability 0.7, else lognormal(0, 1.2) x the pixel's scale (heavy tails,
    skewed, many zero-variance pixels at small n, as Monte Carlo pixels are)."""
    x = rng.lognormal(0.0, 1.2, size=shape + (n,)) * (rng.random(shape + (n,)) < 0.3) * scale[..., None]
    m = x.mean(axis=-1)
    v = x.var(axis=-1, ddof=1) / n
    return np.repeat(m[..., None], 3, -1), np.repeat(v[..., None], 3, -1)


def test_false_alarm_rate_on_heavy_tailed_synthetic_frames():
    """300 independent null pairs of synthetic heavy-tailed frames (24 x 18,
    reference 64 samples, test 4 or 16, smooth brightness ramp): the verdict's
    false alarms at α = 0.01 stay within the one-sided 99.9 % binomial bound
    of Binomial(300, 0.01) (scipy.stats.binom.ppf); the per-pixel |z| > 3
    count that the verdict no longer uses would exceed 3x its normal rate in
    most pairs; and the 16-sample frames 50 % brighter are found (power > 0.9;
    their global mean has a relative standard error near 5 % here)."""
    from scipy.stats import binom
    rng = np.random.default_rng(20240611)
    h, w, trials, alpha = 18, 24, 300, 0.01
    scale = np.linspace(0.5, 2.0, w)[None, :] * np.ones((h, 1))
    alarms = excess = found = 0
    for i in range(trials):
        nt = 4 if i % 2 else 16
        rm, rv = _heavy_tailed_pixels(rng, (h, w), 64, scale)
        tm, tv = _heavy_tailed_pixels(rng, (h, w), nt, scale)
        out = S.analyse(rm, tm, rv, tv, spp_ref=64, spp_test=nt, alpha=alpha)
        alarms += bool(out["significant"])
        excess += out["fraction_significant"] > 3 * S.CHANCE_FRACTION
        if nt == 16:
            found += bool(S.analyse(rm, tm * 1.5, rv, tv * 2.25, spp_ref=64, spp_test=nt,
                                    alpha=alpha)["significant"])
    print(f"false alarms {alarms}/{trials}, excess {excess}, found {found}")
    assert alarms <= binom.ppf(0.999, trials, alpha), alarms
    assert excess > trials / 2, excess
    assert found > 0.9 * trials / 2, found


def test_clipped_8bit_reference_is_diagnosed(room, tmp_path):
    """A --preview PNG of the reference (sRGB, clipped at 1) against a linear
    EXR frame of the same scene: diagnosed as clipped at 1.0 in the share of
    pixels that reach 1.0, those pixels left out, and no scale fault (the
    emitter pixels once made it "test ≈ 25 × reference")."""
    from refrender.io import write_png_preview
    import warnings
    rm, rv, tm, tv = room
    write_png_preview(tmp_path / "ref.png", rm)
    write_exr(tmp_path / "test.exr", tm, tv, {"spp": 64})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = load_frame(tmp_path / "ref.png")
    rep = compare(ref, load_frame(tmp_path / "test.exr"))
    faults = {d["fault"]: d for d in rep["diagnoses"]}
    share = float((np.abs(ref.rgb - 1.0) <= 1e-6).any(axis=-1).mean())
    assert share > 0.01
    assert "clipped_reference" in faults, rep["diagnoses"]
    assert f"clipped at 1.0 in {share:.1%} of pixels" in faults["clipped_reference"]["detail"]
    assert "scale" not in faults, rep["diagnoses"]


def test_scene_mismatch_is_refused(files, capsys, tmp_path):
    """Frames whose scene_sha256 differ: one line, exit 2 (and no JSON);
    --allow-other-scene compares them and notes it."""
    f = files
    rm = load_frame(f / "ref.exr")
    write_exr(tmp_path / "a.exr", rm.rgb, rm.variance, {"scene_sha256": "a" * 64})
    write_exr(tmp_path / "b.exr", rm.rgb, rm.variance, {"scene_sha256": "b" * 64})
    rc, out, err = _run([tmp_path / "a.exr", tmp_path / "b.exr", "--json", tmp_path / "x.json"], capsys)
    assert rc == 2 and "scene_sha256 differs" in err and "--allow-other-scene" in err
    assert len(err.strip().splitlines()) == 1 and not (tmp_path / "x.json").exists()
    rc, out, err = _run([tmp_path / "a.exr", tmp_path / "b.exr", "--allow-other-scene"], capsys)
    assert rc == 0 and "compared anyway" in out
