"""Search and logging overhead: a whole run (CMA-ES, constraint handling, HDF5 log, checkpoint
after every generation) against the bare evaluation kernel at the same population.

Usage::

    python benchmarks/bench_search.py [--json] [--popsize 32 64] [--generations 40]

Prints, per population size, evaluations per second of the run and of the kernel and the
overhead fraction (run time / kernel time − 1), split into the search's share (CMA-ES ask/tell
with its augmented-Lagrangian constraint handling, no log) and the logging share (HDF5 rows,
flushes, checkpoints).  Goal: under 0.30 at popsize ≥ 32.
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

from foilmap.design.problem import Problem  # noqa: E402
from foilmap.design.search import is_finished, new_search, step  # noqa: E402
from foilmap.run.single import execute_run
from foilmap.store.folder import StudyFolder  # noqa: E402
from foilmap.store.runlog import read_run  # noqa: E402
from foilmap.store.studyfile import load_study_text  # noqa: E402


def measure(popsize: int, generations: int, repeats: int = 3) -> dict:
    """Best of ``repeats`` for each of the three timings (the host's noise only adds time)."""
    import cma  # noqa: F401 - imported once per process (about a second); not a per-run cost

    text = files("foilmap").joinpath("data/demo.toml").read_text()
    text = text.replace("restarts = 1", f"restarts = 0\npopsize = {popsize}")
    study = load_study_text(text).with_budget(popsize * generations)
    t_run = t_search = t_kernel = float("inf")
    for _ in range(repeats):
        with tempfile.TemporaryDirectory() as tmp:
            out = Path(tmp)
            _, st = StudyFolder.prepare(study, out, None)
            run = st.runs()[0]
            t0 = time.perf_counter()
            execute_run(st, run, out)
            t_run = min(t_run, time.perf_counter() - t0)
            x = read_run(out / "runs" / f"{run.run_id}.h5").evals["x"]
        problem = Problem.from_run(st, run)
        # the search alone (CMA-ES ask/tell with its constraint handling), no log, no checkpoint
        state = new_search(problem, run.search, run.seed)
        t0 = time.perf_counter()
        while not is_finished(state):
            step(state, problem, run.search)
        t_search = min(t_search, time.perf_counter() - t0)
        problem.evaluate(x[:popsize])  # warm-up
        t0 = time.perf_counter()
        for g in range(0, x.shape[0], popsize):
            problem.evaluate(x[g : g + popsize])
        t_kernel = min(t_kernel, time.perf_counter() - t0)
    n = x.shape[0]
    return {"popsize": popsize, "evaluations": int(n), "run_evals_per_s": round(n / t_run, 1),
            "kernel_evals_per_s": round(n / t_kernel, 1),
            "overhead": round(t_run / t_kernel - 1.0, 3),
            "search_overhead": round(t_search / t_kernel - 1.0, 3),
            "logging_overhead": round((t_run - t_search) / t_kernel, 3)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--popsize", type=int, nargs="+", default=[32, 64])
    ap.add_argument("--generations", type=int, default=40)
    args = ap.parse_args()
    rows = [measure(p, args.generations) for p in args.popsize]
    if args.json:
        print(json.dumps({"runs": rows}))
    else:
        for r in rows:
            print(r)


if __name__ == "__main__":
    main()
