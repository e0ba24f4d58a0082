"""Figures for people and for programs: the JSON object and the text summary of an evaluation.

Angles are converted to degrees here, at the surface; the kernels work in radians.
"""

from __future__ import annotations

import math

import numpy as np

from foilmap.caution import CAUTION  # defined in the bottom layer; re-exported here
from foilmap.section.evaluation import Evaluation
from foilmap.section.status import Status, describe

__all__ = [
    "CAUTION",
    "CONVENTIONS",
    "evaluation_record",
    "format_summary",
    "format_number",
    "format_screen",
    "format_fit",
    "display_values",
    "plural",
    "surface_table_csv",
    "coordinates_text",
    "xy_lines",
]

#: units and sign conventions, printed with every report
CONVENTIONS = (
    "Lengths in chords, LE at (0,0), TE at (1,0); angles in degrees to the chord line; "
    "Cp = 1 - (V/Vinf)^2; Cm about the quarter chord, nose-up positive."
)


def _f(v) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


def evaluation_record(ev: Evaluation, i: int = 0, name: str | None = None) -> dict:
    """Figures of candidate ``i`` as a JSON-ready dict (degrees, NaN → None)."""
    deg = math.degrees
    st = Status(int(ev.status[i]))
    ok = st == Status.OK

    def angle(v):
        v = _f(v)
        return None if v is None else deg(v)

    cp_min = _f(ev.cp_min[i])
    rec = {
        "name": name,
        "status": st.label,
        "status_text": describe(st),
        "cl": _f(ev.cl[i]),
        "alpha_deg": angle(ev.alpha[i]),
        "alpha_zero_lift_deg": angle(ev.alpha_zero_lift[i]),
        "lift_slope_per_deg": None if not ok else _f(ev.lift_slope[i]) * math.pi / 180.0,
        "cl_max_ideal": _f(ev.cl_max_ideal[i]),
        "cm_quarter_chord": _f(ev.cm_quarter_chord[i]),
        "cp_min": cp_min,
        "peak_suction": None if cp_min is None else -cp_min,
        "cp_min_x": _f(ev.cp_min_x[i]),
        "cp_min_surface": ("upper" if ev.cp_min_upper[i] else "lower") if ok else None,
        "thickness": _f(ev.thickness[i]),
        "thickness_x": _f(ev.thickness_x[i]),
        "camber": _f(ev.camber[i]),
        "camber_x": _f(ev.camber_x[i]),
        "le_radius": _f(ev.le_radius[i]),
        "te_angle_deg": angle(ev.te_angle[i]),
        "area": _f(ev.area[i]),
        "recovery_severity": _f(ev.severity[i]),
        "thwaites_separation_x_upper": _f(ev.thwaites_sep_x_upper[i]),
        "thwaites_separation_x_lower": _f(ev.thwaites_sep_x_lower[i]),
        "thwaites_min_lambda": _f(ev.thwaites_min_lambda[i]),
        "stratford_margin": _f(ev.stratford_margin[i]),
        "stratford_separation_x_upper": _f(ev.stratford_sep_x_upper[i]),
        "stratford_separation_x_lower": _f(ev.stratford_sep_x_lower[i]),
        "conventions": CONVENTIONS,
        "caution": CAUTION,
    }
    return rec


def plural(n: int, word: str) -> str:
    """``1 run``, ``2 runs``."""
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def format_number(v, digits: int = 4) -> str:
    """A figure for a text table: fixed digits, no negative zero, ``-`` for none."""
    if v is None:
        return "-"
    if isinstance(v, str):
        return v
    if isinstance(v, (list, tuple)):
        return " to ".join(format_number(x, digits) for x in v)
    s = f"{v:.{digits}f}"
    return s[1:] if s.startswith("-") and float(s) == 0.0 else s


def display_values(obj, significant: int = 12):
    """A JSON-ready copy with floats rounded to ``significant`` digits (so that 2 prints as 2,
    not 1.9999999999999996) and no negative zero."""
    if isinstance(obj, float):
        if obj != obj or obj in (float("inf"), float("-inf")):
            return obj
        v = float(f"{obj:.{significant}g}")
        return 0.0 if v == 0.0 else v
    if isinstance(obj, dict):
        return {k: display_values(v, significant) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [display_values(v, significant) for v in obj]
    return obj


_ROWS = (
    ("Operating point", (
        ("Cl", "cl", 4), ("angle of attack  [deg]", "alpha_deg", 3),
        ("zero-lift angle  [deg]", "alpha_zero_lift_deg", 3),
        ("lift slope  [1/deg]", "lift_slope_per_deg", 5),
        ("Cl limit of the ideal flow (not stall)", "cl_max_ideal", 3),
        ("Cm c/4", "cm_quarter_chord", 5),
    )),
    ("Operating range", (
        ("critical Mach number", "critical_mach", 4),
        ("Mach number", "mach", 3), ("Cp min at that Mach", "cp_min_compressible", 4),
        ("cavitation number sigma", "cavitation_number", 4),
        ("cavitation margin sigma - peak suction", "cavitation_margin", 4),
        ("Cl range free of cavitation", "cavitation_free_cl", 4),
    )),
    ("Pressure", (
        ("Cp min", "cp_min", 4), ("  at x/c", "cp_min_x", 4), ("  on surface", "cp_min_surface", 0),
        ("recovery severity -(s/u)du/ds", "recovery_severity", 4),
        ("Thwaites separation x/c, upper", "thwaites_separation_x_upper", 4),
        ("Thwaites separation x/c, lower", "thwaites_separation_x_lower", 4),
        ("Thwaites min lambda", "thwaites_min_lambda", 4),
        ("Stratford margin (>= 1 separates)", "stratford_margin", 4),
        ("Stratford separation x/c, upper", "stratford_separation_x_upper", 4),
        ("Stratford separation x/c, lower", "stratford_separation_x_lower", 4),
    )),
    ("Shape", (
        ("thickness t/c", "thickness", 5), ("  at x/c", "thickness_x", 4),
        ("camber", "camber", 5), ("  at x/c", "camber_x", 4),
        ("leading-edge radius", "le_radius", 5), ("trailing-edge angle  [deg]", "te_angle_deg", 2),
        ("area  [chord^2]", "area", 5),
    )),
)


def format_summary(rec: dict, proxies: tuple[str, ...] = ("severity",)) -> str:
    """A plain-text summary of one evaluation record, in groups."""
    skip = set()
    if "thwaites" not in proxies:
        skip |= {k for k in rec if k.startswith("thwaites")}
    if "stratford" not in proxies:
        skip |= {k for k in rec if k.startswith("stratford")}
    if "severity" not in proxies:
        skip.add("recovery_severity")
    title = f"foilmap | {rec['name'] or 'section'} | status: {rec['status']}"
    out = [title, "=" * len(title)]
    if rec.get("chord_line"):
        out.append(f"angles, Cl and Cm from the {rec['chord_line']} chord line")
    for group, rows in _ROWS:
        out.append(f"{group}")
        shown = [(lb, k, d) for lb, k, d in rows if k not in skip and k in rec]
        if not shown:
            out.pop()
            continue
        for label, key, digits in shown:
            out.append(f"  {label:<40s} {format_number(rec[key], digits):>12s}")
    out.append("")
    out.append(CONVENTIONS)
    out.append(CAUTION)
    return "\n".join(out)


def format_screen(out: dict, name: str, reynolds: float) -> str:
    """The text of ``foilmap screen`` from its record."""
    def fx(v):
        return "-" if v is None else f"{v:.4f}"

    lines = [f"foilmap screen | {name} | Cl {out['cl']:.4f} at {out['alpha_deg']:.3f} deg | "
             f"Re {reynolds:.3g}"]
    cd_text = fx(out["cd"]) if out["cd"] is not None else (
        "not estimated: turbulent separation (the method does not hold past it)")
    lines.append(f"  profile drag Cd (Squire-Young at x/c = {out['drag_station_x']})   {cd_text}")
    for side in ("upper", "lower"):
        r = out[side]
        how = " (at laminar separation)" if r["transition_by_laminar_separation"] else ""
        lines.append(f"  {side:<6} transition x/c {fx(r['x_transition'])}{how}; laminar "
                     f"separation {fx(r['x_laminar_separation'])}; turbulent separation "
                     f"{fx(r['x_turbulent_separation'])}")
    return "\n".join(lines)


def format_fit(rec: dict, output: str) -> str:
    """The text of ``foilmap fit`` from its record (:func:`foilmap.fit`)."""
    rev = ", reversed to run over the upper surface first" if rec["reversed"] else ""
    lines = [f"read {rec['points_read']} points of {rec['name']!r} ({rec['layout']} layout{rev})"]
    if rec["te_gap_chords"] > 0:
        lines.append(f"open trailing edge: gap {rec['te_gap_chords']:.5f} chords, closed for the "
                     f"fit by a linear thickness ramp (largest shift "
                     f"{rec['closing_shift_chords']:.5f} chords)")
    lines.append(f"trailing-edge angle {rec['te_angle_deg']:.3f} deg; Theodorsen iteration "
                 f"{'converged' if rec['converged'] else 'NOT converged'} in "
                 f"{rec['iterations']} steps")
    lines.append(f"deviation with {rec['coefficients_fitted']} coefficients: max "
                 f"{rec['max_deviation_chords']:.2e}, RMS {rec['rms_deviation_chords']:.2e} chords "
                 f"(full series of {rec['full_terms']} terms: max "
                 f"{rec['full_max_deviation_chords']:.2e})")
    lines.append(f"section written to {output}; its angles, Cl and Cm are measured from the "
                 "file's chord line (leading edge to trailing edge as the file gives them)")
    return "\n".join(lines)


def surface_table_csv(zc: np.ndarray, upper: np.ndarray, q: np.ndarray, name: str) -> str:
    """CSV text of one surface distribution: columns x, y, surface, cp, q."""
    lines = [
        f"# foilmap surface distribution of {name}",
        f"# {CONVENTIONS}",
        f"# {CAUTION}",
        "x,y,surface,cp,q",
    ]
    cp = 1.0 - q * q
    for z, u, c, s in zip(zc, upper, cp, q):
        lines.append(f"{z.real:.10f},{z.imag:.10f},{'upper' if u else 'lower'},{c:.10f},{s:.10f}")
    return "\n".join(lines) + "\n"


def xy_lines(x: np.ndarray, y: np.ndarray) -> str:
    """Two columns to eight decimals, with no "-0.00000000" for round-off below the last digit."""
    x = np.where(np.abs(x) < 5e-9, 0.0, x)
    y = np.where(np.abs(y) < 5e-9, 0.0, y)
    return "\n".join(f"{a: .8f} {b: .8f}" for a, b in zip(x, y))


def coordinates_text(zc: np.ndarray, name: str) -> str:
    """Two-column coordinates: one name line, then x y from the TE over the upper surface."""
    head = f"{name}  (foilmap ideal-flow screening section; verify by viscous analysis and tests)"
    return head + "\n" + xy_lines(zc.real, zc.imag) + "\n"
