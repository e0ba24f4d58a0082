"""The operating range: compressibility corrections, the critical Mach number, cavitation.

All closed form or a scalar root of a closed form:

* Prandtl–Glauert: Cp = Cp₀ / β with β = √(1 − M²).
* Kármán–Tsien: Cp = Cp₀ / (β + M² Cp₀ / (2 (1 + β))).
* Sonic pressure coefficient (isentropic, γ = 1.4):
  Cp* = 2/(γ M²) · [((2 + (γ − 1) M²)/(γ + 1))^{γ/(γ−1)} − 1].
* The critical free-stream Mach number solves Cp(Cp₀,min, M) = Cp*(M); the left side falls and
  the right side rises with M on (0, 1), so the root is unique and found by bisection.
* The cavitation number σ = (p_atm + ρ g h − p_v) / (½ ρ V²); inception where −Cp_min ≥ σ.
  The vapour pressure p_v(T) is the IAPWS-IF97 saturation-pressure equation (region 4);
  fresh-water density from Tanaka et al. (2001), sea water 1025 kg/m³ (common practice).

Sources: Anderson, *Fundamentals of Aerodynamics*, ch. 11 (Prandtl–Glauert, Kármán–Tsien, Cp*);
Wagner & Kretzschmar, *International Steam Tables* (IAPWS-IF97), eq. 30 and table 35;
Tanaka, Girard, Davis, Peuto & Bignell, *Metrologia* 38 (2001) 301, eq. 1.
"""

from __future__ import annotations

import numpy as np

__all__ = ["RULES", "sweep", "surface_peaks", "cl_range_below", "condition_figures",
           "cavitation_margin", "compressible_cp", "sonic_cp", "critical_mach",
           "saturation_pressure", "water_density", "cavitation_number", "GAMMA_AIR", "P_ATM", "G",
           "SEA_WATER_DENSITY"]

GAMMA_AIR = 1.4
P_ATM = 101325.0  # Pa, standard atmosphere at sea level
G = 9.80665  # m/s², standard gravity
SEA_WATER_DENSITY = 1025.0  # kg/m³ (common practice for open sea water)
RULES = ("karman-tsien", "prandtl-glauert")


def compressible_cp(cp0, mach, rule: str = "karman-tsien"):
    """The incompressible pressure coefficient ``cp0`` corrected to free-stream Mach ``mach``."""
    cp0 = np.asarray(cp0, dtype=float)
    mach = np.asarray(mach, dtype=float)
    beta = np.sqrt(1.0 - mach**2)
    if rule == "prandtl-glauert":
        return cp0 / beta
    if rule == "karman-tsien":
        return cp0 / (beta + mach**2 * cp0 / (2.0 * (1.0 + beta)))
    raise ValueError(f"compressibility rule {rule!r} is not one of {', '.join(RULES)}")


def sonic_cp(mach, gamma: float = GAMMA_AIR):
    """Cp* at which the local flow is sonic, for free-stream Mach ``mach``."""
    m2 = np.asarray(mach, dtype=float) ** 2
    return 2.0 / (gamma * m2) * (((2.0 + (gamma - 1.0) * m2) / (gamma + 1.0))
                                 ** (gamma / (gamma - 1.0)) - 1.0)


def critical_mach(cp_min0, rule: str = "karman-tsien", tol: float = 1e-12):
    """Critical Mach number of sections with incompressible minimum Cp ``cp_min0`` (any shape).

    NaN where ``cp_min0`` is NaN; 1 where it is ≥ 0 (no suction: no finite critical Mach number
    below 1 — the corrections themselves end at M = 1).
    """
    cp = np.asarray(cp_min0, dtype=float)
    lo = np.full(cp.shape, 1e-6)
    hi = np.full(cp.shape, 1.0 - 1e-12)
    suction = cp < 0
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        with np.errstate(all="ignore"):
            above = compressible_cp(cp, mid, rule) < sonic_cp(mid)  # past critical at mid
        hi = np.where(above, mid, hi)
        lo = np.where(above, lo, mid)
        if np.all(hi - lo < tol):
            break
    m = 0.5 * (lo + hi)
    return np.where(np.isnan(cp), np.nan, np.where(suction, m, 1.0))


# IAPWS-IF97 region 4 coefficients n1 … n10
_N = (0.11670521452767e4, -0.72421316598842e6, -0.17073846940092e2, 0.12020824702470e5,
      -0.32325550322333e7, 0.14915108613530e2, -0.48232657361591e4, 0.40511340542057e6,
      -0.23855557567849, 0.65017534844798e3)


def saturation_pressure(temperature_k):
    """Saturation (vapour) pressure of water in Pa at ``temperature_k`` (273.15 – 647.096 K),
    by the IAPWS-IF97 saturation-pressure equation."""
    t = np.asarray(temperature_k, dtype=float)
    if np.any((t < 273.15) | (t > 647.096)):
        raise ValueError("IAPWS-IF97 saturation pressure holds from 273.15 K to 647.096 K")
    n = _N
    theta = t + n[8] / (t - n[9])
    a = theta**2 + n[0] * theta + n[1]
    b = n[2] * theta**2 + n[3] * theta + n[4]
    c = n[5] * theta**2 + n[6] * theta + n[7]
    return (2.0 * c / (-b + np.sqrt(b * b - 4.0 * a * c))) ** 4 * 1e6


def water_density(temperature_c, water: str = "fresh"):
    """Density in kg/m³: fresh water by Tanaka et al. (2001) (0–40 °C), sea water 1025."""
    if water == "sea":
        return np.full(np.shape(temperature_c), SEA_WATER_DENSITY)[()]
    if water != "fresh":
        raise ValueError(f"water {water!r} is not one of: fresh, sea")
    t = np.asarray(temperature_c, dtype=float)
    a1, a2, a3, a4, a5 = -3.983035, 301.797, 522528.9, 69.34881, 999.974950
    return a5 * (1.0 - (t + a1) ** 2 * (t + a2) / (a3 * (t + a4)))


def cavitation_number(speed, depth, temperature_c, water: str = "fresh",
                      p_atm: float = P_ATM):
    """σ = (p_atm + ρ g h − p_v) / (½ ρ V²) for a section at ``depth`` m below the surface,
    moving at ``speed`` m/s through water at ``temperature_c`` °C."""
    rho = water_density(temperature_c, water)
    pv = saturation_pressure(np.asarray(temperature_c, dtype=float) + 273.15)
    speed = np.asarray(speed, dtype=float)
    return (p_atm + rho * G * np.asarray(depth, dtype=float) - pv) / (0.5 * rho * speed**2)


# --- the surfaces' peaks and the Cl range under a level -----------------------------------------

def surface_peaks(analysis, points: int = 4096) -> dict:
    """Peak suction −Cp_min and its chord station on each surface, shapes (B,).

    Returns ``{"upper": (peak, x), "lower": (peak, x)}``.  The surface that holds the section's
    peak gets the evaluation's certified value; on the other surface the largest local maximum
    of q over ``points`` circle samples is refined to round-off (d ln q/dφ = 0).  The upper
    surface runs from the trailing edge to the leading edge (φ from 0 to φ_LE).
    """
    from foilmap.section._numerics import refine_extremum
    from foilmap.section.conformal import map_at
    from foilmap.section.flow import speed_log_derivative, speed_on_circle

    sec, frame, flow, ev = analysis.sections, analysis.frame, analysis.flow, analysis.evaluation
    nb = len(sec)
    step = 2.0 * np.pi / points
    phi = step * np.arange(1, points)  # the trailing edge left out (a stagnation point)
    with np.errstate(all="ignore"):
        m = map_at(sec, np.broadcast_to(np.exp(1j * phi), (nb, phi.size)))
        q = speed_on_circle(flow, phi, m.dz)
    upper = phi[None, :] < frame.phi_le[:, None]
    alpha_c = flow.alpha_circle

    def dlog(x, rows):
        mm = map_at(sec[rows], np.exp(1j * x)[:, None])
        return speed_log_derivative(x[:, None], alpha_c[rows, None], mm.q2)[:, 0]

    out = {}
    for name, mask in (("upper", upper), ("lower", ~upper)):
        qm = np.where(mask & np.isfinite(q), q, -np.inf)
        j = np.argmax(qm, axis=1)
        with np.errstate(all="ignore"):
            x_ref = refine_extremum(dlog, phi, j, step)
            mm = map_at(sec, np.exp(1j * x_ref)[:, None])
            q_ref = speed_on_circle(flow, x_ref[:, None], mm.dz)[:, 0]
            xs = frame.to_chord(mm.z)[:, 0].real
        q_best = np.fmax(q_ref, qm[np.arange(nb), j])
        peak = q_best**2 - 1.0
        on_this = ev.cp_min_upper if name == "upper" else ~ev.cp_min_upper
        peak = np.where(on_this, -ev.cp_min, peak)
        xs = np.where(on_this, ev.cp_min_x, xs)
        ok = ev.status == 0
        out[name] = (np.where(ok, peak, np.nan), np.where(ok, xs, np.nan))
    return out


def cl_range_below(section, level: float, cl_limits=(-3.0, 3.0), step: float = 0.02,
                   tol: float = 1e-6, **analyse_kw):
    """The Cl interval of one section (a batch of one) over which the peak suction stays at or
    below ``level``: the interval around the Cl of least peak suction, its ends found to
    ``tol`` by bisection between Cl samples ``step`` apart.  None when no Cl qualifies; an end
    at ``cl_limits`` or the section's ideal maximum means the range runs on to there.
    """
    from foilmap.section.conformal import SectionSet
    from foilmap.section.evaluation import analyse

    def peaks(cls):
        cls = np.atleast_1d(np.asarray(cls, dtype=float))
        many = SectionSet(np.repeat(section.coefficients, cls.size, axis=0),
                          np.repeat(section.te_angle, cls.size))
        with np.errstate(all="ignore"):  # Cl beyond the ideal limit is a status, not a warning
            ev = analyse(many, cl=cls, proxies=(), **analyse_kw).evaluation
        return np.where(ev.status == 0, -ev.cp_min, np.nan)

    grid = np.arange(cl_limits[0], cl_limits[1] + 0.5 * step, step)
    ps = peaks(grid)
    ok = ps <= level
    if not ok.any():
        return None
    j = int(np.nanargmin(ps))
    lo = j
    while lo > 0 and ok[lo - 1]:
        lo -= 1
    hi = j
    while hi < grid.size - 1 and ok[hi + 1]:
        hi += 1

    def edge(inside, outside):
        a, b = grid[inside], grid[outside]
        while abs(b - a) > tol:
            mid = 0.5 * (a + b)
            p = peaks(mid)[0]
            if p <= level:
                a = mid
            else:
                b = mid
        return float(a)

    low = edge(lo, lo - 1) if lo > 0 else float(grid[lo])
    high = edge(hi, hi + 1) if hi < grid.size - 1 else float(grid[hi])
    return low, high


def sweep(section, *, alpha=None, cl=None, mach: float | None = None,
          rule: str = "karman-tsien", reference_le=None, points: int = 256) -> dict:
    """One section (a batch of one) over angles (radians) or lift coefficients, as arrays.

    Keys: alpha, cl, cm_quarter_chord, peak_suction_upper / _lower with x_…, severity,
    thwaites_separation_x_upper / _lower, critical_mach, status; with ``mach`` also the
    corrected peak suctions (…_compressible).  Rows past the section's ideal maximum Cl, or
    invalid, are NaN with their status.
    """
    from foilmap.section.conformal import SectionSet
    from foilmap.section.evaluation import analyse

    vals = np.atleast_1d(np.asarray(alpha if cl is None else cl, dtype=float))
    many = SectionSet(np.repeat(section.coefficients, vals.size, axis=0),
                      np.repeat(section.te_angle, vals.size))
    kw = {"alpha": vals} if cl is None else {"cl": vals}
    an = analyse(many, proxies=("severity", "thwaites"), points=points,
                 reference_le=reference_le, **kw)
    ev = an.evaluation
    pk = surface_peaks(an)
    out = {"alpha": ev.alpha, "cl": ev.cl, "cm_quarter_chord": ev.cm_quarter_chord,
           "peak_suction_upper": pk["upper"][0], "x_peak_upper": pk["upper"][1],
           "peak_suction_lower": pk["lower"][0], "x_peak_lower": pk["lower"][1],
           "severity": ev.severity,
           "thwaites_separation_x_upper": ev.thwaites_sep_x_upper,
           "thwaites_separation_x_lower": ev.thwaites_sep_x_lower,
           "critical_mach": critical_mach(ev.cp_min, rule), "status": ev.status}
    if mach is not None:
        for side in ("upper", "lower"):
            out[f"peak_suction_{side}_compressible"] = -compressible_cp(
                -out[f"peak_suction_{side}"], mach, rule)
    return out


def cavitation_margin(sigma, peak_suction):
    """σ − (−Cp_min): positive while the section is free of cavitation (inception where the peak
    suction reaches σ).  Any shapes that broadcast."""
    return np.asarray(sigma, dtype=float) - np.asarray(peak_suction, dtype=float)


def condition_figures(cp_min: float, *, rule: str = "karman-tsien", mach: float | None = None,
                      sigma: float | None = None, section=None, reference_le=None,
                      points: int | None = None) -> dict:
    """The operating-range figures of one evaluated section: its critical Mach number, and what a
    Mach number or a cavitation number asks.

    ``cp_min`` is the section's (incompressible, certified) minimum Cp at the operating point.
    Keys: ``critical_mach`` and ``compressibility_rule``; with ``mach`` also ``mach``,
    ``cp_min_compressible`` and ``peak_suction_compressible``; with ``sigma`` also
    ``cavitation_number``, ``cavitation_margin`` (σ − peak suction) and ``cavitation_free_cl``
    (the Cl interval ``[low, high]`` of :func:`cl_range_below` at σ for ``section``, a batch of
    one measured from ``reference_le``; None when no Cl is free of cavitation).
    """
    cp_min = float(cp_min)
    out = {"critical_mach": float(critical_mach(cp_min, rule)), "compressibility_rule": rule}
    if mach is not None:
        cp = float(compressible_cp(cp_min, mach, rule))
        out.update({"mach": float(mach), "cp_min_compressible": cp,
                    "peak_suction_compressible": -cp})
    if sigma is not None:
        if section is None:
            raise ValueError("the cavitation-free Cl range needs the section")
        kw = {} if points is None else {"points": points}
        rng = cl_range_below(section, float(sigma), reference_le=reference_le, **kw)
        out.update({"cavitation_number": float(sigma),
                    "cavitation_margin": float(cavitation_margin(sigma, -cp_min)),
                    "cavitation_free_cl": None if rng is None else [float(v) for v in rng]})
    return out
