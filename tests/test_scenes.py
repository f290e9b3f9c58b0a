"""The bundled scenes load, and the analytic scene files match their builders."""
import json
from pathlib import Path

import numpy as np
import pytest

import refrender
from refrender import validation as V

SCENES = Path(__file__).resolve().parent.parent / "scenes"


@pytest.mark.parametrize("path", sorted(SCENES.rglob("*.json")), ids=lambda p: p.name)
def test_bundled_scene_loads(path):
    scene = refrender.load_scene(path)
    assert scene.objects


@pytest.mark.parametrize("name", sorted(V.SCENE_FILES))
def test_analytic_scene_file_matches_builder(name):
    """Invariant: scenes/analytic/*.json are written by refrender.validation."""
    on_disk = json.loads((SCENES / "analytic" / f"{name}.json").read_text())
    assert on_disk == json.loads(json.dumps(V.SCENE_FILES[name]().scene))


def test_crop_reproduces_pixels_of_the_full_frame():
    """Invariant: random numbers are keyed on full-frame pixel indices, so a
    crop is bit-identical to the same window of the full render."""
    doc = json.loads((SCENES / "reading_nook.json").read_text())
    doc["film"] = {"width": 32, "height": 24}
    full = refrender.render(refrender.load_scene(doc, base_dir=SCENES), spp=4)
    doc["film"]["crop"] = [5, 7, 19, 13]
    part = refrender.render(refrender.load_scene(doc, base_dir=SCENES), spp=4)
    assert part.mean.shape == (6, 14, 3)
    assert np.array_equal(part.mean, full.mean[7:13, 5:19])
    assert np.array_equal(part.variance, full.variance[7:13, 5:19])
    assert part.meta["window"] == [5, 7, 19, 13]
