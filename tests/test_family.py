"""Section families: the rule between stations, fairness, the family search, family files."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.interpolate import PchipInterpolator

from foilmap.design.family import (
    Family,
    build_problem,
    check_positions,
    fairness,
    interpolate,
    interpolate_constraints,
)
from foilmap.design.study import parse_study
from foilmap.errors import InputError
from foilmap.store.familyfile import format_family, parse_family

FAMILY = """
[study]
name = "fam"
seeds = [1]
[shape]
coefficients = 4
[[station]]
name = "root"
position = 0.0
cl = 0.7
constraints = { thickness = [0.14, 0.3] }
[[station]]
name = "mid"
position = 0.4
cl = 0.6
weight = 2.0
[[station]]
name = "tip"
position = 1.0
cl = 0.5
[objectives]
peak_suction = 1.0
[constraints]
thickness = [0.10, 0.3]
[search]
max_evaluations = 200
"""


# --- the rule between stations ------------------------------------------------------------------

POS = np.array([0.0, 0.15, 0.55, 1.0])


def test_pchip_matches_an_independent_implementation():
    # scipy's PchipInterpolator (Fritsch-Carlson slopes, the same published rule) is written
    # apart from ours: the two agree to round-off, real and complex, over many stations
    rng = np.random.default_rng(3)
    y = rng.normal(size=(4, 3, 5)) + 1j * rng.normal(size=(4, 3, 5))
    at = np.linspace(0.0, 1.0, 201)
    ours = interpolate(POS, y, at, "pchip")
    ref = PchipInterpolator(POS, y.real, axis=0)(at) + 1j * PchipInterpolator(POS, y.imag,
                                                                               axis=0)(at)
    assert np.max(np.abs(ours - ref)) < 1e-13


def test_linear_matches_numpy_interp():
    rng = np.random.default_rng(4)
    y = rng.normal(size=4)
    at = np.linspace(0.0, 1.0, 97)
    assert np.max(np.abs(interpolate(POS, y, at, "linear") - np.interp(at, POS, y))) < 1e-15


@pytest.mark.parametrize("rule", ["linear", "pchip"])
def test_stations_bit_for_bit_and_identical_stations_everywhere(rule):
    rng = np.random.default_rng(5)
    y = rng.normal(size=(4, 6)) * 0.05 + 1j * rng.normal(size=(4, 6)) * 0.05
    assert np.array_equal(interpolate(POS, y, POS, rule), y)
    same = np.repeat(y[:1], 4, axis=0)
    at = np.linspace(0.0, 1.0, 53)
    assert np.array_equal(interpolate(POS, same, at, rule), np.repeat(y[:1], 53, axis=0))


@pytest.mark.parametrize("rule", ["linear", "pchip"])
def test_family_object_at_stations_and_range(rule):
    rng = np.random.default_rng(6)
    a = -0.08 + 0.02 * rng.normal(size=(3, 5)) + 0.03j + 0.01j * rng.normal(size=(3, 5))
    fam = Family(("r", "m", "t"), np.array([0.1, 0.5, 0.9]), a, np.array([14.0, 11.0, 9.5]),
                 rule)
    sec = fam.section_at([0.1, 0.5, 0.9])
    assert np.array_equal(sec.coefficients, a)
    assert np.array_equal(sec.te_angle, np.radians([14.0, 11.0, 9.5]))
    with pytest.raises(ValueError, match="outside the family's stations"):
        fam.section_at(0.95)
    with pytest.raises(ValueError):
        Family(("r", "t"), np.array([0.5, 0.5]), a[:2], np.array([10.0, 10.0]))


def test_pchip_never_overshoots_between_stations():
    # the monotone rule keeps every component between its two stations' values
    y = np.array([0.0, 1.0, 1.1, 3.0])
    at = np.linspace(0.0, 1.0, 401)
    v = interpolate(POS, y, at, "pchip")
    k = np.clip(np.searchsorted(POS, at, side="right") - 1, 0, 2)
    lo, hi = np.minimum(y[k], y[k + 1]), np.maximum(y[k], y[k + 1])
    assert np.all(v >= lo - 1e-15) and np.all(v <= hi + 1e-15)


def test_check_positions_inside_each_interval():
    at = check_positions([0.0, 0.4, 1.0], 8)
    assert len(at) == 16
    assert np.all((at[:8] > 0.0) & (at[:8] < 0.4)) and np.all((at[8:] > 0.4) & (at[8:] < 1.0))


# --- fairness --------------------------------------------------------------------------------


def test_fairness_rule():
    tol = 1e-5
    rows = np.array([
        [0.16, 0.15, 0.13, 0.12, 0.10],  # monotone down: fair
        [0.10, 0.12, 0.13, 0.15, 0.16],  # monotone up: fair
        [0.16, 0.15, 0.151, 0.12, 0.10],  # a bump of 1e-3 on the way down
        [0.12, 0.12, 0.1195, 0.12, 0.12],  # equal ends with a dip of 5e-4
        [0.12, 0.12, 0.120004, 0.12, 0.120002],  # equal ends (to tol), within tol: fair
    ])
    g = fairness(rows, tol)
    assert g[0] < 0 and g[1] < 0 and g[4] <= 0
    assert g[2] == pytest.approx(1e-3 - tol, abs=1e-12)
    assert g[3] == pytest.approx(5e-4 - tol, abs=1e-12)


def test_constraints_interpolate_between_two_stations():
    a = {"thickness": [0.2, 0.3], "cm": [-0.1, 0.0], "min_le_radius": 0.01,
         "station_thickness": [[0.9, 0.02]], "camber": [0.0, 0.05]}
    b = {"thickness": [0.1, 0.3], "cm": [-0.2, 0.0], "min_le_radius": 0.004,
         "station_thickness": [[0.9, 0.01]]}
    c = interpolate_constraints(a, b, 0.25)
    assert c["thickness"] == pytest.approx([0.175, 0.3])
    assert c["cm"] == pytest.approx([-0.125, 0.0])
    assert c["min_le_radius"] == pytest.approx(0.0085)
    assert c["station_thickness"] == [[0.9, pytest.approx(0.0175)]]
    assert "camber" not in c  # only one station binds it: at that station alone


# --- the family study -------------------------------------------------------------------------


def test_family_study_expands_into_station_runs_then_the_joint_search():
    st = parse_study(FAMILY, "fam.toml")
    ids = [r.run_id for r in st.runs()]
    assert ids == ["root.s1", "mid.s1", "tip.s1", "family.s1"]
    root = st.runs()[0]
    assert root.constraints["thickness"] == [0.14, 0.3]  # the station's own over the study's
    assert st.runs()[1].constraints["thickness"] == [0.10, 0.3]
    assert st.family == {"rule": "linear", "checks": 8, "fair_tolerance": 1e-5,
                         "start": "stations", "step": 0.1, "evaluations": 0}
    shape = parse_study(FAMILY + "[family]\nstart = \"shape\"\n", "f.toml")
    assert [r.run_id for r in shape.runs()] == ["family.s1"]


@pytest.mark.parametrize("text,needle", [
    (FAMILY.replace("position = 0.4", "position = 0.0"), "station[2].position = 0 does not increase"),
    (FAMILY.replace("cl = 0.6\n", ""), "missing key 'station[2].cl'"),
    (FAMILY + "[[point]]\nname = \"p\"\ncl = 0.5\n", "both [[point]] and [[station]]"),
    (FAMILY.replace("name = \"mid\"", "name = \"family\""), "kept for the family's joint search"),
    (FAMILY + "[family]\nchecks = 0\n", "family.checks = 0 is not allowed"),
    (FAMILY + "[family]\nrule = \"spline\"\n", "family.rule = 'spline' is not allowed"),
    (FAMILY.replace("constraints = { thickness = [0.14, 0.3] }",
                    "constraints = { thick = [0.14, 0.3] }"),
     "unknown key 'station[1].constraints.thick'"),
])
def test_bad_family_study_gets_one_line(text, needle):
    with pytest.raises(InputError) as err:
        parse_study(text, "fam.toml")
    assert needle in str(err.value) and "\n" not in str(err.value), str(err.value)


def _problem(text=FAMILY):
    st = parse_study(text, "fam.toml")
    return st, build_problem(st, [r for r in st.runs() if r.family][0])


def test_family_objective_is_the_weighted_sum_of_the_stations():
    st, pb = _problem()
    rng = np.random.default_rng(7)
    y = 0.2 * rng.normal(size=(24, pb.param.dimension))  # some feasible, some not
    out = pb.evaluate(y)
    secs = pb.param.station_sections(y)
    own = [p.evaluate_sections(s) for p, s in zip(pb.station_problems, secs)]
    want = sum(s.weight * o.objectives[:, 0] for s, o in zip(st.stations, own))
    ok = out.status == 0
    assert ok.any()
    assert np.array_equal(out.objectives[ok, 0], want[ok])
    feas = out.feasible
    assert feas.any() and (ok & ~feas).any()
    assert np.array_equal(out.f[feas], want[feas])
    # feasibility first: a valid but infeasible family ranks after every feasible one, by its
    # summed scaled violations
    late = ok & ~feas
    viol = np.maximum(out.constraints[late] / pb.constraint_scales, 0.0).sum(axis=1)
    worst = np.max(want[feas])
    assert np.allclose(out.f[late], worst + 1.0 + abs(worst) + viol, rtol=0, atol=1e-12)
    # a station's own constraint columns are that station's problem's, to the bit
    names = pb.constraint_names
    j = names.index("root:thickness_low")
    assert np.array_equal(out.constraints[ok, j], own[0].constraints[ok, 0])
    assert "root-mid:fair_thickness" in names and "mid-tip:fair_camber" in names


def test_identical_stations_make_a_fair_family_whose_in_between_sections_are_the_station():
    st, pb = _problem(FAMILY.replace("constraints = { thickness = [0.14, 0.3] }", ""))
    y = np.zeros((1, pb.param.dimension))  # every station at the shape's start
    out = pb.evaluate(y)
    assert out.status[0] == 0
    names = pb.constraint_names
    for k in ("root-mid:fair_thickness", "root-mid:fair_camber", "mid-tip:fair_thickness"):
        assert out.constraints[0, names.index(k)] == -pb.fair_tolerance
    sec = pb.param.station_sections(y)[0]
    at = check_positions(pb.positions, 8)
    coeffs = np.repeat(sec.coefficients[None], 3, axis=0)
    assert np.array_equal(interpolate(pb.positions, coeffs, at)[:, 0], np.repeat(
        sec.coefficients, len(at), axis=0))


def test_an_invalid_in_between_section_makes_the_family_invalid():
    # every station valid alone, one in-between section refused (here: its status forced to
    # below_floor): the family takes that status and ranks below every valid family
    from dataclasses import replace

    from foilmap.design.problem import Outcome
    from foilmap.section.status import Status

    st, pb = _problem()
    rng = np.random.default_rng(7)
    y = 0.3 * rng.normal(size=(6, pb.param.dimension))
    base = pb.evaluate(y)
    assert np.all(base.status == 0)

    class Refuses:
        def __init__(self, inner):
            self.inner = inner

        def evaluate_sections(self, sec):
            o = self.inner.evaluate_sections(sec)
            status = o.status.copy()
            status[2] = Status.BELOW_FLOOR
            return Outcome(o.f, o.objectives, o.constraints, status, o.feasible, o.evaluation,
                           o.peak)

        def __getattr__(self, name):
            return getattr(self.inner, name)

    cps = list(pb.check_problems)
    cps[11] = Refuses(cps[11])  # an in-between position of the second interval
    out = replace(pb, check_problems=tuple(cps)).evaluate(y)
    assert out.status[2] == Status.BELOW_FLOOR and not out.feasible[2]
    assert np.all(out.status[[0, 1, 3, 4, 5]] == 0)
    assert out.f[2] > np.max(out.f[[0, 1, 3, 4, 5]])
    assert np.all(out.constraints[2] == 1.0) and np.isnan(out.objectives[2]).all()


# --- a family study run end to end (in this process) ----------------------------------------

TINY = """
[study]
name = "tiny-family"
seeds = [3]
[shape]
coefficients = 3
[[station]]
name = "root"
position = 0.0
cl = 0.6
constraints = { thickness = [0.15, 0.3] }
[[station]]
name = "mid"
position = 0.5
cl = 0.5
[[station]]
name = "tip"
position = 1.0
cl = 0.4
[family]
evaluations = 240
[objectives]
peak_suction = 1.0
[constraints]
thickness = [0.11, 0.3]
min_le_radius = 0.005
[search]
max_evaluations = 200
popsize = 8
"""


def _run_family(out, stop_after=None):
    out = Path(out)
    from foilmap.run.single import execute_run
    from foilmap.store.folder import StudyFolder

    st = parse_study(TINY, "tiny.toml")
    StudyFolder.prepare(st, out, None)
    fam_run = [r for r in st.runs() if r.family][0]
    calls = {"n": 0}

    def stop():  # counts the joint search's generations (its log exists once it has begun)
        if (out / "runs" / "family.s3.h5").exists():
            calls["n"] += 1
        return stop_after is not None and calls["n"] == stop_after

    try:
        execute_run(st, fam_run, out, should_stop=stop)  # runs its station runs first
    except SystemExit as exc:
        assert exc.code == 143
        return False
    return True


def test_family_study_end_to_end(tmp_path):
    # the family run runs its station runs first, starts from their bests, and its best family
    # meets every station's Cl exactly and its constraints, and is valid and fair at 8
    # positions per interval, checked through the family file and the numpy reference route
    from foilmap.api.families import best_family
    from foilmap.design.family import interpolate_point
    from foilmap.section.evaluation import analyse
    from foilmap.store.familyfile import format_family

    out = tmp_path / "f"
    assert _run_family(out)
    best = best_family(out)
    assert [r["station"] for r in best.stations] == ["root", "mid", "tip"]
    assert all(r["independent"] is not None for r in best.stations)
    fam = parse_family(best.to_toml(), "best.toml")
    st = parse_study(TINY, "tiny.toml")
    for s in st.stations:
        an = analyse(fam.section_at(s.position), cl=s.point.cl, proxies=())
        ev = an.evaluation
        assert ev.status[0] == 0
        assert abs(ev.cl[0] - s.point.cl) < 1e-12
        lo, hi = s.constraints["thickness"]
        assert lo <= ev.thickness[0] <= hi
        assert ev.le_radius[0] >= 0.005
    for i in range(2):
        a, b = st.stations[i], st.stations[i + 1]
        t, c = [], []
        for k in range(0, 10):
            u = k / 9
            pt = interpolate_point(a.point, b.point, u, "x")
            ev = analyse(fam.section_at(a.position + (b.position - a.position) * u),
                         cl=pt.cl, proxies=(), floor=0.005).evaluation
            assert ev.status[0] == 0, (i, k)
            t.append(ev.thickness[0])
            c.append(ev.camber[0])
        for seq in (t, c):
            assert fairness(np.array([seq]), 1e-5)[0] <= 1e-12, (i, seq)
    assert format_family("x", fam) == format_family("x", parse_family(
        format_family("x", fam), "again"))


def test_family_run_resumes_bit_identically(tmp_path):
    from foilmap.store.runlog import read_run

    whole, cut = tmp_path / "whole", tmp_path / "cut"
    assert _run_family(whole)
    assert not _run_family(cut, stop_after=5)  # stopped in the joint search's 5th generation
    assert _run_family(cut)
    a = read_run(whole / "runs" / "family.s3.h5")
    b = read_run(cut / "runs" / "family.s3.h5")
    assert a.evaluations == b.evaluations == 240
    for k in ("x", "f", "constraints", "status"):
        assert np.array_equal(a.evals[k], b.evals[k], equal_nan=True), k


# --- the commands ----------------------------------------------------------------------------


def _family_file(tmp_path, positions=(0.2, 0.5, 0.9)):
    from test_familyfile import _family

    fam = _family()
    fam = Family(fam.names, np.array(positions), fam.coefficients, fam.te_angle_deg, fam.rule,
                 fam.figures)
    p = tmp_path / "blade.toml"
    p.write_text(format_family("blade", fam))
    return p, fam


def test_family_commands(tmp_path):
    import csv

    from conftest import cli

    from foilmap.store.sectionfile import load_section

    p, fam = _family_file(tmp_path)
    r = cli("family", p, "--at", "0.5", "-o", tmp_path / "s.toml")
    assert r.returncode == 0, r.stderr
    rec = load_section(tmp_path / "s.toml")  # a station: its section, bit for bit
    assert np.array_equal(rec.coefficients, fam.coefficients[1]) and rec.te_angle_deg == 11.5
    r = cli("family", p, "--loft", "4", "--points", "21", "-o", tmp_path / "loft.csv")
    assert r.returncode == 0, r.stderr
    lines = [ln for ln in (tmp_path / "loft.csv").read_text().splitlines()
             if not ln.startswith("#")]
    rows = list(csv.DictReader(lines))
    assert len(rows) == 4 * 21
    assert sorted({float(r["position"]) for r in rows}) == pytest.approx([0.2, 13 / 30, 2 / 3,
                                                                          0.9])
    r = cli("evaluate", p, "--at", "0.5", "--cl", "0.6", "--json")
    assert r.returncode == 0, r.stderr
    alone = cli("evaluate", tmp_path / "s.toml", "--cl", "0.6", "--json")
    import json

    a, b = json.loads(r.stdout), json.loads(alone.stdout)
    assert a["cp_min"] == b["cp_min"] and a["alpha_deg"] == b["alpha_deg"]
    r = cli("sweep", p, "--at", "0.7", "--alpha", "0:4:2", "--json")
    assert r.returncode == 0, r.stderr
    assert len(json.loads(r.stdout)["rows"]) == 3


@pytest.mark.parametrize("args,message", [
    (["evaluate", "{fam}", "--at", "0.1", "--cl", "0.5"],
     "--at 0.1: span position 0.1 is outside the family's stations (0.2 to 0.9)"),
    (["family", "{fam}", "--at", "0.95", "-o", "{tmp}/x.toml"], "outside the family's stations"),
    (["evaluate", "{fam}", "--cl", "0.5"], "is a family file: give --at POSITION"),
    (["family", "{fam}", "--loft", "1", "-o", "{tmp}/x.csv"], "loft positions 1 is out of range"),
    (["run", "{study}"], "does not increase"),
])
def test_family_bad_input_one_line_exit_2(tmp_path, args, message):
    from conftest import cli

    p, _ = _family_file(tmp_path)
    study = tmp_path / "study.toml"
    study.write_text(FAMILY.replace("position = 0.4", "position = 0.0"))
    r = cli(*[a.format(fam=p, tmp=tmp_path, study=study) for a in args])
    assert r.returncode == 2
    err = r.stderr.strip().splitlines()
    assert len(err) == 1 and message in err[0], r.stderr
    assert "Traceback" not in r.stderr
    assert not (tmp_path / "x.toml").exists() and not (tmp_path / "x.csv").exists()


@pytest.mark.slow
@pytest.mark.parametrize("method", ["comocma", "epsilon"])
def test_multi_objective_family_runs(tmp_path, method):
    # a family's fronts: each objective the stations' weighted sum; the ε sweep's family runs
    # start from the station runs of their own level
    from foilmap.run.single import execute_run
    from foilmap.store.folder import StudyFolder
    from foilmap.store.runlog import read_run

    text = TINY.replace("[objectives]\npeak_suction = 1.0\n",
                        "[objectives]\npeak_suction = 1.0\narea = 1.0\n")
    text = text.replace("max_evaluations = 200\npopsize = 8\n",
                        "max_evaluations = 60\npopsize = 6\n")
    text = text.replace("evaluations = 240", "evaluations = 60")
    if method == "comocma":
        text += "method = \"comocma\"\nkernels = 2\n[fronts]\nreference_point = [3.0, 1.0]\n"
    else:
        text += "method = \"epsilon\"\nepsilon_levels = [0.4, 0.5]\n"
    st = parse_study(text, "mo.toml")
    StudyFolder.prepare(st, tmp_path, None)
    fam_runs = [r for r in st.runs() if r.family]
    assert len(fam_runs) == (1 if method == "comocma" else 2)
    for r in fam_runs:
        execute_run(st, r, tmp_path)
        log = read_run(tmp_path / "runs" / f"{r.run_id}.h5")
        assert log.evaluations >= 60 and log.objective_names == ["peak_suction", "area"]
        ok = log.evals["status"] == 0
        assert ok.any()
        if method == "epsilon":
            assert log.constraint_names[-1] == "epsilon_area"
            assert (tmp_path / "runs" / f"root.e{r.epsilon_index}.s3.h5").exists()


@pytest.mark.slow
def test_pick_from_a_family_front_writes_a_family_file(tmp_path):
    from conftest import cli

    from foilmap.run.single import execute_run
    from foilmap.store.folder import StudyFolder

    text = TINY.replace("[objectives]\npeak_suction = 1.0\n",
                        "[objectives]\npeak_suction = 1.0\narea = 1.0\n")
    text = text.replace("max_evaluations = 200\npopsize = 8\n",
                        "max_evaluations = 60\npopsize = 6\nmethod = \"comocma\"\nkernels = 2\n")
    text = text.replace("evaluations = 240", "evaluations = 300")
    text += "[fronts]\nreference_point = [3.0, 1.0]\n"
    st = parse_study(text, "mo.toml")
    out = tmp_path / "mo"
    StudyFolder.prepare(st, out, None)
    execute_run(st, [r for r in st.runs() if r.family][0], out)
    ids, names, pts = StudyFolder(out).merged_front()
    assert ids and all(i.startswith("family.") for i in ids)  # not the stations' fronts
    r = cli("pick", out, "--knee", "-o", tmp_path / "k.toml")
    assert r.returncode == 0, r.stderr
    fam = parse_family((tmp_path / "k.toml").read_text(), "k.toml")
    assert fam.names == ("root", "mid", "tip")
