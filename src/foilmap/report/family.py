"""The family of a family study, for the report page and the terminal: the stations' sections
overlaid, the schedules along the span (thickness, camber, Cl, peak suction, cavitation margin,
Cm) at the stations and between them, Cp at each station, and the price of continuity (each
station's objective in the family beside its independent station run's)."""

from __future__ import annotations

import html
import math

import numpy as np

__all__ = ["format_stations", "family_schedules", "family_html", "SCHEDULE_POSITIONS"]

#: in-between positions per interval drawn in the schedules (beyond the study's own checks)
SCHEDULE_POSITIONS = 16


def _pct(v) -> str:
    return "—" if v is None else f"{100.0 * v:+.2f} %"


def _f(v, digits=5) -> str:
    return "—" if v is None or not np.isfinite(v) else f"{v:.{digits}g}"


def format_stations(rows: list[dict]) -> str:
    """A text table: per station its objective in the family, the best of its independent
    station run and the difference (the price of continuity)."""
    head = f"{'station':<12} {'position':>8} {'in family':>10} {'alone':>10} {'price':>9}"
    lines = ["each station's objective in the family and alone (its independent station run, "
             "same budget):", head, "-" * len(head)]
    for r in rows:
        lines.append(f"{r['station']:<12} {r['position']:>8.3f} {_f(r['f']):>10} "
                     f"{_f(r['independent']):>10} {_pct(r['price']):>9}")
    return "\n".join(lines)


def family_schedules(study, family, per_interval: int = SCHEDULE_POSITIONS) -> dict:
    """Figures along the span at the stations and ``per_interval`` positions inside each
    interval: each position's section at its interpolated design Cl (the peak suction the
    largest over its Cl range where the stations give one), with the cavitation margin where
    both neighbouring stations give a cavitation number."""
    from foilmap.design.family import interpolate_point
    from foilmap.section.evaluation import analyse

    st = study.stations
    pos, pts, is_station = [], [], []
    for i, s in enumerate(st):
        pos.append(s.position)
        pts.append(s.point)
        is_station.append(True)
        if i + 1 < len(st):
            for k in range(1, per_interval + 1):
                u = k / (per_interval + 1)
                pos.append(s.position + (st[i + 1].position - s.position) * u)
                pts.append(interpolate_point(s.point, st[i + 1].point, u, "between"))
                is_station.append(False)
    out = {k: [] for k in ("position", "station", "cl", "thickness", "camber", "peak_suction",
                           "cavitation_margin", "cm", "status")}
    secs = family.section_at(np.array(pos))
    for j, (p, pt) in enumerate(zip(pos, pts)):
        an = analyse(secs[j:j + 1], cl=pt.cl, proxies=())
        ev = an.evaluation
        peak = -float(ev.cp_min[0])
        for c in (pt.cl_range or ()):
            other, code = an.peak_suction_at(c)
            if int(code[0]) == 0:
                peak = max(peak, float(other[0]))
        out["position"].append(p)
        out["station"].append(is_station[j])
        out["cl"].append(pt.cl)
        out["thickness"].append(float(ev.thickness[0]))
        out["camber"].append(float(ev.camber[0]))
        out["peak_suction"].append(peak)
        out["cavitation_margin"].append(math.nan if pt.sigma is None else pt.sigma - peak)
        out["cm"].append(float(ev.cm_quarter_chord[0]))
        out["status"].append(int(ev.status[0]))
    return {k: np.array(v) for k, v in out.items()}


def _figures(study, family, sched):
    from matplotlib import colormaps
    from matplotlib.figure import Figure

    from foilmap.section.evaluation import analyse, surface_distribution

    cmap = colormaps["viridis"]
    n = len(study.stations)
    colours = [cmap(0.1 + 0.75 * i / max(n - 1, 1)) for i in range(n)]
    # the stations' sections overlaid, each above its Cp on one chord axis
    fig = Figure(figsize=(10, 6.2))
    ax_s = fig.add_subplot(2, 1, 1)
    ax_p = fig.add_subplot(2, 1, 2, sharex=ax_s)
    for i, s in enumerate(study.stations):
        sec = family.section_at(s.position)
        an = analyse(sec, cl=s.point.cl, proxies=())
        zc, _, q = surface_distribution(an, 241)
        lab = f"{s.name} (span {s.position:g}, Cl {s.point.cl:g})"
        ax_s.plot(zc[0].real, zc[0].imag, color=colours[i], lw=1.4, label=lab)
        ax_p.plot(zc[0].real, 1 - q[0] ** 2, color=colours[i], lw=1.2)
    ax_s.set_aspect("equal", adjustable="datalim")
    ax_s.grid(True, color="0.92")
    ax_s.legend(fontsize=8, frameon=False, loc="upper right")
    ax_s.set_title("the stations' sections, root to tip", fontsize=10)
    ax_p.invert_yaxis()
    ax_p.set_xlabel("x / chord")
    ax_p.set_ylabel("Cp at each station's design Cl")
    ax_p.grid(True, color="0.92")
    fig.tight_layout()

    keys = [("thickness", "thickness t/c"), ("camber", "camber / chord"),
            ("cl", "design Cl"), ("peak_suction", "peak suction −Cp min"),
            ("cavitation_margin", "cavitation margin σ − (−Cp min)"), ("cm", "Cm c/4")]
    sch = Figure(figsize=(10, 5.6))
    st = sched["station"]
    for k, (key, label) in enumerate(keys):
        ax = sch.add_subplot(2, 3, k + 1)
        y = sched[key]
        if np.all(np.isnan(y)):
            ax.text(0.5, 0.5, "no cavitation number given", ha="center", va="center",
                    transform=ax.transAxes, fontsize=8, color="0.4")
        else:
            ax.plot(sched["position"], y, "-", color="#1f4e79", lw=1.2)
            ax.plot(sched["position"][st], y[st], "o", color="#c55a11", ms=5)
        ax.set_title(label, fontsize=9)
        ax.set_xlabel("span position", fontsize=8)
        ax.tick_params(labelsize=7)
        ax.grid(True, color="0.92")
    sch.suptitle("schedules along the span (dots: the stations; line: the family between them)",
                 fontsize=10)
    sch.tight_layout()
    return fig, sch


def family_html(folder, img, table) -> tuple[str, list[str]]:
    """The report page's block for a family study (``img(fig, alt)`` and ``table(head,
    rows)`` are the page's own helpers) and its warnings."""
    from foilmap.store.familyfile import best_family
    from foilmap.errors import InputError

    try:
        best = best_family(folder.path)
    except InputError as exc:
        return f"<h3>The family</h3><p>{html.escape(str(exc))}</p>", [str(exc)]
    study = folder.study
    sched = family_schedules(study, best.family)
    fig, sch = _figures(study, best.family, sched)
    warnings = []
    bad = sched["status"][~sched["station"]] != 0
    if bad.any():
        warnings.append(f"{int(bad.sum())} in-between sections of the best family drawn here "
                        "are not valid sections (finer than the study's checks)")
    rows = [[r["station"], f"{r['position']:g}", _f(r["f"]), _f(r["independent"]),
             _pct(r["price"])] for r in best.stations]
    price = ("<p>The price of continuity: each station's objective in the family beside the "
             "best of its independent station run (same budget, in this folder). With "
             "<code>[family] start = \"shape\"</code> the folder holds no station runs; run the "
             "same study with <code>start = \"stations\"</code> to see them.</p>"
             + table(["station", "span position", "in the family", "alone", "price"], rows))
    d = best.design
    head = (f"<h3>The family <small>(run {html.escape(d.run_id)}, evaluation {d.evaluation}, "
            f"rule {html.escape(best.family.rule)})</small></h3>")
    return (head + img(fig, "the stations' sections and their Cp") + price
            + img(sch, "schedules along the span"), warnings)
