"""Export bundles: complete folders whose coordinates re-evaluate to the exported figures."""

from __future__ import annotations

import csv
import json
import math
import sys

import numpy as np
import pytest
from conftest import cli
from panel import panel_solve

from foilmap import SectionSet
from foilmap.section.evaluation import evaluate
from foilmap.section.fitting import fit_section
from foilmap.store.coordfile import load_coordinates


def test_export_of_a_section_re_evaluates(tmp_path, section_file):
    out = tmp_path / "out"
    r = cli("export", section_file, "--cl", "0.5", "--re", "3e6", "--points", "241", "-o", out)
    assert r.returncode == 0, r.stderr
    folder = out / "test-section"
    for name in ("coordinates.dat", "design.json", "section.png", "surface-cl0.500.csv"):
        assert (folder / name).exists(), name
    side = json.loads((folder / "design.json").read_text())
    assert {"cl", "alpha_deg", "coefficients", "te_angle_deg", "software", "caution"} <= side.keys()
    # a smooth 12 % section at Re 3e6 and low lift: profile drag of order 0.005-0.010 (common
    # practice; Abbott & von Doenhoff's polars show about 0.006 for the NACA 0012, from memory)
    assert side["cl"] == pytest.approx(0.5) and 0.004 < side["screening"]["cd"] < 0.012
    rows = list(csv.DictReader(line for line in (out / "summary.csv").read_text().splitlines()
                               if not line.startswith("#")))
    assert len(rows) == 1 and rows[0]["design"] == "test-section"
    # the exported coordinates fitted back: Cl and Cp at the exported angle (tolerances: the
    # fit's deviation, ~1e-5 chords here, moves Cl by under 2e-3 and Cp by under 1e-2)
    coords = load_coordinates(folder / "coordinates.dat")
    fit = fit_section(coords.xy, coords.le_index, 24)
    assert fit.max_deviation < 1e-4
    back = SectionSet(fit.coefficients[None, :], [fit.te_angle])
    ev = evaluate(back, alpha=math.radians(side["alpha_deg"]))
    assert ev.cl[0] == pytest.approx(side["cl"], abs=2e-3)
    assert ev.cp_min[0] == pytest.approx(side["cp_min"], abs=1e-2)
    # and through the independent panel method (240 panels): Cl within 1 %
    res = panel_solve(coords.xy[:, 0][None], coords.xy[:, 1][None], math.radians(side["alpha_deg"]))
    assert res["cl"][0] == pytest.approx(side["cl"], rel=0.01)
    # the surface table: Cp and q consistent, the minimum Cp near the exported one
    table = [r for r in csv.DictReader(line for line in (folder / "surface-cl0.500.csv")
                                       .read_text().splitlines() if not line.startswith("#"))]
    cp = np.array([float(t["cp"]) for t in table])
    q = np.array([float(t["q"]) for t in table])
    np.testing.assert_allclose(cp, 1 - q**2, atol=1e-7)
    assert cp.min() == pytest.approx(side["cp_min"], abs=5e-3)
    assert {t["surface"] for t in table} == {"upper", "lower"}
    # the trailing-edge zone is marked, its unbounded gradients left out; elsewhere all finite
    zone = [t for t in table if t["te_zone"] == "1"]
    rest = [t for t in table if t["te_zone"] == "0"]
    assert zone and rest and len(zone) + len(rest) == len(table)
    assert all(float(t["x"]) > 0.99 and t["dq_ds"] == t["thwaites_lambda"] == "" for t in zone)
    lam = np.array([float(t["thwaites_lambda"]) for t in rest])
    x = np.array([float(t["x"]) for t in rest])
    assert np.all(np.isfinite(lam))
    # |λ| < 5 up to 98 % chord (measured: 4.3 at x 0.979 on the upper surface, under 1 before
    # 90 %).  Between 98 % and the zone the ideal flow already decelerates into its
    # trailing-edge stagnation point (a finite edge angle, 10° here), du/ds → −∞, and λ falls
    # to −9.1 at x 0.990, the last station before the zone (measured): there λ is negative and
    # grows in size towards the edge on each surface, station by station
    assert np.max(np.abs(lam[x <= 0.98])) < 5.0
    for side in ("upper", "lower"):
        aft = sorted((float(t["x"]), float(t["thwaites_lambda"])) for t in rest
                     if t["surface"] == side and float(t["x"]) > 0.98)
        assert len(aft) >= 3 and all(v < 0 for _, v in aft)
        assert all(b[1] < a[1] for a, b in zip(aft, aft[1:])), aft


def test_trailing_edge_thickness_blend(tmp_path, section_file):
    out = tmp_path / "te"
    r = cli("export", section_file, "--alpha", "2", "--te-thickness", "0.005", "--spacing",
            "curvature", "-o", out)
    assert r.returncode == 0, r.stderr
    xy = np.loadtxt((out / "test-section" / "coordinates.dat").read_text().splitlines()[1:])
    assert xy[0, 1] - xy[-1, 1] == pytest.approx(0.005, abs=1e-12)
    le = int(np.argmin(np.hypot(*xy.T)))
    assert tuple(xy[le]) == (0.0, 0.0)  # the leading edge does not move
    side = json.loads((out / "test-section" / "design.json").read_text())
    assert side["coordinates"]["largest_shift_by_te_blend"] == pytest.approx(0.0025, abs=1e-9)
    assert "0.005 chords thick" in (out / "test-section" / "coordinates.dat").read_text()


@pytest.mark.slow
def test_export_front_designs_with_mesh(tmp_path):
    import gmsh  # noqa: F401 - the mesh extra, installed with the test extra
    from test_fronts import run_folder

    folder, _ = run_folder(tmp_path, "mo", __import__("test_fronts").MO_STUDY
                           .replace("seeds = [1, 2]", "seeds = [1]").replace("900", "300"))
    r = cli("fronts", folder, "--json", "--reference", "50,50")
    assert r.returncode == 0, r.stderr
    ids = [d["id"] for d in json.loads(r.stdout)["groups"][0]["merged_front"]][:2]
    out = tmp_path / "ex"
    r = cli("export", folder, "--ids", ",".join(ids), "--mesh", "--farfield", "10", "-o", out)
    assert r.returncode == 0, r.stderr
    dirs = sorted(p for p in out.iterdir() if p.is_dir())
    assert len(dirs) == 2
    for d in dirs:
        side = json.loads((d / "design.json").read_text())
        assert side["provenance"]["run"] == "p.s1"
        assert side["cl"] == pytest.approx(0.5)
        assert (d / "mesh.msh").read_text()[:11] == "$MeshFormat"
        # the exported front design's coordinates re-evaluate to its figures (fit, 24 terms)
        coords = load_coordinates(d / "coordinates.dat")
        fit = fit_section(coords.xy, coords.le_index, 24)
        back = evaluate(SectionSet(fit.coefficients[None, :], [fit.te_angle]),
                        alpha=math.radians(side["alpha_deg"]))
        assert back.cl[0] == pytest.approx(side["cl"], abs=5e-3)
        assert back.cp_min[0] == pytest.approx(side["cp_min"], abs=2e-2)
        assert side["objectives"]["peak_suction"] == pytest.approx(-side["cp_min"], rel=1e-9)
    r = cli("export", folder, "--all", "-o", tmp_path / "all")
    assert r.returncode == 0, r.stderr


def test_mesh_without_gmsh_says_how_to_install(monkeypatch):
    from foilmap import InputError
    from foilmap.report.mesh import check_gmsh

    monkeypatch.setitem(sys.modules, "gmsh", None)  # as if the extra were not installed
    with pytest.raises(InputError, match=r'install the mesh extra with python -m pip install -e "\.\[mesh\]"'):
        check_gmsh()


@pytest.mark.parametrize("args,message", [
    (["{sec}", "-o", "{tmp}/o"], "a section file needs the operating point"),
    (["{sec}", "--cl", "0.5", "--best", "-o", "{tmp}/o"], "select from a study folder"),
    (["{tmp}", "--cl", "0.5", "-o", "{tmp}/o"], "a study folder needs --best"),
    (["{sec}", "--cl", "0.5", "-o", "{tmp}"], "exists and is not an empty folder"),
    (["{sec}", "--cl", "0.5", "--te-thickness", "0.2", "-o", "{tmp}/o"],
     "trailing-edge thickness '0.2' is out of range"),
])
def test_export_bad_input(tmp_path, section_file, args, message):
    r = cli("export", *[a.format(sec=section_file, tmp=tmp_path) for a in args])
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], r.stderr
    assert not (tmp_path / "o").exists()
