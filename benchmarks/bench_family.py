"""Family studies checked end to end: the shipped example and a held-out family of our own.

Each study runs whole (``foilmap run --workers W``), then its best family is read back from the
family file ``foilmap best`` writes, and checked by the numpy reference route, apart from the
search's compiled kernel:

- every station meets its design Cl exactly (closed-form angle) and its own constraints;
- at ``--checks`` positions inside each interval (8 or more) every section is valid, meets the
  constraints interpolated from its two stations, and thickness and camber are fair;
- each station's objective in the family is within ``--price`` (5 %) of its independent
  station run, which the study ran with the same per-station budget.

Prints one JSON object (``--json``) or a table; the exit code is 1 when a check fails.

Usage::

    python benchmarks/bench_family.py [--json] [--workers 2] [--checks 8] [--price 0.05]
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]

#: a held-out family (invented scenario, not shipped): a small propeller blade with three
#: stations, the Mach number rising toward the tip, a bound on the moment and a critical Mach
#: number held at every station
HELD_OUT = """
# held-out family benchmark (invented scenario)
[study]
name = "held-out-propeller"
seeds = [5]
[shape]
coefficients = 5
start = [[-0.09, 0.03]]
te_angle_deg = [6.0, 14.0]
[[station]]
name = "hub"
position = 0.2
cl = 0.55
mach = 0.25
constraints = { thickness = [0.16, 0.3] }
[[station]]
name = "middle"
position = 0.6
cl = 0.45
mach = 0.4
weight = 2.0
constraints = { thickness = [0.11, 0.3] }
[[station]]
name = "tip"
position = 1.0
cl = 0.3
mach = 0.55
constraints = { thickness = [0.07, 0.3], min_critical_mach = 0.62 }
[family]
evaluations = 3000
[objectives]
peak_suction = 1.0
[constraints]
min_le_radius = 0.004
cm = [-0.12, 0.0]
[search]
max_evaluations = 2500
"""


def check(folder: Path, checks: int, price: float) -> dict:
    """The acceptance checks of one finished family study folder."""
    from foilmap.api.families import best_family
    from foilmap.design.family import fairness, interpolate_constraints, interpolate_point
    from foilmap.section.evaluation import analyse
    from foilmap.section.operating import critical_mach
    from foilmap.store.familyfile import parse_family
    from foilmap.store.folder import StudyFolder

    study = StudyFolder(folder).study
    best = best_family(folder)
    fam = parse_family(best.to_toml(), "best family")  # through the family file
    floor = study.constraints.get("min_local_thickness", 0.0)
    failures = []

    def meets(ev, pt, cons, where):
        if int(ev.status[0]) != 0:
            failures.append(f"{where}: status {int(ev.status[0])}")
            return
        peak = -float(ev.cp_min[0])
        got = {"thickness": ev.thickness[0], "camber": ev.camber[0], "cm": ev.cm_quarter_chord[0],
               "thickness_x": ev.thickness_x[0], "camber_x": ev.camber_x[0]}
        for key, (lo, hi) in ((k, v) for k, v in cons.items() if k in got):
            if not lo - 1e-9 <= got[key] <= hi + 1e-9:
                failures.append(f"{where}: {key} {got[key]:.5f} outside [{lo:g}, {hi:g}]")
        if "min_le_radius" in cons and ev.le_radius[0] < cons["min_le_radius"] - 1e-9:
            failures.append(f"{where}: le radius {ev.le_radius[0]:.5f}")
        if "min_critical_mach" in cons:
            mc = float(critical_mach(-np.array([peak]), pt.compressibility)[0])
            if mc < cons["min_critical_mach"] - 1e-6:
                failures.append(f"{where}: critical Mach {mc:.4f}")
        if "cavitation_margin" in cons and pt.sigma is not None:
            if pt.sigma - peak < cons["cavitation_margin"] - 1e-9:
                failures.append(f"{where}: cavitation margin {pt.sigma - peak:.4f}")

    stations = []
    for s in study.stations:
        ev = analyse(fam.section_at(s.position), cl=s.point.cl, proxies=(),
                     floor=floor).evaluation
        cl_error = abs(float(ev.cl[0]) - s.point.cl)
        if not cl_error < 1e-12:
            failures.append(f"station {s.name}: Cl {float(ev.cl[0])!r} for {s.point.cl}")
        meets(ev, s.point, s.constraints, f"station {s.name}")
        stations.append({"station": s.name, "cl_error": cl_error})
    fair = []
    for i in range(len(study.stations) - 1):
        a, b = study.stations[i], study.stations[i + 1]
        t, c = [], []
        for k in range(checks + 2):
            u = k / (checks + 1)
            pt = interpolate_point(a.point, b.point, u, "between")
            cons = interpolate_constraints(a.constraints, b.constraints, u)
            ev = analyse(fam.section_at(a.position + (b.position - a.position) * u), cl=pt.cl,
                         proxies=(), floor=floor).evaluation
            if 0 < k < checks + 1:
                meets(ev, pt, cons, f"{a.name}-{b.name} u={u:.3f}")
            t.append(float(ev.thickness[0]))
            c.append(float(ev.camber[0]))
        gt = float(fairness(np.array([t]), study.family["fair_tolerance"])[0])
        gc = float(fairness(np.array([c]), study.family["fair_tolerance"])[0])
        fair.append({"interval": f"{a.name}-{b.name}", "thickness_g": gt, "camber_g": gc})
        if gt > 1e-12 or gc > 1e-12:
            failures.append(f"{a.name}-{b.name}: not fair (g {gt:.2e}, {gc:.2e})")
    for row, st in zip(best.stations, stations):
        st.update({"in_family": row["f"], "alone": row["independent"], "price": row["price"]})
        if row["price"] is None or row["price"] > price:
            failures.append(f"station {row['station']}: price {row['price']}")
    return {"stations": stations, "fairness": fair, "failures": failures,
            "family_objective": best.design.fun}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true")
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--checks", type=int, default=8)
    ap.add_argument("--price", type=float, default=0.05)
    args = ap.parse_args()
    studies = {"tidal-blade-family": (ROOT / "studies" / "tidal-blade-family.toml").read_text(),
               "held-out-propeller": HELD_OUT}
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for name, text in studies.items():
            path = Path(tmp) / f"{name}.toml"
            path.write_text(text)
            out = Path(tmp) / name
            t0 = time.perf_counter()
            r = subprocess.run([sys.executable, "-m", "foilmap.cli", "run", str(path), "--out",
                                str(out), "--workers", str(args.workers)],
                               capture_output=True, text=True)
            wall = time.perf_counter() - t0
            if r.returncode != 0:
                raise SystemExit(f"{name}: foilmap run failed: {r.stderr.strip()[-300:]}")
            row = {"study": name, "wall_s": round(wall, 1), "workers": args.workers}
            row.update(check(out, args.checks, args.price))
            rows.append(row)
    ok = not any(r["failures"] for r in rows)
    if args.json:
        print(json.dumps({"studies": rows, "ok": ok}, default=float))
    else:
        for r in rows:
            print(f"{r['study']}: {r['wall_s']} s with {r['workers']} workers, family "
                  f"objective {r['family_objective']:.5g}")
            for s in r["stations"]:
                p = s["price"]
                print(f"  {s['station']:10s} in family {s['in_family']:.5g} alone "
                      f"{s['alone']:.5g} price {'-' if p is None else f'{100 * p:+.2f} %'} "
                      f"Cl error {s['cl_error']:.1e}")
            for f in r["fairness"]:
                print(f"  {f['interval']:16s} fairness g thickness {f['thickness_g']:.2e} "
                      f"camber {f['camber_g']:.2e}")
            for line in r["failures"]:
                print(f"  FAILED: {line}")
        print("all checks passed" if ok else "some checks failed")
    sys.exit(0 if ok else 1)


if __name__ == "__main__":
    main()
