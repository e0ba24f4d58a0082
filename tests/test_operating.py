"""The operating range: cavitation, compressibility, sweeps, symmetric sections, source chord lines.

Reference values name their sources beside them.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from conftest import ROOT, cli

from foilmap.section.conformal import SectionSet
from foilmap.section.evaluation import analyse
from foilmap.section.operating import (
    cavitation_number,
    cl_range_below,
    compressible_cp,
    critical_mach,
    saturation_pressure,
    sonic_cp,
    surface_peaks,
    water_density,
)
from foilmap.store.sectionfile import load_section

EXAMPLE = ROOT / "studies" / "example-section.toml"


# --- cavitation -----------------------------------------------------------------------------------

def test_vapour_pressure_iapws_if97():
    # 2.339 kPa at 20 °C: steam tables built on Wagner & Pruss, "The IAPWS formulation 1995
    # for the thermodynamic properties of ordinary water substance", J. Phys. Chem. Ref. Data
    # 31 (2002) 387, list 2.3392 kPa at 293.15 K (the value from memory)
    assert saturation_pressure(293.15) == pytest.approx(2339.0, abs=1.0)
    # IAPWS-IF97 verification values of the saturation-pressure equation (table 35 of the
    # release; from memory): 300 K → 0.353658941e-2 MPa, 500 K → 0.263889776e1 MPa
    assert saturation_pressure(300.0) == pytest.approx(3536.58941, rel=1e-8)
    assert saturation_pressure(500.0) == pytest.approx(2.63889776e6, rel=1e-8)
    with pytest.raises(ValueError):
        saturation_pressure(250.0)


def test_water_density():
    # Tanaka et al., Metrologia 38 (2001) 301: the maximum, 999.975 kg/m³ near 4 °C, and
    # 998.2067 kg/m³ at 20 °C (their table)
    assert water_density(3.98) == pytest.approx(999.9750, abs=1e-3)
    assert water_density(20.0) == pytest.approx(998.2067, abs=1e-3)
    assert water_density(10.0, "sea") == 1025.0


def test_cavitation_number_worked_by_hand():
    # V = 10 m/s at h = 1 m in fresh water at 20 °C, standard atmosphere (hand arithmetic):
    # ρ = 998.2067, p_v = 2339.2, ρgh = 998.2067 × 9.80665 × 1 = 9789.07
    # σ = (101325 + 9789.07 − 2339.2) / (½ × 998.2067 × 10²) = 108774.9 / 49910.34 = 2.17940
    assert cavitation_number(10.0, 1.0, 20.0) == pytest.approx(2.17940, abs=2e-5)


def test_cavitation_free_range_ends_meet_sigma():
    sec = load_section(EXAMPLE).to_set()
    sigma = 1.0
    low, high = cl_range_below(sec, sigma)
    for cl in (low, high):
        pk = -analyse(sec, cl=cl, proxies=()).evaluation.cp_min[0]
        assert pk == pytest.approx(sigma, abs=1e-4)
    mid = -analyse(sec, cl=0.5 * (low + high), proxies=()).evaluation.cp_min[0]
    assert mid < sigma
    outside = -analyse(sec, cl=high + 0.05, proxies=()).evaluation.cp_min[0]
    assert outside > sigma
    assert cl_range_below(sec, 0.01) is None  # no Cl has so little suction


# --- compressibility ------------------------------------------------------------------------------

def test_sonic_cp():
    # Cp* = 2/(γM²)[((2 + (γ−1)M²)/(γ+1))^{γ/(γ−1)} − 1] (Anderson, Fundamentals of
    # Aerodynamics, ch. 11): 0 at M = 1; at M = 0.5, by hand, 5.714286 × (0.875^3.5 − 1) =
    # −2.1334 (the textbook's plotted curve passes −2.13 there; from memory)
    assert sonic_cp(1.0) == pytest.approx(0.0, abs=1e-15)
    assert sonic_cp(0.5) == pytest.approx(2.0 / 0.35 * (0.875**3.5 - 1.0), rel=1e-12)
    assert sonic_cp(0.5) == pytest.approx(-2.1334, abs=1e-4)


def test_critical_mach_both_rules():
    # Cp_min = −0.43 at zero lift, a 12 % symmetric section: M_crit ≈ 0.74 by Prandtl–Glauert
    # (Anderson, Fundamentals of Aerodynamics, ch. 11 worked example, read off a graph; from
    # memory).  Worked from the rules (Cp* and the two corrections as written in Anderson
    # ch. 11, solved here by bisection independent of foilmap): 0.7371 by Prandtl–Glauert and
    # 0.7229 by Kármán–Tsien
    def sonic(m):
        return 2 / (1.4 * m * m) * (((2 + 0.4 * m * m) / 2.4) ** 3.5 - 1)

    def pg(m):
        return -0.43 / (1 - m * m) ** 0.5

    def kt(m):
        b = (1 - m * m) ** 0.5
        return -0.43 / (b + m * m / (1 + b) * -0.43 / 2)

    def root(f, lo=0.5, hi=0.9):
        for _ in range(60):
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if f(mid) > sonic(mid) else (lo, mid)
        return 0.5 * (lo + hi)

    m_pg = float(critical_mach(-0.43, "prandtl-glauert"))
    m_kt = float(critical_mach(-0.43, "karman-tsien"))
    assert m_pg == pytest.approx(0.74, abs=0.005)
    assert m_pg == pytest.approx(root(pg), abs=1e-6) and root(pg) == pytest.approx(0.7371, abs=1e-4)
    assert m_kt == pytest.approx(root(kt), abs=1e-6) and root(kt) == pytest.approx(0.7229, abs=1e-4)
    # the arithmetic of each rule: at its root the corrected Cp equals Cp*
    for rule, m in (("prandtl-glauert", m_pg), ("karman-tsien", m_kt)):
        assert float(compressible_cp(-0.43, m, rule)) == pytest.approx(float(sonic_cp(m)),
                                                                      abs=1e-9)
    # Prandtl–Glauert: Cp0/β by hand at M = 0.6 (β = 0.8)
    assert float(compressible_cp(-0.4, 0.6, "prandtl-glauert")) == pytest.approx(-0.5)
    # Kármán–Tsien by hand at M = 0.6: −0.4/(0.8 + 0.36 × (−0.4)/(2 × 1.8)) = −0.4/0.76
    assert float(compressible_cp(-0.4, 0.6)) == pytest.approx(-0.4 / 0.76)
    # more suction, lower critical Mach number; none without suction
    ms = critical_mach(np.array([-0.2, -0.43, -1.0, 0.1, np.nan]))
    assert ms[0] > ms[1] > ms[2] and ms[3] == 1.0 and np.isnan(ms[4])


def test_fitted_naca_0012_critical_mach(tmp_path):
    # foilmap's own fitted NACA 0012 at zero lift: the figure the note states
    r = cli("naca", "0012", "-o", tmp_path / "n.dat")
    assert r.returncode == 0, r.stderr
    r = cli("fit", tmp_path / "n.dat", "-o", tmp_path / "n.toml")
    assert r.returncode == 0, r.stderr
    r = cli("evaluate", tmp_path / "n.toml", "--cl", "0", "--json")
    rec = json.loads(r.stdout)
    # zero-lift peak suction of the 0012: (v/V)max² − 1 = 1.188² − 1 = 0.411 (Abbott & von
    # Doenhoff, Theory of Wing Sections, Appendix I, NACA 0012 table; from memory)
    assert rec["peak_suction"] == pytest.approx(0.411, abs=0.01)
    assert rec["critical_mach"] == pytest.approx(
        float(critical_mach(-rec["peak_suction"])), abs=1e-9)
    assert 0.70 < rec["critical_mach"] < 0.76


# --- the sweep ------------------------------------------------------------------------------------

def test_surface_peaks_against_dense_sampling():
    sec = load_section(EXAMPLE).to_set()
    an = analyse(sec, alpha=np.radians(3.0), proxies=())
    pk = surface_peaks(an)
    phi = 2 * np.pi * np.arange(1, 2**18) / 2**18
    from foilmap.section.conformal import map_at
    from foilmap.section.flow import speed_on_circle

    m = map_at(sec, np.exp(1j * phi)[None, :])
    q = speed_on_circle(an.flow, phi, m.dz)[0]
    upper = phi < an.frame.phi_le[0]
    for name, mask in (("upper", upper), ("lower", ~upper)):
        dense = q[mask].max() ** 2 - 1.0
        assert pk[name][0][0] == pytest.approx(dense, rel=1e-6)
    assert max(pk["upper"][0][0], pk["lower"][0][0]) == pytest.approx(-an.evaluation.cp_min[0],
                                                                       rel=1e-12)


def test_sweep_command(tmp_path):
    r = cli("sweep", EXAMPLE, "--alpha", "-4:8:2", "--sigma", "1.2", "--mach", "0.3", "--json",
            "--csv", tmp_path / "s.csv", "-o", tmp_path / "s.png")
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    rows = out["rows"]
    assert [round(row["alpha_deg"], 9) for row in rows] == [-4, -2, 0, 2, 4, 6, 8]
    for key in ("alpha_deg", "cl", "cm_quarter_chord", "peak_suction_upper",
                "peak_suction_lower", "x_peak_upper", "x_peak_lower", "recovery_severity",
                "thwaites_separation_x_upper", "critical_mach", "cavitation_margin",
                "peak_suction_upper_compressible"):
        assert key in rows[0], key
    # lift is linear in the angle at the closed-form slope; Cm changes linearly too
    a = np.radians([row["alpha_deg"] for row in rows])
    cl = np.array([row["cl"] for row in rows])
    slope = np.polyfit(np.sin(a - a[0]), cl, 1)
    assert np.allclose(np.polyval(slope, np.sin(a - a[0])), cl, atol=0.02)
    # each row agrees with evaluate at its angle
    r2 = cli("evaluate", EXAMPLE, "--alpha", "4", "--json", "--sigma", "1.2")
    ev = json.loads(r2.stdout)
    row = rows[4]
    assert max(row["peak_suction_upper"], row["peak_suction_lower"]) == pytest.approx(
        ev["peak_suction"], rel=1e-9)
    assert row["cavitation_margin"] == pytest.approx(ev["cavitation_margin"], abs=1e-9)
    assert (tmp_path / "s.png").stat().st_size > 10000
    assert (tmp_path / "s.csv").read_text().count("\n") == 2 + 1 + 7
    # bad ranges: one line, exit 2
    for bad in ("1:0:1", "0:5", "a:b:c", "0:10:0"):
        r = cli("sweep", EXAMPLE, f"--alpha={bad}")
        assert r.returncode == 2 and len(r.stderr.strip().splitlines()) == 1, (bad, r.stderr)


def test_evaluate_cavitation_options(tmp_path):
    r = cli("evaluate", EXAMPLE, "--cl", "0.5", "--json", "--speed", "10", "--depth", "1",
            "--water-temp", "20")
    rec = json.loads(r.stdout)
    assert rec["cavitation_number"] == pytest.approx(2.17940, abs=2e-5)
    low, high = rec["cavitation_free_cl"]
    assert low < 0.5 < high
    r = cli("evaluate", EXAMPLE, "--cl", "0.5", "--speed", "10")
    assert r.returncode == 2 and "missing --depth, --water-temp" in r.stderr
    r = cli("evaluate", EXAMPLE, "--cl", "0.5", "--sigma", "1", "--depth", "2")
    assert r.returncode == 2 and "not both" in r.stderr


# --- symmetric sections ---------------------------------------------------------------------------

def test_symmetric_study_gives_symmetric_sections(tmp_path):
    from conftest import small_study

    text = small_study("sym", [3], 300, constraints="thickness = [0.10, 1.0]").replace(
        "coefficients = 4", "coefficients = 4\nsymmetric = true")
    assert "symmetric = true" in text
    (tmp_path / "s.toml").write_text(text)
    r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out", "--workers", "1")
    assert r.returncode == 0, r.stdout + r.stderr
    import foilmap

    best = foilmap.open_results(tmp_path / "out").best()
    sec = best.section
    assert np.all(sec.coefficients.imag == 0.0)
    ev = foilmap.evaluate(sec, alpha=0.0)  # zero to round-off (the LE is found to 1e-11 rad)
    assert abs(ev.cl) < 1e-10 and abs(ev.camber) < 1e-9
    assert abs(ev.alpha_zero_lift_deg) < 1e-8
    ev = foilmap.evaluate(sec, cl=best.design_cl)  # the target met through the angle
    assert ev.cl == pytest.approx(best.design_cl, abs=1e-12) and ev.alpha_deg > 0


def test_symmetric_contradictions_refused(tmp_path):
    from conftest import small_study

    text = small_study("sym", [3], 300, constraints="camber = [0.01, 0.05]").replace(
        "coefficients = 4", "coefficients = 4\nsymmetric = true")
    (tmp_path / "s.toml").write_text(text)
    r = cli("run", tmp_path / "s.toml", "--out", tmp_path / "out")
    assert r.returncode == 2
    assert "constraints.camber" in r.stderr and "shape.symmetric" in r.stderr
    assert not (tmp_path / "out").exists()


# --- a fitted section's source chord line ---------------------------------------------------------

@pytest.mark.slow
def test_fitted_naca_2412_lift_from_the_files_chord_line(tmp_path):
    # Cl at the file's 4° against a converged panel solution of the same coordinates
    from panel import panel_solve

    from foilmap.section.naca import naca4_coordinates

    r = cli("naca", "2412", "-n", "401", "-o", tmp_path / "n.dat")
    assert r.returncode == 0, r.stderr
    r = cli("fit", tmp_path / "n.dat", "-n", "24", "-o", tmp_path / "n.toml")
    assert r.returncode == 0, r.stderr
    rec = load_section(tmp_path / "n.toml")
    assert rec.reference_le is not None
    r = cli("evaluate", tmp_path / "n.toml", "--alpha", "4", "--json")
    out = json.loads(r.stdout)
    assert out["chord_line"] == "source"
    # the panel method on the same formula's coordinates, refined 800 → 1600 → 3200 panels and
    # extrapolated (first order in the panel size)
    cls = []
    for n in (800, 1600, 3200):
        xy = naca4_coordinates("2412", n + 1, closed_te=True)
        cls.append(panel_solve(xy[:, 0][None], xy[:, 1][None], math.radians(4.0))["cl"][0])
    converged = 2 * cls[2] - cls[1]
    assert abs(cls[2] - cls[1]) < 3e-4  # converging
    assert out["cl"] == pytest.approx(converged, rel=0.003)
    # the section's own chord line (TE to the farthest point) is turned by about 0.09°
    own = analyse(rec.to_set(), alpha=math.radians(4.0), proxies=()).evaluation.cl[0]
    assert own < out["cl"] * 0.995


def test_reference_line_round_trip_in_section_file():
    from foilmap.store.sectionfile import format_section, parse_section

    text = format_section("x", [complex(-0.08, 0.02)], 10.0, reference_le=complex(1e-4, -2e-3))
    rec = parse_section(text)
    assert rec.reference_le == complex(1e-4, -2e-3)
    from foilmap.errors import InputError

    with pytest.raises(InputError, match="reference_le"):
        parse_section(text.replace("reference_le = [0.0001, -0.002]", "reference_le = [0.5, 0]"))


def test_study_point_conditions(tmp_path):
    from conftest import small_study

    from foilmap.errors import InputError
    from foilmap.store.studyfile import load_study_text

    base = small_study("c", [1], 200)
    st = load_study_text(base.replace("cl = 0.5", "cl = 0.5\nspeed = 10.0\ndepth = 1.0\n"
                                  "water_temperature = 20.0", 1))
    assert st.points[0].sigma == pytest.approx(2.17940, abs=2e-5)
    with pytest.raises(InputError, match="cavitation_margin needs a cavitation number"):
        load_study_text(small_study("c", [1], 200, constraints="cavitation_margin = 0.1"))
    with pytest.raises(InputError, match="missing point\\[1\\].depth"):
        load_study_text(base.replace("cl = 0.5", "cl = 0.5\nspeed = 10.0", 1))
    with pytest.raises(InputError, match="station_thickness .* constraints.thickness"):
        load_study_text(small_study("c", [1], 200, constraints="thickness = [0.1, 0.12]\n"
                                "station_thickness = [[0.3, 0.15]]"))


def test_symmetric_parametrisation_is_real():
    from foilmap.design.study import Parametrisation

    shape = {"coefficients": 3, "start": [[-0.09, 0.03]], "step": 0.02, "limit": 0.15,
             "te_angle_deg": [6.0, 14.0], "symmetric": True}
    par = Parametrisation.from_shape(shape)
    assert par.dimension == 4
    y = np.random.default_rng(1).normal(size=(5, 4))
    sec = par.sections(y)
    assert isinstance(sec, SectionSet) and np.all(sec.coefficients.imag == 0)
