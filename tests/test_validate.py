"""`refrender validate` and the new analytic cases of refrender/validation.py.

The quick suite runs here exactly as a user runs it (same cases, seeds and
4-sigma decision); its expected values name their published sources in
refrender/validation.py.
"""
import json
import math

import pytest

from refrender import validation as V
from refrender.cli.main import main


@pytest.mark.parametrize("a,b,c,table", [
    (1, 1, 1, 0.0557342), (2, 1, 1, 0.0686973), (1, 2, 0.5, 0.158775), (1, 1, 2, 0.0139277),
    (1e6, 1e6, 1, 0.249999716),
])
def test_perpendicular_rectangle_formula_matches_table(a, b, c, table):
    """Howell's catalog entry B-8 (Hamilton & Morgan 1952), 90° case (Howell's catalog B-8 at 90 degrees)."""
    F = V.perpendicular_rectangle_case(a, b, c).expected / (V.RHO * V.L_EMIT)
    assert F == pytest.approx(table, rel=5e-6)


@pytest.mark.parametrize("R,power,rho,f,L", [
    (1, 4 * math.pi, 0.5, 0.0, 0.318310), (1, 4 * math.pi, 0.9, 0.02, 2.42779),
    (1, 4 * math.pi, 0.99, 0.05, 5.29625), (0.5, 10.0, 0.95, 0.01, 16.1773),
])
def test_integrating_sphere_formula_matches_table(R, power, rho, f, L):
    """Goebel, Generalized Integrating-Sphere Theory, Appl. Opt. 1967 (Goebel 1967; point source at the centre)."""
    assert V.integrating_sphere_case(R, power, rho, f).expected == pytest.approx(L, rel=5e-6)


def test_port_disk_closes_the_cap():
    """The black disk sits on the cap's base circle: its rim lies on the sphere and the
    cap it cuts off has the requested area fraction ((1 - cos a) / 2, common practice)."""
    case = V.integrating_sphere_case(1.0, 4 * math.pi, 0.9, 0.02)
    disk = case.scene["objects"][1]
    y, r = disk["center"][1], disk["radius"]
    assert y * y + r * r == pytest.approx(1.0, rel=1e-12)
    assert (1 - y) / 2 == pytest.approx(0.02, rel=1e-12)


def test_validate_quick_passes_and_writes_json(tmp_path, capsys):
    out = tmp_path / "v.json"
    rc = main(["validate", "--quick", "--json", str(out)])
    text = capsys.readouterr().out
    doc = json.loads(out.read_text())
    assert rc == 0, text
    assert doc["passed"] and doc["level"] == "quick"
    assert len(doc["cases"]) == len(V.suite("quick"))
    names = {c["case"] for c in doc["cases"]}
    assert any(n.startswith("perpendicular") for n in names)
    assert any(n.startswith("integrating sphere") for n in names)
    for c in doc["cases"]:
        assert c["std_error"] <= 0.005 * abs(c["expected"]) * (1 + 1e-9)   # the quick target
        assert abs(c["z"]) <= V.Z_MAX
    assert "expected" in text and "measured" in text and "[1]" in text


def test_validate_fails_on_a_wrong_expected_value(tmp_path, monkeypatch, capsys):
    """Testing the test: a case whose expected value is 2 % off must fail and give exit 1."""
    good = V.point_case(10.0, 2.0, 60.0)
    wrong = V.Case(good.name + " (wrong)", good.expected * 1.02, good.source, good.scene)
    monkeypatch.setattr(V, "suite", lambda level: [(good, "mis", "solid_angle", 0.002),
                                                   (wrong, "mis", "solid_angle", 0.002)])
    out = tmp_path / "v.json"
    rc = main(["validate", "--json", str(out), "--quiet"])
    doc = json.loads(out.read_text())
    assert rc == 1
    assert [c["passed"] for c in doc["cases"]] == [True, False]
    assert "1/2 passed" in capsys.readouterr().out


def test_validate_json_folder_error(tmp_path, capsys):
    rc = main(["validate", "--json", str(tmp_path / "no" / "v.json")])
    err = capsys.readouterr().err
    assert rc == 2 and err.count("\n") == 1 and "--json" in err


def test_validate_rejects_both_levels(capsys):
    assert main(["validate", "--quick", "--full"]) == 2


def test_full_suite_covers_every_combination():
    rows = V.suite("full")
    combos = {(s, m) for c, s, m, t in rows if c.name.startswith("sphere")}
    assert combos == set(V.COMBOS)
    assert all(t == 0.003 for *_, t in rows)
