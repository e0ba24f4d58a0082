"""What a rejected candidate costs beside a valid one, in the compiled search kernel.

A study started far from a good shape meets many invalid candidates, and one in its endgame
meets many on the floor: each kind should cost about what a valid candidate does.  Candidates
are drawn around two shapes (invented test data): a thin cambered section, some of whose
neighbours cross, and the best design of a peak-suction search that sits on the local-thickness
floor.  Each candidate is timed alone (batch of one, best of several repeats), with the default
floor of 0.005 c and without it, and the medians per status are printed.

Usage::

    python benchmarks/bench_reject.py [--json] [--n CANDIDATES]
"""

from __future__ import annotations

import argparse
import json
import os
import time

import numpy as np

from foilmap.section import _compiled as C
from foilmap.section.status import Status

#: the best design of a free-tail search with the floor on (five coefficients, edge 6.3°)
ON_FLOOR = (np.array([-0.04642932261734864 + 0.05362564388942115j,
                      -0.009893183866954028 + 0.01617260370735679j,
                      -0.011266603178053485 + 0.032568613345477664j,
                      0.020273948038362334 + 0.013914222308468303j,
                      0.0047078265973730235 - 0.005137666521612892j]), 6.297870083460637)
THIN = (np.array([-0.04 + 0.04j, 0.0, 0.0, 0.0, 0.0]), 8.0)


def family(base, size: float, n: int, seed: int):
    rng = np.random.default_rng(seed)
    a, tau = base
    m = a.size
    c = a + size / np.arange(1, m + 1) * (rng.standard_normal((n, m))
                                          + 1j * rng.standard_normal((n, m)))
    return c, np.full(n, np.radians(tau))


def time_one(c, tau, floor: float, repeats: int = 5) -> tuple[int, float]:
    args = (c[None, :], np.array([tau]), np.array([0.6]), 256, 0.95, 0.02, 0.9, np.zeros(0), 0,
            0.0, C.PEAK_TOLERANCE, False, floor)
    status = int(C.search_batch(*args)[0][0])
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        C.search_batch(*args)
        best = min(best, time.perf_counter() - t0)
    return status, best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--n", type=int, default=200, help="candidates per family")
    args = ap.parse_args()
    C.warm_up()
    out = {"cores": os.cpu_count(), "floors": {}}
    for floor in (0.005, 0.0):
        times: dict[str, list[float]] = {}
        for base, size, seed in ((THIN, 0.02, 1), (ON_FLOOR, 6e-4, 2)):
            c, tau = family(base, size, args.n, seed)
            for i in range(args.n):
                st, t = time_one(c[i], tau[i], floor)
                times.setdefault(Status(st).label, []).append(t)
        med = {k: round(float(np.median(v)) * 1e6, 1) for k, v in times.items()}
        worst = {k: round(float(np.max(v)) * 1e6, 1) for k, v in times.items()}
        ok = med.get("ok", np.nan)
        out["floors"][str(floor)] = {
            "count": {k: len(v) for k, v in times.items()}, "median_us": med, "max_us": worst,
            "median_over_valid": {k: round(v / ok, 2) for k, v in med.items()}}
    if args.json:
        print(json.dumps(out))
    else:
        for floor, r in out["floors"].items():
            print(f"floor {floor} c")
            for k in sorted(r["count"]):
                print(f"  {k:20s} {r['count'][k]:5d} candidates  median {r['median_us'][k]:9.1f} us"
                      f"  max {r['max_us'][k]:9.1f} us  ({r['median_over_valid'][k]} x valid)")


if __name__ == "__main__":
    main()
