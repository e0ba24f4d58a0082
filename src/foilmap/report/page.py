"""The study report page: one self-contained HTML file per set of study folders.

It is what a designer opens the morning after an overnight study: what the study asked, the run
states and times, convergence, the fronts of a multi-objective study, the best designs (shapes,
Cp at the design Cl and the ends of its range, a table of figures with their constraint
margins), the warnings, the caution, and how to reproduce the study.  Several folders go side by
side, with their fronts on one set of axes and hypervolume statistics.

The page needs nothing from the network: the style is inline and every figure is a PNG in a
``data:`` URI.
"""

from __future__ import annotations

import base64
import html
import io
import math
import time
from pathlib import Path

from foilmap._version import __version__
from foilmap.errors import InputError
from foilmap.report.study import LE_RADIUS_FLOOR, floor_warnings, run_colours, runs_figure
from foilmap.report.text import CAUTION, format_number, plural
from foilmap.store.folder import StudyFolder, collect_fronts, is_multi_objective

__all__ = ["report_page"]

#: best designs shown per study (single-objective: the best runs; fronts: knee and ends)
DESIGNS_SHOWN = 3

_STYLE = """
body { font-family: system-ui, -apple-system, 'Segoe UI', sans-serif; margin: 0;
       color: #1c2833; background: #fbfcfc; }
header { background: #17324d; color: #f4f6f7; padding: 18px 32px; }
header h1 { margin: 0 0 4px 0; font-size: 22px; font-weight: 600; }
header p { margin: 0; font-size: 13px; color: #c9d6df; }
main { padding: 8px 32px 40px 32px; max-width: 1180px; }
section.study { border-top: 3px solid #17324d; margin-top: 28px; }
h2 { font-size: 19px; margin: 18px 0 6px 0; }
h3 { font-size: 15px; margin: 18px 0 6px 0; color: #21618c; }
table { border-collapse: collapse; font-size: 13px; margin: 6px 0 10px 0; }
th, td { border-bottom: 1px solid #d5dbdb; padding: 3px 10px 3px 4px; text-align: left; }
th { background: #eaf0f4; font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.caution { background: #fdf2e9; border-left: 5px solid #ca6f1e; padding: 8px 12px;
           font-size: 13px; margin: 12px 0; }
.warn { background: #fdedec; border-left: 5px solid #a93226; padding: 6px 12px;
        font-size: 13px; margin: 6px 0; }
.ok { color: #1e8449; } .bad { color: #a93226; font-weight: 600; }
img { max-width: 100%; border: 1px solid #d5dbdb; background: white; margin: 4px 0; }
pre { background: #f2f4f4; padding: 10px; font-size: 12px; overflow-x: auto; }
code { background: #f2f4f4; padding: 1px 4px; }
.grid { display: flex; flex-wrap: wrap; gap: 14px; }
.grid > div { flex: 1 1 480px; }
"""


def _png(fig, dpi: int = 100) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _img(fig, alt: str, dpi: int = 100) -> str:
    return f'<img alt="{html.escape(alt)}" src="{_png(fig, dpi)}">'


def _table(head: list[str], rows: list[list], numeric: set[int] = frozenset()) -> str:
    out = ["<table><tr>" + "".join(f"<th>{html.escape(h)}</th>" for h in head) + "</tr>"]
    for r in rows:
        cells = []
        for i, v in enumerate(r):
            cls = ' class="num"' if i in numeric else ""
            cells.append(f"<td{cls}>{v if isinstance(v, _Raw) else html.escape(str(v))}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    return "\n".join(out) + "</table>"


class _Raw(str):
    """Cell text that is already HTML."""


def _num(v, digits: int = 4) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    return format_number(float(v), digits)


def _asked(study) -> str:
    parts = ["<h3>What the study asked</h3>"]
    obj = [[k, _num(w, 3)] for k, w in study.objectives.items()]
    parts.append(_table(["objective (minimised)", "weight"], obj, {1}))
    cons = [[k, html.escape(str(v))] for k, v in study.constraints.items()]
    parts.append(_table(["constraint", "bound"], cons) if cons else
                 "<p>No constraints.</p>")
    pts = []
    for p in study.points:
        pts.append([p.name, _num(p.cl, 3),
                    "-" if p.cl_range is None else f"{p.cl_range[0]:g} to {p.cl_range[1]:g}",
                    "-" if p.reynolds is None else f"{p.reynolds:.3g}",
                    "-" if p.mach is None else f"{p.mach:g}",
                    "-" if p.sigma is None else f"{p.sigma:.4g}"])
    parts.append(_table(["point", "Cl", "Cl range", "Reynolds", "Mach", "sigma"], pts,
                        {1, 3, 4, 5}))
    s = study.search
    shape = study.shape
    parts.append(_table(
        ["search", "budget per run", "population", "restarts", "seeds", "coefficients",
         "trailing-edge angle"],
        [[s["method"], s["max_evaluations"], s["popsize"] or "default", s["restarts"],
          ", ".join(map(str, study.seeds)), shape["coefficients"],
          "{:g} to {:g} deg".format(*shape["te_angle_deg"])]], {1, 3, 5}))
    return "\n".join(parts)


def _runs(st: dict) -> str:
    rows = []
    for r in st["runs"]:
        state = r["state"]
        cls = "ok" if state == "complete" else "bad" if state in (
            "failed", "interrupted", "unreadable", "unfinished") else ""
        best = _num(r["best"], 6) if r["best"] is not None else (
            f"HV {_num(r['hypervolume'], 5)}" if r.get("hypervolume") is not None else "-")
        rej = r.get("rejected") or {}
        n = max(r["evaluations"], 1)
        rows.append([r["run"], _Raw(f'<span class="{cls}">{html.escape(state)}</span>'),
                     r["generations"], r["evaluations"], best,
                     f"{rej.get('below_floor', 0)} ({rej.get('below_floor', 0) / n:.2%})",
                     rej.get("uncertified", 0),
                     _num(r["elapsed_s"], 1)])
    rate = st.get("evaluations_per_s")
    head = (f"<h3>Runs</h3><p>{plural(len(st['runs']), 'run')}: " + ", ".join(
        f"{n} {k}" for k, n in sorted(st["counts"].items()))
        + f"; {st['evaluations']} evaluations"
        + (f", {rate:.0f} per second of search" if rate else "") + ".</p>")
    return head + _table(["run", "state", "generations", "evaluations", "best feasible",
                          "below floor", "uncertified", "time s"], rows, {2, 3, 4, 5, 6, 7})


def _chosen_designs(folder: StudyFolder) -> list:
    """The designs shown: the best runs' bests, or the knee and the ends of the merged front."""
    study = folder.study
    if is_multi_objective(study):
        from foilmap.design.fronts import knee_index

        ids, _, pts = folder.merged_front()
        if not ids:
            return []
        pick = sorted({0, len(ids) - 1, int(knee_index(pts)) if len(ids) > 2 else 0})
        return [folder.design_by_id(ids[i]) for i in pick][:DESIGNS_SHOWN]
    found = []
    for r, log in folder.logged_runs():
        b = log.best()
        if b is not None:
            found.append((b["f"], r.run_id, b["index"], log))
    found.sort(key=lambda t: t[0])
    return [folder.design(rid, ev, log) for _, rid, ev, log in found[:DESIGNS_SHOWN]]


def _designs(folder: StudyFolder) -> tuple[str, list[str]]:
    from matplotlib.figure import Figure

    from foilmap.section.evaluation import analyse, surface_distribution

    designs = _chosen_designs(folder)
    if not designs:
        return ("<h3>Best designs</h3><p>No feasible design yet.</p>",
                [f"no run of study {folder.study.name} has a feasible design yet"])
    warnings = []
    colours = run_colours(folder.study)  # each run in the colour of the convergence figure
    shape = Figure(figsize=(10, 3.0))
    ax = shape.add_subplot(1, 1, 1)
    blocks = []
    for k, d in enumerate(designs):
        col = colours.get(d.run_id, "#1b4f72")
        # two designs of one run (ends and knee of a front): one colour, another line style
        style = ("-", "--", "-.", ":")[sum(e.run_id == d.run_id for e in designs[:k]) % 4]
        cls = [d.design_cl]
        if d.run.point.cl_range is not None:
            cls += list(d.run.point.cl_range)
        an = analyse(d.section, cl=d.design_cl, proxies=("severity", "thwaites"))
        ev = an.evaluation
        zc, up, q = surface_distribution(an, 241)
        ax.plot(zc[0].real, zc[0].imag, style, color=col, lw=1.4, label=d.id)
        cp_fig = Figure(figsize=(5.2, 3.3))
        axp = cp_fig.add_subplot(1, 1, 1)
        for j, c in enumerate(cls):
            a2 = an if j == 0 else analyse(d.section, cl=c, proxies=())
            if a2.evaluation.status[0] != 0:
                continue
            z2, _, q2 = surface_distribution(a2, 241)
            axp.plot(z2[0].real, 1 - q2[0] ** 2, "-" if j == 0 else ":", color=col,
                     lw=1.3 if j == 0 else 1.0, label=f"Cl {c:g}" + (" (design)" if j == 0
                                                                     else ""))
        axp.invert_yaxis()
        axp.set_xlabel("x / chord")
        axp.set_ylabel("Cp")
        axp.grid(True, color="0.9")
        axp.legend(fontsize=7, frameon=False)
        axp.set_title(d.id, fontsize=9)
        cp_fig.tight_layout()
        radius = float(ev.le_radius[0])
        if radius < LE_RADIUS_FLOOR:
            warnings.append(f"design {d.id} has a leading-edge radius of {radius:.2g} c, below "
                            f"the practical floor of about {LE_RADIUS_FLOOR:g} c; set "
                            "constraints.min_le_radius")
        fig_rows = [
            ["Cl / angle", f"{ev.cl[0]:.4f} at {math.degrees(ev.alpha[0]):.3f} deg"],
            ["peak suction -Cp min", f"{-ev.cp_min[0]:.4f} at x/c {ev.cp_min_x[0]:.3f}"],
            ["Cm c/4", _num(ev.cm_quarter_chord[0], 4)],
            ["thickness", f"{ev.thickness[0]:.4f} at x/c {ev.thickness_x[0]:.3f}"],
            ["camber", f"{ev.camber[0]:.4f} at x/c {ev.camber_x[0]:.3f}"],
            ["leading-edge radius", _num(radius, 5)],
            ["trailing-edge angle", f"{d.te_angle_deg:.2f} deg"],
            ["recovery severity", _num(ev.severity[0], 4)],
        ]
        fig_rows += [[f"objective {k2}", _num(v, 5)] for k2, v in d.objectives.items()]
        margins = [[n, _num(-g, 5), _Raw('<span class="ok">met</span>' if g <= 0 else
                                          '<span class="bad">violated</span>')]
                   for n, g in d.constraints.items()]
        blocks.append(
            f'<div><h3>{html.escape(d.id)} <small>(run {html.escape(d.run_id)}, '
            f'evaluation {d.evaluation})</small></h3>{_img(cp_fig, "Cp of " + d.id)}'
            + _table(["figure", "value"], fig_rows)
            + (_table(["constraint", "margin", ""], margins, {1}) if margins else "")
            + "</div>")
    ax.set_aspect("equal", adjustable="datalim")
    ax.set_xlabel("x / chord")
    ax.grid(True, color="0.9")
    ax.legend(fontsize=8, frameon=False, loc="upper right")
    ax.set_title("the designs shown, overlaid", fontsize=10)
    shape.tight_layout()
    head = ("<h3>Best designs</h3>" if not is_multi_objective(folder.study) else
            "<h3>Designs from the merged front (its ends and its knee)</h3>")
    return (head + _img(shape, "shapes") + '<div class="grid">' + "".join(blocks) + "</div>",
            warnings)


def _study_section(folder: StudyFolder) -> str:
    study = folder.study
    st = folder.status()
    parts = [f'<section class="study"><h2>Study {html.escape(study.name)}</h2>'
             f"<p>Folder <code>{html.escape(str(folder.path))}</code>"
             + (f" — {html.escape(study.description)}" if study.description else "") + "</p>"]
    parts.append(_asked(study))
    parts.append(_runs(st))
    warnings = []
    bad = [r for r in st["runs"] if r["state"] in ("failed", "interrupted", "unfinished",
                                                   "unreadable")]
    for r in bad:
        why = f": {r['error']}" if r.get("error") else ""
        warnings.append(f"run {r['run']} is {r['state']}{why}"
                        + ("; foilmap resume continues it" if r["state"] != "failed" else ""))
    warnings += [f"run {r['run']}: {r['damage']}" for r in st["runs"] if r.get("damage")]
    try:
        conv = runs_figure(folder.path)
        title = ("Hypervolume and fronts" if is_multi_objective(study)
                 else "Convergence and the best sections")
        parts.append(f"<h3>{title}</h3>" + _img(conv, title, 90))
    except InputError as exc:
        warnings.append(str(exc))
    for r in st["runs"]:
        unproven = (r.get("rejected") or {}).get("uncertified", 0)
        if unproven:
            warnings.append(f"run {r['run']}: {plural(unproven, 'evaluation')} rejected unproven "
                            "(a certificate gave up before proving the section valid or not)")
    warnings += [w.removeprefix("warning: ") for w in floor_warnings(folder.path)]
    if study.is_family:
        from foilmap.report.family import family_html

        designs, dw = family_html(folder, _img, _table)
    else:
        designs, dw = _designs(folder)
    warnings += dw
    parts.append(designs)
    if warnings:
        parts.insert(1, "<h3>Warnings</h3>" + "".join(
            f'<div class="warn">{html.escape(w)}</div>' for w in warnings))
    parts.append("<h3>How to reproduce it</h3>"
                 f"<p>Save the study text below as <code>study.toml</code> and run "
                 f"<code>foilmap run study.toml --out {html.escape(str(folder.path))}</code> "
                 f"(or continue this folder with <code>foilmap resume "
                 f"{html.escape(str(folder.path))}</code>). The same study and seeds give the "
                 "same runs, bit for bit.</p>"
                 f"<pre>{html.escape(study.text)}</pre>")
    parts.append("</section>")
    return "\n".join(parts)


def _comparison(paths: list[str]) -> str:
    import numpy as np

    from foilmap.report.compare import compare_fronts, plot_fronts

    note = ""
    try:
        fronts = collect_fronts(paths)
        try:
            res = compare_fronts(fronts)
        except InputError:
            # no common reference point in the studies: 10 % beyond the worst of every front
            allp = np.concatenate([f.objectives for f in fronts if f.objectives.size])
            hi = allp.max(axis=0)
            ref = np.where(hi > 0, 1.1 * hi, 0.9 * hi) + 1e-9
            res = compare_fronts(fronts, [float(v) for v in ref])
            note = (" The studies give no reference point; this one lies 10 % beyond the worst "
                    "value of every front shown.")
    except (InputError, ValueError) as exc:
        return f"<h2>The studies compared</h2><p>No comparison: {html.escape(str(exc))}</p>"
    if len(res["objectives"]) >= 2:
        buf = io.BytesIO()
        plot_fronts(fronts, res, buf)
        img = ('<img alt="fronts compared" src="data:image/png;base64,'
               + base64.b64encode(buf.getvalue()).decode("ascii") + '">')
    else:
        img = ("<p>One objective: each run's hypervolume is the distance of its best value "
               "below the reference point.</p>")
    rows = [[g["group"], g["count"], _num(g["hypervolume"]["mean"], 5),
             _num(g["hypervolume"]["median"], 5), _num(g["hypervolume"]["std"], 5),
             _num(g["hypervolume"]["min"], 5), _num(g["hypervolume"]["max"], 5)]
            for g in res["groups"]]
    comps = [[c["a"], c["b"], _num(c["p_value"], 4),
              _num(c.get("epsilon_additive_a_to_b"), 5), _num(c.get("epsilon_additive_b_to_a"), 5)]
             for c in res["comparisons"]]
    return ("<section class=\"study\"><h2>The studies compared</h2>"
            f"<p>Objectives {html.escape(', '.join(res['objectives']))} (minimised); "
            f"hypervolume against the reference point "
            f"{[round(v, 6) for v in res['reference_point']]}.{note}</p>" + img
            + _table(["group", "runs", "HV mean", "median", "std", "min", "max"], rows,
                     {1, 2, 3, 4, 5, 6})
            + (_table(["group A", "group B", "Mann-Whitney p", "eps+ A to B", "eps+ B to A"],
                      comps, {2, 3, 4}) if comps else "") + "</section>")


def report_page(folders: list[str | Path]) -> str:
    """The HTML text of the report page for one or more study folders."""
    sfs = []
    for f in folders:
        sf = StudyFolder(f)
        if not sf.exists():
            raise InputError(f"{str(f)!r} is not a study folder (no study.toml)")
        sfs.append(sf)
    names = ", ".join(sf.study.name for sf in sfs)
    body = [f"<header><h1>foilmap report: {html.escape(names)}</h1>"
            f"<p>{plural(len(sfs), 'study folder')}, written "
            f"{time.strftime('%Y-%m-%d %H:%M %Z')} by foilmap {__version__}</p></header><main>",
            f'<div class="caution"><b>Caution.</b> {html.escape(CAUTION)}</div>']
    if len(sfs) > 1:
        body.append(_comparison([str(sf.path) for sf in sfs]))
    for sf in sfs:
        body.append(_study_section(sf))
    body.append(f'<div class="caution">{html.escape(CAUTION)}</div></main>')
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<title>foilmap report: {html.escape(names)}</title>"
            f"<style>{_STYLE}</style></head><body>\n" + "\n".join(body) + "\n</body></html>\n")
