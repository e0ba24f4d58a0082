"""The demo: a real small study on built-in defaults, end to end."""

from __future__ import annotations

import subprocess
import sys
import tomllib
from importlib.resources import files

import pytest

from foilmap import load_section
from foilmap.section.evaluation import evaluate


@pytest.mark.slow
def test_demo_finishes_and_its_best_section_meets_the_constraints(tmp_path):
    out = tmp_path / "demo"
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "demo", "--out", str(out)],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    assert "demo finished" in r.stdout and str(out) in r.stdout
    for name in ("runs", "index.json", "convergence.png", "best-section.toml",
                 "best-section.png", "study.toml"):
        assert (out / name).exists(), name
    study = tomllib.loads(files("foilmap").joinpath("data/demo.toml").read_text())
    con = study["constraints"]
    rec = load_section(out / "best-section.toml")
    sec = rec.to_set()
    ev = evaluate(sec, cl=0.5)
    assert ev.status[0] == 0
    tol = 1e-9
    assert ev.thickness[0] >= con["thickness"][0] - tol
    lo, hi = con["thickness_x"]
    assert lo - tol <= ev.thickness_x[0] <= hi + tol
    assert ev.le_radius[0] >= con["min_le_radius"] - tol
    assert ev.te_angle[0] >= __import__("math").radians(con["te_angle_deg"][0]) - tol
    lo, hi = con["cm"]
    assert lo - tol <= ev.cm_quarter_chord[0] <= hi + tol
    # a designer's sanity check: positive camber, peak suction well below the starting section's
    assert 0 < ev.camber[0] < 0.06
    peak = max(-evaluate(sec, cl=c).cp_min[0] for c in (0.3, 0.5, 0.7))
    assert peak < 1.0
