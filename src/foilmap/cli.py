"""The ``foilmap`` command: a table of thin subcommands, each parsing its arguments, calling the
library (:mod:`foilmap.api`, the engines of :mod:`foilmap.run`) and formatting what it returns
(:mod:`foilmap.report`), with an exit code (0 done, 2 bad input).

Adding a command: write its options as ``_options_NAME(parser)`` and its body as
``cmd_NAME(args) -> int``, and register both with ``@command("NAME", "help", _options_NAME)``
above the body; the table (:data:`COMMANDS`) lists the commands in the order of registration.
Imports of the library happen inside the commands, so that ``foilmap --help`` stays quick.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from foilmap._version import __version__
from foilmap.errors import InputError

__all__ = ["main", "build_parser", "command", "COMMANDS"]

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


# --- the command table ---------------------------------------------------------------------------

@dataclass(frozen=True)
class Command:
    """One subcommand: its name, its one-line help, the function adding its options, its body."""

    name: str
    help: str
    options: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]


#: every subcommand, in the order ``foilmap --help`` lists them
COMMANDS: dict[str, Command] = {}


def command(name: str, help: str, options: Callable[[argparse.ArgumentParser], None]):
    """Register the decorated ``cmd_NAME(args) -> int`` as the subcommand ``name``."""

    def register(run: Callable[[argparse.Namespace], int]):
        if name in COMMANDS:
            raise ValueError(f"command {name!r} is registered twice")
        COMMANDS[name] = Command(name, help, options, run)
        return run

    return register


# --- shared option types and groups --------------------------------------------------------------

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


_WORKERS = _int_range("workers", 1, 1024)


def _section_argument(p: argparse.ArgumentParser) -> None:
    p.add_argument("section", help="section file (TOML)")


def _family_position(p: argparse.ArgumentParser) -> None:
    p.add_argument("--at", type=_finite("span position", 0.0, 1.0), metavar="POS",
                   help="with a family file: the section at this span position")


def _section_of(args):
    """The section a command reads: the file, or its section at ``--at`` for a family file."""
    from foilmap.store.familyfile import load_section_at

    return load_section_at(args.section, args.at)


def _json_option(p: argparse.ArgumentParser, what: str = "print one JSON object") -> None:
    p.add_argument("--json", action="store_true", help=what)


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


def _add_engine(p: argparse.ArgumentParser) -> None:
    p.add_argument("--workers", type=_WORKERS, help="worker processes (default: cores)")
    p.add_argument("--engine", choices=("local", "dask"),
                   help="local process pool (default) or a Dask cluster (cluster extra)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="Dask scheduler address, e.g. tcp://head:8786 (default: a LocalCluster)")
    p.add_argument("--wait", action="store_true",
                   help="if another foilmap is writing the folder, wait for it (default: stop)")


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


def _print_json(obj, indent: int = 1) -> None:
    """JSON output rounded for display (no 1.9999999999999996, no -0.0)."""
    from foilmap.report.text import display_values

    print(json.dumps(display_values(obj), indent=indent))


def _png_target(output: str, command: str) -> Path:
    """Check a PNG output path before any work is done."""
    out = Path(output)
    if out.suffix.lower() != ".png":
        raise InputError(f"{command}: output {str(out)!r} must end in .png")
    if not out.parent.exists():
        raise InputError(f"{command}: folder {str(out.parent)!r} does not exist")
    return out


def _write_png(out: Path, figure: Callable, stream=None, dpi: int = 120) -> None:
    """Draw ``figure()`` into a temporary file and rename it into place: whole or not at all.
    The line saying so goes to ``stream`` (standard error when standard output carries JSON)."""
    tmp = out.with_name(f".{out.stem}.part.png")
    try:
        figure().savefig(tmp, dpi=dpi)
        tmp.replace(out)
    finally:
        if tmp.exists():
            tmp.unlink()
    print(f"plot written to {out}", file=stream or sys.stdout)


# --- sections ------------------------------------------------------------------------------------

def _options_evaluate(p):
    _section_argument(p)
    _family_position(p)
    _add_operating_point(p)
    p.add_argument("--re", type=_finite("Reynolds number", 0.0, 1e10, open_lo=True),
                   metavar="RE", help="chord Reynolds number: adds Stratford's turbulent criterion")
    p.add_argument("--proxy-end", type=_finite("proxy end station", 0.0, 1.0, open_lo=True),
                   metavar="X", help="chord station where the recovery proxies stop (default: "
                   "the library's, 0.9)")
    _add_conditions(p)
    _json_option(p)
    p.add_argument("--table", metavar="FILE.csv", help="also write x, y, surface, cp, q per point")
    p.add_argument("--table-points", type=_int_range("table points", 5, 100001), default=201,
                   metavar="N", help="points in the --table file (default 201, cosine spacing)")


@command("evaluate", "figures of a section at an angle or a target Cl", _options_evaluate)
def cmd_evaluate(args) -> int:
    from foilmap.api.sections import evaluate
    from foilmap.report.text import format_summary
    from foilmap.store.sectionfile import write_text_atomic

    res = evaluate(_section_of(args), alpha=args.alpha, cl=args.cl, points=args.points,
                   reynolds=args.re, mach=args.mach,
                   **({} if args.proxy_end is None else {"proxy_end": args.proxy_end}),
                   sigma=_sigma(args), compressibility=args.compressibility)
    if args.json:
        _print_json(res.record, indent=2)
        if not res.ok:
            print(f"foilmap evaluate: section {res.name!r}: {res.record['status_text']}",
                  file=sys.stderr)
            return EXIT_INPUT
    else:
        res.check()
        used = ("severity", "thwaites") + (("stratford",) if args.re is not None else ())
        print(format_summary(res.record, used))
    if args.table:
        write_text_atomic(args.table, res.surface_table(args.table_points))
        if not args.json:
            print(f"surface distribution written to {args.table}")
    return EXIT_OK


def _options_sweep(p):
    _section_argument(p)
    _family_position(p)
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--alpha", type=_range("angle", -30.0, 30.0), metavar="A:B:STEP",
                   help="angles of attack in degrees, e.g. -4:10:0.5")
    g.add_argument("--cl", type=_range("lift coefficient", -5.0, 5.0), metavar="A:B:STEP",
                   help="lift coefficients, e.g. 0:1.2:0.1")
    _add_conditions(p)
    _json_option(p, "print {\"rows\": [...]} as JSON")
    p.add_argument("--csv", metavar="FILE.csv", help="also write the rows as CSV")
    p.add_argument("-o", "--output", metavar="FILE.png",
                   help="also draw Cl, Cm and the minimum-pressure envelope")


@command("sweep", "the operating range: figures over angles or Cl values", _options_sweep)
def cmd_sweep(args) -> int:
    from foilmap.api.sections import sweep
    from foilmap.report.sweep import format_sweep
    from foilmap.report.text import CAUTION
    from foilmap.store.sectionfile import write_text_atomic

    png = _png_target(args.output, "sweep") if args.output else None
    res = sweep(_section_of(args), alpha=args.alpha, cl=args.cl, mach=args.mach, sigma=_sigma(args),
                compressibility=args.compressibility)
    if args.csv:
        write_text_atomic(args.csv, res.to_csv())
    if png is not None:
        _write_png(png, res.figure, sys.stderr if args.json else None)
    if args.json:
        _print_json(res.record)
        return EXIT_OK
    print(format_sweep(res.record))
    if args.csv:
        print(f"rows written to {args.csv}")
    print(CAUTION)
    return EXIT_OK


def _options_report(p):
    p.add_argument("folders", nargs="+", metavar="DIR", help="study folders (side by side)")
    p.add_argument("-o", "--output", required=True, metavar="FILE.html", help="the page to write")


@command("report", "one self-contained HTML page of one or more studies", _options_report)
def cmd_report(args) -> int:
    from foilmap.api.folders import report_page

    out = Path(args.output)
    if out.suffix.lower() not in (".html", ".htm"):
        raise InputError(f"report: output {str(out)!r} must end in .html")
    if not out.parent.exists():
        raise InputError(f"report: folder {str(out.parent)!r} does not exist")
    report_page(args.folders, out)
    print(f"report of {len(args.folders)} study folder(s) written to {out} (one self-contained "
          "page: open it in a browser)")
    return EXIT_OK


def _options_inverse(p):
    p.add_argument("target", help="target CSV: columns x, surface, and cp or q (as evaluate "
                   "--table writes)")
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--cl", type=_finite("lift coefficient", -5.0, 5.0), metavar="CL",
                   help="design lift coefficient of the target")
    g.add_argument("--alpha", type=_finite("angle of attack", -30.0, 30.0), metavar="DEG",
                   help="angle of attack of the target, degrees")
    p.add_argument("--te-angle", type=_finite("trailing-edge angle", 0.0, 60.0), default=10.0,
                   metavar="DEG", help="trailing-edge angle of the design (default 10)")
    p.add_argument("-n", type=_int_range("coefficients", 1, 64), default=24,
                   help="shape-series coefficients of the fitted section (default 24)")
    p.add_argument("-o", "--output", required=True, metavar="SECTION.toml",
                   help="the section file to write")
    p.add_argument("--report", metavar="FILE.png", help="also draw target and achieved Cp")
    _json_option(p, "print the figures as JSON")


@command("inverse", "the section whose ideal-flow Cp is a target table", _options_inverse)
def cmd_inverse(args) -> int:
    from foilmap.api.sections import inverse
    from foilmap.report.inverse import format_inverse

    png = _png_target(args.report, "inverse") if args.report else None
    res = inverse(args.target, cl=args.cl, alpha=args.alpha, te_angle=args.te_angle, n=args.n)
    res.write(args.output)
    if png is not None:
        _write_png(png, res.figure, sys.stderr if args.json else None)
    if args.json:
        print(json.dumps({**res.record, "output": str(args.output)}, indent=1))
        return EXIT_OK
    print(format_inverse(res.record, args.target, args.output))
    return EXIT_OK


def _options_coords(p):
    _section_argument(p)
    p.add_argument("-n", "--points", type=_int_range("points", 5, 100001), default=201,
                   help="number of points (default 201, as export)")
    p.add_argument("--spacing", choices=("cosine", "map"), default="cosine",
                   help="cosine in x on each surface, or uniform in circle angle (the map's own)")
    p.add_argument("-o", "--output", metavar="FILE", help="output file (default: standard output)")


@command("coords", "write coordinates (two columns, TE-upper-LE-lower-TE)", _options_coords)
def cmd_coords(args) -> int:
    from foilmap.api.sections import as_section, coordinates
    from foilmap.report.text import coordinates_text
    from foilmap.store.sectionfile import write_text_atomic

    rec = as_section(args.section)
    xy = coordinates(rec, points=args.points, spacing=args.spacing)
    text = coordinates_text(xy[:, 0] + 1j * xy[:, 1], rec.name)
    if args.output:
        write_text_atomic(args.output, text)
        print(f"{args.points} points written to {args.output}")
    else:
        sys.stdout.write(text)
    return EXIT_OK


def _options_plot(p):
    _section_argument(p)
    _family_position(p)
    _add_operating_point(p)
    p.add_argument("-o", "--output", required=True, metavar="FILE.png", help="output PNG")


@command("plot", "PNG of the section, its streamlines and its Cp", _options_plot)
def cmd_plot(args) -> int:
    from foilmap.api.sections import evaluate

    out = _png_target(args.output, "plot")
    res = evaluate(_section_of(args), alpha=args.alpha, cl=args.cl, points=args.points).check()
    _write_png(out, res.figure, dpi=130)
    return EXIT_OK


# --- studies -------------------------------------------------------------------------------------

def _run_folder(study, out: Path, workers, budget, engine=None, scheduler=None,
                wait: bool = False, what: str = "foilmap run") -> int:
    from foilmap.report.progress import Progress
    from foilmap.report.study import format_run_summary
    from foilmap.run.local import drive_study
    from foilmap.store.lock import describe_holder

    def waiting(holder):
        print(f"foilmap: {str(out)!r} is in use by {describe_holder(holder)}; waiting for it",
              file=sys.stderr, flush=True)

    summaries = drive_study(study, out, workers=workers, budget=budget,
                          progress=Progress.for_study(study, budget), engine=engine,
                          scheduler=scheduler, wait=None if wait else 0.0, what=what,
                          on_wait=waiting)
    print(format_run_summary(study, out, summaries))
    return EXIT_OK if all(s.get("state") == "complete" for s in summaries) else 1


def _options_run(p):
    p.add_argument("study", help="study file (TOML), see docs/study-file.md")
    p.add_argument("--out", metavar="DIR", help="study folder (default results/STUDY-NAME)")
    p.add_argument("--budget", type=_int_range("budget", 10, 10**9), metavar="EVALS",
                   help="evaluation budget of each run, replacing the study's")
    _add_engine(p)


@command("run", "run a study: every run logged to HDF5", _options_run)
def cmd_run(args) -> int:
    from foilmap.store.studyfile import load_study

    study = load_study(args.study)
    out = Path(args.out) if args.out else Path("results") / study.name
    return _run_folder(study, out, args.workers, args.budget, args.engine, args.scheduler,
                       args.wait, "foilmap run")


def _options_resume(p):
    p.add_argument("folder", help="study folder")
    _add_engine(p)


@command("resume", "finish the unfinished runs of a study folder", _options_resume)
def cmd_resume(args) -> int:
    from foilmap.store.folder import StudyFolder

    out = Path(args.folder)
    study = StudyFolder(out).study
    return _run_folder(study, out, args.workers, None, args.engine, args.scheduler,
                       args.wait, "foilmap resume")


def _options_status(p):
    p.add_argument("folder", help="study folder")
    _json_option(p)


@command("status", "progress of every run of a study folder (also live)", _options_status)
def cmd_status(args) -> int:
    from foilmap.api.folders import status
    from foilmap.report.study import format_status

    st = status(args.folder)
    if args.json:
        _print_json(st)
    else:
        print("\n".join([format_status(st), *st["warnings"]]))
    return EXIT_OK


def _options_best(p):
    p.add_argument("folder", help="study folder")
    p.add_argument("--run", metavar="ID", help="one run's best (default: the whole study's)")
    p.add_argument("-o", "--output", required=True, metavar="SECTION.toml",
                   help="section file to write (a family file for a family study)")


@command("best", "the best feasible design as a section file", _options_best)
def cmd_best(args) -> int:
    from foilmap.api.folders import best_design
    from foilmap.report.study import design_warnings
    from foilmap.report.text import CAUTION
    from foilmap.store.sectionfile import format_section, write_text_atomic

    d = best_design(args.folder, args.run)
    if d.run.family:
        return _best_family(args, d)
    text = format_section(f"{d.study_name}-{d.run_id}", d.coefficients, d.te_angle_deg,
                          d.provenance())
    write_text_atomic(args.output, text)
    print(f"best feasible design of {d.run_id} (objective {d.fun:.6g}, evaluation "
          f"{d.evaluation}) written to {args.output}")
    for line in design_warnings(Path(args.folder)):
        if f" run {d.run_id} " in line:
            print(line)
    print(CAUTION)
    return EXIT_OK


def _best_family(args, d) -> int:
    """``best`` of a family study: the family file, and each station's price of continuity."""
    from foilmap.api.families import best_family
    from foilmap.report.family import format_stations
    from foilmap.report.text import CAUTION
    from foilmap.store.sectionfile import write_text_atomic

    best = best_family(args.folder, d.run_id)
    write_text_atomic(args.output, best.to_toml())
    print(f"best feasible family of {d.run_id} (objective {d.fun:.6g}, evaluation "
          f"{d.evaluation}) written to {args.output}")
    print(format_stations(best.stations))
    print(CAUTION)
    return EXIT_OK


def _options_family(p):
    p.add_argument("family", help="family file (TOML), as foilmap best writes for a family study")
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--at", type=_finite("span position", 0.0, 1.0), metavar="POS",
                   help="write the section at this span position as a section file")
    g.add_argument("--loft", type=_int_range("loft positions", 2, 10000), metavar="N",
                   help="write coordinates at N span positions, first station to last, in one "
                        "CSV table with a position column")
    p.add_argument("-o", "--output", required=True, metavar="FILE",
                   help="SECTION.toml with --at, FILE.csv with --loft")
    p.add_argument("--points", type=_int_range("points", 11, 100001), default=201, metavar="N",
                   help="points per section in the --loft table (default 201, cosine spacing)")


@command("family", "a family's section at a span position, or its loft table", _options_family)
def cmd_family(args) -> int:
    from foilmap.api.families import family_section, load_family, loft
    from foilmap.report.text import CAUTION
    from foilmap.store.sectionfile import format_section, write_text_atomic

    fam = load_family(args.family)
    if args.at is not None:
        rec = family_section(args.family, args.at)
        write_text_atomic(args.output, format_section(rec.name, rec.coefficients,
                                                      rec.te_angle_deg, rec.provenance))
        print(f"section at span position {args.at:g} of {args.family} written to "
              f"{args.output}")
    else:
        lf = loft(fam, args.loft, points=args.points)
        write_text_atomic(args.output, lf.to_csv())
        print(f"{args.loft} sections of {args.points} points, span positions "
              f"{lf.positions[0]:g} to {lf.positions[-1]:g}, written to {args.output}")
    print(CAUTION)
    return EXIT_OK


def _options_plot_run(p):
    p.add_argument("folder", help="study folder")
    p.add_argument("-o", "--output", required=True, metavar="FILE.png", help="PNG to write")


@command("plot-run", "PNG: convergence of every run and the best sections", _options_plot_run)
def cmd_plot_run(args) -> int:
    from foilmap.report.study import runs_figure

    out = _png_target(args.output, "plot-run")
    _write_png(out, lambda: runs_figure(Path(args.folder)))
    return EXIT_OK


def _options_demo(p):
    p.add_argument("--out", default=str(Path("results") / "demo"), metavar="DIR",
                   help="output folder (default results/demo; replaced on every demo)")
    p.add_argument("--workers", type=_WORKERS, help="worker processes (default: cores)")


@command("demo", "a small real study on built-in defaults (under 2 minutes)", _options_demo)
def cmd_demo(args) -> int:
    from foilmap.demo import run_demo

    return run_demo(Path(args.out), args.workers, _run_folder)


# --- files ---------------------------------------------------------------------------------------

def _options_naca(p):
    p.add_argument("code", help="four digits, for example 2412")
    p.add_argument("-n", "--points", type=_int_range("points", 11, 100001), default=201,
                   help="number of points (default 201, cosine spacing)")
    p.add_argument("--open-te", action="store_true",
                   help="the original open trailing edge (-0.1015) instead of the closed one")
    p.add_argument("-o", "--output", required=True, metavar="FILE",
                   help="coordinates file to write (two columns)")


@command("naca", "coordinates of a NACA four-digit section (published formula)", _options_naca)
def cmd_naca(args) -> int:
    from foilmap.report.text import xy_lines
    from foilmap.section.naca import naca4_coordinates, parse_naca4
    from foilmap.store.sectionfile import write_text_atomic

    parse_naca4(args.code)
    xy = naca4_coordinates(args.code, args.points, closed_te=not args.open_te)
    edge = "open" if args.open_te else "closed"
    head = f"NACA {args.code.strip().upper().removeprefix('NACA').strip()}  ({edge} trailing edge)"
    write_text_atomic(args.output, f"{head}\n{xy_lines(xy[:, 0], xy[:, 1])}\n")
    print(f"{args.points} points written to {args.output}")
    return EXIT_OK


def _options_fit(p):
    p.add_argument("coords", help="coordinates file (two columns; see docs/coordinates.md)")
    p.add_argument("-n", type=_int_range("coefficients", 1, 64), default=24, metavar="N",
                   help="coefficients to keep (default 24)")
    p.add_argument("-o", "--output", required=True, metavar="SECTION.toml",
                   help="section file to write")
    p.add_argument("--report", metavar="FILE.png",
                   help="overlay of given and fitted contours with the deviation along the chord")
    _json_option(p, "print the fit's figures as JSON")


@command("fit", "conformal-map coefficients of a coordinates file", _options_fit)
def cmd_fit(args) -> int:
    from foilmap.api.sections import fit
    from foilmap.report.text import CAUTION, format_fit

    png = _png_target(args.report, "fit") if args.report else None
    res = fit(args.coords, n=args.n)
    res.write(args.output)
    if args.json:
        if png is not None:
            _write_png(png, res.figure, sys.stderr)
        _print_json({**res.record, "output": str(args.output)})
        return EXIT_OK
    print(format_fit(res.record, args.output))
    if png is not None:
        _write_png(png, res.figure)
    print(CAUTION)
    return EXIT_OK


# --- fronts and designs --------------------------------------------------------------------------

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


def _options_fronts(p):
    p.add_argument("paths", nargs="+", metavar="DIR_OR_RUN", help="study folders or run logs")
    p.add_argument("--reference", metavar="R1,R2[,R3]",
                   help="common hypervolume reference point (default: the studies' own)")
    _json_option(p)
    p.add_argument("--csv", metavar="FILE", help="one row per front design")
    p.add_argument("-o", "--output", metavar="FILE.png", help="figure of fronts and statistics")


@command("fronts", "compare the Pareto fronts of runs and studies", _options_fronts)
def cmd_fronts(args) -> int:
    from foilmap.api.folders import compare_fronts
    from foilmap.store.sectionfile import write_text_atomic

    png = _png_target(args.output, "fronts") if args.output else None
    res = compare_fronts(args.paths, reference=_reference(args.reference))
    if args.json:
        _print_json(res.record)
    else:
        print(res.text())
    if args.csv:
        write_text_atomic(args.csv, res.to_csv())
        if not args.json:
            print(f"front designs written to {args.csv}")
    if png is not None:
        _write_png(png, res.figure, sys.stderr if args.json else None, dpi=110)
    return EXIT_OK


def _options_pick(p):
    p.add_argument("folder", help="study folder")
    how = p.add_mutually_exclusive_group(required=True)
    how.add_argument("--nearest", metavar="F1=V1,F2=V2", help="nearest to these objective values")
    how.add_argument("--knee", action="store_true", help="the knee of the front")
    how.add_argument("--index", metavar="K_OR_ID", help="position in the merged front, or RUN#EVAL")
    p.add_argument("--run", metavar="ID", help="only this run's front")
    p.add_argument("-o", "--output", required=True, metavar="SECTION.toml",
                   help="section file to write")


@command("pick", "a design from a study's front as a section file", _options_pick)
def cmd_pick(args) -> int:
    from foilmap.api.folders import pick
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
    d = pick(args.folder, nearest=nearest, knee=args.knee, index=args.index, run=args.run)
    prov = {**d.provenance(), "design": d.id,
            **{f"objective_{k}": v for k, v in d.objectives.items()}}
    if d.run.family:  # a family study's front: the family file
        from foilmap.api.families import family_design
        from foilmap.store.familyfile import format_family

        fam = family_design(args.folder, d).family
        write_text_atomic(args.output, format_family(f"{d.run_id}-{d.evaluation}", fam, prov))
    else:
        write_text_atomic(args.output, format_section(f"{d.run_id}-{d.evaluation}",
                                                      d.coefficients, d.te_angle_deg, prov))
    vals = ", ".join(f"{k} {v:.6g}" for k, v in d.objectives.items())
    print(f"design {d.id} ({vals}) written to {args.output}")
    print(CAUTION)
    return EXIT_OK


def _options_screen(p):
    _section_argument(p)
    _add_operating_point(p)
    p.add_argument("--re", required=True, type=_finite("Reynolds number", 1e4, 1e9),
                   metavar="RE", help="chord Reynolds number")
    _json_option(p)


@command("screen", "integral boundary-layer screening: transition, separation and profile drag",
         _options_screen)
def cmd_screen(args) -> int:
    from foilmap.api.sections import SCREEN_NOTE, screen
    from foilmap.report.text import CAUTION, format_screen

    res = screen(args.section, reynolds=args.re, cl=args.cl, alpha=args.alpha,
                 points=args.points)
    if args.json:
        _print_json(res.record, indent=2)
        return EXIT_OK
    print(format_screen(res.record, res.record["name"], args.re))
    print(SCREEN_NOTE)
    print(CAUTION)
    return EXIT_OK


def _options_export(p):
    p.add_argument("selection", help="a section file, or a study folder with --best, --ids, --all")
    g = p.add_mutually_exclusive_group()
    g.add_argument("--cl", type=_finite("lift coefficient", -20.0, 20.0), metavar="CL",
                   help="operating point (default: the design Cl of the run)")
    g.add_argument("--alpha", type=_finite("angle of attack", -89.0, 89.0), metavar="DEG",
                   help="export at this angle of attack, degrees (instead of the design Cl)")
    w = p.add_mutually_exclusive_group()
    w.add_argument("--best", action="store_true", help="the best feasible design of the folder")
    w.add_argument("--ids", metavar="ID,...", help="front designs by id (RUN#EVAL, see fronts)")
    w.add_argument("--all", action="store_true", help="every design of the folder's fronts")
    p.add_argument("--run", metavar="ID", help="with --best: one run's best")
    p.add_argument("--re", type=_finite("Reynolds number", 1e4, 1e9), metavar="RE",
                   help="Reynolds number for the boundary-layer screening in design.json")
    p.add_argument("--points", type=_int_range("points", 11, 100001), default=201,
                   help="coordinate points per design (default 201)")
    p.add_argument("--spacing", choices=("cosine", "map", "curvature"), default="cosine",
                   help="point spacing: cosine in x, the map's own, or by curvature")
    p.add_argument("--te-thickness", type=_finite("trailing-edge thickness", 0.0, 0.05),
                   default=0.0, metavar="T", help="open the trailing edge to T chords")
    p.add_argument("--mesh", action="store_true", help="also a 2-D gmsh mesh (mesh extra)")
    p.add_argument("--farfield", type=_finite("far field", 2.0, 1000.0), default=20.0,
                   metavar="CHORDS", help="far-field radius of the mesh")
    p.add_argument("--first-cell", type=_finite("first cell height", 1e-8, 1e-2),
                   default=1e-5, metavar="H", help="first cell height at the wall, chords")
    p.add_argument("-o", "--output", required=True, metavar="DIR",
                   help="folder to create for the bundle (new or empty)")


@command("export", "hand-off bundles for viscous analysis", _options_export)
def cmd_export(args) -> int:
    from foilmap.api.sections import export
    from foilmap.report.progress import CountProgress
    from foilmap.report.text import CAUTION

    def bar(count):
        return CountProgress("exporting", count) if count > 1 else None

    res = export(args.selection, args.output, cl=args.cl, alpha=args.alpha, best=args.best,
                 ids=args.ids, all_designs=args.all, run=args.run, reynolds=args.re,
                 points=args.points, spacing=args.spacing, te_thickness=args.te_thickness,
                 mesh=args.mesh, farfield=args.farfield, first_cell=args.first_cell,
                 progress=bar)
    print(f"{len(res.rows)} design(s) exported to {res.folder} (summary.csv, one folder per "
          "design)")
    if args.te_thickness > 0:
        print(f"trailing edge opened to {args.te_thickness:g} chords by a linear thickness blend "
              f"(points move by up to {args.te_thickness / 2:g} chords; the LE does not move)")
    print(CAUTION)
    return EXIT_OK


# --- the parser and the entry point --------------------------------------------------------------

#: the order ``foilmap --help`` lists the commands in (commands not named here follow, in the
#: order they were registered)
ORDER = ("evaluate", "sweep", "report", "inverse", "coords", "plot", "run", "resume", "status",
         "best", "family", "plot-run", "demo", "naca", "fit", "fronts", "pick", "screen",
         "export")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="foilmap", description=(
        "Search and evaluate aerofoil and hydrofoil sections by generalised conformal maps. "
        "Ideal-flow screening: check chosen sections by viscous analysis and tests."))
    p.add_argument("--version", action="version", version=f"foilmap {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser, metavar="COMMAND")
    names = [n for n in ORDER if n in COMMANDS] + [n for n in COMMANDS if n not in ORDER]
    for name in names:
        c = COMMANDS[name]
        sp = sub.add_parser(c.name, help=c.help)
        c.options(sp)
        sp.set_defaults(func=c.run)
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


def entry() -> None:
    """The ``foilmap`` command: :func:`main`, then leave with its exit code.  h5py's messages
    about a file whose writes the disk refused are dropped (the failure has its one line), and a
    process that holds a run log HDF5 could not close (a full disk) leaves without collecting it
    (:func:`~foilmap.store.runlog.leave_if_unclosed`): collecting it would crash the process."""
    from foilmap.store.runlog import leave_if_unclosed, quiet_refused_writes

    quiet_refused_writes()
    try:
        code = main()
    except SystemExit as exc:
        code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    leave_if_unclosed(code)
    sys.exit(code)


if __name__ == "__main__":  # pragma: no cover
    entry()
