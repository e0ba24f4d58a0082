"""End-to-end study throughput: evaluations per second of ``foilmap run --workers 1``, wall time,
for every example study, a held-back study and a free-tail study (a first study as a new user
writes it: no station thickness, so a peak-suction search thins the tail until the
local-thickness floor holds it).

This is the regime users run: whole studies at their own population sizes (a candidate with a
Cl range counts as one evaluation), process start, the compiled kernel loaded from its cache,
the search, the HDF5 logs and checkpoints.  The compiled kernel is warmed first (its one-time
compilation after an install is reported separately as ``compile_s``).

With ``--budget N`` each study runs one long run (its first seed, point and variant) of N
evaluations, and the figures are given per phase from the run log's own clock: the rate in the
first tenth and in the last quarter of the run's evaluations, their ratio, and the share of
each status (``uncertified`` is a certificate that gave up: a valid section may be among them).

Usage::

    python benchmarks/bench_study.py [--json] [--studies NAME ...] [--budget EVALS]
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ("hydrofoil-front-wing", "turbine-midspan", "front-wing-coefficients",
            "tidal-blade-family")

#: a held-back study (invented scenario, not shipped): a symmetric-looking rudder-like section
#: held over Cl -0.3..0.3 with a leading-edge radius floor and the Stratford margin at 2e6
HELD_BACK = """
# held-back benchmark study (invented scenario)
[study]
name = "held-back"
seeds = [11, 12]
[shape]
coefficients = 6
start = [[-0.10, 0.0]]
te_angle_deg = [6.0, 14.0]
[[point]]
name = "rudder"
cl = 0.0
cl_range = [-0.3, 0.3]
reynolds = 2.0e6
[objectives]
peak_suction = 1.0
stratford_margin = 0.2
[constraints]
thickness = [0.14, 1.0]
min_le_radius = 0.01
cm = [-0.02, 0.02]
[search]
max_evaluations = 5000
restarts = 1
"""


#: a first study as a new user writes it (invented scenario): five coefficients, one Cl, peak
#: suction only, a thickness and a leading-edge radius floor, nothing on the tail
FREE_TAIL = """
# free-tail benchmark study (invented scenario)
[study]
name = "free-tail"
seeds = [1]
[shape]
coefficients = 5
start = [[-0.09, 0.03]]
te_angle_deg = [6.0, 14.0]
[[point]]
name = "design"
cl = 0.6
[objectives]
peak_suction = 1.0
[constraints]
thickness = [0.10, 1.0]
min_le_radius = 0.005
[search]
max_evaluations = 20000
restarts = 0
"""
OWN = {"held-back": HELD_BACK, "free-tail": FREE_TAIL}


def one_run(text: str) -> str:
    """The study reduced to one run: its first seed, and its first variant only."""
    text = re.sub(r"(?m)^seeds\s*=\s*\[\s*(-?\d+)[^\]]*\]", r"seeds = [\1]", text)
    parts = text.split("[[variant]]")
    return parts[0] if len(parts) <= 2 else "[[variant]]".join(parts[:2])


def phases(folder: Path) -> dict:
    """Rates and status shares of the first tenth and the last quarter of a run, from its log:
    the generation table's evaluations and elapsed seconds."""
    from foilmap.section.status import Status
    from foilmap.store.runlog import read_run

    log = read_run(sorted((folder / "runs").glob("*.h5"))[0])
    ev = np.asarray(log.gen["evaluations"], dtype=float)
    t = np.asarray(log.gen["time"], dtype=float)
    st = np.asarray(log.evals["status"]).astype(int)
    n = ev[-1]

    def window(lo: float, hi: float) -> dict:
        i0 = int(np.searchsorted(ev, lo))  # the first generation past lo
        i1 = int(np.searchsorted(ev, hi))
        e0, t0 = (0.0, 0.0) if i0 == 0 else (ev[i0 - 1], t[i0 - 1])
        rate = (ev[i1] - e0) / max(t[i1] - t0, 1e-9)
        s = st[int(e0):int(ev[i1])]
        share = {Status(c).label: round(float(np.mean(s == c)), 4)
                 for c in np.unique(s) if c != Status.OK}
        return {"evals_per_s": round(float(rate), 1), "rejected_share": share}

    first = window(0.0, 0.1 * n)
    last = window(0.75 * n, n)
    return {"first_tenth": first, "last_quarter": last,
            "last_over_first": round(last["evals_per_s"] / first["evals_per_s"], 3),
            "uncertified_share": round(float(np.mean(st == Status.UNCERTIFIED)), 5),
            "below_floor_share": round(float(np.mean(st == Status.BELOW_FLOOR)), 5)}


def evaluations(folder: Path) -> int:
    index = json.loads((folder / "index.json").read_text())
    return sum(int(r.get("evaluations") or 0) for r in index["runs"])


def popsize(folder: Path) -> int:
    from foilmap.store.runlog import read_run

    logs = sorted((folder / "runs").glob("*.h5"))
    return int(read_run(logs[0]).gen["popsize"][0]) if logs else 0


def family_figures(folder: Path) -> dict:
    """A family study's joint search: its evaluations (each evaluates every station and every
    checked in-between section), its own seconds, and when it found its final best (the
    evaluation and the seconds since the study began, station runs included)."""
    from foilmap.store.folder import StudyFolder
    from foilmap.store.runlog import read_run

    f = StudyFolder(folder)
    index = {r["run"]: r for r in json.loads((folder / "index.json").read_text())["runs"]}
    out = {}
    for r in f.study.runs():
        log = read_run(f.log_path(r.run_id))
        if not r.family:
            continue
        best = log.best()
        g = int(np.searchsorted(log.gen["evaluations"], best["index"] + 1)) if best else -1
        stations = [s for s in f.study.runs() if not s.family]
        before = sum(float(index[s.run_id].get("elapsed_s") or 0.0) for s in stations)
        out[r.run_id] = {
            "evaluations": log.evaluations, "seconds": round(float(log.gen["time"][-1]), 1),
            "sections_per_evaluation": len(f.study.stations) + (len(f.study.stations) - 1)
            * f.study.family["checks"],
            "best_at_evaluation": None if best is None else best["index"] + 1,
            "best_at_s": None if best is None else round(float(log.gen["time"][g]), 1),
            "station_runs_s_summed": round(before, 1)}
    return out


def run_one(study: Path, budget: int | None, tmp: Path, workers: int = 1) -> dict:
    out = tmp / study.stem
    cmd = [sys.executable, "-m", "foilmap.cli", "run", str(study), "--out", str(out),
           "--workers", str(workers)]
    if budget:
        cmd += ["--budget", str(budget)]
    t0 = time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if r.returncode != 0:
        raise SystemExit(f"{study.name}: foilmap run failed: {r.stderr.strip()[-300:]}")
    n = evaluations(out)
    row = {"study": study.stem, "evaluations": n, "wall_s": round(wall, 2),
           "evals_per_s": round(n / wall, 1), "popsize": popsize(out)}
    if "[[station]]" in study.read_text():
        row["family"] = family_figures(out)
    elif budget:
        row.update(phases(out))
    return row


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--studies", nargs="+", default=[*EXAMPLES, *OWN])
    ap.add_argument("--budget", type=int, default=None, help="one long run of this many "
                    "evaluations per study, with per-phase figures (default: every run of each "
                    "study at its own budget)")
    ap.add_argument("--workers", type=int, default=1, help="worker processes per study "
                    "(default 1: the rate of one core)")
    args = ap.parse_args()
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", "from foilmap.section import _compiled; _compiled.warm_up()"],
                   check=True)
    compile_s = time.perf_counter() - t0
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for name in args.studies:
            text = OWN[name] if name in OWN else (ROOT / "studies" / f"{name}.toml").read_text()
            study = tmp / f"{name}.toml"
            study.write_text(one_run(text) if args.budget else text)
            rows.append(run_one(study, args.budget, tmp, args.workers))
    out = {"studies": rows, "compile_or_load_s": round(compile_s, 2),
           "min_evals_per_s": min(r["evals_per_s"] for r in rows),
           "cores": os.cpu_count()}
    if args.json:
        print(json.dumps(out))
    else:
        for r in rows:
            print(f"{r['study']:28s} {r['evaluations']:7d} evals {r['wall_s']:7.2f} s "
                  f"{r['evals_per_s']:9.1f} evals/s  popsize {r['popsize']}")
            for rid, fam in r.get("family", {}).items():
                print(f"{'':28s} {rid}: {fam['evaluations']} evaluations of "
                      f"{fam['sections_per_evaluation']} sections in {fam['seconds']} s, best "
                      f"at evaluation {fam['best_at_evaluation']} ({fam['best_at_s']} s)")
            if "first_tenth" in r:
                print(f"{'':28s} first tenth {r['first_tenth']['evals_per_s']:9.1f}/s, last "
                      f"quarter {r['last_quarter']['evals_per_s']:9.1f}/s (ratio "
                      f"{r['last_over_first']}), uncertified {r['uncertified_share']:.3%}")
        print(f"kernel compile or cache load: {out['compile_or_load_s']} s")


if __name__ == "__main__":
    main()
