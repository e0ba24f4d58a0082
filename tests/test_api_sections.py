"""Every command's job as a library call: each call of foilmap's API gives the figures the
matching command prints with --json, to 1e-9, for plain and fitted sections, whichever form the
section is given in (path, SectionRecord, SectionSet).

Reference values: the command's own --json output (worked from the rule that the API and the
command are one computation); no published figure is asserted here.
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
from conftest import SECTION_TEXT, cli, small_study

import foilmap

TOL = 1e-9


def same(api, shown, path="") -> None:
    """``api`` (the library's figures) equals ``shown`` (the command's JSON) to :data:`TOL`,
    relative to the size of the figure (the JSON is rounded to 12 significant digits)."""
    if isinstance(shown, dict):
        assert isinstance(api, dict), path
        assert set(shown) <= set(api), (path, sorted(set(shown) - set(api)))
        for k, v in shown.items():
            same(api[k], v, f"{path}.{k}")
    elif isinstance(shown, list):
        assert len(api) == len(shown), path
        for i, (a, s) in enumerate(zip(api, shown)):
            same(a, s, f"{path}.{i}")
    elif isinstance(shown, float) and not isinstance(api, bool):
        assert api is not None, path
        assert abs(float(api) - shown) <= TOL * max(1.0, abs(shown)), (path, api, shown)
    else:
        assert api == shown, (path, api, shown)


def run_json(*args) -> dict:
    r = cli(*args, "--json")
    assert r.returncode == 0, r.stderr
    return json.loads(r.stdout)


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """A hand-written section (test data, invented), a fitted NACA 2412 (the four-digit formula,
    fitted by the shape series: its angles are measured from the file's chord line) and a
    target table of the hand-written section at Cl 0.5."""
    d = tmp_path_factory.mktemp("api")
    plain = d / "plain.toml"
    plain.write_text(SECTION_TEXT)
    r = cli("naca", "2412", "-o", d / "n2412.dat")
    assert r.returncode == 0, r.stderr
    fitted = d / "n2412.toml"
    fit_json = run_json("fit", d / "n2412.dat", "-n", "24", "-o", fitted)
    table = d / "target.csv"
    r = cli("evaluate", plain, "--cl", "0.5", "--table", table)
    assert r.returncode == 0, r.stderr
    return {"dir": d, "plain": plain, "fitted": fitted, "fit_json": fit_json, "target": table,
            "coords": d / "n2412.dat"}


@pytest.mark.parametrize("kind", ["plain", "fitted"])
def test_evaluate_equals_the_command(files, kind):
    path = files[kind]
    shown = run_json("evaluate", path, "--alpha", "4", "--mach", "0.3", "--sigma", "1.6",
                     "--re", "2e6")
    rec = foilmap.load_section(path)
    for section in (path, str(path), rec, rec.to_set()):  # every form a caller may hold
        res = foilmap.evaluate(section, alpha=4.0, mach=0.3, sigma=1.6, reynolds=2e6)
        if isinstance(section, foilmap.SectionSet):  # a bare batch has no name
            assert res.name == "section"
            res.record["name"] = shown["name"]
        same(res.record, shown)
        assert res.alpha_deg == pytest.approx(4.0, abs=1e-12)  # degrees in, degrees out
        assert res.chord_line == ("source" if kind == "fitted" else "own")
    shown = run_json("evaluate", path, "--cl", "0.5", "--speed", "8", "--depth", "0.5",
                     "--water-temp", "15", "--water", "sea", "--compressibility",
                     "prandtl-glauert", "--mach", "0.2")
    sigma = float(foilmap.cavitation_number(8.0, 0.5, 15.0, "sea"))
    res = foilmap.evaluate(rec, cl=0.5, sigma=sigma, mach=0.2, compressibility="prandtl-glauert")
    same(res.record, shown)


def test_fitted_angles_are_measured_from_the_files_chord_line(files):
    # issue 21: foilmap.evaluate took radians and lost reference_le; now the API's 4 degrees is
    # the command's 4 degrees from the source chord line (worked from the rule)
    rec = foilmap.load_section(files["fitted"])
    assert rec.reference_le is not None
    assert rec.to_set().reference_le[0] == rec.reference_le  # to_set keeps the chord line
    own = foilmap.SectionSet(rec.coefficients[None, :], np.radians([rec.te_angle_deg]))
    a = foilmap.evaluate(rec.to_set(), alpha=4.0)
    b = foilmap.evaluate(own, alpha=4.0)  # the same map without its chord line
    assert a.chord_line == "source" and b.chord_line == "own"
    assert a.cl != pytest.approx(b.cl, abs=1e-4)  # the lines differ, so do the figures
    assert 0.5 < a.cl < 1.0  # an ideal-flow Cl near 2 pi (4 + 2.1) degrees (common practice)


def test_sweep_equals_the_command(files):
    shown = run_json("sweep", files["fitted"], "--alpha", "-2:6:2", "--sigma", "1.2",
                     "--mach", "0.3")
    res = foilmap.sweep(foilmap.load_section(files["fitted"]), alpha=[-2.0, 0.0, 2.0, 4.0, 6.0],
                        sigma=1.2, mach=0.3)
    same(res.record, shown)
    assert len(res.rows) == 5 and res.rows[2]["alpha_deg"] == pytest.approx(2.0)
    shown = run_json("sweep", files["plain"], "--cl", "0:1:0.25")
    res = foilmap.sweep(files["plain"], cl=[0.0, 0.25, 0.5, 0.75, 1.0])
    same(res.record, shown)
    import pandas as pd  # in the test extra: never skipped
    frame = res.to_frame()
    assert isinstance(frame, pd.DataFrame) and list(frame["cl"]) == [r["cl"] for r in res.rows]


@pytest.mark.parametrize("kind", ["plain", "fitted"])
def test_screen_equals_the_command(files, kind):
    shown = run_json("screen", files[kind], "--alpha", "3", "--re", "1e6")
    res = foilmap.screen(foilmap.load_section(files[kind]), reynolds=1e6, alpha=3.0)
    same(res.record, shown)
    assert res.cd == pytest.approx(shown["cd"], rel=TOL)


def test_fit_equals_the_command(files):
    res = foilmap.fit(files["coords"], n=24)
    same(res.record, {k: v for k, v in files["fit_json"].items() if k != "output"})
    assert res.deviation == pytest.approx(files["fit_json"]["max_deviation_chords"], rel=TOL)
    written = foilmap.load_section(files["fitted"])
    assert res.section.reference_le == pytest.approx(written.reference_le, abs=1e-15)
    np.testing.assert_allclose(res.section.coefficients, written.coefficients, atol=1e-15)
    # the fitted section goes straight into an evaluation, measured from the file's chord line
    same(foilmap.evaluate(res.section, alpha=4.0).record,
         run_json("evaluate", files["fitted"], "--alpha", "4"))


def test_inverse_equals_the_command(files):
    out = files["dir"] / "inverse.toml"
    shown = run_json("inverse", files["target"], "--cl", "0.5", "-n", "12", "-o", out)
    res = foilmap.inverse(files["target"], cl=0.5, n=12)
    same(res.record, {k: v for k, v in shown.items() if k != "output"})
    assert res.cp_rms == pytest.approx(shown["rms_cp_deviation"], rel=TOL)
    np.testing.assert_allclose(res.section.coefficients,
                               foilmap.load_section(out).coefficients, atol=1e-15)


def test_coordinates_equal_the_command(files):
    out = files["dir"] / "c.dat"
    r = cli("coords", files["fitted"], "-n", "81", "-o", out)
    assert r.returncode == 0, r.stderr
    xy = np.loadtxt(out.read_text().splitlines()[1:])
    np.testing.assert_allclose(foilmap.coordinates(files["fitted"], points=81), xy, atol=5e-9)


def test_export_equals_the_command(files, tmp_path):
    r = cli("export", files["fitted"], "--alpha", "4", "--re", "1e6", "-o", tmp_path / "cmd")
    assert r.returncode == 0, r.stderr
    res = foilmap.export(foilmap.load_section(files["fitted"]), tmp_path / "api", alpha=4.0,
                         reynolds=1e6)
    text = (tmp_path / "cmd" / "summary.csv").read_text()
    rows = list(csv.DictReader(ln for ln in text.splitlines() if not ln.startswith("#")))
    assert len(rows) == len(res.rows) == 1
    for k, v in rows[0].items():
        if k == "source":
            continue
        got = res.rows[0][k]
        if isinstance(got, float):
            assert got == pytest.approx(float(v), rel=TOL, abs=TOL), k
        else:
            assert str(got) == v, k
    # a fitted section's export is measured from its chord line, as evaluate is
    assert res.rows[0]["alpha_deg"] == pytest.approx(4.0, abs=1e-12)
    assert res.rows[0]["cl"] == pytest.approx(
        foilmap.evaluate(files["fitted"], alpha=4.0).cl, rel=TOL)


@pytest.fixture(scope="module")
def front_folder(tmp_path_factory):
    """A small two-objective study run in this process (test data, invented)."""
    d = tmp_path_factory.mktemp("front")
    text = small_study("mo", [1, 2], 200, objectives="peak_suction = 1.0\nseverity = 1.0",
                       extra="[fronts]\nreference_point = [5.0, 5.0]\n").replace(
        "[search]", '[search]\nmethod = "comocma"\nkernels = 3')
    (d / "s.toml").write_text(text)
    foilmap.run_study(foilmap.load_study(d / "s.toml"), d / "out", workers=1)
    return d / "out"


def test_fronts_status_and_report_equal_the_commands(front_folder, tmp_path):
    shown = run_json("fronts", front_folder)
    res = foilmap.compare_fronts(front_folder)
    same(json.loads(json.dumps(res.record)), shown)
    shown = run_json("fronts", front_folder, "--reference", "4,4")
    same(json.loads(json.dumps(foilmap.compare_fronts([front_folder], reference=[4, 4]).record)),
         shown)
    st, shown = foilmap.status(front_folder), run_json("status", front_folder)
    st.pop("checked"), shown.pop("checked")  # the time each was read
    same(json.loads(json.dumps(st)), shown)
    page = foilmap.report_page(front_folder, tmp_path / "api.html")
    r = cli("report", front_folder, "-o", tmp_path / "cmd.html")
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "api.html").read_text() == page.html
    drop_stamp = [ln for ln in page.html.splitlines() if "written" not in ln]
    assert drop_stamp == [ln for ln in (tmp_path / "cmd.html").read_text().splitlines()
                          if "written" not in ln]


def test_bad_input_is_one_line():
    two = foilmap.SectionSet(np.array([[-0.07 + 0.03j], [-0.08 + 0.02j]]), np.radians([10, 10]))
    with pytest.raises(foilmap.InputError, match="holds 2 sections") as e:
        foilmap.evaluate(two, alpha=2.0)
    assert "\n" not in str(e.value)
    with pytest.raises(foilmap.InputError, match="exactly one of cl and alpha"):
        foilmap.evaluate(two[0], alpha=2.0, cl=0.5)
    with pytest.raises(foilmap.InputError, match="is not a section"):
        foilmap.sweep(42, alpha=[0.0])
    with pytest.raises(foilmap.InputError, match="compressibility rule"):
        foilmap.evaluate(two[0], alpha=2.0, compressibility="magic")
    with pytest.raises(foilmap.InputError, match="out of range"):
        foilmap.fit([[1, 0], [0, 0]], n=0)
    # the limits of the commands' options hold for the library's callers too
    for kw, words in ((dict(alpha=4.0, points=5), "points = 5 is out of range"),
                      (dict(alpha=float("nan")), "alpha = nan is out of range"),
                      (dict(cl="a"), "cl = 'a' is not a number"),
                      (dict(alpha=4.0, mach=1.5), "mach = 1.5 is out of range"),
                      (dict(alpha=4.0, sigma=-1.0), "sigma = -1.0 is out of range"),
                      (dict(alpha=4.0, reynolds=0.0), "reynolds = 0.0 is out of range")):
        with pytest.raises(foilmap.InputError, match=words):
            foilmap.evaluate(two[0], **kw)
    with pytest.raises(foilmap.InputError, match="alpha = 40 is out of range"):
        foilmap.sweep(two[0], alpha=[1, 40])
    with pytest.raises(foilmap.InputError, match="a number or a list"):
        foilmap.sweep(two[0], cl=[])
    with pytest.raises(foilmap.InputError, match="n = 2.5 is not a whole number"):
        foilmap.inverse("any.csv", cl=0.5, n=2.5)


def test_fit_json_bad_input_is_one_line(tmp_path):
    bad = tmp_path / "bad.dat"
    bad.write_text("not coordinates\n1 2 3\n")
    r = cli("fit", bad, "-o", tmp_path / "o.toml", "--json")
    assert r.returncode == 2 and r.stdout == ""
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr


def test_help_imports_no_kernel():
    # foilmap --help starts without numba, numpy or matplotlib (the time is measured by hand,
    # never asserted: DEVELOPERS.md, "Tests")
    import subprocess
    import sys

    code = ("import sys, foilmap.cli\n"
            "try:\n    foilmap.cli.main(['--help'])\nexcept SystemExit:\n    pass\n"
            "print(sorted(m for m in ('numba', 'numpy', 'matplotlib', 'scipy') "
            "if m in sys.modules))")
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    assert r.stdout.strip().splitlines()[-1] == "[]"


def test_every_angle_is_in_degrees(files):
    # the kernel works in radians; a call of 4 (degrees) is not 4 radians (229 degrees)
    res = foilmap.evaluate(files["plain"], alpha=4.0)
    assert res.ok and res.alpha_deg == pytest.approx(4.0)
    from foilmap.section.evaluation import analyse

    kernel = analyse(foilmap.load_section(files["plain"]).to_set(),
                     alpha=math.radians(4.0))
    assert res.cl == pytest.approx(float(kernel.evaluation.cl[0]), rel=1e-12)


def test_the_documented_section_example_runs(tmp_path, monkeypatch):
    # docs/python-api.md's first example, executed as written (its figures are not asserted:
    # the other tests of this file hold every call to its command)
    import re
    import shutil
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    code = re.findall(r"```python\n(.*?)```", (root / "docs" / "python-api.md").read_text(),
                      flags=re.S)[0]
    shutil.copytree(root / "studies", tmp_path / "studies")
    monkeypatch.chdir(tmp_path)
    exec(compile(code, "docs/python-api.md", "exec"), {"__name__": "example"})
    assert sorted(p.name for p in tmp_path.iterdir()) == ["studies"]  # nothing written
