"""Reading study folders for people: status per run, warnings, convergence plots.

Everything is read through :class:`~foilmap.store.folder.StudyFolder`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from foilmap.errors import InputError
from foilmap.report.text import plural
from foilmap.store.folder import StudyFolder, is_multi_objective

__all__ = ["format_run_summary", "format_status", "damage_lines", "sharp_nose_warnings", "floor_warnings", "design_warnings", "best_shapes",
           "runs_figure", "plot_runs", "run_colours", "RUN_PALETTE", "LE_RADIUS_FLOOR", "ON_FLOOR", "is_multi_objective"]


def format_run_summary(study, out: Path, summaries: list[dict]) -> str:
    """What ``foilmap run`` and ``resume`` print when their runs end: how many finished or
    failed (each failure with its error), the design warnings, and a line when no run found a
    feasible design."""
    failed = [s for s in summaries if s.get("state") != "complete"]
    lines = [f"study {study.name}: {plural(len(summaries) - len(failed), 'run')} finished now, "
             f"{len(failed)} failed; logs in {Path(out) / 'runs'}"]
    for s in failed:
        lines.append(f"  run {s['run']} {s.get('state', 'failed')}: "
                     f"{s.get('error', 'unknown error')}")
    lines += design_warnings(Path(out))
    done = [s for s in summaries if s.get("state") == "complete"]
    if done and not is_multi_objective(study) and all(s.get("best") is None for s in done):
        lines.append(f"warning: no run of study {study.name} found a feasible design; loosen "
                     f"the constraints or widen the search (foilmap status {out} shows each run)")
    return "\n".join(lines)


def format_status(st: dict) -> str:
    """The text of ``foilmap status`` from :meth:`StudyFolder.status`."""
    rate = st.get("evaluations_per_s")
    head = (f"study {st['study']} in {st['folder']}: " + ", ".join(
        f"{n} {k}" for k, n in sorted(st["counts"].items()))
        + f"; {st['evaluations']} evaluations"
        + (f", {rate:.0f} per second of search" if rate else ""))
    lines = [head, ""]
    cols = (f"{'run':<28} {'state':<11} {'gens':>6} {'evals':>8} {'best feasible':>14} "
            f"{'time s':>8}")
    lines += [cols, "-" * len(cols)]
    for r in st["runs"]:
        best = "-" if r["best"] is None else f"{r['best']:.6g}"
        if r["best"] is None and r.get("hypervolume") is not None:
            best = f"HV {r['hypervolume']:.5g}"  # a multi-objective run's measure
        el = "-" if r["elapsed_s"] is None else f"{r['elapsed_s']:.1f}"
        lines.append(f"{r['run']:<28} {r['state']:<11} {r['generations']:>6} "
                     f"{r['evaluations']:>8} {best:>14} {el:>8}")
    notes = []
    for r in st["runs"]:
        rej = r.get("rejected") or {}
        if rej.get("uncertified"):
            notes.append(f"run {r['run']}: {plural(rej['uncertified'], 'evaluation')} rejected "
                         "unproven (a certificate gave up: uncertified)")
        if rej.get("below_floor"):
            share = rej["below_floor"] / max(r["evaluations"], 1)
            notes.append(f"run {r['run']}: {plural(rej['below_floor'], 'evaluation')} "
                         f"({share:.2%}) below the local-thickness floor")
    if notes:
        lines += [""] + notes
    lines += damage_lines(st)
    return "\n".join(lines)


def damage_lines(st: dict) -> list[str]:
    """Status lines naming damaged run files and the repairs a resume made (``damage``)."""
    found = [f"damage: run {r['run']}: {r['damage']}" for r in st["runs"] if r.get("damage")]
    return [""] + found if found else []


#: a leading-edge radius below about 0.2 % of the chord is a needle nose that no real section
#: should have: sensitive to incidence, hard to build and to keep attached (common practice)
LE_RADIUS_FLOOR = 0.002


def best_shapes(out, status: dict | None = None) -> list[tuple[str, dict]]:
    """(run id, best shape) for every run with a feasible design (see
    :meth:`StudyFolder.best_shape`) of a study folder (a path or a :class:`StudyFolder`).  A
    finished run's comes from the index (no log opened); ``status`` is the folder's
    :meth:`StudyFolder.status` when the caller has it already."""
    folder = out if isinstance(out, StudyFolder) else StudyFolder(out)
    st = status if status is not None else folder.status()
    found = []
    for row in st["runs"]:
        shape = row.get("best_shape")
        if shape is None and row["generations"]:  # an index written before best shapes were
            log = folder.log(row["run"])
            shape = folder.best_shape(row["run"], log) if log is not None else {}
        if shape:
            found.append((row["run"], shape))
    return found


def sharp_nose_warnings(out: Path, floor: float = LE_RADIUS_FLOOR,
                        status: dict | None = None) -> list[str]:
    """One warning line per run whose best feasible design has a leading-edge radius below
    ``floor`` (chords), naming the study key that prevents it."""
    return _nose_lines(best_shapes(out, status), floor)


def _nose_lines(shapes, floor: float) -> list[str]:
    lines = []
    for run_id, shape in shapes:
        radius = shape["le_radius"]
        if radius < floor:
            lines.append(f"warning: the best design of run {run_id} has a leading-edge radius "
                         f"of {radius:.2g} c, below the practical floor of about {floor:g} c; "
                         f"set constraints.min_le_radius in the study to keep the search away "
                         f"from needle noses")
    return lines


#: a best design whose least clearance above the local-thickness floor is under this share of
#: the floor sits on it: the search thinned the section until the floor held it
ON_FLOOR = 0.05


def floor_warnings(out: Path, status: dict | None = None) -> list[str]:
    """One warning line per run whose best feasible design sits on the local-thickness floor
    (``constraints.min_local_thickness``), naming where and the study keys that govern it."""
    folder = StudyFolder(out)
    return _floor_lines(folder, best_shapes(folder, status))


def _floor_lines(folder: StudyFolder, shapes) -> list[str]:
    t0 = float(folder.study.constraints.get("min_local_thickness", 0.0))
    if t0 <= 0.0:
        return []
    lines = []
    for run_id, shape in shapes:
        margin, x = shape["floor_margin"], shape["floor_x"]
        if margin < ON_FLOOR * t0:
            lines.append(f"warning: the best design of run {run_id} sits on the local-thickness "
                         f"floor (at x/c {x:.3f} it is {margin:.2g} c above the floor of "
                         f"constraints.min_local_thickness = {t0:g} c): the search thinned it "
                         f"until the floor held it; give constraints.station_thickness where "
                         f"the section must be thicker, or raise the floor")
    return lines


def design_warnings(out: Path, status: dict | None = None) -> list[str]:
    """Every warning about the best designs of a study folder: needle noses and sections on
    the local-thickness floor (``status``: the folder's status, when the caller has it)."""
    folder = StudyFolder(out)
    shapes = best_shapes(folder, status)
    return _nose_lines(shapes, LE_RADIUS_FLOOR) + _floor_lines(folder, shapes)


#: the colours of the runs, in the study's order (matplotlib's tab10, repeating)
RUN_PALETTE = ("#1f77b4", "#ff7f0e", "#2ca02c", "#d62728", "#9467bd", "#8c564b", "#e377c2",
               "#7f7f7f", "#bcbd22", "#17becf")


def run_colours(study) -> dict[str, str]:
    """One colour per run of ``study``, by its place in the study's run order: every figure of a
    study (convergence, fronts, the designs of the report page) draws a run in its colour."""
    return {r.run_id: RUN_PALETTE[i % len(RUN_PALETTE)] for i, r in enumerate(study.runs())}


def _front_runs_figure(folder: StudyFolder):
    """Hypervolume history and final front of every run of a multi-objective study."""
    from matplotlib.figure import Figure

    from foilmap.report.text import CAUTION

    fig = Figure(figsize=(11, 5.2))
    ax_h, ax_f = fig.subplots(1, 2)
    shown = 0
    names = None
    colours = run_colours(folder.study)
    for r, log in folder.logged_runs():
        names = log.objective_names
        colour = colours[r.run_id]
        hv = log.gen.get("hypervolume")
        if hv is not None and np.isfinite(hv).any():
            ax_h.plot(log.gen["evaluations"], hv, lw=1.2, color=colour, label=r.run_id)
        front = log.evals["objectives"][log.front()]
        if front.shape[0] and front.shape[1] >= 2:
            order = np.argsort(front[:, 0])
            ax_f.plot(front[order, 0], front[order, 1], ".-", ms=4, lw=0.8, color=colour,
                      label=r.run_id)
        shown += 1
    if not shown:
        raise InputError(f"study folder {str(folder.path)!r} has no run with a logged generation yet: "
                         "nothing to plot")
    ax_h.set_xlabel("evaluations")
    ax_h.set_ylabel("hypervolume of the feasible archive")
    ax_h.set_title(f"study {folder.study.name}: hypervolume of {plural(shown, 'run')}",
                   fontsize=10)
    ax_h.grid(True, color="0.9")
    if names:
        ax_f.set_xlabel(names[0])
        ax_f.set_ylabel(names[1])
    ax_f.set_title("final fronts (minimised)", fontsize=10)
    ax_f.grid(True, color="0.9")
    if shown <= 12:
        ax_f.legend(fontsize=7, frameon=False, ncol=2)
    fig.text(0.5, 0.01, CAUTION, ha="center", fontsize=7, color="0.3")
    fig.tight_layout(rect=(0, 0.04, 1, 1))
    return fig


def runs_figure(out: Path, best_count: int = 4):
    """A Figure of the convergence of every run, and below it the best sections directly above
    their Cp on one chord axis (for a multi-objective study, the hypervolume history and the
    final fronts).  Each run has its colour of :func:`run_colours` throughout."""
    from matplotlib.figure import Figure

    from foilmap.report.text import CAUTION
    from foilmap.section.evaluation import analyse, surface_distribution

    folder = StudyFolder(out)
    study = folder.study
    if is_multi_objective(study):
        return _front_runs_figure(folder)
    if not any(log.best() is not None for _, log in folder.logged_runs()):
        raise InputError(f"no run of study {study.name!r} has a feasible design yet: nothing to "
                         f"plot (foilmap status {out} shows each run)")
    fig = Figure(figsize=(10, 11))
    grid = fig.add_gridspec(3, 1, height_ratios=[1.0, 0.75, 1.0], hspace=0.08)
    ax_c = fig.add_subplot(grid[0])
    ax_s = fig.add_subplot(grid[1])
    ax_p = fig.add_subplot(grid[2], sharex=ax_s)
    finals = []
    colour = run_colours(study)
    for r, log in folder.logged_runs():
        e, b = log.gen["evaluations"], log.gen["best_f"]
        ok = np.isfinite(b)
        if ok.any():
            ax_c.plot(e[ok], b[ok], lw=1.2, color=colour[r.run_id], label=r.run_id)
            finals.append((float(b[ok][-1]), r.run_id))
    lows = [f for f, _ in finals]
    firsts = [ln.get_ydata()[0] for ln in ax_c.get_lines()]
    if lows and min(lows) > 0 and max(firsts) / min(lows) > 10:  # log scale where it suits
        ax_c.set_yscale("log")
    ax_c.set_xlabel("evaluations")
    ax_c.set_ylabel("best feasible objective")
    ax_c.grid(True, which="both", color="0.9")
    ax_c.set_title(f"study {study.name}: convergence of {plural(len(finals), 'run')}",
                   fontsize=10)
    if len(finals) <= 12:
        ax_c.legend(fontsize=7, frameon=True, framealpha=0.85, edgecolor="0.85",
                    ncol=2 if len(finals) > 6 else 1, loc="upper right")
    # a family run's design is several sections: the page's family block shows them
    best = sorted((f, rid) for f, rid in finals if not folder.run_spec(rid).family)[:best_count]
    for f, rid in best:
        d = folder.best_design(rid)
        an = analyse(d.section, cl=d.design_cl, proxies=())
        zc, up, q = surface_distribution(an, 241)
        ax_s.plot(zc[0].real, zc[0].imag, lw=1.3, color=colour[rid], label=f"{rid}: {f:.4g}")
        ax_p.plot(zc[0].real, 1 - q[0] ** 2, lw=1.2, color=colour[rid])
    # equal scales by adjusting the y range (as foilmap plot does), so that the sections fill
    # their panel's width and each suction peak sits over its place on the chord
    ax_s.set_xlim(-0.05, 1.05)
    ax_s.set_aspect("equal", adjustable="datalim")
    ax_s.set_ylabel("y / chord")
    ax_s.set_title(f"the best {plural(len(best), 'section')} (objective in the legend) and "
                   "their Cp at the design Cl", fontsize=10)
    ax_s.grid(True, color="0.9")
    ax_s.tick_params(labelbottom=False)
    ax_s.legend(fontsize=7.5, frameon=True, framealpha=0.85, edgecolor="0.85",
                loc="upper right", ncol=2 if len(best) > 2 else 1)
    ax_p.invert_yaxis()
    ax_p.axhline(0.0, color="0.6", lw=0.7)
    ax_p.set_xlabel("x / chord")
    ax_p.set_ylabel("Cp at the design Cl")
    ax_p.grid(True, color="0.9")
    fig.text(0.5, 0.01, CAUTION, ha="center", fontsize=7, color="0.3")
    fig.subplots_adjust(left=0.09, right=0.97, top=0.96, bottom=0.06)
    # the convergence plot keeps its own x axis: a gap under it for its label
    pos = ax_c.get_position()
    ax_c.set_position([pos.x0, pos.y0 + 0.04, pos.width, pos.height - 0.04])
    return fig


def plot_runs(out: Path, path: Path, best_count: int = 4) -> None:
    """Write :func:`runs_figure` to ``path`` (PNG)."""
    runs_figure(out, best_count).savefig(path, dpi=120)
