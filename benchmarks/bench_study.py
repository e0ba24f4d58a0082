"""End-to-end study throughput: evaluations per second of ``foilmap run --workers 1``, wall time,
for every example study and a held-back study.

This is the regime users run: whole studies at their own population sizes (a candidate with a
Cl range counts as one evaluation), process start, the compiled kernel loaded from its cache,
the search, the HDF5 logs and checkpoints.  The compiled kernel is warmed first (its one-time
compilation after an install is reported separately as ``compile_s``).

Usage::

    python benchmarks/bench_study.py [--json] [--studies NAME ...] [--budget EVALS]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
EXAMPLES = ("hydrofoil-front-wing", "turbine-midspan", "front-wing-coefficients")

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


def evaluations(folder: Path) -> int:
    index = json.loads((folder / "index.json").read_text())
    return sum(int(r.get("evaluations") or 0) for r in index["runs"])


def popsize(folder: Path) -> int:
    from foilmap.store.runlog import read_run

    logs = sorted((folder / "runs").glob("*.h5"))
    return int(read_run(logs[0]).gen["popsize"][0]) if logs else 0


def run_one(study: Path, budget: int | None, tmp: Path) -> dict:
    out = tmp / study.stem
    cmd = [sys.executable, "-m", "foilmap.cli", "run", str(study), "--out", str(out),
           "--workers", "1"]
    if budget:
        cmd += ["--budget", str(budget)]
    t0 = time.perf_counter()
    r = subprocess.run(cmd, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if r.returncode != 0:
        raise SystemExit(f"{study.name}: foilmap run failed: {r.stderr.strip()[-300:]}")
    n = evaluations(out)
    return {"study": study.stem, "evaluations": n, "wall_s": round(wall, 2),
            "evals_per_s": round(n / wall, 1), "popsize": popsize(out)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--studies", nargs="+", default=[*EXAMPLES, "held-back"])
    ap.add_argument("--budget", type=int, default=None, help="evaluations per run (default: "
                    "each study's own)")
    args = ap.parse_args()
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-c", "from foilmap.section import _compiled; _compiled.warm_up()"],
                   check=True)
    compile_s = time.perf_counter() - t0
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for name in args.studies:
            if name == "held-back":
                study = tmp / "held-back.toml"
                study.write_text(HELD_BACK)
            else:
                study = ROOT / "studies" / f"{name}.toml"
            rows.append(run_one(study, args.budget, tmp))
    out = {"studies": rows, "compile_or_load_s": round(compile_s, 2),
           "min_evals_per_s": min(r["evals_per_s"] for r in rows),
           "cores": os.cpu_count()}
    if args.json:
        print(json.dumps(out))
    else:
        for r in rows:
            print(f"{r['study']:28s} {r['evaluations']:7d} evals {r['wall_s']:7.2f} s "
                  f"{r['evals_per_s']:9.1f} evals/s  popsize {r['popsize']}")
        print(f"kernel compile or cache load: {out['compile_or_load_s']} s")


if __name__ == "__main__":
    main()
