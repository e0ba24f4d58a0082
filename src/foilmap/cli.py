"""The ``foilmap`` command: a table of subcommands, each parsing its arguments, calling the
library and returning an exit code (0 done, 2 bad input)."""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

from foilmap._version import __version__
from foilmap.errors import InputError

__all__ = ["main"]

EXIT_OK = 0
EXIT_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse with errors on one line (no usage block) and exit code 2."""

    def error(self, message: str):  # noqa: D102 - argparse hook
        if self.prog == "foilmap" and "required: COMMAND" in message:
            # bare `foilmap`: the command table, then exit 2
            self.print_help(sys.stderr)
            raise SystemExit(EXIT_INPUT)
        raise InputError(f"{self.prog}: {message}")


def _display(obj):
    """JSON output rounded for display (no 1.9999999999999996, no -0.0)."""
    from foilmap.report.text import display_values

    return display_values(obj)


def _finite(kind: str, lo: float | None = None, hi: float | None = None, open_lo=False):
    def parse(text: str) -> float:
        try:
            v = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
        bad = not math.isfinite(v)
        bad |= lo is not None and (v <= lo if open_lo else v < lo)
        bad |= hi is not None and v > hi
        if bad:
            lo_s = "" if lo is None else (f"> {lo:g}" if open_lo else f">= {lo:g}")
            hi_s = "" if hi is None else f"<= {hi:g}"
            allowed = " and ".join(s for s in (lo_s, hi_s) if s) or "finite"
            raise argparse.ArgumentTypeError(f"{kind} {text!r} is out of range (allowed: {allowed})")
        return v

    return parse


def _int_range(kind: str, lo: int, hi: int):
    def parse(text: str) -> int:
        try:
            v = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if not lo <= v <= hi:
            raise argparse.ArgumentTypeError(f"{kind} {v} is out of range (allowed: {lo} to {hi})")
        return v

    return parse


def _add_operating_point(p: argparse.ArgumentParser) -> None:
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--alpha", type=_finite("angle of attack", -89.0, 89.0), metavar="DEG",
                   help="angle of attack to the chord line, degrees")
    g.add_argument("--cl", type=_finite("lift coefficient", -20.0, 20.0), metavar="CL",
                   help="target lift coefficient (met exactly by the closed-form angle)")
    p.add_argument("--points", type=_int_range("points", 32, 65536), default=256,
                   help="circle-plane samples (default 256; peak suction is refined beyond them)")


def _add_conditions(p: argparse.ArgumentParser) -> None:
    """Options of the flow conditions: Mach number and cavitation number."""
    p.add_argument("--mach", type=_finite("Mach number", 0.0, 0.95), metavar="M",
                   help="free-stream Mach number: Cp and peak suction corrected by the "
                        "compressibility rule")
    p.add_argument("--compressibility", choices=("karman-tsien", "prandtl-glauert"),
                   default="karman-tsien",
                   help="compressibility rule for --mach and the critical Mach number "
                        "(default karman-tsien)")
    p.add_argument("--sigma", type=_finite("cavitation number", 0.0, 1e6, open_lo=True),
                   metavar="S", help="cavitation number (or give --speed, --depth, --water-temp)")
    p.add_argument("--speed", type=_finite("speed", 0.0, 200.0, open_lo=True), metavar="M/S",
                   help="speed through the water, m/s (with --depth and --water-temp: sigma)")
    p.add_argument("--depth", type=_finite("depth", 0.0, 11000.0), metavar="M",
                   help="depth of the section below the free surface, m")
    p.add_argument("--water-temp", type=_finite("water temperature", 0.0, 40.0), metavar="DEGC",
                   help="water temperature, degrees Celsius (0 to 40)")
    p.add_argument("--water", choices=("fresh", "sea"), default="fresh",
                   help="water density: fresh (by temperature) or sea (1025 kg/m3)")


def _sigma(args) -> float | None:
    """The cavitation number the options give, or None."""
    parts = {"--speed": args.speed, "--depth": args.depth, "--water-temp": args.water_temp}
    given = [k for k, v in parts.items() if v is not None]
    if args.sigma is not None:
        if given:
            raise InputError(f"give --sigma or {', '.join(parts)}, not both ({given[0]} was "
                             "also given)")
        return args.sigma
    if not given:
        return None
    missing = [k for k, v in parts.items() if v is None]
    if missing:
        raise InputError(f"the cavitation number from speed needs {', '.join(parts)}; "
                         f"missing {', '.join(missing)}")
    from foilmap.section.operating import cavitation_number

    return float(cavitation_number(args.speed, args.depth, args.water_temp, args.water))


def _condition_record(rec, an, args) -> dict:
    """The operating-range figures of an evaluation: critical Mach number, and what --mach and
    the cavitation options ask."""
    from foilmap.section.operating import cl_range_below, compressible_cp, critical_mach

    ev = an.evaluation
    out = {"chord_line": "source" if rec.reference_le is not None else "own",
           "critical_mach": float(critical_mach(ev.cp_min[0], args.compressibility)),
           "compressibility_rule": args.compressibility}
    if args.mach is not None:
        cp = float(compressible_cp(ev.cp_min[0], args.mach, args.compressibility))
        out.update({"mach": args.mach, "cp_min_compressible": cp,
                    "peak_suction_compressible": -cp})
    sigma = _sigma(args)
    if sigma is not None:
        rng = cl_range_below(rec.to_set(), sigma, reference_le=rec.reference_le)
        out.update({"cavitation_number": sigma,
                    "cavitation_margin": sigma + float(ev.cp_min[0]),
                    "cavitation_free_cl": None if rng is None else list(rng)})
    return out


def _analyse(args, proxies=("severity",)):
    from foilmap.section.evaluation import analyse
    from foilmap.store.sectionfile import load_section

    rec = load_section(args.section)
    kw = {"cl": args.cl} if args.cl is not None else {"alpha": math.radians(args.alpha)}
    re = getattr(args, "re", None)
    if re is not None and "stratford" not in proxies:
        proxies = tuple(proxies) + ("stratford",)
    an = analyse(rec.to_set(), points=args.points, proxies=proxies, reynolds=re,
                 proxy_end=getattr(args, "proxy_end", 0.9), reference_le=rec.reference_le, **kw)
    return rec, an


def _check_ok(rec, an) -> None:
    from foilmap.section.status import Status, describe

    st = int(an.evaluation.status[0])
    if st == Status.ABOVE_MAX_LIFT:
        from foilmap.section.flow import max_ideal_cl

        top = float(max_ideal_cl(an.sections, an.angle_frame)[0])
        raise InputError(f"section {rec.name!r} cannot reach that Cl: the ideal flow's largest Cl "
                         f"(at 90 degrees in the circle plane, far beyond any stall) is "
                         f"{top:.4g}; ask for less")
    if st != Status.OK:
        raise InputError(f"section {rec.name!r} is not usable: {describe(st)} "
                         f"(status {Status(st).label})")


def cmd_evaluate(args) -> int:
    from foilmap.report.text import (
        display_values,
        evaluation_record,
        format_summary,
        surface_table_csv,
    )
    from foilmap.section.status import Status
    from foilmap.store.sectionfile import write_text_atomic

    proxies = ("severity", "thwaites")
    rec, an = _analyse(args, proxies)
    record = evaluation_record(an.evaluation, 0, rec.name)
    ok = int(an.evaluation.status[0]) == Status.OK
    if ok:
        record.update(_condition_record(rec, an, args))
    if args.json:
        print(json.dumps(display_values(record), indent=2))
        if not ok:
            print(f"foilmap evaluate: section {rec.name!r}: {record['status_text']}",
                  file=sys.stderr)
            return EXIT_INPUT
    else:
        _check_ok(rec, an)
        used = proxies + (("stratford",) if args.re is not None else ())
        print(format_summary(record, used))
    if args.table:
        from foilmap.section.evaluation import surface_distribution

        zc, upper, q = surface_distribution(an, args.table_points, "cosine")
        write_text_atomic(args.table, surface_table_csv(zc[0], upper[0], q[0], rec.name))
        if not args.json:
            print(f"surface distribution written to {args.table}")
    return EXIT_OK


def cmd_coords(args) -> int:
    from foilmap.report.text import coordinates_text
    from foilmap.section.evaluation import analyse
    from foilmap.section.geometry import coordinates
    from foilmap.store.sectionfile import load_section, write_text_atomic

    rec = load_section(args.section)
    sec = rec.to_set()
    an = analyse(sec, alpha=0.0, proxies=())
    _check_ok(rec, an)
    zc = coordinates(sec, an.frame, an.split, args.points, args.spacing)[0]
    text = coordinates_text(zc, rec.name)
    if args.output:
        write_text_atomic(args.output, text)
        print(f"{args.points} points written to {args.output}")
    else:
        sys.stdout.write(text)
    return EXIT_OK


def _png_target(output: str, command: str) -> Path:
    """Check a PNG output path before any work is done."""
    out = Path(output)
    if out.suffix.lower() != ".png":
        raise InputError(f"{command}: output {str(out)!r} must end in .png")
    if not out.parent.exists():
        raise InputError(f"{command}: folder {str(out.parent)!r} does not exist")
    return out


def _write_png(out: Path, draw, stream=None) -> None:
    """Draw into a temporary file and rename it into place: whole or not at all.  The line
    saying so goes to ``stream`` (standard error when standard output carries JSON)."""
    tmp = out.with_name(f".{out.stem}.part.png")
    try:
        draw(tmp)
        tmp.replace(out)
    finally:
        if tmp.exists():
            tmp.unlink()
    print(f"plot written to {out}", file=stream or sys.stdout)


def cmd_plot(args) -> int:
    from foilmap.report.plots import plot_section

    out = _png_target(args.output, "plot")
    rec, an = _analyse(args)
    _check_ok(rec, an)
    _write_png(out, lambda tmp: plot_section(an, tmp, rec.name))
    return EXIT_OK


def _run_folder(study, out: Path, workers, budget, engine=None, scheduler=None,
                wait: bool = False, what: str = "foilmap run") -> int:
    from foilmap.report.progress import Progress
    from foilmap.run.local import run_study
    from foilmap.store.lock import describe_holder

    def waiting(holder):
        print(f"foilmap: {str(out)!r} is in use by {describe_holder(holder)}; waiting for it",
              file=sys.stderr, flush=True)

    summaries = run_study(study, out, workers=workers, budget=budget,
                          progress=Progress.for_study(study, budget), engine=engine,
                          scheduler=scheduler, wait=None if wait else 0.0, what=what,
                          on_wait=waiting)
    failed = [s for s in summaries if s.get("state") != "complete"]
    from foilmap.report.text import plural

    print(f"study {study.name}: {plural(len(summaries) - len(failed), 'run')} finished now, "
          f"{len(failed)} failed; logs in {out / 'runs'}")
    for s in failed:
        print(f"  run {s['run']} {s.get('state', 'failed')}: {s.get('error', 'unknown error')}")
    from foilmap.report.study import design_warnings, is_multi_objective

    for line in design_warnings(out):
        print(line)
    done = [s for s in summaries if s.get("state") == "complete"]
    if done and not is_multi_objective(study) and all(s.get("best") is None for s in done):
        print(f"warning: no run of study {study.name} found a feasible design; loosen the "
              f"constraints or widen the search (foilmap status {out} shows each run)")
    return EXIT_OK if not failed else 1


def cmd_run(args) -> int:
    from foilmap.store.studyfile import load_study

    study = load_study(args.study)
    out = Path(args.out) if args.out else Path("results") / study.name
    return _run_folder(study, out, args.workers, args.budget, args.engine, args.scheduler,
                       args.wait, "foilmap run")


def cmd_resume(args) -> int:
    from foilmap.store.folder import StudyFolder

    out = Path(args.folder)
    study = StudyFolder(out).study
    return _run_folder(study, out, args.workers, None, args.engine, args.scheduler,
                       args.wait, "foilmap resume")


def cmd_status(args) -> int:
    from foilmap.report.study import format_status
    from foilmap.store.folder import StudyFolder

    from foilmap.report.study import design_warnings

    st = StudyFolder(args.folder).status()
    st["warnings"] = design_warnings(Path(args.folder))
    if args.json:
        print(json.dumps(_display(st), indent=1))
    else:
        print("\n".join([format_status(st), *st["warnings"]]))
    return EXIT_OK


def cmd_best(args) -> int:
    from foilmap.report.text import CAUTION
    from foilmap.store.folder import StudyFolder
    from foilmap.store.sectionfile import format_section, write_text_atomic

    d = StudyFolder(args.folder).best_design(args.run)
    text = format_section(f"{d.study_name}-{d.run_id}", d.coefficients, d.te_angle_deg,
                          d.provenance())
    write_text_atomic(args.output, text)
    print(f"best feasible design of {d.run_id} (objective {d.fun:.6g}, evaluation "
          f"{d.evaluation}) written to {args.output}")
    from foilmap.report.study import design_warnings

    for line in design_warnings(Path(args.folder)):
        if f" run {d.run_id} " in line:
            print(line)
    print(CAUTION)
    return EXIT_OK


def cmd_plot_run(args) -> int:
    from foilmap.report.study import plot_runs

    out = _png_target(args.output, "plot-run")
    _write_png(out, lambda tmp: plot_runs(Path(args.folder), tmp))
    return EXIT_OK


def cmd_demo(args) -> int:
    from foilmap.demo import run_demo

    return run_demo(Path(args.out), args.workers, _run_folder)


def _range(kind: str, lo: float, hi: float, most: int = 2001):
    """argparse type for A:B:STEP (inclusive of B when the steps land on it)."""

    def parse(text: str):
        parts = text.split(":")
        try:
            a, b, step = (float(v) for v in parts)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"{kind} range {text!r} is not START:STOP:STEP (three numbers)") from None
        if not all(map(math.isfinite, (a, b, step))) or step <= 0 or b < a:
            raise argparse.ArgumentTypeError(
                f"{kind} range {text!r}: needs START <= STOP and STEP > 0")
        if a < lo or b > hi:
            raise argparse.ArgumentTypeError(
                f"{kind} range {text!r} leaves the allowed {lo:g} to {hi:g}")
        n = int(math.floor((b - a) / step + 1e-9)) + 1
        if n > most:
            raise argparse.ArgumentTypeError(
                f"{kind} range {text!r} has {n} steps; at most {most} are allowed")
        return [a + i * step for i in range(n)]

    return parse


def cmd_sweep(args) -> int:
    from foilmap.report.sweep import sweep_csv, sweep_figure, sweep_rows
    from foilmap.report.text import CAUTION, display_values, format_number
    from foilmap.section.operating import sweep
    from foilmap.store.sectionfile import load_section, write_text_atomic

    png = _png_target(args.output, "sweep") if args.output else None
    rec = load_section(args.section)
    sigma = _sigma(args)
    kw = ({"alpha": [math.radians(a) for a in args.alpha]} if args.alpha is not None
          else {"cl": args.cl})
    res = sweep(rec.to_set(), mach=args.mach, rule=args.compressibility,
                reference_le=rec.reference_le, **kw)
    rows = sweep_rows(res, sigma)
    if not any(r["cl"] is not None for r in rows):
        raise InputError(f"sweep: section {rec.name!r} has no usable row in the range "
                         f"(first row: {rows[0]['status']})")
    if args.csv:
        write_text_atomic(args.csv, sweep_csv(rows, rec.name))
    if png is not None:
        _write_png(png, lambda tmp: sweep_figure(rows, rec.name, sigma, args.mach)
                   .savefig(tmp, dpi=120), sys.stderr if args.json else None)
    if args.json:
        out = {"name": rec.name, "chord_line": "source" if rec.reference_le is not None
               else "own", "compressibility_rule": args.compressibility, "mach": args.mach,
               "cavitation_number": sigma, "rows": rows, "caution": CAUTION}
        print(json.dumps(display_values(out), indent=1))
        return EXIT_OK
    head = (f"{'alpha':>7} {'Cl':>8} {'Cm c/4':>8} {'peak up':>8} {'x':>6} {'peak lo':>8} "
            f"{'x':>6} {'severity':>8} {'M crit':>7}")
    print(f"foilmap sweep | {rec.name} | angles from the "
          f"{'source' if rec.reference_le is not None else 'own'} chord line")
    print(head)
    print("-" * len(head))
    for r in rows:
        print(f"{format_number(r['alpha_deg'], 2):>7} {format_number(r['cl'], 4):>8} "
              f"{format_number(r['cm_quarter_chord'], 4):>8} "
              f"{format_number(r['peak_suction_upper'], 4):>8} "
              f"{format_number(r['x_peak_upper'], 3):>6} "
              f"{format_number(r['peak_suction_lower'], 4):>8} "
              f"{format_number(r['x_peak_lower'], 3):>6} "
              f"{format_number(r['recovery_severity'], 3):>8} "
              f"{format_number(r['critical_mach'], 3):>7}"
              + ("" if r["status"] == "ok" else f"  ({r['status']})"))
    if sigma is not None:
        print(f"cavitation number sigma {sigma:.4g}: rows with a negative cavitation_margin "
              "cavitate (see --json or --csv)")
    if args.csv:
        print(f"rows written to {args.csv}")
    print(CAUTION)
    return EXIT_OK


def cmd_report(args) -> int:
    from foilmap.report.page import report_page
    from foilmap.store.sectionfile import write_text_atomic

    out = Path(args.output)
    if out.suffix.lower() not in (".html", ".htm"):
        raise InputError(f"report: output {str(out)!r} must end in .html")
    if not out.parent.exists():
        raise InputError(f"report: folder {str(out.parent)!r} does not exist")
    write_text_atomic(out, report_page(args.folders))
    print(f"report of {len(args.folders)} study folder(s) written to {out} (one self-contained "
          "page: open it in a browser)")
    return EXIT_OK


def cmd_inverse(args) -> int:
    from foilmap.report.inverse import inverse_figure, inverse_record
    from foilmap.report.text import CAUTION
    from foilmap.section.inverse import inverse_section
    from foilmap.store.sectionfile import format_section, write_text_atomic
    from foilmap.store.targetfile import load_target

    png = _png_target(args.report, "inverse") if args.report else None
    target = load_target(args.target)
    name = Path(args.target).stem
    kw = {"cl": args.cl} if args.cl is not None else {"alpha": math.radians(args.alpha)}
    res = inverse_section(target, te_angle=math.radians(args.te_angle), coefficients=args.n,
                          **kw)
    rec = inverse_record(res, name)
    if not (math.isfinite(res.rms_deviation) and math.isfinite(res.cl)) \
            or res.fit.max_deviation > 0.01:
        raise InputError(f"inverse: target {str(args.target)!r} gives no usable section at "
                         "this operating point (the contour folds or does not close); check "
                         "the target and the operating point")
    prov = {"inverse_of": str(args.target), "method": "Lighthill inverse, least closure change",
            "design_cl": res.cl, "design_alpha_deg": math.degrees(res.alpha),
            "rms_cp_deviation": rec["rms_cp_deviation"],
            "max_cp_deviation": rec["max_cp_deviation"],
            "fit_max_deviation_chords": res.fit.max_deviation}
    write_text_atomic(args.output, format_section(name, res.fit.coefficients,
                                                  math.degrees(res.fit.te_angle), prov))
    if png is not None:
        _write_png(png, lambda tmp: inverse_figure(res, name).savefig(tmp, dpi=120),
                   sys.stderr if args.json else None)
    if args.json:
        print(json.dumps({**rec, "output": str(args.output)}, indent=1))
        return EXIT_OK
    cov = ", ".join(f"{s} x/c {v[0]:.3f} to {v[1]:.3f}" for s, v in rec["target_covers"].items()
                    if v is not None)
    print(f"target {args.target}: {rec['target_points']} points ({cov})")
    print(f"inverse design at Cl {res.cl:.4f}, alpha {rec['alpha_deg']:.3f} deg, trailing-edge "
          f"angle {rec['te_angle_deg']:.2f} deg; {rec['iterations']} iterations"
          + ("" if rec["converged"] else " (stopped at the iteration limit)"))
    print(f"achieved Cp against the target: RMS deviation {rec['rms_cp_deviation']:.2g}, "
          f"largest {rec['max_cp_deviation']:.2g} at x/c "
          f"{rec['max_cp_deviation_at']['x']:.3f} ({rec['max_cp_deviation_at']['surface']})")
    print(f"closure: ln q changed by up to {rec['closure_change_given_max_dlnq']:.2g} where the "
          f"target is given, {rec['closure_change_free_max_dlnq']:.2g} on the free part; "
          f"stations beyond x/c 0.99 (the trailing-edge stagnation) are not matched")
    print(f"fitted with {args.n} coefficients: deviation max {res.fit.max_deviation:.2e}, RMS "
          f"{res.fit.rms_deviation:.2e} chords; section written to {args.output}")
    print(CAUTION)
    return EXIT_OK


def cmd_naca(args) -> int:
    from foilmap.report.text import xy_lines
    from foilmap.section.naca import naca4_coordinates, parse_naca4
    from foilmap.store.sectionfile import write_text_atomic

    parse_naca4(args.code)
    xy = naca4_coordinates(args.code, args.points, closed_te=not args.open_te)
    edge = "open" if args.open_te else "closed"
    head = f"NACA {args.code.strip().upper().removeprefix('NACA').strip()}  ({edge} trailing edge)"
    body = xy_lines(xy[:, 0], xy[:, 1])
    write_text_atomic(args.output, f"{head}\n{body}\n")
    print(f"{args.points} points written to {args.output}")
    return EXIT_OK


def cmd_fit(args) -> int:
    from foilmap.report.text import CAUTION
    from foilmap.section.fitting import fit_section
    from foilmap.store.coordfile import load_coordinates
    from foilmap.store.sectionfile import format_section, write_text_atomic

    if args.report:
        report = _png_target(args.report, "fit")
    coords = load_coordinates(args.coords)
    fit = fit_section(coords.xy, coords.le_index, args.n, source_le=coords.source_le)
    print(f"read {coords.rows_read} points of {coords.name!r} ({coords.layout} layout"
          f"{', reversed to run over the upper surface first' if coords.reversed else ''})")
    if coords.te_gap > 0:
        print(f"open trailing edge: gap {coords.te_gap:.5f} chords, closed for the fit by a "
              f"linear thickness ramp (largest shift {coords.closing_shift:.5f} chords)")
    print(f"trailing-edge angle {math.degrees(fit.te_angle):.3f} deg; Theodorsen iteration "
          f"{'converged' if fit.converged else 'NOT converged'} in {fit.iterations} steps")
    print(f"deviation with {args.n} coefficients: max {fit.max_deviation:.2e}, "
          f"RMS {fit.rms_deviation:.2e} chords (full series of {fit.full_terms} terms: "
          f"max {fit.full_max_deviation:.2e})")
    prov = {"fitted_from": str(args.coords), "coefficients_fitted": args.n,
            "max_deviation_chords": fit.max_deviation, "rms_deviation_chords": fit.rms_deviation,
            "te_gap_chords": coords.te_gap}
    write_text_atomic(args.output, format_section(coords.name, fit.coefficients,
                                                  math.degrees(fit.te_angle), prov,
                                                  reference_le=fit.reference_le))
    print(f"section written to {args.output}; its angles, Cl and Cm are measured from the "
          f"file's chord line (leading edge to trailing edge as the file gives them)")
    if args.report:
        from foilmap.report.plots import plot_fit

        _write_png(report, lambda tmp: plot_fit(coords, fit, tmp))
    print(CAUTION)
    return EXIT_OK


def _reference(text: str | None):
    if text is None:
        return None
    try:
        vals = [float(v) for v in text.split(",")]
    except ValueError:
        raise InputError(f"--reference {text!r} is not a comma-separated list of numbers") from None
    if not all(math.isfinite(v) for v in vals):
        raise InputError(f"--reference {text!r} holds a non-finite number")
    return vals


def cmd_fronts(args) -> int:
    from foilmap.report.compare import (
        collect_fronts,
        compare_fronts,
        format_fronts,
        fronts_csv,
        plot_fronts,
    )
    from foilmap.store.sectionfile import write_text_atomic

    png = _png_target(args.output, "fronts") if args.output else None
    fronts = collect_fronts(args.paths)
    res = compare_fronts(fronts, _reference(args.reference))
    print(json.dumps(_display(res), indent=1) if args.json else format_fronts(res))
    if args.csv:
        write_text_atomic(args.csv, fronts_csv(fronts, res))
        if not args.json:
            print(f"front designs written to {args.csv}")
    if png is not None:
        if args.json:
            plot_fronts(fronts, res, png)
        else:
            _write_png(png, lambda tmp: plot_fronts(fronts, res, tmp))
    return EXIT_OK


def cmd_pick(args) -> int:
    from foilmap.report.compare import pick_design
    from foilmap.report.text import CAUTION
    from foilmap.store.sectionfile import format_section, write_text_atomic

    nearest = None
    if args.nearest is not None:
        nearest = {}
        for part in args.nearest.split(","):
            name, _, val = part.partition("=")
            try:
                nearest[name.strip()] = float(val)
            except ValueError:
                raise InputError(f"--nearest {args.nearest!r}: write NAME=VALUE pairs separated "
                                 "by commas, for example peak_suction=0.8,severity=0.4") from None
    d = pick_design(Path(args.folder), nearest=nearest, knee=args.knee, index=args.index,
                    run=args.run)
    prov = {**d.provenance(), "design": d.id,
            **{f"objective_{k}": v for k, v in d.objectives.items()}}
    write_text_atomic(args.output, format_section(f"{d.run_id}-{d.evaluation}", d.coefficients,
                                                  d.te_angle_deg, prov))
    vals = ", ".join(f"{k} {v:.6g}" for k, v in d.objectives.items())
    print(f"design {d.id} ({vals}) written to {args.output}")
    print(CAUTION)
    return EXIT_OK


SCREEN_NOTE = ("First screening by integral boundary-layer methods (Thwaites, Michel, Head, "
               "Squire-Young) on the ideal-flow speed: not a replacement for a viscous solver.")


def cmd_screen(args) -> int:
    from foilmap.report.text import CAUTION, format_screen
    from foilmap.section.screening import DRAG_STATION, screen_analysis

    rec, an = _analyse(args, ())
    _check_ok(rec, an)
    res = screen_analysis(an, args.re)
    out = {"name": rec.name, "cl": float(an.evaluation.cl[0]),
           "alpha_deg": math.degrees(an.evaluation.alpha[0]), **res.record(0),
           "drag_station_x": DRAG_STATION, "note": SCREEN_NOTE, "caution": CAUTION}
    if args.json:
        print(json.dumps(_display(out), indent=2))
        return EXIT_OK
    print(format_screen(out, rec.name, args.re))
    print(SCREEN_NOTE)
    print(CAUTION)
    return EXIT_OK


def _designs_from_folder(args, folder: Path):
    """The designs ``export`` takes from a study folder: the best, the merged front (--all), or
    the given ids."""
    from foilmap.report.export import Design
    from foilmap.store.folder import StudyFolder

    sf = StudyFolder(folder)
    if args.best:
        picks = [sf.best_design(args.run)]
    else:
        if args.all:
            wanted, _, _ = sf.merged_front(args.run)
        else:
            wanted = [i.strip() for i in args.ids.split(",") if i.strip()]
            on_fronts = {i for f in sf.fronts() for i in f.ids}
            for i in wanted:
                if i not in on_fronts:
                    raise InputError(f"no design {i!r} on the fronts of {str(folder)!r} "
                                     f"(see foilmap fronts {folder})")
        picks = [sf.design_by_id(i) for i in wanted]
    alpha = None if args.alpha is None else math.radians(args.alpha)
    return [Design.from_folder_design(d, cl=args.cl, alpha=alpha, reynolds=args.re)
            for d in picks]


def cmd_export(args) -> int:
    from foilmap.report.export import Design, export_designs
    from foilmap.report.progress import CountProgress
    from foilmap.report.text import CAUTION
    from foilmap.store.sectionfile import atomic_folder, load_section

    out = Path(args.output)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise InputError(f"export: output {str(out)!r} exists and is not an empty folder")
    if not out.parent.exists():
        raise InputError(f"export: folder {str(out.parent)!r} does not exist")
    if args.mesh:
        from foilmap.report.mesh import check_gmsh

        check_gmsh()
    sel = Path(args.selection)
    if sel.is_dir():
        if not (args.best or args.ids or args.all):
            raise InputError("export: a study folder needs --best, --ids ID,... or --all")
        designs = _designs_from_folder(args, sel)
    elif sel.is_file():
        if args.best or args.ids or args.all:
            raise InputError("export: --best, --ids and --all select from a study folder, "
                             f"not from the section file {str(sel)!r}")
        if args.cl is None and args.alpha is None:
            raise InputError("export: a section file needs the operating point: --cl or --alpha")
        rec = load_section(sel)
        designs = [Design(rec.name, rec.to_set(), cl=args.cl,
                          alpha=None if args.alpha is None else math.radians(args.alpha),
                          reynolds=args.re, provenance={"file": str(sel), **rec.provenance})]
    else:
        raise InputError(f"export: {str(sel)!r} is neither a section file nor a study folder")
    progress = CountProgress("exporting", len(designs)) if len(designs) > 1 else None
    with atomic_folder(out) as tmp:
        rows = export_designs(designs, tmp, points=args.points, spacing=args.spacing,
                              te_thickness=args.te_thickness, mesh=args.mesh,
                              farfield=args.farfield, first_cell=args.first_cell,
                              progress=progress)
    print(f"{len(rows)} design(s) exported to {out} (summary.csv, one folder per design)")
    if args.te_thickness > 0:
        print(f"trailing edge opened to {args.te_thickness:g} chords by a linear thickness blend "
              f"(points move by up to {args.te_thickness / 2:g} chords; the LE does not move)")
    print(CAUTION)
    return EXIT_OK


def _add_engine(p: argparse.ArgumentParser) -> None:
    p.add_argument("--engine", choices=("local", "dask"),
                   help="local process pool (default) or a Dask cluster (cluster extra)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="Dask scheduler address, e.g. tcp://head:8786 (default: a LocalCluster)")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="foilmap", description=(
        "Search and evaluate aerofoil and hydrofoil sections by generalised conformal maps. "
        "Ideal-flow screening: check chosen sections by viscous analysis and tests."))
    p.add_argument("--version", action="version", version=f"foilmap {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser, metavar="COMMAND")

    e = sub.add_parser("evaluate", help="figures of a section at an angle or a target Cl")
    e.add_argument("section", help="section file (TOML)")
    _add_operating_point(e)
    e.add_argument("--re", type=_finite("Reynolds number", 0.0, 1e10, open_lo=True),
                   metavar="RE", help="chord Reynolds number: adds Stratford's turbulent criterion")
    e.add_argument("--proxy-end", type=_finite("proxy end station", 0.0, 1.0, open_lo=True),
                   default=0.9, metavar="X", help="chord station where the recovery proxies stop")
    _add_conditions(e)
    e.add_argument("--json", action="store_true", help="print one JSON object")
    e.add_argument("--table", metavar="FILE.csv", help="also write x, y, surface, cp, q per point")
    e.add_argument("--table-points", type=_int_range("table points", 5, 100001), default=201,
                   metavar="N", help="points in the --table file (default 201, cosine spacing)")
    e.set_defaults(func=cmd_evaluate)

    sw = sub.add_parser("sweep", help="the operating range: figures over angles or Cl values")
    sw.add_argument("section", help="section file (TOML)")
    g = sw.add_mutually_exclusive_group(required=True)
    g.add_argument("--alpha", type=_range("angle", -30.0, 30.0), metavar="A:B:STEP",
                   help="angles of attack in degrees, e.g. -4:10:0.5")
    g.add_argument("--cl", type=_range("lift coefficient", -5.0, 5.0), metavar="A:B:STEP",
                   help="lift coefficients, e.g. 0:1.2:0.1")
    _add_conditions(sw)
    sw.add_argument("--json", action="store_true", help="print {\"rows\": [...]} as JSON")
    sw.add_argument("--csv", metavar="FILE.csv", help="also write the rows as CSV")
    sw.add_argument("-o", "--output", metavar="FILE.png",
                    help="also draw Cl, Cm and the minimum-pressure envelope")
    sw.set_defaults(func=cmd_sweep)

    rp = sub.add_parser("report", help="one self-contained HTML page of one or more studies")
    rp.add_argument("folders", nargs="+", metavar="DIR", help="study folders (side by side)")
    rp.add_argument("-o", "--output", required=True, metavar="FILE.html",
                    help="the page to write")
    rp.set_defaults(func=cmd_report)

    iv = sub.add_parser("inverse", help="the section whose ideal-flow Cp is a target table")
    iv.add_argument("target", help="target CSV: columns x, surface, and cp or q (as evaluate "
                    "--table writes)")
    g = iv.add_mutually_exclusive_group(required=True)
    g.add_argument("--cl", type=_finite("lift coefficient", -5.0, 5.0), metavar="CL",
                   help="design lift coefficient of the target")
    g.add_argument("--alpha", type=_finite("angle of attack", -30.0, 30.0), metavar="DEG",
                   help="angle of attack of the target, degrees")
    iv.add_argument("--te-angle", type=_finite("trailing-edge angle", 0.0, 60.0), default=10.0,
                    metavar="DEG", help="trailing-edge angle of the design (default 10)")
    iv.add_argument("-n", type=_int_range("coefficients", 1, 64), default=24,
                    help="shape-series coefficients of the fitted section (default 24)")
    iv.add_argument("-o", "--output", required=True, metavar="SECTION.toml",
                    help="the section file to write")
    iv.add_argument("--report", metavar="FILE.png", help="also draw target and achieved Cp")
    iv.add_argument("--json", action="store_true", help="print the figures as JSON")
    iv.set_defaults(func=cmd_inverse)

    c = sub.add_parser("coords", help="write coordinates (two columns, TE-upper-LE-lower-TE)")
    c.add_argument("section", help="section file (TOML)")
    c.add_argument("-n", "--points", type=_int_range("points", 5, 100001), default=201,
                   help="number of points (default 201, as export)")
    c.add_argument("--spacing", choices=("cosine", "map"), default="cosine",
                   help="cosine in x on each surface, or uniform in circle angle (the map's own)")
    c.add_argument("-o", "--output", metavar="FILE", help="output file (default: standard output)")
    c.set_defaults(func=cmd_coords)

    pl = sub.add_parser("plot", help="PNG of the section, its streamlines and its Cp")
    pl.add_argument("section", help="section file (TOML)")
    _add_operating_point(pl)
    pl.add_argument("-o", "--output", required=True, metavar="FILE.png", help="output PNG")
    pl.set_defaults(func=cmd_plot)

    workers_t = _int_range("workers", 1, 1024)
    r = sub.add_parser("run", help="run a study: every run logged to HDF5")
    r.add_argument("study", help="study file (TOML), see docs/study-file.md")
    r.add_argument("--out", metavar="DIR", help="study folder (default results/STUDY-NAME)")
    r.add_argument("--workers", type=workers_t, help="worker processes (default: cores)")
    r.add_argument("--budget", type=_int_range("budget", 10, 10**9), metavar="EVALS",
                   help="evaluation budget of each run, replacing the study's")
    _add_engine(r)
    r.add_argument("--wait", action="store_true",
                   help="if another foilmap is writing the folder, wait for it (default: stop)")
    r.set_defaults(func=cmd_run)

    rs = sub.add_parser("resume", help="finish the unfinished runs of a study folder")
    rs.add_argument("folder", help="study folder")
    rs.add_argument("--workers", type=workers_t, help="worker processes (default: cores)")
    _add_engine(rs)
    rs.add_argument("--wait", action="store_true",
                    help="if another foilmap is writing the folder, wait for it (default: stop)")
    rs.set_defaults(func=cmd_resume)

    s_ = sub.add_parser("status", help="progress of every run of a study folder (also live)")
    s_.add_argument("folder", help="study folder")
    s_.add_argument("--json", action="store_true", help="print one JSON object")
    s_.set_defaults(func=cmd_status)

    b = sub.add_parser("best", help="the best feasible design as a section file")
    b.add_argument("folder", help="study folder")
    b.add_argument("--run", metavar="ID", help="one run's best (default: the whole study's)")
    b.add_argument("-o", "--output", required=True, metavar="SECTION.toml",
                   help="section file to write")
    b.set_defaults(func=cmd_best)

    pr = sub.add_parser("plot-run", help="PNG: convergence of every run and the best sections")
    pr.add_argument("folder", help="study folder")
    pr.add_argument("-o", "--output", required=True, metavar="FILE.png",
                    help="PNG to write")
    pr.set_defaults(func=cmd_plot_run)

    d = sub.add_parser("demo", help="a small real study on built-in defaults (under 2 minutes)")
    d.add_argument("--out", default=str(Path("results") / "demo"), metavar="DIR",
                   help="output folder (default results/demo; replaced on every demo)")
    d.add_argument("--workers", type=workers_t, help="worker processes (default: cores)")
    d.set_defaults(func=cmd_demo)

    nc = sub.add_parser("naca", help="coordinates of a NACA four-digit section (published formula)")
    nc.add_argument("code", help="four digits, for example 2412")
    nc.add_argument("-n", "--points", type=_int_range("points", 11, 100001), default=201,
                    help="number of points (default 201, cosine spacing)")
    nc.add_argument("--open-te", action="store_true",
                    help="the original open trailing edge (-0.1015) instead of the closed one")
    nc.add_argument("-o", "--output", required=True, metavar="FILE",
                    help="coordinates file to write (two columns)")
    nc.set_defaults(func=cmd_naca)

    ft = sub.add_parser("fit", help="conformal-map coefficients of a coordinates file")
    ft.add_argument("coords", help="coordinates file (two columns; see docs/coordinates.md)")
    ft.add_argument("-n", type=_int_range("coefficients", 1, 64), default=24, metavar="N",
                    help="coefficients to keep (default 24)")
    ft.add_argument("-o", "--output", required=True, metavar="SECTION.toml",
                    help="section file to write")
    ft.add_argument("--report", metavar="FILE.png",
                    help="overlay of given and fitted contours with the deviation along the chord")
    ft.set_defaults(func=cmd_fit)

    fr = sub.add_parser("fronts", help="compare the Pareto fronts of runs and studies")
    fr.add_argument("paths", nargs="+", metavar="DIR_OR_RUN", help="study folders or run logs")
    fr.add_argument("--reference", metavar="R1,R2[,R3]",
                    help="common hypervolume reference point (default: the studies' own)")
    fr.add_argument("--json", action="store_true", help="print one JSON object")
    fr.add_argument("--csv", metavar="FILE", help="one row per front design")
    fr.add_argument("-o", "--output", metavar="FILE.png", help="figure of fronts and statistics")
    fr.set_defaults(func=cmd_fronts)

    pk = sub.add_parser("pick", help="a design from a study's front as a section file")
    pk.add_argument("folder", help="study folder")
    how = pk.add_mutually_exclusive_group(required=True)
    how.add_argument("--nearest", metavar="F1=V1,F2=V2", help="nearest to these objective values")
    how.add_argument("--knee", action="store_true", help="the knee of the front")
    how.add_argument("--index", metavar="K_OR_ID", help="position in the merged front, or RUN#EVAL")
    pk.add_argument("--run", metavar="ID", help="only this run's front")
    pk.add_argument("-o", "--output", required=True, metavar="SECTION.toml",
                    help="section file to write")
    pk.set_defaults(func=cmd_pick)

    sc = sub.add_parser("screen", help="integral boundary-layer screening: transition, "
                        "separation and profile drag")
    sc.add_argument("section", help="section file (TOML)")
    _add_operating_point(sc)
    sc.add_argument("--re", required=True, type=_finite("Reynolds number", 1e4, 1e9),
                    metavar="RE", help="chord Reynolds number")
    sc.add_argument("--json", action="store_true", help="print one JSON object")
    sc.set_defaults(func=cmd_screen)

    ex = sub.add_parser("export", help="hand-off bundles for viscous analysis")
    ex.add_argument("selection", help="a section file, or a study folder with --best, --ids, --all")
    g = ex.add_mutually_exclusive_group()
    g.add_argument("--cl", type=_finite("lift coefficient", -20.0, 20.0), metavar="CL",
                   help="operating point (default: the design Cl of the run)")
    g.add_argument("--alpha", type=_finite("angle of attack", -89.0, 89.0), metavar="DEG",
                   help="export at this angle of attack, degrees (instead of the design Cl)")
    w = ex.add_mutually_exclusive_group()
    w.add_argument("--best", action="store_true", help="the best feasible design of the folder")
    w.add_argument("--ids", metavar="ID,...", help="front designs by id (RUN#EVAL, see fronts)")
    w.add_argument("--all", action="store_true", help="every design of the folder's fronts")
    ex.add_argument("--run", metavar="ID", help="with --best: one run's best")
    ex.add_argument("--re", type=_finite("Reynolds number", 1e4, 1e9), metavar="RE",
                    help="Reynolds number for the boundary-layer screening in design.json")
    ex.add_argument("--points", type=_int_range("points", 11, 100001), default=201,
                    help="coordinate points per design (default 201)")
    ex.add_argument("--spacing", choices=("cosine", "map", "curvature"), default="cosine",
                    help="point spacing: cosine in x, the map's own, or by curvature")
    ex.add_argument("--te-thickness", type=_finite("trailing-edge thickness", 0.0, 0.05),
                    default=0.0, metavar="T", help="open the trailing edge to T chords")
    ex.add_argument("--mesh", action="store_true", help="also a 2-D gmsh mesh (mesh extra)")
    ex.add_argument("--farfield", type=_finite("far field", 2.0, 1000.0), default=20.0,
                    metavar="CHORDS", help="far-field radius of the mesh")
    ex.add_argument("--first-cell", type=_finite("first cell height", 1e-8, 1e-2),
                    default=1e-5, metavar="H", help="first cell height at the wall, chords")
    ex.add_argument("-o", "--output", required=True, metavar="DIR",
                    help="folder to create for the bundle (new or empty)")
    ex.set_defaults(func=cmd_export)
    return p


def _terminate(signum, frame):  # noqa: ARG001 - signal handler signature
    raise SystemExit(128 + signum)


def _negative_values(argv: list[str]) -> list[str]:
    """Join a value that starts with a minus sign to its option (``--alpha -4:8:2`` →
    ``--alpha=-4:8:2``): argparse would take it for an option."""
    out: list[str] = []
    it = iter(argv)
    for tok in it:
        if tok.startswith("--") and "=" not in tok:
            nxt = next(it, None)
            if nxt is not None and len(nxt) > 1 and nxt[0] == "-" and (nxt[1].isdigit()
                                                                       or nxt[1] == "."):
                out.append(f"{tok}={nxt}")
                continue
            out.append(tok)
            if nxt is not None:
                out.append(nxt)
            continue
        out.append(tok)
    return out


def main(argv: list[str] | None = None) -> int:
    import signal

    # SIGTERM (a batch scheduler's walltime, a kill) closes files and stops workers cleanly
    signal.signal(signal.SIGTERM, _terminate)
    try:
        args = build_parser().parse_args(
            _negative_values(list(sys.argv[1:] if argv is None else argv)))
        return args.func(args)
    except InputError as exc:
        msg = str(exc)
        if not msg.startswith("foilmap"):
            msg = f"foilmap: {msg}"
        print(msg.splitlines()[0] if msg else "foilmap: bad input", file=sys.stderr)
        return EXIT_INPUT
    except BrokenPipeError:  # output piped into a pager or head that closed early
        sys.stderr.close()
        return EXIT_OK
    except KeyboardInterrupt:
        print("foilmap: interrupted; unfinished runs resume with foilmap resume", file=sys.stderr)
        return 130
    except SystemExit as exc:
        if isinstance(exc.code, int) and exc.code > 128:
            print("foilmap: terminated; unfinished runs resume with foilmap resume",
                  file=sys.stderr)
        raise


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
