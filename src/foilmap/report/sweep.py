"""The operating-range sweep for people: rows, CSV, and the figure.

The figure has three panels: Cl against the angle, Cm c/4 against the angle, and the
minimum-pressure envelope — the peak suction −Cp_min of each surface against Cl, from which
hydrofoil and propeller designers read the cavitation-free range (inception where the peak
suction reaches the cavitation number σ, drawn when given).
"""

from __future__ import annotations

import csv
import io
import math

import numpy as np

from foilmap.report.text import CAUTION, display_values

__all__ = ["sweep_rows", "sweep_csv", "sweep_figure", "format_sweep"]

_COLUMNS = ("alpha_deg", "cl", "cm_quarter_chord", "peak_suction_upper", "x_peak_upper",
            "peak_suction_lower", "x_peak_lower", "recovery_severity",
            "thwaites_separation_x_upper", "thwaites_separation_x_lower", "critical_mach")


def _num(v) -> float | None:
    v = float(v)
    return v if math.isfinite(v) else None


def sweep_rows(res: dict, sigma: float | None = None) -> list[dict]:
    """JSON-ready rows of :func:`foilmap.section.operating.sweep` (degrees, NaN → None)."""
    from foilmap.section.status import Status

    rows = []
    for i in range(res["cl"].shape[0]):
        row = {"alpha_deg": _num(np.degrees(res["alpha"][i])), "cl": _num(res["cl"][i]),
               "cm_quarter_chord": _num(res["cm_quarter_chord"][i]),
               "peak_suction_upper": _num(res["peak_suction_upper"][i]),
               "x_peak_upper": _num(res["x_peak_upper"][i]),
               "peak_suction_lower": _num(res["peak_suction_lower"][i]),
               "x_peak_lower": _num(res["x_peak_lower"][i]),
               "recovery_severity": _num(res["severity"][i]),
               "thwaites_separation_x_upper": _num(res["thwaites_separation_x_upper"][i]),
               "thwaites_separation_x_lower": _num(res["thwaites_separation_x_lower"][i]),
               "critical_mach": _num(res["critical_mach"][i]),
               "status": Status(int(res["status"][i])).label}
        for side in ("upper", "lower"):
            key = f"peak_suction_{side}_compressible"
            if key in res:
                row[key] = _num(res[key][i])
        if sigma is not None:
            from foilmap.section.operating import cavitation_margin

            worst = max((v for v in (row["peak_suction_upper"], row["peak_suction_lower"])
                         if v is not None), default=None)
            row["cavitation_margin"] = (None if worst is None
                                        else float(cavitation_margin(sigma, worst)))
        rows.append(display_values(row))
    return rows


def sweep_csv(rows: list[dict], name: str) -> str:
    """The rows as CSV text, with a comment header."""
    keys = list(rows[0]) if rows else list(_COLUMNS)
    buf = io.StringIO()
    buf.write(f"# foilmap operating-range sweep of {name}; angles in degrees to the chord "
              "line; peak suction = -Cp_min on each surface; x in chords\n")
    buf.write(f"# {CAUTION}\n")
    w = csv.DictWriter(buf, fieldnames=keys, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: "" if r.get(k) is None else r[k] for k in keys})
    return buf.getvalue()


def sweep_figure(rows: list[dict], name: str, sigma: float | None = None,
                 mach: float | None = None):
    """A Figure: Cl and Cm c/4 against the angle, and the minimum-pressure envelope."""
    from matplotlib.figure import Figure

    ok = [r for r in rows if r["cl"] is not None]
    a = np.array([r["alpha_deg"] for r in ok])
    cl = np.array([r["cl"] for r in ok])
    cm = np.array([r["cm_quarter_chord"] for r in ok])
    suffix = "_compressible" if mach is not None else ""
    up = np.array([np.nan if r.get(f"peak_suction_upper{suffix}") is None
                   else r[f"peak_suction_upper{suffix}"] for r in ok])
    lo = np.array([np.nan if r.get(f"peak_suction_lower{suffix}") is None
                   else r[f"peak_suction_lower{suffix}"] for r in ok])
    fig = Figure(figsize=(12, 4.6))
    ax_l, ax_m, ax_e = fig.subplots(1, 3)
    ink, second = "#1b4f72", "#b9770e"
    ax_l.plot(a, cl, "-", color=ink, lw=1.6)
    ax_l.set_xlabel("angle of attack [deg]")
    ax_l.set_ylabel("Cl")
    ax_l.set_title("lift", fontsize=10)
    ax_m.plot(a, cm, "-", color=second, lw=1.6)
    ax_m.set_xlabel("angle of attack [deg]")
    ax_m.set_ylabel("Cm c/4")
    ax_m.set_title("moment about the quarter chord", fontsize=10)
    ax_e.plot(cl, up, "-", color=ink, lw=1.6, label="upper surface")
    ax_e.plot(cl, lo, "--", color=second, lw=1.6, label="lower surface")
    if sigma is not None:
        ax_e.axhline(sigma, color="#922b21", lw=1.0, ls=":")
        ax_e.annotate(f"σ = {sigma:.3g}: cavitation above", (0.02, sigma),
                      xycoords=("axes fraction", "data"), xytext=(0, 4),
                      textcoords="offset points", fontsize=8, color="#922b21")
    ax_e.set_xlabel("Cl")
    ax_e.set_ylabel("peak suction  -Cp min" + (f"  (M = {mach:g})" if mach is not None else ""))
    ax_e.set_title("minimum-pressure envelope", fontsize=10)
    ax_e.legend(fontsize=8, frameon=False, loc="upper center")
    for ax in (ax_l, ax_m, ax_e):
        ax.grid(True, color="0.9")
    fig.suptitle(f"{name}: operating range (ideal flow)", fontsize=11)
    fig.text(0.5, 0.01, CAUTION, ha="center", fontsize=7, color="0.3")
    fig.tight_layout(rect=(0, 0.04, 1, 0.95))
    return fig


def format_sweep(record: dict) -> str:
    """The text table of ``foilmap sweep`` from its record (:func:`foilmap.sweep`)."""
    from foilmap.report.text import format_number

    head = (f"{'alpha':>7} {'Cl':>8} {'Cm c/4':>8} {'peak up':>8} {'x':>6} {'peak lo':>8} "
            f"{'x':>6} {'severity':>8} {'M crit':>7}")
    lines = [f"foilmap sweep | {record['name']} | angles from the {record['chord_line']} chord "
             "line", head, "-" * len(head)]
    for r in record["rows"]:
        lines.append(f"{format_number(r['alpha_deg'], 2):>7} {format_number(r['cl'], 4):>8} "
                     f"{format_number(r['cm_quarter_chord'], 4):>8} "
                     f"{format_number(r['peak_suction_upper'], 4):>8} "
                     f"{format_number(r['x_peak_upper'], 3):>6} "
                     f"{format_number(r['peak_suction_lower'], 4):>8} "
                     f"{format_number(r['x_peak_lower'], 3):>6} "
                     f"{format_number(r['recovery_severity'], 3):>8} "
                     f"{format_number(r['critical_mach'], 3):>7}"
                     + ("" if r["status"] == "ok" else f"  ({r['status']})"))
    sigma = record.get("cavitation_number")
    if sigma is not None:
        lines.append(f"cavitation number sigma {sigma:.4g}: rows with a negative "
                     "cavitation_margin cavitate (see --json or --csv)")
    return "\n".join(lines)
