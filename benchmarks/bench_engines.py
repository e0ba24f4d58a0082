"""Runs per minute of the local engine and of Dask (LocalCluster) on 1 and 2 workers.

Usage::

    python benchmarks/bench_engines.py [--json] [--runs 40] [--evals 120]

Each configuration runs the same study of short runs into a fresh folder; the Dask figure
includes starting and stopping the LocalCluster, as a user's command does.
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

from foilmap.engine import run_study
from foilmap.study import parse_study

STUDY = """
[study]
name = "bench"
seeds = [{seeds}]
[shape]
coefficients = 4
[[point]]
name = "p"
cl = 0.5
[objectives]
peak_suction = 1.0
[constraints]
min_thickness = 0.10
[search]
max_evaluations = {evals}
"""


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--runs", type=int, default=40)
    ap.add_argument("--evals", type=int, default=120)
    args = ap.parse_args()
    st = parse_study(STUDY.format(seeds=", ".join(map(str, range(1, args.runs + 1))),
                                  evals=args.evals))
    rows = []
    for engine in ("local", "dask"):
        for workers in (1, 2):
            with tempfile.TemporaryDirectory() as tmp:
                t0 = time.perf_counter()
                run_study(st, Path(tmp), workers=workers, engine=engine)
                dt = time.perf_counter() - t0
            rows.append({"engine": engine, "workers": workers, "runs": args.runs,
                         "seconds": round(dt, 2), "runs_per_min": round(args.runs / dt * 60, 1)})
    by = {(r["engine"], r["workers"]): r["seconds"] for r in rows}
    out = {"rows": rows,
           "dask_overhead_s_per_run_2_workers": round((by[("dask", 2)] - by[("local", 2)])
                                                      / args.runs * 2, 3)}
    print(json.dumps(out) if args.json else json.dumps(out, indent=1))


if __name__ == "__main__":
    main()
