"""Throughput of the section evaluation over the batch sizes searches use, and of a panel method
as the peer.

Two routes are timed at batch 1, 12, 32, 100 and 1000: the compiled search kernel (what a search
pays per candidate: the certified validity checks, the chord frame, the flow at the design Cl and
the ends of a Cl range, the certified peak suction at all three, the moment, the geometry and the
default recovery proxy) and the numpy reference pipeline (``evaluate``, one Cl).  Single core:
the BLAS thread pools are limited to one thread before numpy is imported.

Usage::

    python benchmarks/bench_evaluate.py [--json] [--points 256] [--coefficients 8]
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import json  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(Path(__file__).resolve().parent))
from panel import panel_solve  # noqa: E402

from foilmap import SectionSet, offset_circle_coefficients  # noqa: E402
from foilmap.section.evaluation import analyse, evaluate  # noqa: E402
from foilmap.section.geometry import coordinates  # noqa: E402


def population(batch: int, n: int, seed: int = 12345) -> SectionSet:
    """A CMA-ES-like cloud around a 12 % cambered section (invented benchmark data)."""
    rng = np.random.default_rng(seed)
    base = offset_circle_coefficients(-0.08 + 0.04j, n)
    scale = 0.01 / np.arange(1, n + 1)
    pert = scale * (rng.standard_normal((batch, n)) + 1j * rng.standard_normal((batch, n)))
    tau = np.radians(rng.uniform(6.0, 14.0, batch))
    return SectionSet(base[None, :] + pert, tau)


BATCHES = (1, 12, 32, 100, 1000)


def best_time(fn, repeats: int) -> float:
    fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--points", type=int, default=256)
    ap.add_argument("--coefficients", type=int, default=8)
    ap.add_argument("--panels", type=int, default=200)
    ap.add_argument("--repeats", type=int, default=7)
    args = ap.parse_args()

    from foilmap.section import _compiled

    _compiled.warm_up()
    cls = np.array([0.5, 0.3, 0.7])
    curve = []
    for batch in BATCHES:
        sec = population(batch, args.coefficients)
        c, tau = np.ascontiguousarray(sec.coefficients), np.ascontiguousarray(sec.te_angle)
        reps = max(3, min(args.repeats, 3000 // batch))
        t_k = best_time(lambda: _compiled.search_batch(c, tau, cls, args.points, 0.95, 0.02, 0.9,
                                                        np.array([0.9]), 1, 0.0,
                                                        _compiled.PEAK_TOLERANCE), reps)
        t_r = best_time(lambda: evaluate(sec, cl=0.5, points=args.points), max(3, reps // 3))
        curve.append({"batch": batch, "kernel_sections_per_s": round(batch / t_k, 1),
                      "reference_sections_per_s": round(batch / t_r, 1)})
    by_batch = {row["batch"]: row for row in curve}
    sec = population(1000, args.coefficients)
    ev = evaluate(sec, cl=0.5, points=args.points)
    rate = by_batch[1000]["kernel_sections_per_s"]

    # the peer: a Hess–Smith panel solution of the same sections' coordinates
    nb_panel = 50
    sub = sec[np.arange(nb_panel)]
    an = analyse(sub, cl=0.5, proxies=())
    zc = coordinates(sub, an.frame, an.split, args.panels + 1, "cosine")
    alpha = an.evaluation.alpha
    t_panel = best_time(lambda: panel_solve(zc.real, zc.imag, alpha), max(3, args.repeats // 2))
    panel_rate = nb_panel / t_panel
    ok = np.isfinite(alpha)
    cl_panel = panel_solve(zc.real[ok], zc.imag[ok], alpha[ok])["cl"]
    out = {
        "curve": curve,
        "kernel_batch32_over_batch1000": round(by_batch[32]["kernel_sections_per_s"] / rate, 3),
        "sections_per_s": round(rate, 1),
        "points": args.points,
        "coefficients": args.coefficients,
        "valid_fraction": float(np.mean(ev.status == 0)),
        "panel_sections_per_s": round(panel_rate, 2),
        "panels": args.panels,
        "speed_ratio_vs_panel": round(rate / panel_rate, 1),  # kernel, three Cl each
        "panel_cl_max_abs_difference": float(np.max(np.abs(cl_panel - 0.5))),
        "threads": os.environ.get("OPENBLAS_NUM_THREADS"),
    }
    if args.json:
        print(json.dumps(out))
    else:
        for k, v in out.items():
            print(f"{k:32s} {v}")


if __name__ == "__main__":
    main()
