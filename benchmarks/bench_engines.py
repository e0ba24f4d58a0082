"""Runs per minute of the local engine and of Dask (LocalCluster) on 1 and 2 workers.

Usage::

    python benchmarks/bench_engines.py [--json] [--runs 40] [--evals 120]

Each configuration runs the same study of short runs of the demo problem into a fresh folder; the Dask figure
includes starting and stopping the LocalCluster, as a user's command does.
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from importlib.resources import files
from pathlib import Path

from foilmap.run.local import drive_study
from foilmap.store.studyfile import load_study_text


def bench_study(runs: int, evals: int):
    """The demo problem with ``runs`` seeds of ``evals`` evaluations each (invented data)."""
    text = files("foilmap").joinpath("data/demo.toml").read_text()
    text = text.replace("seeds = [1, 2, 3, 4]", f"seeds = {list(range(1, runs + 1))}")
    return load_study_text(text).with_budget(evals)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--runs", type=int, default=40)
    ap.add_argument("--evals", type=int, default=120)
    args = ap.parse_args()
    st = bench_study(args.runs, args.evals)
    rows = []
    for engine in ("local", "dask"):
        for workers in (1, 2):
            with tempfile.TemporaryDirectory() as tmp:
                t0 = time.perf_counter()
                drive_study(st, Path(tmp), workers=workers, engine=engine)
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
