"""Comparing Pareto fronts across runs and studies, and picking designs from them.

A *front* is the non-dominated feasible archive a run log holds (the runs of an ε-constraint
sweep that share point, variant and seed are merged into one).  Runs group by study, point and
variant; the runs of a group differ by seed.  Hypervolumes use one common reference point for
every run, and points beyond it are refused rather than silently scored zero.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from foilmap.design.fronts import (
    FrontError,
    epsilon_additive,
    hypervolume,
    knee_index,
    median_attainment,
    merge_archive,
)
from foilmap.errors import InputError
from foilmap.store.folder import RunFront, StudyFolder, collect_fronts

__all__ = ["RunFront", "collect_fronts", "compare_fronts", "format_fronts", "fronts_csv",
           "plot_fronts", "fronts_figure", "pick_design"]


def _common(fronts: list[RunFront], reference) -> tuple[list[str], np.ndarray]:
    names = fronts[0].objective_names
    for f in fronts[1:]:
        if f.objective_names != names:
            raise InputError(f"fronts have different objectives: {fronts[0].run} has "
                             f"{', '.join(names)}, {f.run} has {', '.join(f.objective_names)}; "
                             "compare runs of the same objectives")
    if reference is None:
        refs = {f.reference_point for f in fronts}
        if None in refs:
            missing = next(f for f in fronts if f.reference_point is None)
            raise InputError(f"run {missing.run} has no fronts.reference_point in its study; "
                             "give one with --reference")
        if len(refs) > 1:
            raise InputError("runs use different reference points ("
                             + "; ".join(str(list(r)) for r in sorted(refs))
                             + "); give one common point with --reference")
        reference = refs.pop()
    ref = np.asarray(reference, dtype=float)
    if ref.size != len(names):
        raise InputError(f"reference point {ref.tolist()} has {ref.size} values; the fronts have "
                         f"{len(names)} objectives ({', '.join(names)})")
    return names, ref


def compare_fronts(fronts: list[RunFront], reference=None) -> dict:
    """Hypervolumes, group statistics and pairwise comparisons, as a JSON-ready dict."""
    from scipy.stats import mannwhitneyu

    names, ref = _common(fronts, reference)
    runs = []
    groups: dict[str, list[RunFront]] = {}
    for f in fronts:
        try:
            hv = hypervolume(f.objectives, ref)
        except FrontError as exc:
            allp = np.concatenate([g.objectives for g in fronts if g.objectives.size])
            hi = allp.max(axis=0)
            suggest = ",".join(f"{v:.3g}" for v in np.where(hi > 0, 1.1 * hi, 0.9 * hi + 0.1))
            raise InputError(f"run {f.run}: {exc} (for example a reference point {suggest})") from None
        runs.append({
            "run": f.run, "folder": f.folder, "group": f.group, "reference_point": ref.tolist(),
            "hypervolume": hv,
            "front": f.objectives.tolist(),
            "designs": [{"id": i, "objectives": o.tolist()} for i, o in zip(f.ids, f.objectives)],
        })
        groups.setdefault(f.group, []).append(f)
    hv_of = {r["run"]: r["hypervolume"] for r in runs}
    out_groups = []
    merged = {}
    for g, fs in groups.items():
        hvs = np.array([hv_of[f.run] for f in fs])
        allp = np.concatenate([f.objectives for f in fs]) if fs else np.zeros((0, len(names)))
        ids = sum((f.ids for f in fs), [])
        keep, pts = merge_archive(np.zeros(0, dtype=np.int64), np.zeros((0, len(names))),
                                  np.arange(allp.shape[0]), allp)
        merged[g] = pts
        entry = {
            "group": g, "runs": [f.run for f in fs], "count": len(fs),
            "hypervolume": {"mean": float(hvs.mean()), "median": float(np.median(hvs)),
                            "std": float(hvs.std(ddof=1)) if len(hvs) > 1 else 0.0,
                            "min": float(hvs.min()), "max": float(hvs.max())},
            "merged_front": [{"id": ids[i], "objectives": allp[i].tolist()} for i in keep],
        }
        nonempty = [f.objectives for f in fs if f.objectives.shape[0]]
        if len(names) == 2 and nonempty:
            entry["median_attainment"] = median_attainment(nonempty).tolist()
        out_groups.append(entry)
    comps = []
    gl = list(groups)
    for i in range(len(gl)):
        for j in range(i + 1, len(gl)):
            a, b = gl[i], gl[j]
            ha = [hv_of[f.run] for f in groups[a]]
            hb = [hv_of[f.run] for f in groups[b]]
            test = mannwhitneyu(ha, hb, alternative="two-sided")
            comp = {"a": a, "b": b, "test": "Mann-Whitney U (two-sided) on hypervolumes",
                    "u": float(test.statistic), "p_value": float(test.pvalue)}
            if merged[a].shape[0] and merged[b].shape[0]:
                comp["epsilon_additive_a_to_b"] = epsilon_additive(merged[a], merged[b])
                comp["epsilon_additive_b_to_a"] = epsilon_additive(merged[b], merged[a])
            comps.append(comp)
    return {"objectives": names, "reference_point": ref.tolist(), "runs": runs,
            "groups": out_groups, "comparisons": comps}


def format_fronts(res: dict) -> str:
    names = res["objectives"]
    lines = [f"fronts of {len(res['runs'])} runs in {len(res['groups'])} groups; objectives "
             f"{', '.join(names)} (minimised); reference point {res['reference_point']}", ""]
    head = f"{'group':<36} {'runs':>4} {'HV mean':>10} {'median':>10} {'std':>9} {'min':>10} {'max':>10}"
    lines += [head, "-" * len(head)]
    for g in res["groups"]:
        h = g["hypervolume"]
        lines.append(f"{g['group']:<36} {g['count']:>4} {h['mean']:>10.5g} {h['median']:>10.5g} "
                     f"{h['std']:>9.3g} {h['min']:>10.5g} {h['max']:>10.5g}")
    if res["comparisons"]:
        lines.append("")
        for c in res["comparisons"]:
            eps = ""
            if "epsilon_additive_a_to_b" in c:
                eps = (f"; additive epsilon {c['epsilon_additive_a_to_b']:.4g} (a to b), "
                       f"{c['epsilon_additive_b_to_a']:.4g} (b to a)")
            lines.append(f"{c['a']}  vs  {c['b']}: Mann-Whitney U = {c['u']:g}, "
                         f"p = {c['p_value']:.3g}{eps}")
    for g in res["groups"]:
        lines.append("")
        lines.append(f"merged front of {g['group']} ({len(g['merged_front'])} designs; pick by id):")
        for d in g["merged_front"]:
            vals = "  ".join(f"{n} {v:.6g}" for n, v in zip(names, d["objectives"]))
            lines.append(f"  {d['id']:<28} {vals}")
    return "\n".join(lines)


def fronts_csv(fronts: list[RunFront], res: dict) -> str:
    names = res["objectives"]
    width = max((f.variables.shape[1] for f in fronts if f.variables.size), default=0)
    head = ["group", "run", "design"] + names + [f"x{i}" for i in range(width)]
    rows = [",".join(head)]
    for f in fronts:
        for i, o, x in zip(f.ids, f.objectives, f.variables):
            xs = [repr(float(v)) for v in x] + [""] * (width - len(x))
            rows.append(",".join([f.group, f.run, i] + [repr(float(v)) for v in o] + xs))
    return "\n".join(rows) + "\n"


def plot_fronts(fronts: list[RunFront], res: dict, path) -> None:
    """Write :func:`fronts_figure` to ``path`` (PNG)."""
    fronts_figure(fronts, res).savefig(path, dpi=110)


def fronts_figure(fronts: list[RunFront], res: dict):
    """A Figure: fronts overlaid by group, median attainment surfaces, hypervolume against
    evaluations."""
    import matplotlib
    from matplotlib.figure import Figure

    from foilmap.report.text import CAUTION

    names = res["objectives"]
    groups = [g["group"] for g in res["groups"]]
    colours = matplotlib.rcParams["axes.prop_cycle"].by_key()["color"]
    col = {g: colours[i % len(colours)] for i, g in enumerate(groups)}
    fig = Figure(figsize=(15, 4.8))
    axes = fig.subplots(1, 3)
    a0, a1, a2 = axes
    for f in fronts:
        if f.objectives.shape[0]:
            o = f.objectives
            a0.plot(o[:, 0], o[:, 1], "o", ms=3, alpha=0.7, color=col[f.group])
    for g in groups:
        a0.plot([], [], "o", color=col[g], label=g)
    a0.set_xlabel(names[0])
    a0.set_ylabel(names[1])
    a0.set_title("fronts of every run, by group" + (" (first two objectives)"
                                                     if len(names) > 2 else ""), fontsize=10)
    a0.legend(fontsize=7, frameon=False)
    for g in res["groups"]:
        med = g.get("median_attainment")
        if med:
            m = np.array(sorted(med))
            a1.step(m[:, 0], m[:, 1], where="post", color=col[g["group"]], label=g["group"])
    a1.set_xlabel(names[0])
    a1.set_ylabel(names[1])
    a1.set_title("median attainment surface of each group", fontsize=10)
    if len(names) == 2:
        a1.legend(fontsize=7, frameon=False)
    for f in fronts:
        if f.evaluations.size and np.isfinite(f.hv_history).any():
            a2.plot(f.evaluations, f.hv_history, lw=1.0, color=col[f.group])
    a2.set_xlabel("evaluations")
    a2.set_ylabel("hypervolume (run's own reference point)")
    a2.set_title("hypervolume history", fontsize=10)
    for ax in axes:
        ax.grid(True, color="0.9")
    fig.text(0.5, 0.01, CAUTION, ha="center", fontsize=7, color="0.3")
    fig.tight_layout(rect=(0, 0.04, 1, 1))
    return fig


def pick_design(folder: Path, *, nearest: dict | None = None, knee: bool = False,
                index: str | None = None, run: str | None = None):
    """Choose one design from a study folder's merged front: by position or id (``index``),
    the knee, or the nearest to given objective values.  Returns a
    :class:`~foilmap.design.results.FolderDesign`."""
    sf = StudyFolder(folder)
    ids, names, pts = sf.merged_front(run)
    if not ids:
        raise InputError(f"{str(folder)!r} has no feasible design on any front yet")
    if index is not None:
        if "#" in index:
            if index not in {i for f in sf.fronts() for i in f.ids}:
                raise InputError(f"no design {index!r} on the fronts of {str(folder)!r}")
            return sf.design_by_id(index)
        try:
            k = int(index)
        except ValueError:
            raise InputError(f"design index {index!r} is neither a position nor an id RUN#EVAL") \
                from None
        if not 0 <= k < len(ids):
            raise InputError(f"design index {k} is out of range (the merged front has "
                             f"{len(ids)} designs, 0 to {len(ids) - 1})")
        j = k
    elif knee:
        j = knee_index(pts)
    else:
        missing = [n for n in names if n not in nearest]
        extra = [n for n in nearest if n not in names]
        if missing or extra:
            raise InputError(f"the nearest design needs a value for each objective ({', '.join(names)}); "
                             + (f"missing {', '.join(missing)}" if missing else
                                f"unknown {', '.join(extra)}"))
        target = np.array([nearest[n] for n in names])
        span = np.where(np.ptp(pts, axis=0) > 0, np.ptp(pts, axis=0), 1.0)
        j = int(np.argmin(np.hypot.reduce((pts - target) / span, axis=1)))
    return sf.design_by_id(ids[j])
