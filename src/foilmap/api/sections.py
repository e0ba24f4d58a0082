"""What the section commands do, as library calls that return result objects.

Every call takes a section as a path to a section file, the :class:`SectionRecord` that
:func:`foilmap.load_section` returns, or a one-section :class:`SectionSet`; every angle in and out
is in degrees (the kernels work in radians); every figure is the number the matching command
prints with ``--json`` (``foilmap evaluate`` ↔ :func:`evaluate`, ``sweep`` ↔ :func:`sweep`,
``inverse`` ↔ :func:`inverse`, ``fit`` ↔ :func:`fit`, ``screen`` ↔ :func:`screen`, ``coords`` ↔
:func:`coordinates`, ``export`` ↔ :func:`export`).  A fitted section's angles, Cl and Cm are
measured from its source chord line (``reference_le``), by the API as by the commands.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from foilmap.errors import InputError
from foilmap.section._kconst import DEFAULT_PROXY_END
from foilmap.section.conformal import SectionSet
from foilmap.store.sectionfile import SectionRecord, format_section, load_section

__all__ = ["as_section", "evaluate", "Evaluated", "sweep", "Sweep", "inverse", "InverseDesign",
           "fit", "Fitted", "screen", "Screening", "coordinates", "export", "Exported",
           "SCREEN_NOTE"]

SCREEN_NOTE = ("First screening by integral boundary-layer methods (Thwaites, Michel, Head, "
               "Squire-Young) on the ideal-flow speed: not a replacement for a viscous solver.")


@dataclass(frozen=True)
class _Section:
    """A section resolved from what a caller gave: its name, the batch of one, the chord line."""

    name: str
    sections: SectionSet
    reference_le: complex | None
    provenance: dict
    source: str | None = None  # the file it was read from

    @property
    def chord_line(self) -> str:
        return "source" if self.reference_le is not None else "own"

    def record(self) -> SectionRecord:
        return SectionRecord(self.name, math.degrees(float(self.sections.te_angle[0])),
                             self.sections.coefficients[0].copy(), dict(self.provenance),
                             self.reference_le)


def _resolve(section, what: str = "section") -> _Section:
    if isinstance(section, _Section):
        return section
    if isinstance(section, (str, os.PathLike)):
        rec = load_section(section)
        return _Section(rec.name, rec.to_set(), rec.reference_le, dict(rec.provenance),
                        str(section))
    if isinstance(section, SectionRecord):
        return _Section(section.name, section.to_set(), section.reference_le,
                        dict(section.provenance))
    if isinstance(section, SectionSet):
        if len(section) != 1:
            raise InputError(f"{what}: the SectionSet holds {len(section)} sections; pass one "
                             "at a time (sections[i])")
        ref = getattr(section, "reference_le", None)
        if ref is not None:
            ref = complex(np.asarray(ref).reshape(-1)[0])
        return _Section("section", section, ref, {})
    raise InputError(f"{what}: {type(section).__name__} is not a section (give a section file's "
                     "path, a SectionRecord from foilmap.load_section, or a SectionSet of one)")


def as_section(section) -> SectionRecord:
    """A section file's path, a :class:`SectionRecord` or a one-section :class:`SectionSet` as
    a :class:`SectionRecord` (name, coefficients, trailing-edge angle, chord line)."""
    return _resolve(section).record()


def _number(what: str, name: str, value, lo: float | None = None, hi: float | None = None,
            open_lo: bool = False, whole: bool = False) -> float:
    """``value`` as a finite number in [lo, hi] (or (lo, hi]), else one line naming it."""
    ok = isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool)
    if ok and whole:
        ok = math.isfinite(value) and float(value) == int(value)
    if not ok:
        raise InputError(f"{what}: {name} = {value!r} is not a {'whole ' if whole else ''}number")
    v = float(value)
    bad = not math.isfinite(v)
    bad |= lo is not None and (v <= lo if open_lo else v < lo)
    bad |= hi is not None and v > hi
    if bad:
        lo_s = "" if lo is None else (f"> {lo:g}" if open_lo else f">= {lo:g}")
        hi_s = "" if hi is None else f"<= {hi:g}"
        allowed = " and ".join(s for s in (lo_s, hi_s) if s) or "finite"
        raise InputError(f"{what}: {name} = {value!r} is out of range (allowed: {allowed})")
    return int(v) if whole else v


def _operating_point(cl, alpha, what: str, alpha_limit: float = 89.0,
                     cl_limit: float = 20.0) -> dict:
    """``cl`` or ``alpha`` (degrees; a number, or a sequence for a sweep) as the kernel's
    keywords (radians), checked as the commands check them."""
    if (cl is None) == (alpha is None):
        raise InputError(f"{what}: give exactly one of cl and alpha (degrees)")
    name, value, limit = ("cl", cl, cl_limit) if cl is not None else ("alpha", alpha,
                                                                      alpha_limit)
    values = np.atleast_1d(np.asarray(value, dtype=object))
    if values.ndim != 1 or values.size == 0:
        raise InputError(f"{what}: {name} must be a number or a list of numbers")
    checked = np.array([_number(what, name, v, -limit, limit) for v in values])
    out = checked if np.ndim(value) else checked[0]
    return {"cl": out} if name == "cl" else {"alpha": np.radians(out)}


def _conditions(what: str, points=None, reynolds=None, mach=None, sigma=None,
                proxy_end=None) -> None:
    """The options the commands check, checked alike for the library's callers."""
    if points is not None:
        _number(what, "points", points, 32, 65536, whole=True)
    if reynolds is not None:
        _number(what, "reynolds", reynolds, 0.0, 1e10, open_lo=True)
    if mach is not None:
        _number(what, "mach", mach, 0.0, 0.95)
    if sigma is not None:
        _number(what, "sigma", sigma, 0.0, 1e6, open_lo=True)
    if proxy_end is not None:
        _number(what, "proxy_end", proxy_end, 0.0, 1.0, open_lo=True)


def _analyse(sec: _Section, cl, alpha, what: str, **kw):
    from foilmap.section.evaluation import analyse

    return analyse(sec.sections, reference_le=sec.reference_le,
                   **_operating_point(cl, alpha, what), **kw)


def _check_ok(name: str, an) -> None:
    """One line (an :class:`InputError`) when the evaluation is not usable."""
    from foilmap.section.status import Status, describe

    st = int(an.evaluation.status[0])
    if st == Status.ABOVE_MAX_LIFT:
        from foilmap.section.flow import max_ideal_cl

        top = float(max_ideal_cl(an.sections, an.angle_frame)[0])
        raise InputError(f"section {name!r} cannot reach that Cl: the ideal flow's largest Cl "
                         f"(at 90 degrees in the circle plane, far beyond any stall) is "
                         f"{top:.4g}; ask for less")
    if st != Status.OK:
        raise InputError(f"section {name!r} is not usable: {describe(st)} "
                         f"(status {Status(st).label})")


class _Record:
    """A result whose figures are a JSON-ready dict (``.record``), also read as attributes."""

    record: dict

    def __getattr__(self, key):
        rec = self.__dict__.get("record")
        if rec is not None and key in rec:
            return rec[key]
        raise AttributeError(f"{type(self).__name__} has no figure {key!r}"
                             + ("" if rec is None else f"; figures: {', '.join(rec)}"))


# --- evaluate ------------------------------------------------------------------------------------

class Evaluated(_Record):
    """One section at one operating point: ``.record`` is what ``foilmap evaluate --json``
    prints (``cl``, ``alpha_deg``, ``cp_min``, ``peak_suction``, ``thickness``, … and the
    operating-range figures ``critical_mach``, ``cavitation_margin``, …), each also an
    attribute (``result.cl``); ``.analysis`` keeps the kernel's state for tables and plots."""

    def __init__(self, name: str, record: dict, analysis, section: _Section):
        self.name = name
        self.record = record
        self.analysis = analysis
        self._section = section

    def __repr__(self) -> str:
        return (f"Evaluated({self.name!r}, status={self.record['status']!r}, "
                f"cl={self.record['cl']}, alpha_deg={self.record['alpha_deg']})")

    @property
    def ok(self) -> bool:
        """True when the section is valid and the figures certified (status ``ok``)."""
        return self.record["status"] == "ok"

    @property
    def section(self) -> SectionRecord:
        return self._section.record()

    def check(self) -> "Evaluated":
        """The result itself, or an :class:`InputError` (one line) when it is not usable."""
        _check_ok(self.name, self.analysis)
        return self

    def distribution(self, points: int = 201, spacing: str = "cosine"):
        """Surface points (complex, chords), upper-surface flags and q/V∞, shapes (points,)."""
        from foilmap.section.evaluation import surface_distribution

        zc, upper, q = surface_distribution(self.analysis, points, spacing)
        return zc[0], upper[0], q[0]

    def surface_table(self, points: int = 201) -> str:
        """The CSV text ``foilmap evaluate --table`` writes (x, y, surface, cp, q)."""
        from foilmap.report.text import surface_table_csv

        zc, upper, q = self.distribution(points, "cosine")
        return surface_table_csv(zc, upper, q, self.name)

    def figure(self):
        """The figure ``foilmap plot`` draws: the section, its streamlines and its Cp."""
        from foilmap.report.plots import section_figure

        self.check()
        return section_figure(self.analysis, self.name)


def evaluate(section, *, alpha: float | None = None, cl: float | None = None,
             points: int = 256, reynolds: float | None = None,
             proxy_end: float = DEFAULT_PROXY_END,
             mach: float | None = None, sigma: float | None = None,
             compressibility: str = "karman-tsien") -> Evaluated:
    """Figures of one section at an angle of attack (``alpha``, degrees, to its chord line) or a
    target lift coefficient (``cl``), as ``foilmap evaluate --json`` prints them.

    ``reynolds`` adds Stratford's turbulent criterion; ``mach`` the compressible Cp by the
    ``compressibility`` rule (``karman-tsien`` or ``prandtl-glauert``); ``sigma`` (the
    cavitation number, :func:`foilmap.cavitation_number` from speed, depth and temperature) the
    cavitation margin and the cavitation-free Cl range.  An invalid section is a status
    (``.ok`` False, ``.check()`` raises), not an exception.
    """
    from foilmap.report.text import evaluation_record
    from foilmap.section.operating import RULES, condition_figures
    from foilmap.section.status import Status

    if compressibility not in RULES:
        raise InputError(f"compressibility rule {compressibility!r} is not one of "
                         f"{', '.join(RULES)}")
    _conditions("evaluate", points, reynolds, mach, sigma, proxy_end)
    sec = _resolve(section, "evaluate")
    proxies = ("severity", "thwaites") + (("stratford",) if reynolds is not None else ())
    an = _analyse(sec, cl, alpha, "evaluate", points=points, proxies=proxies,
                  reynolds=reynolds, proxy_end=proxy_end)
    record = evaluation_record(an.evaluation, 0, sec.name)
    if int(an.evaluation.status[0]) == Status.OK:
        record["chord_line"] = sec.chord_line
        record.update(condition_figures(an.evaluation.cp_min[0], rule=compressibility,
                                        mach=mach, sigma=sigma, section=sec.sections,
                                        reference_le=sec.reference_le))
    return Evaluated(sec.name, record, an, sec)


# --- sweep ---------------------------------------------------------------------------------------

class Sweep(_Record):
    """One section over angles or lift coefficients: ``.rows`` (one dict per angle, as
    ``foilmap sweep --json`` prints them), ``.record`` (the whole JSON object),
    ``.to_frame()`` (pandas), ``.to_csv()`` and ``.figure()``."""

    def __init__(self, record: dict):
        self.record = record

    def __repr__(self) -> str:
        return f"Sweep({self.record['name']!r}, {len(self.rows)} rows)"

    def __len__(self) -> int:
        return len(self.record["rows"])

    def to_frame(self):
        """The rows as a pandas DataFrame (needs pandas)."""
        try:
            import pandas as pd
        except ImportError:  # pragma: no cover - depends on the environment
            raise InputError("to_frame needs pandas (pip install pandas); .rows has the same "
                             "figures as dicts") from None
        return pd.DataFrame(self.record["rows"])

    def to_csv(self) -> str:
        """The CSV text ``foilmap sweep --csv`` writes."""
        from foilmap.report.sweep import sweep_csv

        return sweep_csv(self.rows, self.record["name"])

    def figure(self):
        """Cl, Cm and the minimum-pressure envelope (the figure of ``foilmap sweep -o``)."""
        from foilmap.report.sweep import sweep_figure

        return sweep_figure(self.rows, self.record["name"], self.record["cavitation_number"],
                            self.record["mach"])


def sweep(section, *, alpha=None, cl=None, mach: float | None = None,
          sigma: float | None = None, compressibility: str = "karman-tsien",
          points: int = 256) -> Sweep:
    """One section over angles of attack (``alpha``: degrees, a number or a sequence) or lift
    coefficients (``cl``), as ``foilmap sweep --json`` prints it: per row Cl, Cm c/4, the peak
    suction and its station on each surface, recovery severity, Thwaites separation, critical
    Mach number; with ``mach`` the compressible peaks, with ``sigma`` the cavitation margin."""
    from foilmap.report.sweep import sweep_rows
    from foilmap.report.text import CAUTION
    from foilmap.section.operating import RULES
    from foilmap.section.operating import sweep as sweep_kernel

    if compressibility not in RULES:
        raise InputError(f"compressibility rule {compressibility!r} is not one of "
                         f"{', '.join(RULES)}")
    _conditions("sweep", points, None, mach, sigma)
    sec = _resolve(section, "sweep")
    kw = _operating_point(cl, alpha, "sweep", alpha_limit=30.0, cl_limit=5.0)
    res = sweep_kernel(sec.sections, mach=mach, rule=compressibility,
                       reference_le=sec.reference_le, points=points, **kw)
    rows = sweep_rows(res, sigma)
    if not any(r["cl"] is not None for r in rows):
        raise InputError(f"sweep: section {sec.name!r} has no usable row in the range "
                         f"(first row: {rows[0]['status']})")
    return Sweep({"name": sec.name, "chord_line": sec.chord_line,
                  "compressibility_rule": compressibility, "mach": mach,
                  "cavitation_number": sigma, "rows": rows, "caution": CAUTION})


# --- inverse -------------------------------------------------------------------------------------

class InverseDesign(_Record):
    """The section whose ideal-flow Cp is a target: ``.section`` (a :class:`SectionRecord`,
    written by ``.write(path)``), ``.cp_rms`` (the RMS Cp deviation from the target) and
    ``.record`` (what ``foilmap inverse --json`` prints, without ``output``)."""

    def __init__(self, record: dict, section: SectionRecord, result):
        self.record = record
        self.section = section
        self.result = result  # the kernel's InverseSection

    def __repr__(self) -> str:
        return (f"InverseDesign({self.section.name!r}, cl={self.record['cl']}, "
                f"cp_rms={self.cp_rms:.3g})")

    @property
    def cp_rms(self) -> float:
        return self.record["rms_cp_deviation"]

    def write(self, path) -> None:
        """Write the section file (whole or not at all)."""
        _write_section(path, self.section)

    def figure(self):
        """Target and achieved Cp over the section (the figure of ``inverse --report``)."""
        from foilmap.report.inverse import inverse_figure

        return inverse_figure(self.result, self.section.name)


def _write_section(path, rec: SectionRecord) -> None:
    from foilmap.store.sectionfile import write_text_atomic

    write_text_atomic(path, format_section(rec.name, rec.coefficients, rec.te_angle_deg,
                                           rec.provenance, reference_le=rec.reference_le))


def inverse(target, *, cl: float | None = None, alpha: float | None = None,
            te_angle: float | None = None, n: int | None = None,
            name: str | None = None) -> InverseDesign:
    """The section whose ideal-flow Cp is ``target`` (a target table's path, or a
    :class:`~foilmap.section.inverse.Target`) at lift coefficient ``cl`` or angle ``alpha``
    (degrees), with trailing-edge angle ``te_angle`` (degrees, default 10) fitted with ``n``
    coefficients (default 24); the figures of ``foilmap inverse --json``."""
    from foilmap.report.inverse import inverse_record
    from foilmap.section.inverse import Target, inverse_section
    from foilmap.store.targetfile import load_target

    te_angle = _number("inverse", "te_angle", 10.0 if te_angle is None else te_angle, 0.0, 60.0)
    n = _number("inverse", "n", 24 if n is None else n, 1, 64, whole=True)
    if isinstance(target, Target):
        source, tgt = "<target>", target
        name = name or "inverse"
    else:
        source, tgt = str(target), load_target(target)
        name = name or Path(target).stem
    kw = _operating_point(cl, alpha, "inverse", alpha_limit=30.0, cl_limit=5.0)
    res = inverse_section(tgt, te_angle=math.radians(te_angle), coefficients=n, **kw)
    rec = inverse_record(res, name)
    if not (math.isfinite(res.rms_deviation) and math.isfinite(res.cl)) \
            or res.fit.max_deviation > 0.01:
        raise InputError(f"inverse: target {source!r} gives no usable section at this "
                         "operating point (the contour folds or does not close); check the "
                         "target and the operating point")
    prov = {"inverse_of": source, "method": "Lighthill inverse, least closure change",
            "design_cl": res.cl, "design_alpha_deg": math.degrees(res.alpha),
            "rms_cp_deviation": rec["rms_cp_deviation"],
            "max_cp_deviation": rec["max_cp_deviation"],
            "fit_max_deviation_chords": res.fit.max_deviation}
    section = SectionRecord(name, math.degrees(res.fit.te_angle),
                            np.asarray(res.fit.coefficients, dtype=complex), prov)
    return InverseDesign(rec, section, res)


# --- fit -----------------------------------------------------------------------------------------

class Fitted(_Record):
    """A coordinates file fitted by the shape series: ``.section`` (a :class:`SectionRecord`
    whose angles are measured from the file's chord line), ``.deviation`` (the largest
    distance of the fitted contour from the given one, chords) and ``.record`` (what
    ``foilmap fit --json`` prints)."""

    def __init__(self, record: dict, section: SectionRecord, coords, result):
        self.record = record
        self.section = section
        self.coords = coords
        self.result = result  # the kernel's SectionFit

    def __repr__(self) -> str:
        return (f"Fitted({self.section.name!r}, n={self.record['coefficients_fitted']}, "
                f"deviation={self.deviation:.2e})")

    @property
    def deviation(self) -> float:
        return self.record["max_deviation_chords"]

    def write(self, path) -> None:
        """Write the section file (whole or not at all)."""
        _write_section(path, self.section)

    def figure(self):
        """Given and fitted contours with the deviation along the chord (``fit --report``)."""
        from foilmap.report.plots import fit_figure

        return fit_figure(self.coords, self.result)


def fit(coords, *, n: int = 24, name: str | None = None) -> Fitted:
    """Conformal-map coefficients of a contour: a coordinates file's path, a
    :class:`~foilmap.store.coordfile.Coordinates`, or points of shape (M, 2) from the trailing
    edge over one surface to the other; kept to ``n`` coefficients (1 to 64)."""
    from foilmap.section.fitting import fit_section
    from foilmap.store.coordfile import Coordinates, load_coordinates, normalise_loop

    n = _number("fit", "n", n, 1, 64, whole=True)
    if isinstance(coords, Coordinates):
        c, source = coords, coords.name or "<coordinates>"
    elif isinstance(coords, (str, os.PathLike)):
        c, source = load_coordinates(coords), str(coords)
    else:
        xy = np.asarray(coords, dtype=float)
        if xy.ndim != 2 or xy.shape[1] != 2 or xy.shape[0] < 10:
            raise InputError("fit: points must have shape (M, 2) with M >= 10, from the "
                             "trailing edge over one surface and back")
        c, source = normalise_loop(xy, name or "section"), "<points>"
    f = fit_section(c.xy, c.le_index, int(n), source_le=c.source_le)
    label = name or c.name or "section"
    prov = {"fitted_from": source, "coefficients_fitted": int(n),
            "max_deviation_chords": f.max_deviation, "rms_deviation_chords": f.rms_deviation,
            "te_gap_chords": c.te_gap}
    section = SectionRecord(label, math.degrees(f.te_angle),
                            np.asarray(f.coefficients, dtype=complex), prov, f.reference_le)
    record = {"name": label, "points_read": c.rows_read, "layout": c.layout,
              "reversed": c.reversed, "te_gap_chords": c.te_gap,
              "closing_shift_chords": c.closing_shift,
              "te_angle_deg": math.degrees(f.te_angle), "converged": bool(f.converged),
              "iterations": int(f.iterations), "coefficients_fitted": int(n),
              "max_deviation_chords": f.max_deviation, "rms_deviation_chords": f.rms_deviation,
              "full_terms": int(f.full_terms), "full_max_deviation_chords": f.full_max_deviation,
              "reference_le": [f.reference_le.real, f.reference_le.imag],
              "coefficients": [[float(a.real), float(a.imag)] for a in f.coefficients]}
    return Fitted(record, section, c, f)


# --- screen --------------------------------------------------------------------------------------

class Screening(_Record):
    """Integral boundary-layer screening of one section at one operating point: ``.cd``
    (Squire–Young profile drag) and per surface transition and separation stations;
    ``.record`` is what ``foilmap screen --json`` prints."""

    def __init__(self, record: dict):
        self.record = record

    def __repr__(self) -> str:
        return f"Screening({self.record['name']!r}, cl={self.record['cl']}, cd={self.cd})"


def screen(section, *, reynolds: float, cl: float | None = None, alpha: float | None = None,
           points: int = 256) -> Screening:
    """Transition, separation and profile drag by integral boundary-layer methods on the ideal
    flow of one section at ``cl`` or ``alpha`` (degrees) and chord Reynolds number
    ``reynolds``: a first screening, not a viscous solver."""
    from foilmap.report.text import CAUTION
    from foilmap.section.screening import DRAG_STATION, screen_analysis

    _number("screen", "reynolds", reynolds, 1e4, 1e9)
    _conditions("screen", points)
    sec = _resolve(section, "screen")
    an = _analyse(sec, cl, alpha, "screen", points=points, proxies=())
    _check_ok(sec.name, an)
    res = screen_analysis(an, float(reynolds))
    return Screening({"name": sec.name, "chord_line": sec.chord_line,
                      "cl": float(an.evaluation.cl[0]),
                      "alpha_deg": math.degrees(an.evaluation.alpha[0]), **res.record(0),
                      "drag_station_x": DRAG_STATION, "note": SCREEN_NOTE, "caution": CAUTION})


# --- coordinates ---------------------------------------------------------------------------------

def coordinates(section, *, points: int = 201, spacing: str = "cosine") -> np.ndarray:
    """The contour of one section, shape (points, 2), trailing edge → upper → leading edge →
    lower → trailing edge in its own chord frame (what ``foilmap coords`` writes)."""
    from foilmap.section.evaluation import analyse
    from foilmap.section.geometry import coordinates as contour

    points = _number("coords", "points", points, 5, 100001, whole=True)
    if spacing not in ("cosine", "map"):
        raise InputError(f"coords: spacing {spacing!r} is not one of: cosine, map")
    sec = _resolve(section, "coords")
    an = analyse(sec.sections, alpha=0.0, proxies=())
    _check_ok(sec.name, an)
    zc = contour(sec.sections, an.frame, an.split, points, spacing)[0]
    return np.column_stack([zc.real, zc.imag])


# --- export --------------------------------------------------------------------------------------

@dataclass
class Exported:
    """A hand-off bundle: ``.folder`` and ``.rows`` (one per design, the rows of its
    ``summary.csv``)."""

    folder: Path
    rows: list = field(default_factory=list)

    def __len__(self) -> int:
        return len(self.rows)


def export(selection, output, *, cl: float | None = None, alpha: float | None = None,
           best: bool = False, ids=None, all_designs: bool = False, run: str | None = None,
           reynolds: float | None = None, points: int = 201, spacing: str = "cosine",
           te_thickness: float = 0.0, mesh: bool = False, farfield: float = 20.0,
           first_cell: float = 1e-5, progress=None) -> Exported:
    """Hand-off bundles for viscous analysis into the new (or empty) folder ``output``.

    ``selection`` is a section (a section file's path, a :class:`SectionRecord` or a
    :class:`SectionSet` of one: give ``cl`` or ``alpha`` in degrees) or a study folder with
    ``best=True`` (``run`` for one run's), ``ids`` (front design ids ``RUN#EVAL``, a list or a
    comma-separated string) or ``all_designs=True`` (the merged front); designs from a folder
    are exported at their run's design Cl unless ``cl`` or ``alpha`` is given.
    """
    from foilmap.report.export import SPACINGS, Design, export_designs
    from foilmap.store.sectionfile import atomic_folder

    out = Path(output)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise InputError(f"export: output {str(out)!r} exists and is not an empty folder")
    if not out.parent.exists():
        raise InputError(f"export: folder {str(out.parent)!r} does not exist")
    if cl is not None and alpha is not None:
        raise InputError("export: give cl or alpha, not both")
    if cl is not None:
        _number("export", "cl", cl, -20.0, 20.0)
    if alpha is not None:
        _number("export", "alpha", alpha, -89.0, 89.0)
    if reynolds is not None:
        _number("export", "reynolds", reynolds, 1e4, 1e9)
    _number("export", "points", points, 11, 100001, whole=True)
    _number("export", "te_thickness", te_thickness, 0.0, 0.05)
    if spacing not in SPACINGS:
        raise InputError(f"export: spacing {spacing!r} is not one of {', '.join(SPACINGS)}")
    if mesh:
        from foilmap.report.mesh import check_gmsh

        check_gmsh()
    chosen = best or bool(ids) or all_designs
    alpha_rad = None if alpha is None else math.radians(alpha)
    if isinstance(selection, (str, os.PathLike)) and Path(selection).is_dir():
        if not chosen:
            raise InputError("export: a study folder needs --best, --ids ID,... or --all")
        designs = _designs_from_folder(Path(selection), best, ids, all_designs, run, cl,
                                       alpha_rad, reynolds)
    else:
        if isinstance(selection, (str, os.PathLike)) and not Path(selection).is_file():
            raise InputError(f"export: {str(selection)!r} is neither a section file nor a "
                             "study folder")
        if chosen:
            raise InputError("export: --best, --ids and --all select from a study folder, "
                             f"not from the section file {str(selection)!r}")
        if cl is None and alpha is None:
            raise InputError("export: a section file needs the operating point: --cl or --alpha")
        sec = _resolve(selection, "export")
        prov = {"file": sec.source, **sec.provenance} if sec.source else dict(sec.provenance)
        designs = [Design(sec.name, sec.sections, cl=cl, alpha=alpha_rad, reynolds=reynolds,
                          provenance=prov, reference_le=sec.reference_le)]
    if callable(progress):  # a factory given the number of designs (the command's bar)
        progress = progress(len(designs))
    with atomic_folder(out) as tmp:
        rows = export_designs(designs, tmp, points=points, spacing=spacing,
                              te_thickness=te_thickness, mesh=mesh, farfield=farfield,
                              first_cell=first_cell, progress=progress)
    return Exported(out, rows)


def _designs_from_folder(folder: Path, best, ids, all_designs, run, cl, alpha, reynolds):
    """The designs ``export`` takes from a study folder: the best, the merged front, or the
    given ids."""
    from foilmap.report.export import Design
    from foilmap.store.folder import StudyFolder

    sf = StudyFolder(folder)
    if best:
        picks = [sf.best_design(run)]
    else:
        if all_designs:
            wanted, _, _ = sf.merged_front(run)
        else:
            wanted = ([i.strip() for i in ids.split(",") if i.strip()] if isinstance(ids, str)
                      else [str(i) for i in ids])
            on_fronts = {i for f in sf.fronts() for i in f.ids}
            for i in wanted:
                if i not in on_fronts:
                    raise InputError(f"no design {i!r} on the fronts of {str(folder)!r} "
                                     f"(see foilmap fronts {folder})")
        picks = [sf.design_by_id(i) for i in wanted]
    return [Design.from_folder_design(d, cl=cl, alpha=alpha, reynolds=reynolds) for d in picks]
