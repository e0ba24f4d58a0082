"""Search quality on the demo problem: evaluations to come within 1e-3 of the best feasible
objective of a long reference search, median over seeds.

Usage::

    python benchmarks/bench_quality.py [--json] [--seeds 5] [--budget 8000] [--reference 30000]

The reference is the best of three long runs (seeds 1001–1003) with the same settings.  A run
that never comes within the tolerance counts as its whole budget (and is reported).
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from importlib.resources import files  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

from foilmap.run.local import drive_study  # noqa: E402
from foilmap.store.runlog import read_run  # noqa: E402
from foilmap.store.studyfile import load_study_text  # noqa: E402


def study_text(seeds) -> str:
    text = files("foilmap").joinpath("data/demo.toml").read_text()
    return text.replace("seeds = [1, 2, 3, 4]", f"seeds = {list(seeds)}")


def run(seeds, budget, workers):
    study = load_study_text(study_text(seeds))
    with tempfile.TemporaryDirectory() as tmp:
        drive_study(study, Path(tmp), workers=workers, budget=budget)
        logs = [read_run(Path(tmp) / "runs" / f"cruise.s{s}.h5") for s in seeds]
        return [(log.gen["evaluations"].copy(), log.gen["best_f"].copy()) for log in logs]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--seeds", type=int, default=5)
    ap.add_argument("--budget", type=int, default=8000)
    ap.add_argument("--reference", type=int, default=30000)
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    ap.add_argument("--tolerance", type=float, default=1e-3)
    args = ap.parse_args()
    t0 = time.time()
    ref_runs = run([1001, 1002, 1003], args.reference, args.workers)
    ref = min(float(np.nanmin(b)) for _, b in ref_runs)
    results = run(range(1, args.seeds + 1), args.budget, args.workers)
    needed, reached = [], []
    for evals, best in results:
        hit = np.flatnonzero(best <= ref + args.tolerance)
        reached.append(bool(hit.size))
        needed.append(int(evals[hit[0]]) if hit.size else args.budget)
    out = {
        "problem": "demo",
        "reference_objective": ref,
        "tolerance": args.tolerance,
        "budget": args.budget,
        "evaluations_to_target": needed,
        "median_evaluations_to_target": float(np.median(needed)),
        "reached": reached,
        "final_best": [float(np.nanmin(b)) for _, b in results],
        "seconds": round(time.time() - t0, 1),
    }
    print(json.dumps(out) if args.json else json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
