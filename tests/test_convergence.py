"""Convergence studies (refrender.study, tools/convergence.py): progressive
snapshots, measured against variance-predicted MSE, the -1 rate, the bias
detector, outputs and the command line.

The scene is a small floor beside a wall under an area light (24 x 18
pixels): direct light plus one clearly visible bounce from the wall, so
``max_bounces`` 1 is biased against full transport.
"""
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

import refrender
from refrender import study
from refrender.compare import metrics as M

ROOT = Path(__file__).resolve().parents[1]

SCENE = {
    "version": 1,
    "camera": {"position": [0, 0, 1.5], "look_at": [0, 0, 0], "fov_y": 40},
    "film": {"width": 24, "height": 18},
    "materials": {"floor": {"type": "lambertian", "albedo": [0.7, 0.6, 0.5]},
                  "wall": {"type": "lambertian", "albedo": [0.9, 0.9, 0.9]}},
    "objects": [
        {"shape": "rectangle", "origin": [-2, -2, 0], "edge1": [4, 0, 0], "edge2": [0, 4, 0], "material": "floor"},
        {"shape": "rectangle", "origin": [-0.45, -2, 0], "edge1": [0, 4, 0], "edge2": [0, 0, 2], "material": "wall"},
        {"shape": "rectangle", "origin": [-0.2, -0.5, 1.8], "edge1": [0, 1, 0], "edge2": [1, 0, 0],
         "emission": [4, 4, 4]},
    ],
    "render": {"spp": 16, "seed": 0},
}
SCHEDULE = [2, 4, 8, 16, 32, 64]


@pytest.fixture(autouse=True)
def _mpl(tmp_path, monkeypatch):
    monkeypatch.setenv("MPLCONFIGDIR", str(tmp_path / "mpl"))


@pytest.fixture(scope="module")
def scene():
    return refrender.load_scene(SCENE)


@pytest.fixture(scope="module")
def rows(scene):
    """Full transport (MIS) and direct lighting only, 2 seeds each, against a
    reference rendered on the fly at 4 x 64 spp."""
    return study.run(scene, [{"name": "full"}, {"name": "direct", "max_bounces": 1}], SCHEDULE, seeds=[0, 1])


def test_snapshots_are_progressive_and_exact(scene, rows):
    """Each snapshot equals a one-shot render of that many samples (merge of
    disjoint ranges, README), and records spp, seconds and rays."""
    full0 = [r for r in rows if r["config"] == "full" and r["seed"] == 0]
    assert [r["spp"] for r in full0] == SCHEDULE
    assert all(r["seconds"] > 0 and r["rays"] > 0 for r in full0)
    assert all(b["rays"] > a["rays"] and b["seconds"] >= a["seconds"] for a, b in zip(full0, full0[1:]))
    ref = refrender.render(scene, spp=256, seed=study.REFERENCE_SEED)
    one = refrender.render(scene, spp=16, seed=0)
    assert full0[3]["mse"] == pytest.approx(M.mse(ref.mean, one.mean), rel=1e-9)
    assert full0[3]["predicted_mse"] == pytest.approx(float(one.variance.mean()), rel=1e-9)
    assert full0[3]["ref_floor"] == pytest.approx(float(ref.variance.mean()), rel=1e-12)


def test_measured_mse_matches_prediction_for_unbiased(rows):
    """Unbiased configuration: at every snapshot measured MSE = predicted +
    reference floor within 4 standard errors of the measured MSE."""
    for r in rows:
        if r["config"] == "full":
            assert abs(r["excess_z"]) < 4, (r["spp"], r["seed"], r["excess_z"])


@pytest.fixture(scope="module")
def plane_rows():
    """The simplest unbiased case: the floor under the area light, no wall."""
    doc = dict(SCENE, objects=[SCENE["objects"][0], SCENE["objects"][2]])
    return study.run(refrender.load_scene(doc), [{"name": "full"}], SCHEDULE, seeds=[0, 1, 2, 3])


def test_rate_is_minus_one(plane_rows):
    """MSE (reference floor subtracted) of independent samples falls as spp^-1
    on a simple unbiased scene: −1 lies inside the fitted slope's 95 %
    interval, and the interval is narrow enough (width < 0.5) to mean something."""
    for r in plane_rows:
        assert abs(r["excess_z"]) < 4, (r["spp"], r["seed"], r["excess_z"])
    s = study.summarise(plane_rows)[0]
    assert s["slope_spp"]["method"] == "across seeds" and s["slope_spp"]["runs"] == 4
    lo, hi = s["slope_spp"]["ci95"]
    assert lo <= -1 <= hi, s["slope_spp"]
    assert hi - lo < 0.5
    lo, hi = s["slope_predicted"]["ci95"]
    assert lo <= -1 <= hi, s["slope_predicted"]


def test_biased_configuration_is_flagged(rows):
    """max_bounces 1 misses the wall's bounce: flagged biased, its squared bias
    estimated as the difference between measured and predicted MSE, and
    efficiency ranks are assigned."""
    summ = {x["config"]: x for x in study.summarise(rows)}
    d, f = summ["direct"], summ["full"]
    assert d["biased"] and not f["biased"]
    assert d["bias_z"] > 4 and d["bias_squared"] > 0
    assert d["plateau"]
    # its squared bias is most of its error at 64 spp
    assert d["bias_squared"] > 0.5 * d["mse"]
    assert f["efficiency_rank"] == 1 and "efficiency_rank" not in d      # a biased config is not ranked


def test_without_reference(scene):
    """No reference: rows carry the variance-predicted MSE only; it falls as 1/spp."""
    rows = study.run(scene, [{"name": "nee", "strategy": "nee"}], [4, 8, 16], reference=False, seeds=[3])
    assert all("mse" not in r for r in rows)
    p = [r["predicted_mse"] for r in rows]
    assert p[0] > p[1] > p[2] > 0
    s = study.summarise(rows)[0]
    assert s["efficiency"] > 0 and s["predicted_mse"] == p[-1]


def test_outputs_and_plot(rows, tmp_path):
    paths = study.write_outputs(tmp_path / "out", rows)
    data = json.loads((tmp_path / "out" / "rows.json").read_text())
    assert len(data) == len(rows) == 2 * 2 * len(SCHEDULE)
    lines = (tmp_path / "out" / "rows.csv").read_text().splitlines()
    assert len(lines) == len(rows) + 1 and "predicted_mse" in lines[0]
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    assert {s["config"] for s in summary} == {"full", "direct"}
    import imageio.v3 as iio
    img = iio.imread(paths["convergence.png"])
    assert img.ndim == 3 and img.shape[1] > 800 and img[..., :3].std() > 5
    table = study.summary_table(summary)
    assert "BIASED" in table and "full" in table


def test_bad_setup_errors(scene):
    for kwargs, text in [({"configs": [{"strategy": "mis", "colour": 1}]}, "configs[0].colour"),
                         ({"configs": [{}], "schedule": [4, 2]}, "schedule"),
                         ({"configs": [{}], "seeds": [1, 1]}, "seeds"),
                         ({"configs": [{}], "metrics": ["nope"]}, "metrics"),
                         ({"configs": [{"name": "a"}, {"name": "a"}]}, "duplicate")]:
        with pytest.raises(study.StudyError, match=text.replace("[", r"\[").replace("]", r"\]")):
            study.run(scene, max_spp=4, reference=False, **kwargs)


def test_study_file_and_cli(tmp_path):
    """A study file drives tools/convergence.py; outputs land in --out; bad
    input exits 2 with one line; --fail-if-biased exits 1 on a biased config."""
    (tmp_path / "scene.json").write_text(json.dumps(SCENE))
    study_doc = {"scene": "scene.json", "film": {"width": 12, "height": 9}, "schedule": [2, 4, 8],
                 "seeds": [0], "reference_factor": 4,
                 "configs": [{"name": "mis"}, {"name": "direct", "max_bounces": 1}]}
    (tmp_path / "study.json").write_text(json.dumps(study_doc))
    env = dict(os.environ, MPLCONFIGDIR=str(tmp_path / "mpl"))
    tool = str(ROOT / "tools" / "convergence.py")
    res = subprocess.run([sys.executable, tool, "--study", str(tmp_path / "study.json"), "--out",
                          str(tmp_path / "o"), "--fail-if-biased"], capture_output=True, text=True, env=env,
                         timeout=600)
    assert res.returncode == 1, res.stderr          # "direct" is biased (17 standard errors here)
    assert "direct: biased" in res.stdout
    assert (tmp_path / "o" / "convergence.png").exists() and (tmp_path / "o" / "summary.csv").exists()
    assert study.main(["--study", str(tmp_path / "study.json"), "--out", str(tmp_path / "o2"), "--quiet"]) == 0
    assert study.main([str(tmp_path / "scene.json"), "--config", "x:strategy=wrong", "--max-spp", "2",
                       "--no-reference", "--out", str(tmp_path / "p"), "--quiet"]) == 2
    assert study.main([str(tmp_path / "scene.json"), "--config", "x:colour=1", "--out", str(tmp_path / "p")]) == 2
    assert not (tmp_path / "p").exists()
    bad = dict(study_doc, extra=1)
    (tmp_path / "bad.json").write_text(json.dumps(bad))
    assert study.main(["--study", str(tmp_path / "bad.json"), "--out", str(tmp_path / "q")]) == 2


def test_t_quantiles_against_scipy():
    """The 95 % Student-t table of study.T975 against scipy.stats.t.ppf(0.975)."""
    stats = pytest.importorskip("scipy.stats")
    for dof, v in enumerate(study.T975, start=1):
        assert v == pytest.approx(stats.t.ppf(0.975, dof), abs=6e-4), dof


def test_parse_config():
    assert study._parse_config("nee-area:strategy=nee,light_sampling=area,max_bounces=none") == {
        "name": "nee-area", "strategy": "nee", "light_sampling": "area", "max_bounces": None}
    assert study._parse_config("rr_start=2") == {"rr_start": 2}
    with pytest.raises(study.StudyError, match="--config"):
        study._parse_config("foo=1")


def test_reference_of_another_scene_is_refused(scene, tmp_path):
    """A --reference EXR whose scene_sha256 is not the studied scene's: one-line
    error (exit 2 from the command line); allow_other_scene accepts it."""
    import numpy as np

    from refrender.errors import RefrenderError
    from refrender.io import write_exr
    ref = tmp_path / "other.exr"
    img = np.full((18, 24, 3), 0.5)
    write_exr(ref, img, np.full_like(img, 1e-4), {"scene_sha256": "f" * 64})
    with pytest.raises(RefrenderError, match="scene_sha256 differs.*--allow-other-scene"):
        study.run(scene, [{"name": "a"}], [2], reference=str(ref))
    rows = study.run(scene, [{"name": "a"}], [2], reference=str(ref), allow_other_scene=True)
    assert len(rows) == 1
    sc = tmp_path / "s.json"
    sc.write_text(json.dumps(SCENE))
    assert study.main([str(sc), "--schedule", "2", "--reference", str(ref), "--quiet",
                       "--out", str(tmp_path / "o")]) == 2
