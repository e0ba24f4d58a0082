"""Pareto fronts: indicators on hand-checked sets, a search against a known front, multi-
objective runs reproduced and resumed, ε-constraint sweeps, and the fronts and pick commands."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from conftest import cli, small_study

from foilmap import load_section
from foilmap.design.fronts import (
    FrontError,
    hypervolume,
    knee_index,
    merge_archive,
    nondominated_mask,
)
from foilmap.design.problem import Outcome, Problem
from foilmap.design.search import is_finished, new_search, step
from foilmap.run.single import execute_run
from foilmap.store.folder import StudyFolder
from foilmap.store.runlog import read_run
from foilmap.store.studyfile import load_study_text


def test_hypervolume_2d_by_hand():
    # (1,3), (2,2), (3,1) with reference (4,4): slabs sorted by f1,
    # (2−1)(4−3) + (3−2)(4−2) + (4−3)(4−1) = 1 + 2 + 3 = 6 (worked by hand)
    pts = np.array([[1.0, 3.0], [2.0, 2.0], [3.0, 1.0]])
    assert hypervolume(pts, [4.0, 4.0]) == pytest.approx(6.0, abs=1e-12)
    # a dominated point adds nothing: (2.5, 2.5) lies inside the union
    assert hypervolume(np.vstack([pts, [2.5, 2.5]]), [4.0, 4.0]) == pytest.approx(6.0)


def test_hypervolume_3d_by_hand():
    # three boxes (1,1,3), (1,3,1), (3,1,1) to (4,4,4): each 3·3·1 = 9; pairwise overlaps are
    # 1·1·3 = 3 each, the triple overlap 1·1·1 = 1: 27 − 9 + 1 = 19 (inclusion–exclusion)
    pts = np.array([[1.0, 1.0, 3.0], [1.0, 3.0, 1.0], [3.0, 1.0, 1.0]])
    assert hypervolume(pts, [4.0, 4.0, 4.0]) == pytest.approx(19.0, abs=1e-12)


def test_nondominated_filtering_and_archive_merge():
    pts = np.array([[1.0, 3.0], [2.0, 2.0], [2.5, 2.5], [3.0, 1.0], [3.0, 3.0]])
    np.testing.assert_array_equal(nondominated_mask(pts), [True, True, False, True, False])
    idx, p = merge_archive(np.array([0, 1]), pts[:2], np.array([2, 3, 4]), pts[2:])
    np.testing.assert_array_equal(idx, [0, 1, 3])


def test_points_beyond_the_reference_and_nan_are_refused():
    with pytest.raises(FrontError, match="beyond the reference point"):
        hypervolume(np.array([[1.0, 5.0]]), [4.0, 4.0])
    with pytest.raises(FrontError, match="NaN"):
        hypervolume(np.array([[1.0, np.nan]]), [4.0, 4.0])


def test_knee_of_a_convex_front():
    t = np.linspace(0, 1, 21)
    front = np.column_stack([t, (1 - np.sqrt(t)) ** 2])  # symmetric about f1 = f2
    k = knee_index(front)
    assert front[k, 0] == pytest.approx(front[k, 1], abs=0.06)


# --- a search against a known front -------------------------------------------------------------


@dataclass(frozen=True)
class _Param:
    dimension: int

    def x0(self):
        return np.full(self.dimension, 0.5)

    def bounds(self):
        return [-3.0] * self.dimension, [3.0] * self.dimension

    def sigma_scales(self):
        return np.full(self.dimension, 0.3)


@dataclass(frozen=True)
class SphereProblem:
    """f1 = Σ xᵢ², f2 = Σ (xᵢ − 1)²: the front is x = t·(1, …, 1), t ∈ [0, 1], i.e.
    f2 = (√D − √f1)² for 0 ≤ f1 ≤ D (the two-objective sphere problem; exact)."""

    param: _Param
    reference_point: tuple = (4.0, 4.0)
    objectives: tuple = (("f1", 1.0), ("f2", 1.0))
    constraint_scales: tuple = ()

    def evaluate(self, x):
        f = np.column_stack([np.sum(x**2, 1), np.sum((x - 1) ** 2, 1)])
        n = x.shape[0]
        return Outcome(f.sum(1), f, np.zeros((n, 0)), np.zeros(n, np.int8), np.ones(n, bool))


def sphere_front_hypervolume(d: int, ref: float) -> float:
    """∫ (ref − f2(f1)) df1 over the part of the exact front inside the reference box."""
    f1 = np.linspace(0.0, d, 2_000_001)
    f2 = (np.sqrt(d) - np.sqrt(f1)) ** 2
    inside = (f1 < ref) & (f2 < ref)
    y = np.where(inside, ref - f2, 0.0)
    return float(np.sum(0.5 * (y[1:] + y[:-1]) * np.diff(f1)))


def test_comocma_front_approaches_the_exact_sphere_front():
    d = 4
    prob = SphereProblem(_Param(d))
    search = {"method": "comocma", "max_evaluations": 6000, "kernels": 10, "popsize": 0,
              "restarts": 0}
    state = new_search(prob, search, seed=11)
    while not is_finished(state):
        gen, _ = step(state, prob, search)
    true_hv = sphere_front_hypervolume(d, 4.0)
    # closed form for D = 4, reference (4, 4): ∫₀⁴ (4 − (2 − √f1)²) df1 = ∫₀⁴ (4√f1 − f1) df1
    # = 64/3 − 8 = 40/3 (worked by hand)
    assert true_hv == pytest.approx(40.0 / 3.0, rel=1e-6)
    # the archive's hypervolume after 6000 evaluations is within 1 % of the exact front's
    assert 0.99 * true_hv < gen.hypervolume <= true_hv + 1e-9


# --- multi-objective runs through the engine -----------------------------------------------------

MO_STUDY = small_study(
    "mo", [1, 2], 900, objectives="peak_suction = 1.0\nseverity = 1.0",
    constraints="thickness = [0.10, 1.0]\nmin_le_radius = 0.006",
    extra='[fronts]\nreference_point = [2.0, 2.0]\n').replace(
    "[search]\n", '[search]\nmethod = "comocma"\nkernels = 6\n')


def run_folder(tmp_path, name, text=MO_STUDY, budget=None):
    study = load_study_text(text)
    out = tmp_path / name
    _, study = StudyFolder.prepare(study, out, budget)
    for r in study.runs():
        execute_run(study, r, out)
    return out, study


def test_multi_objective_runs_repeat_bit_for_bit(tmp_path):
    from test_search import logs_equal

    a, study = run_folder(tmp_path, "a")
    np.random.seed(3)
    b, _ = run_folder(tmp_path, "b")
    for r in study.runs():
        logs_equal(a / "runs" / f"{r.run_id}.h5", b / "runs" / f"{r.run_id}.h5")
    log = read_run(a / "runs" / "p.s1.h5")
    assert log.front().size > 5
    hv = log.gen["hypervolume"]
    assert np.all(np.diff(hv) >= -1e-12) and hv[-1] > hv[0]  # the archive only improves
    # every archived design is feasible and mutually non-dominated
    fr = log.front()
    assert np.all(log.evals["status"][fr] == 0)
    assert np.all(log.evals["constraints"][fr] <= 0)
    assert nondominated_mask(log.evals["objectives"][fr]).all()


@pytest.mark.slow
def test_multi_objective_run_killed_and_resumed(tmp_path, tmp_path_factory):
    from conftest import reference_folder
    from test_search import logs_equal, wait_for_generations

    # 91 generations: the log shows generation 10 at the first one-second commit (about 25
    # generations in on this machine), so the kill lands mid-run with room for a faster one
    text = MO_STUDY.replace("seeds = [1, 2]", "seeds = [1]").replace("900", "6000")
    sf, ref = reference_folder(tmp_path_factory, text)
    out = tmp_path / "cut"
    proc = subprocess.Popen([sys.executable, "-m", "foilmap.cli", "run", str(sf), "--out",
                             str(out), "--workers", "1"], stdout=subprocess.DEVNULL,
                            stderr=subprocess.DEVNULL, start_new_session=True)
    wait_for_generations(out / "runs" / "p.s1.h5", 10, proc)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait(timeout=60)
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out)],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    logs_equal(ref / "runs" / "p.s1.h5", out / "runs" / "p.s1.h5")
    assert read_run(out / "runs" / "p.s1.h5").resumes == 1


def test_epsilon_sweep_merges_into_one_front_per_seed(tmp_path):
    from foilmap.report.compare import collect_fronts, compare_fronts

    text = MO_STUDY.replace('method = "comocma"\nkernels = 6\nmax_evaluations = 900',
                            'method = "epsilon"\nepsilon_levels = [0.6, 0.9, 1.4]\n'
                            'max_evaluations = 300').replace("seeds = [1, 2]", "seeds = [1]")
    out, study = run_folder(tmp_path, "eps", text)
    assert [r.run_id for r in study.runs()] == ["p.e0.s1", "p.e1.s1", "p.e2.s1"]
    for r in study.runs():  # each level minimised the first objective under its bound
        log = read_run(out / "runs" / f"{r.run_id}.h5")
        assert log.constraint_names[-1] == "epsilon_severity"
        best = log.best()
        assert best is not None and best["objectives"][1] <= r.epsilon + 1e-12
    fronts = collect_fronts([str(out)])
    assert len(fronts) == 1 and fronts[0].run == "p.s1"
    res = compare_fronts(fronts)
    assert res["runs"][0]["hypervolume"] > 0
    assert nondominated_mask(np.array(res["runs"][0]["front"])).all()


# --- the commands --------------------------------------------------------------------------------


@pytest.mark.slow
def test_fronts_and_pick_commands(tmp_path):
    a, study = run_folder(tmp_path, "a")
    b, _ = run_folder(tmp_path, "b", MO_STUDY.replace("coefficients = 4", "coefficients = 6")
                      .replace('name = "mo"', 'name = "mo6"'))
    csv = tmp_path / "f.csv"
    png = tmp_path / "f.png"
    # the archive keeps every non-dominated design, extremes beyond the study's reference
    # point included; one common reference point that covers them all is given here
    r = cli("fronts", a, b, "--json", "--csv", csv, "-o", png, "--reference", "20,20")
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    assert len(res["runs"]) == 4 and len(res["groups"]) == 2
    for run in res["runs"]:
        assert {"reference_point", "hypervolume", "front"} <= run.keys()
        assert run["reference_point"] == [20.0, 20.0]
        pts = np.array(run["front"])
        assert run["hypervolume"] == pytest.approx(hypervolume(pts, [20.0, 20.0]))
    comp = res["comparisons"][0]
    assert 0.0 <= comp["p_value"] <= 1.0 and "epsilon_additive_a_to_b" in comp
    assert "median_attainment" in res["groups"][0]
    assert png.read_bytes()[:4] == b"\x89PNG"
    rows = csv.read_text().splitlines()
    assert rows[0].startswith("group,run,design,peak_suction,severity,x0")
    assert len(rows) - 1 == sum(len(run["front"]) for run in res["runs"])
    # pick the knee and check it evaluates to the objectives the front reported
    sec = tmp_path / "knee.toml"
    r = cli("pick", a, "--knee", "-o", sec)
    assert r.returncode == 0, r.stderr
    rec = load_section(sec)
    run_id, ev = rec.provenance["design"].split("#")
    log = read_run(a / "runs" / f"{run_id}.h5")
    spec = next(s for s in study.runs() if s.run_id == run_id)
    prob = Problem.from_run(study, spec)
    from foilmap.section.conformal import SectionSet
    from foilmap.section.evaluation import analyse

    an = analyse(SectionSet(rec.coefficients[None, :], np.radians([rec.te_angle_deg])), cl=0.5,
                 proxies=("severity",))
    assert -an.evaluation.cp_min[0] == pytest.approx(log.evals["objectives"][int(ev)][0], rel=1e-9)
    assert an.evaluation.severity[0] == pytest.approx(log.evals["objectives"][int(ev)][1], rel=1e-9)
    del prob
    for how in (["--index", "0"], ["--index", rec.provenance["design"]],
                ["--nearest", "peak_suction=0.7,severity=0.6"]):
        r = cli("pick", a, *how, "-o", tmp_path / "p.toml")
        assert r.returncode == 0, r.stderr


@pytest.mark.parametrize("case,message", [
    ("objectives", "fronts have different objectives"),
    ("reference", "runs use different reference points"),
    ("beyond", "lie beyond the reference point"),
    ("badref", "--reference '1,x' is not a comma-separated list"),
    ("pickname", "the nearest design needs a value for each objective"),
])
def test_fronts_refusals(tmp_path, case, message):
    a, _ = run_folder(tmp_path, "a", MO_STUDY.replace("seeds = [1, 2]", "seeds = [1]")
                      .replace("900", "200"))
    if case == "objectives":
        other = MO_STUDY.replace("severity = 1.0", "area = 1.0").replace('name = "mo"',
                                                                        'name = "o"')
        b, _ = run_folder(tmp_path, "b", other.replace("seeds = [1, 2]", "seeds = [1]")
                          .replace("900", "200"))
        args = ["fronts", a, b]
    elif case == "reference":
        other = MO_STUDY.replace("[2.0, 2.0]", "[3.0, 3.0]").replace('name = "mo"', 'name = "o"')
        b, _ = run_folder(tmp_path, "b", other.replace("seeds = [1, 2]", "seeds = [1]")
                          .replace("900", "200"))
        args = ["fronts", a, b]
    elif case == "beyond":
        args = ["fronts", a, "--reference", "0.3,0.3"]
    elif case == "badref":
        args = ["fronts", a, "--reference", "1,x"]
    else:
        args = ["pick", a, "--nearest", "peak_suction=0.5", "-o", tmp_path / "x.toml"]
    r = cli(*args)
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and message in lines[0], r.stderr
    assert not (tmp_path / "x.toml").exists()


def test_shipped_front_study_is_a_two_variant_comparison():
    root = Path(__file__).resolve().parents[1]
    path = next((root / "studies").glob("*front*.toml"))
    study = load_study_text(path.read_text(), str(path))
    assert study.search["method"] == "comocma" and len(study.objectives) == 2
    assert {v for v, _ in study.variants} == {"n4", "n8"}


def test_fronts_of_two_folders_of_one_study_stay_apart(tmp_path):
    # regression: same-named runs of two folders were merged (one run counted twice)
    import shutil

    a, study = run_folder(tmp_path, "a", budget=300)
    b = tmp_path / "b"
    shutil.copytree(a, b)
    r = cli("fronts", a, b, "--json", "--reference", "5,5")
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    runs = {(row["folder"], row["run"]) for row in res["runs"]}
    assert len(res["runs"]) == 4 and len(runs) == 4
    assert {row["run"] for row in res["runs"]} == {"a/p.s1", "a/p.s2", "b/p.s1", "b/p.s2"}
    assert [g["count"] for g in res["groups"]] == [2, 2]
    # and two run logs of the same name from two folders
    r = cli("fronts", a / "runs" / "p.s1.h5", b / "runs" / "p.s1.h5", "--json", "--reference",
            "5,5")
    assert r.returncode == 0, r.stderr
    res = json.loads(r.stdout)
    assert [row["run"] for row in res["runs"]] == ["a/p.s1", "b/p.s1"]
    hv = [row["hypervolume"] for row in res["runs"]]
    assert hv[0] == pytest.approx(hv[1])  # the same log, counted once in each folder
    # one folder alone keeps plain run ids
    res = json.loads(cli("fronts", a, "--json", "--reference", "5,5").stdout)
    assert {row["run"] for row in res["runs"]} == {"p.s1", "p.s2"}


def test_a_front_study_points_best_to_pick_and_plots_its_hypervolume(tmp_path):
    # regression: best and export --best said "no feasible design yet" and plot-run drew an
    # empty convergence figure for a multi-objective study
    a, _ = run_folder(tmp_path, "a", budget=300)
    for args in (["best", a, "-o", tmp_path / "b.toml"], ["export", a, "--best", "-o",
                                                           tmp_path / "e"]):
        r = cli(*args)
        assert r.returncode == 2, r.stderr
        assert "pick" in r.stderr and "--knee" in r.stderr and len(r.stderr.splitlines()) == 1
        assert not (tmp_path / "b.toml").exists() and not (tmp_path / "e").exists()
    r = cli("plot-run", a, "-o", tmp_path / "hv.png")
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "hv.png").stat().st_size > 20_000


def test_a_study_is_multi_objective_by_its_search_method():
    from foilmap.design.fronts import is_multi_objective
    from foilmap.store import folder
    from foilmap.store.studyfile import load_study_text

    assert folder.is_multi_objective is is_multi_objective  # the store re-exports it
    assert is_multi_objective(load_study_text(MO_STUDY))
    assert not is_multi_objective(load_study_text(small_study("single", [1], 100)))
