"""Reading study folders for people: status per run, the best designs, convergence plots."""

from __future__ import annotations

import json
import math
import time
from pathlib import Path

import numpy as np

from .engine import INDEX_NAME, load_folder, run_paths
from .errors import InputError
from .runlog import read_run
from .study import Parametrisation, Study

__all__ = ["folder_status", "format_status", "best_design", "plot_runs"]


def _index(out: Path) -> dict:
    p = Path(out) / INDEX_NAME
    if not p.exists():
        raise InputError(f"{str(out)!r} is not a study folder (no {INDEX_NAME})")
    return json.loads(p.read_text())


def folder_status(out: Path) -> dict:
    """State, generations, evaluations, best feasible objectives and elapsed time per run."""
    out = Path(out)
    study = load_folder(out)
    index = _index(out)
    listed = {e["run"]: e for e in index["runs"]}
    rows = []
    for run in study.runs():
        log_path, ckpt = run_paths(out, run.run_id)
        entry = listed.get(run.run_id, {})
        row = {"run": run.run_id, "seed": run.seed, "point": run.point.name,
               "variant": run.variant, "state": entry.get("state", "pending"),
               "generations": 0, "evaluations": 0, "best": None, "best_objectives": None,
               "hypervolume": None, "elapsed_s": None, "resumes": 0,
               "file": str(log_path.relative_to(out))}
        if "error" in entry:
            row["error"] = entry["error"]
        if entry.get("state") == "complete" and "generations" in entry:
            # a finished run: its index entry holds what status shows (no log to open)
            for k in ("generations", "evaluations", "best", "best_objectives", "resumes",
                      "elapsed_s", "hypervolume"):
                if k in entry:
                    row[k] = entry[k]
        elif log_path.exists():
            try:
                log = read_run(log_path)
            except (OSError, KeyError, ValueError) as exc:
                row["state"] = "unreadable"
                row["error"] = str(exc)
            else:
                if log.state_name == "complete":
                    row["state"] = "complete"
                elif row["state"] in ("pending", "queued", "complete"):
                    row["state"] = "unfinished"
                row["generations"] = log.generations
                row["evaluations"] = log.evaluations
                row["resumes"] = log.resumes
                best = log.best()
                if best is not None:
                    row["best"] = best["f"]
                    row["best_objectives"] = dict(zip(log.objective_names,
                                                      map(float, best["objectives"])))
                if log.generations:
                    row["elapsed_s"] = float(log.gen["time"][-1])
                    hv = log.gen.get("hypervolume")
                    if hv is not None and np.isfinite(hv[-1]):
                        row["hypervolume"] = float(hv[-1])
        rows.append(row)
    counts = {}
    for r in rows:
        counts[r["state"]] = counts.get(r["state"], 0) + 1
    total_e = sum(r["evaluations"] for r in rows)
    total_t = sum(r["elapsed_s"] or 0.0 for r in rows)
    return {"study": study.name, "folder": str(out), "runs": rows, "counts": counts,
            "evaluations": total_e,
            "evaluations_per_s": (total_e / total_t) if total_t > 0 else None,
            "checked": time.strftime("%Y-%m-%dT%H:%M:%S%z")}


def format_status(st: dict) -> str:
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
    return "\n".join(lines)


def best_design(out: Path, run_id: str | None = None):
    """The best feasible design of a run, or of the whole study.

    Returns ``(record, run, study)`` with the record of :meth:`RunLog.best` plus the section's
    coefficients and trailing-edge angle.
    """
    out = Path(out)
    study = load_folder(out)
    runs = study.runs()
    if is_multi_objective(study):
        raise InputError(f"study {study.name!r} searches Pareto fronts, so it has no single best "
                         f"design: choose one with foilmap pick {out} --knee (or --nearest, "
                         f"--index)")
    if run_id is not None:
        runs = [r for r in runs if r.run_id == run_id]
        if not runs:
            raise InputError(f"no run {run_id!r} in {str(out)!r} "
                             f"(runs: {', '.join(r.run_id for r in study.runs())})")
    best = None
    for r in runs:
        log_path, _ = run_paths(out, r.run_id)
        if not log_path.exists():
            continue
        b = read_run(log_path).best()
        if b is not None and (best is None or b["f"] < best[0]["f"]):
            best = (b, r)
    if best is None:
        where = f"run {run_id!r}" if run_id else f"study folder {str(out)!r}"
        raise InputError(f"{where} has no feasible design yet")
    b, r = best
    sec = Parametrisation.from_shape(r.shape).sections(b["x"][None, :])
    b = {**b, "coefficients": sec.coefficients[0], "te_angle_deg": math.degrees(sec.te_angle[0]),
         "log": str(run_paths(out, r.run_id)[0])}
    return b, r, study


#: a leading-edge radius below about 0.2 % of the chord is a needle nose that no real section
#: should have: sensitive to incidence, hard to build and to keep attached (common practice)
LE_RADIUS_FLOOR = 0.002


def sharp_nose_warnings(out: Path, floor: float = LE_RADIUS_FLOOR) -> list[str]:
    """One warning line per run whose best feasible design has a leading-edge radius below
    ``floor`` (chords), naming the study key that prevents it."""
    from .evaluate import evaluate

    out = Path(out)
    study = load_folder(out)
    lines = []
    for r in study.runs():
        log_path, _ = run_paths(out, r.run_id)
        try:
            b = read_run(log_path).best()
        except (OSError, KeyError, ValueError):
            continue  # no log, or one that a failed run left unreadable: reported elsewhere
        if b is None:
            continue
        sec = Parametrisation.from_shape(r.shape).sections(b["x"][None, :])
        radius = float(evaluate(sec, cl=r.point.cl, proxies=()).le_radius[0])
        if radius < floor:
            lines.append(f"warning: the best design of run {r.run_id} has a leading-edge radius "
                         f"of {radius:.2g} c, below the practical floor of about {floor:g} c; "
                         f"set constraints.min_le_radius in the study to keep the search away "
                         f"from needle noses")
    return lines


def _logged_runs(out: Path, study: Study):
    """(run, log) for every run of the study whose log holds at least one generation."""
    for r in study.runs():
        log_path, _ = run_paths(out, r.run_id)
        if not log_path.exists():
            continue
        log = read_run(log_path)
        if log.generations:
            yield r, log


def _has_feasible(out: Path, run) -> bool:
    try:
        return read_run(run_paths(out, run.run_id)[0]).best() is not None
    except (OSError, KeyError, ValueError):
        return False


def is_multi_objective(study: Study) -> bool:
    """Whether the study's runs search Pareto fronts (COMO-CMA-ES or ε-constraint sweeps)."""
    return any(r.search["method"] != "cmaes" for r in study.runs())


def _plot_front_runs(out: Path, study: Study, path: Path) -> None:
    """Hypervolume history and final front of every run of a multi-objective study."""
    from matplotlib.figure import Figure

    from .report import CAUTION

    fig = Figure(figsize=(11, 5.2))
    ax_h, ax_f = fig.subplots(1, 2)
    shown = 0
    names = None
    for r, log in _logged_runs(out, study):
        names = log.objective_names
        colour = f"C{shown % 10}"
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
        raise InputError(f"study folder {str(out)!r} has no run with a logged generation yet: "
                         "nothing to plot")
    ax_h.set_xlabel("evaluations")
    ax_h.set_ylabel("hypervolume of the feasible archive")
    ax_h.set_title(f"study {study.name}: hypervolume of {shown} runs", fontsize=10)
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
    fig.savefig(path, dpi=120)


def plot_runs(out: Path, path: Path, best_count: int = 4) -> None:
    """Convergence of every run, and the best sections with their Cp (for a multi-objective
    study, the hypervolume history and the final fronts)."""
    from matplotlib.figure import Figure

    from .evaluate import analyse, surface_distribution
    from .report import CAUTION

    out = Path(out)
    study: Study = load_folder(out)
    if is_multi_objective(study):
        _plot_front_runs(out, study, path)
        return
    if not any(_has_feasible(out, r) for r in study.runs()):
        raise InputError(f"no run of study {study.name!r} has a feasible design yet: nothing to "
                         f"plot (foilmap status {out} shows each run)")
    fig = Figure(figsize=(11, 8.5))
    ax_c = fig.add_subplot(2, 1, 1)
    finals = []
    colour = {r.run_id: f"C{i % 10}" for i, r in enumerate(study.runs())}  # one per run
    for r, log in _logged_runs(out, study):
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
    ax_c.set_title(f"study {study.name}: convergence of {len(finals)} runs", fontsize=10)
    if len(finals) <= 12:
        ax_c.legend(fontsize=7, frameon=False, ncol=2)
    ax_s = fig.add_subplot(2, 2, 3)
    ax_p = fig.add_subplot(2, 2, 4)
    for f, rid in sorted(finals)[:best_count]:
        b, r, _ = best_design(out, rid)
        sec = Parametrisation.from_shape(r.shape).sections(b["x"][None, :])
        an = analyse(sec, cl=r.point.cl, proxies=())
        zc, up, q = surface_distribution(an, 201)
        ax_s.plot(zc[0].real, zc[0].imag, lw=1.2, color=colour[rid], label=f"{rid}: {f:.4g}")
        ax_p.plot(zc[0].real, 1 - q[0] ** 2, lw=1.0, color=colour[rid])
    ax_s.set_aspect("equal")
    ax_s.set_xlabel("x / chord")
    ax_s.set_title("best sections", fontsize=10)
    # the legend in the free space under the (flat, equal-aspect) section axes, in figure
    # coordinates, so that it never covers the axis label
    fig.legend(*ax_s.get_legend_handles_labels(), fontsize=7, frameon=False, ncol=2,
               loc="lower left", bbox_to_anchor=(0.06, 0.06))
    ax_p.invert_yaxis()
    ax_p.set_xlabel("x / chord")
    ax_p.set_ylabel("Cp at the design Cl")
    ax_p.grid(True, color="0.9")
    fig.text(0.5, 0.01, CAUTION, ha="center", fontsize=7, color="0.3")
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    fig.savefig(path, dpi=120)
