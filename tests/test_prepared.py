"""The compiled scene is built once per Scene object and reused (refrender.prepared).

Builds are counted by wrapping the compiler, never timed.  Expected hits come
from the closed form of a ray-sphere intersection (common practice) and the
cache must never change a result (invariant: hits and images equal those of a
freshly compiled scene, bit for bit).
"""
from __future__ import annotations

import gc
import json
from pathlib import Path

import numpy as np
import pytest

import refrender
from refrender import farm, prepared

SCENES = Path(__file__).resolve().parent.parent / "scenes"


@pytest.fixture
def counts(monkeypatch):
    """Number of geometry compilations and light-table builds from now on."""
    n = {"compile": 0, "lights": 0}
    compile_scene, build_lights = prepared.compile_scene, prepared.build_lights

    def counted_compile(scene):
        n["compile"] += 1
        return compile_scene(scene)

    def counted_lights(scene, arrays, strategy):
        n["lights"] += 1
        return build_lights(scene, arrays, strategy)

    monkeypatch.setattr(prepared, "compile_scene", counted_compile)
    monkeypatch.setattr(prepared, "build_lights", counted_lights)
    return n


def _doc(objects=None):
    return {"version": 1, "camera": {"position": [0, 0, 10], "look_at": [0, 0, 0]},
            "film": {"width": 6, "height": 4},
            "objects": objects or [{"shape": "sphere", "center": [0, 0, 0], "radius": 1,
                                    "emission": [1, 1, 1]}]}


def _rays():
    o = np.array([[0.0, 0.0, 5.0], [3.0, 0.0, 5.0], [0.5, 0.0, 5.0]])
    d = np.array([[0.0, 0.0, -1.0], [0.0, 0.0, -1.0], [0.0, 0.0, -1.0]])
    return o, d


def test_second_trace_does_not_rebuild(counts):
    scene = refrender.load_scene(_doc())
    o, d = _rays()
    first = refrender.trace(scene, o, d)
    second = refrender.trace(scene, o, d)
    assert counts["compile"] == 1
    # closed form: a unit sphere at the origin, rays down -z from z = 5
    assert first.t[0] == 4.0 and np.isinf(first.t[1])
    assert first.t[2] == pytest.approx(5.0 - np.sqrt(1.0 - 0.25), rel=1e-14)
    for a, b in zip(first, second):
        assert np.array_equal(a, b)


def test_render_and_trace_share_one_build(counts):
    scene = refrender.load_scene(_doc())
    a = refrender.render(scene, spp=2, seed=3)
    refrender.trace(scene, *_rays())
    b = refrender.render(scene, spp=2, seed=3)
    refrender.render(scene, spp=1, strategy="nee")
    refrender.render(scene, spp=1, strategy="nee")
    assert counts["compile"] == 1
    assert counts["lights"] == 2                 # one light table per strategy (mis, nee)
    assert np.array_equal(a.mean, b.mean) and np.array_equal(a.variance, b.variance)
    assert refrender.prepare(scene) is refrender.prepare(scene)


def test_a_different_scene_never_reuses_the_build(counts):
    """Two Scene objects of the same document each compile (the cache is per object)."""
    one = refrender.load_scene(_doc())
    two = refrender.load_scene(_doc())
    assert refrender.prepare(one) is not refrender.prepare(two)
    assert counts["compile"] == 2


def test_changed_object_list_rebuilds(counts):
    """A frozen Scene still has a mutable object list: appending to it must rebuild."""
    scene = refrender.load_scene(_doc())
    o, d = _rays()
    assert np.isinf(refrender.trace(scene, o, d).t[1])
    other = refrender.load_scene(_doc([{"shape": "sphere", "center": [3, 0, 0], "radius": 1}]))
    scene.objects.append(other.objects[0])
    hits = refrender.trace(scene, o, d)
    assert counts["compile"] == 2                # the first trace and the rebuild
    assert hits.t[1] == 4.0 and hits.object[1] == 1
    prepared.discard(scene)
    refrender.trace(scene, o, d)
    assert counts["compile"] == 3


def test_entry_dies_with_its_scene():
    scene = refrender.load_scene(_doc())
    refrender.prepare(scene)
    key = id(scene)
    assert key in prepared._ENTRIES
    del scene
    gc.collect()
    assert key not in prepared._ENTRIES


def test_cache_does_not_travel_with_the_scene():
    """The farm pickles the scene: the payload is the same before and after compiling."""
    scene = refrender.load_scene(_doc())
    before = farm.pack_scene(scene)
    refrender.prepare(scene)
    assert farm.pack_scene(scene) == before


def test_farm_tasks_of_one_payload_compile_once(counts):
    """Worker side: every task of one payload renders the same Scene object."""
    doc = json.loads((SCENES / "reading_nook.json").read_text())
    doc["film"] = {"width": 8, "height": 6}
    scene = refrender.load_scene(doc, base_dir=SCENES)
    payload, digest = farm.pack_scene(scene)
    settings = {"seed": 4}
    parts = [farm._render_task(payload, digest, settings, a, a + 1, 1) for a in range(3)]
    assert counts["compile"] == 1
    local = refrender.render(scene, spp=3, seed=4, threads=1)
    merged = refrender.merge([refrender.Result(p["sum"], p["sum_sq"], p["count"], [p["range"]],
                                               p["meta"], p["stats"]) for p in parts])
    assert np.array_equal(merged.count, local.count)
    assert np.allclose(merged.mean, local.mean, rtol=1e-12, atol=1e-300)
