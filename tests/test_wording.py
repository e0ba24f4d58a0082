"""What people read: names, defaults, wording, rounding, and the bad-input holes found in use."""

from __future__ import annotations

import argparse
import csv
import io
import json

import numpy as np
import pytest
from conftest import ROOT, cli, small_study

EXAMPLE = ROOT / "studies" / "example-section.toml"


def test_point_counts_default_to_201(tmp_path):
    r = cli("coords", EXAMPLE)
    assert len([ln for ln in r.stdout.splitlines()[1:] if ln.strip()]) == 201
    r = cli("naca", "2412", "-o", tmp_path / "n.dat")
    assert len((tmp_path / "n.dat").read_text().splitlines()) == 1 + 201
    r = cli("evaluate", EXAMPLE, "--cl", "0.5", "--table", tmp_path / "t.csv")
    rows = [ln for ln in (tmp_path / "t.csv").read_text().splitlines()
            if ln and not ln.startswith("#")]
    assert len(rows) == 1 + 201


def test_old_constraint_keys_name_the_new_ones(tmp_path):
    for old, new in (("min_thickness = 0.1", "constraints.thickness = [low, high]"),
                     ("max_thickness = 0.2", "constraints.thickness = [low, high]"),
                     ("min_te_angle_deg = 8.0", "constraints.te_angle_deg = [low, high]"),
                     ("min_thickness_at = [[0.9, 0.02]]",
                      "constraints.station_thickness = [[x, t], ...]")):
        (tmp_path / "s.toml").write_text(small_study("old", [1], 100, constraints=old))
        r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out")
        assert r.returncode == 2 and new in r.stderr, r.stderr
        assert len(r.stderr.strip().splitlines()) == 1


def test_progress_line_says_the_share_is_this_generations():
    from foilmap.report.progress import Progress

    buf = io.StringIO()
    p = Progress(total_runs=1, total_evals=100, stream=buf, tty=False, interval=0.0)
    p.update({"run": "p.s1", "generation": 3, "evaluations": 36, "best": 0.894,
              "feasible": 0.0, "sigma": 0.1})
    line = buf.getvalue()
    assert "best feasible so far 0.894" in line and "0% of this generation feasible" in line
    assert "feasible 0%" not in line


def test_ideal_lift_limit_is_named_for_what_it_is():
    r = cli("evaluate", EXAMPLE, "--cl", "0.5")
    assert "max ideal Cl" not in r.stdout
    assert "Cl limit of the ideal flow (not stall)" in r.stdout
    r = cli("evaluate", EXAMPLE, "--cl", "9")
    from foilmap import load_section
    from foilmap.section.evaluation import evaluate

    top = evaluate(load_section(EXAMPLE).to_set(), cl=0.5).cl_max_ideal[0]  # closed form
    assert r.returncode == 2 and "largest Cl" in r.stderr and f"{top:.4g}" in r.stderr


def test_display_rounding():
    from foilmap.report.text import display_values, format_number

    assert format_number(-0.00001, 3) == "0.000"
    assert format_number(-0.0004, 3) == "0.000"
    assert format_number(-0.0006, 3) == "-0.001"
    out = display_values({"a": 1.9999999999999996, "b": -0.0, "c": [0.1 + 0.2],
                          "d": float("nan"), "e": "text"})
    assert out["a"] == 2.0 and str(out["b"]) == "0.0" and out["c"] == [0.3]
    assert out["e"] == "text" and out["d"] != out["d"]
    r = cli("evaluate", EXAMPLE, "--alpha", "0", "--json")
    assert "9999999" not in r.stdout and "-0.0," not in r.stdout


def test_plural_runs(tmp_path):
    (tmp_path / "s.toml").write_text(small_study("one", [1], 60))
    r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out", "--workers", "1")
    assert r.returncode == 0, r.stderr
    assert "1 run finished now" in r.stdout and "1 runs" not in r.stdout


def test_fit_counts_the_points_of_the_file(tmp_path):
    cli("naca", "2412", "-n", "41", "-o", tmp_path / "n.dat")
    r = cli("fit", tmp_path / "n.dat", "-n", "8", "-o", tmp_path / "n.toml")
    assert "read 41 points" in r.stdout


def test_out_of_order_point_names_its_line(tmp_path):
    from foilmap.section.naca import naca4_coordinates

    # NACA 2412 from the formula (41 points, name on line 1) with the point on line 8 moved
    # aft of its predecessor: x must fall along the upper surface towards the leading edge
    xy = naca4_coordinates("2412", 41)
    xy[6, 0] += 0.1
    (tmp_path / "bad.dat").write_text(
        "NACA 2412\n" + "\n".join(f"{x:.8f} {y:.8f}" for x, y in xy) + "\n")
    point = f"({float(f'{xy[6, 0]:.8f}'):g}, {float(f'{xy[6, 1]:.8f}'):g})"
    r = cli("fit", tmp_path / "bad.dat", "-n", "8", "-o", tmp_path / "b.toml")
    assert r.returncode == 2, r.stderr
    assert f"line 8: the point {point} is out of order" in r.stderr, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "b.toml").exists()
    # the same file as a study's start: the same line named, exit 2, nothing written
    (tmp_path / "s.toml").write_text(small_study("st", [1], 60).replace(
        "coefficients = 4", 'coefficients = 4\nstart = "bad.dat"'))
    r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out")
    assert r.returncode == 2 and f"line 8: the point {point} is out of order" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and not (tmp_path / "out").exists()


@pytest.mark.parametrize("code", ["9999", "0150", "2012", "0412", "12", "abcd"])
def test_naca_codes_outside_the_formula(tmp_path, code):
    r = cli("naca", code, "-o", tmp_path / "n.dat")
    assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert not (tmp_path / "n.dat").exists()
    if code in ("9999", "0150"):
        assert "1 to 30 %" in r.stderr


def test_contradictory_constraints_name_both_keys(tmp_path):
    (tmp_path / "s.toml").write_text(small_study(
        "c", [1], 60, constraints="thickness = [0.10, 0.12]\nstation_thickness = [[0.3, 0.15]]"))
    r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out")
    assert r.returncode == 2
    assert "constraints.station_thickness" in r.stderr and "constraints.thickness" in r.stderr
    (tmp_path / "s.toml").write_text(small_study("c", [1], 60,
                                                 constraints="thickness = [0.2, 0.1]"))
    r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out")
    assert r.returncode == 2 and "low <= high" in r.stderr


def test_evaluate_on_coordinates_suggests_fit(tmp_path):
    cli("naca", "0012", "-o", tmp_path / "n.dat")
    r = cli("evaluate", tmp_path / "n.dat", "--cl", "0.3")
    assert r.returncode == 2 and "foilmap fit" in r.stderr and "TOML" not in r.stderr


def test_bare_command_prints_the_table():
    r = cli()
    assert r.returncode == 2
    for cmd in ("evaluate", "sweep", "inverse", "report", "run", "export"):
        assert cmd in r.stderr
    assert "arguments are required" not in r.stderr


def test_every_option_has_help():
    from foilmap.cli import build_parser

    missing = []
    parser = build_parser()
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                missing += [(name, a.dest) for a in sub._actions
                            if not isinstance(a, argparse._HelpAction) and not a.help]
        elif not isinstance(action, argparse._HelpAction) and not action.help:
            missing.append(("foilmap", action.dest))
    assert missing == []


@pytest.mark.slow
def test_demo_ends_with_the_designs_figures(tmp_path):
    r = cli("demo", "--out", tmp_path / "demo", "--workers", "2", timeout=600)
    assert r.returncode == 0, r.stderr
    line = next(ln for ln in r.stdout.splitlines() if ln.startswith("demo finished"))
    for word in ("peak suction", "recovery severity", "thickness", "weighted objective"):
        assert word in line, line


@pytest.mark.slow
def test_export_all_writes_the_merged_front(tmp_path):
    text = small_study("mo", [1, 2], 240, objectives="peak_suction = 1.0\nseverity = 1.0",
                       extra="[fronts]\nreference_point = [3.0, 3.0]\n")
    text = text.replace("[search]\n", '[search]\nmethod = "comocma"\nkernels = 4\n')
    (tmp_path / "s.toml").write_text(text)
    r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out", "--workers", "2")
    assert r.returncode == 0, r.stderr
    import foilmap

    merged = foilmap.open_results(tmp_path / "out").front()
    r = cli("export", tmp_path / "out", "--all", "-o", tmp_path / "bundle", timeout=600)
    assert r.returncode == 0, r.stderr
    folders = [p for p in (tmp_path / "bundle").iterdir() if p.is_dir()]
    assert len(folders) == len(merged) > 0
    assert "exporting" in r.stderr  # progress on long work
    summary = (tmp_path / "bundle" / "summary.csv").read_text()
    rows = list(csv.DictReader(ln for ln in summary.splitlines() if not ln.startswith("#")))
    # one summary row per front design and per folder written, every design named in a row
    assert len(rows) == len(merged)
    assert sorted(r["folder"] for r in rows) == sorted(p.name for p in folders)
    ids = {d.id.replace("#", "-") for d in merged}
    assert len(ids) == len(merged)
    assert all(any(i in r["design"] for r in rows) for i in ids), (ids, rows)


def _floats(obj):
    """Every float in a JSON value, with its path."""
    if isinstance(obj, float):
        yield "", obj
    elif isinstance(obj, dict):
        for k, v in obj.items():
            yield from ((f"{k}.{p}", x) for p, x in _floats(v))
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            yield from ((f"{i}.{p}", x) for p, x in _floats(v))


def test_status_json_is_rounded(tmp_path):
    from foilmap.store.folder import StudyFolder

    (tmp_path / "s.toml").write_text(small_study("r", [1], 60))
    r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out", "--workers", "1")
    assert r.returncode == 0, r.stderr
    r = cli("status", tmp_path / "out", "--json")
    assert r.returncode == 0, r.stderr
    st = json.loads(r.stdout)
    assert st["runs"][0]["state"] == "complete"
    raw = StudyFolder(tmp_path / "out").status()  # the same figures before display rounding
    shown = dict(_floats(st))
    # the objective and the time are figures of full double precision (17 digits) in the log
    for key in ("runs.0.best.", "runs.0.elapsed_s.", "evaluations_per_s."):
        assert key in shown, sorted(shown)
    assert shown["runs.0.best."] == float(f"{raw['runs'][0]['best']:.12g}")
    assert shown["runs.0.elapsed_s."] == float(f"{raw['runs'][0]['elapsed_s']:.12g}")
    # no float printed with more than 12 significant digits, and no negative zero
    for path, v in shown.items():
        digits = repr(abs(v)).split("e")[0].replace(".", "").strip("0")  # shortest repr
        assert len(digits) <= 12, (path, v)
        assert not (v == 0 and str(v).startswith("-")), path
    assert '"best": -0.0' not in r.stdout
