"""Study files: a declarative design study, validated once at load.

A study names the parametrisation, the operating points, the objectives, the constraints, the
search method and its budget, and the seeds.  It expands into independent runs
(seeds × operating points × variants).  Every key, its unit, default and allowed range is in
:data:`SCHEMA`, which ``docs/study-file.md`` documents (a test keeps the two in step).
"""

from __future__ import annotations

import copy
import math
import re
import tomllib
from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np

from foilmap.errors import InputError
from foilmap.section._kconst import DEFAULT_PROXY_END

__all__ = [
    "SCHEMA",
    "OBJECTIVES",
    "Study",
    "Point",
    "RunSpec",
    "Parametrisation",
    "Station",
    "FAMILY_RUN",
    "family_point",
    "parse_study",
]

#: objective names a study may minimise, with their meaning (all at the design point unless said)
OBJECTIVES = {
    "peak_suction": "-Cp_min, the largest over the design Cl and the ends of any Cl range",
    "severity": "largest -(s/u) du/ds over the pressure recovery (Reynolds-free)",
    "stratford_margin": "Stratford's turbulent separation margin (needs reynolds; >= 1 separates)",
    "laminar_deficit": "1 - x/c of Thwaites laminar separation on the upper surface",
    "cm_magnitude": "|Cm| about the quarter chord",
    "area": "cross-section area in chord^2",
    "profile_drag": "Cd of the integral boundary-layer screening (needs reynolds)",
    "target_cp_rms": "RMS deviation of Cp from the point's target_cp table over the stations it "
                     "gives (inverse design by search; needs target_cp)",
    "critical_mach_deficit": "1 - the critical Mach number (minimising it maximises the "
                             "critical Mach number), at the largest peak suction of the point",
}

#: constraint keys of earlier versions, and what replaces each
RENAMED_CONSTRAINTS = {
    "min_thickness": "thickness = [low, high]",
    "max_thickness": "thickness = [low, high]",
    "min_te_angle_deg": "te_angle_deg = [low, high]",
    "min_thickness_at": "station_thickness = [[x, t], ...]",
}

_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


# --- a tiny schema: (type check, default, description) per key --------------------------------


@dataclass(frozen=True)
class Key:
    kind: str  # "int", "float", "str", "range", "pairs", "ints", "choice", "bool", "names"
    default: Any
    doc: str
    lo: float | None = None
    hi: float | None = None
    choices: tuple = ()
    required: bool = False


SCHEMA: dict[str, dict[str, Key]] = {
    "study": {
        "name": Key("name", None, "study name: letters, digits, '_', '-', '.'", required=True),
        "description": Key("str", "", "free text"),
        "seeds": Key("ints", None, "list of seeds, one run per seed", 0, 2**31 - 1, required=True),
    },
    "shape": {
        "coefficients": Key("int", 6, "number N of shape-series coefficients A_1..A_N", 1, 32),
        "start": Key("start", [[-0.09, 0.03]],
                     "starting A_1, A_2, ... as [real, imag] pairs (missing ones are 0), or the "
                     "path of a section file or a coordinates file (fitted)", -1.0, 1.0),
        "step": Key("float", 0.02, "initial search step of A_1's components; A_n gets step/n",
                    1e-6, 0.5),
        "limit": Key("float", 0.15, "bound on |component of A_n - start_n|, divided by n",
                     1e-4, 1.0),
        "te_angle_deg": Key("range", [6.0, 14.0],
                            "trailing-edge angle in degrees: a number (fixed) or [low, high]",
                            0.0, 60.0),
        "symmetric": Key("bool", False, "true: real coefficients only, so the section is "
                         "symmetric (camber exactly 0, Cl 0 at zero angle; fins, keels, rudders, "
                         "struts, masts)"),
    },
    "point": {
        "name": Key("name", None, "operating-point name", required=True),
        "cl": Key("float", None, "design lift coefficient", -5.0, 5.0, required=True),
        "cl_range": Key("range", None,
                        "[low, high]: peak suction is held over the ends and the design Cl",
                        -5.0, 5.0),
        "reynolds": Key("float", None, "chord Reynolds number (for stratford_margin)", 1e3, 1e10),
        "mach": Key("float", None, "free-stream Mach number: peak suction corrected by the "
                    "compressibility rule", 0.0, 0.95),
        "compressibility": Key("choice", "karman-tsien", "rule for mach and the critical Mach "
                               "number: karman-tsien or prandtl-glauert",
                               choices=("karman-tsien", "prandtl-glauert")),
        "sigma": Key("float", None, "cavitation number (or give speed, depth and "
                     "water_temperature)", 0.0, 1e6),
        "speed": Key("float", None, "speed through the water, m/s (for sigma)", 0.0, 200.0),
        "depth": Key("float", None, "depth below the free surface, m (for sigma)", 0.0, 11000.0),
        "water_temperature": Key("float", None, "water temperature, deg C, 0 to 40 (for sigma)",
                                 0.0, 40.0),
        "water": Key("choice", "fresh", "fresh or sea water (density, for sigma)",
                     choices=("fresh", "sea")),
        "target_cp": Key("str", None, "a target pressure table (CSV: x, surface, cp or q) for "
                         "the target_cp_rms objective, relative to the study file"),
    },
    "objectives": {
        name: Key("float", None, f"weight of {name}: {text}", 0.0, 1e6)
        for name, text in OBJECTIVES.items()
    },
    "constraints": {
        "thickness": Key("range", None, "[low, high] bounds on the maximum thickness t/c",
                         0.0, 1.0),
        "thickness_x": Key("range", None, "[low, high] x/c window for the maximum thickness",
                           0.0, 1.0),
        "station_thickness": Key("pairs", None, "[[x/c, t/c], ...]: least thickness at stations",
                                 0.0, 1.0),
        "camber": Key("range", None, "[low, high] bounds on the signed maximum camber (chords)",
                      -0.5, 0.5),
        "camber_x": Key("range", None, "[low, high] x/c window for the maximum camber",
                        0.0, 1.0),
        "min_le_radius": Key("float", None, "smallest leading-edge radius, chords", 0.0, 1.0),
        "min_local_thickness": Key("float", 0.005, "local-thickness floor t0, chords: the "
                                   "thickness at every x/c from 0.05 to 0.8 at least t0, ramping "
                                   "from 0 at the leading edge and tapering as ((1 - x)/0.2)^2 "
                                   "into the trailing-edge wedge (0 switches it off)", 0.0, 0.1),
        "te_angle_deg": Key("range", None, "[low, high] bounds on the trailing-edge angle, "
                            "degrees", 0.0, 60.0),
        "cm": Key("range", None, "[low, high] bounds on Cm c/4 at the design Cl", -2.0, 2.0),
        "max_peak_suction": Key("float", None, "largest -Cp_min over the evaluated Cl", 0.0, 100.0),
        "cavitation_margin": Key("float", None, "least sigma - peak suction over the point's Cl "
                                 "(needs the point's sigma, or speed, depth, water_temperature)",
                                 -100.0, 100.0),
        "min_critical_mach": Key("float", None, "smallest critical Mach number over the point's "
                                 "Cl", 0.0, 1.0),
    },
    "search": {
        "method": Key("choice", "cmaes", "search method: cmaes (one weighted objective), comocma "
                      "(a Pareto front of 2-3 objectives), epsilon (sweeps of cmaes runs)",
                      choices=("cmaes", "comocma", "epsilon")),
        "kernels": Key("int", 8, "COMO-CMA-ES kernels (points the front is followed with)", 2, 200),
        "epsilon_levels": Key("floats", None, "epsilon: bounds on the second objective, one "
                              "single-objective run (minimising the first) per level", -1e6, 1e6),
        "max_evaluations": Key("int", 3000, "evaluation budget of each run", 10, 10**8),
        "popsize": Key("int", 0, "population size (0: CMA-ES default 4 + 3 ln D)", 0, 100000),
        "restarts": Key("int", 2, "IPOP restarts, each doubling the population", 0, 20),
        "points": Key("int", 256, "circle-plane samples per evaluation", 64, 8192),
        "proxy_end": Key("float", DEFAULT_PROXY_END, "chord station where the recovery proxies "
                         "stop", 0.5, 1.0),
    },
}
SCHEMA["engine"] = {
    "kind": Key("choice", "local", "where runs go: local (a process pool on this machine) or "
                "dask (a Dask cluster)", choices=("local", "dask")),
    "scheduler": Key("str", "", "Dask scheduler address (empty: a LocalCluster on this machine)"),
    "workers": Key("int", 0, "worker processes (0: the number of cores; 1: in the calling "
                   "process, no pool)", 0, 4096),
}
SCHEMA["fronts"] = {
    "reference_point": Key("floats", None, "hypervolume reference point, one value per objective "
                           "in the order of [objectives]", -1e6, 1e6),
}
SCHEMA["station"] = {
    "name": Key("name", None, "station name", required=True),
    "position": Key("float", None, "span position, a fraction from 0 (root) to 1 (tip); "
                    "positions increase from station to station", 0.0, 1.0, required=True),
    **{k: v for k, v in SCHEMA["point"].items() if k != "name"},
    "weight": Key("float", 1.0, "weight of the station's objective in the family's sum",
                  0.0, 1e6),
}
SCHEMA["family"] = {
    "rule": Key("choice", "linear", "how coefficients and trailing-edge angle vary between "
                "stations: linear, or pchip (monotone piecewise cubic, C1 through the "
                "stations)", choices=("linear", "pchip")),
    "checks": Key("int", 8, "in-between positions checked in each interval (valid, within the "
                  "interpolated constraints, fair)", 1, 64),
    "fair_tolerance": Key("float", 1e-5, "chords a thickness or camber schedule may go against "
                          "its interval's direction (round-off allowance of the fairness rule)",
                          0.0, 0.01),
    "start": Key("choice", "stations", "stations: independent runs at each station first, "
                 "then the family faired jointly from their optima; shape: one joint search "
                 "from shape.start", choices=("stations", "shape")),
    "step": Key("float", 0.1, "the joint search's initial step, as a fraction of the station "
                "runs' (start = stations only)", 1e-3, 1.0),
    "evaluations": Key("int", 0, "evaluation budget of the joint search (0: "
                       "search.max_evaluations)", 0, 10**8),
}
_VARIANT_TABLES = ("shape", "search")
_TOP = ("study", "shape", "point", "station", "family", "objectives", "constraints", "search",
        "variant", "fronts", "engine")
#: the run id stem of a family's joint search (station runs are named after their stations)
FAMILY_RUN = "family"


def _fail(where: str, msg: str):
    raise InputError(f"study file {where}: {msg}")


def _num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def _check(where: str, path: str, key: Key, v):
    """Validate one value against its schema entry; returns the normalised value."""
    lo = -math.inf if key.lo is None else key.lo
    hi = math.inf if key.hi is None else key.hi
    rng = f"{key.lo:g} to {key.hi:g}" if key.lo is not None else ""
    if key.kind == "int":
        if not (isinstance(v, int) and not isinstance(v, bool)) or not lo <= v <= hi:
            _fail(where, f"{path} = {v!r} is not allowed (a whole number from {rng})")
        return int(v)
    if key.kind == "float":
        if not _num(v) or not lo <= v <= hi:
            _fail(where, f"{path} = {v!r} is not allowed (a number from {rng})")
        return float(v)
    if key.kind in ("str", "name"):
        if not isinstance(v, str) or (key.kind == "name" and not _NAME.match(v)):
            what = "letters, digits, '_', '-', '.' (1 to 64, starting with a letter or digit)"
            _fail(where, f"{path} = {v!r} is not allowed ({'a string' if key.kind == 'str' else what})")
        return v
    if key.kind == "bool":
        if not isinstance(v, bool):
            _fail(where, f"{path} = {v!r} is not allowed (true or false)")
        return v
    if key.kind == "choice":
        if v not in key.choices:
            _fail(where, f"{path} = {v!r} is not allowed (one of: {', '.join(key.choices)})")
        return v
    if key.kind == "ints":
        ok = isinstance(v, list) and 1 <= len(v) <= 10000 and all(
            isinstance(s, int) and not isinstance(s, bool) and lo <= s <= hi for s in v)
        if not ok or len(set(v)) != len(v):
            _fail(where, f"{path} = {v!r} is not allowed (a list of distinct whole numbers "
                         f"from {rng})")
        return [int(s) for s in v]
    if key.kind == "range":
        if _num(v) and path.endswith("shape.te_angle_deg"):
            v = [v, v]
        ok = isinstance(v, list) and len(v) == 2 and all(_num(x) and lo <= x <= hi for x in v)
        if not ok or v[0] > v[1]:
            _fail(where, f"{path} = {v!r} is not allowed ([low, high] with low <= high, "
                         f"each from {rng})")
        return [float(v[0]), float(v[1])]
    if key.kind == "floats":
        ok = isinstance(v, list) and 1 <= len(v) <= 1000 and all(_num(x) and lo <= x <= hi
                                                               for x in v)
        if not ok:
            _fail(where, f"{path} = {v!r} is not allowed (a list of numbers from {rng})")
        return [float(x) for x in v]
    if key.kind == "start" and isinstance(v, str):
        if not v.strip():
            _fail(where, f"{path} = {v!r} is not allowed (pairs, or a file path)")
        return v
    if key.kind in ("pairs", "start"):
        ok = isinstance(v, list) and 1 <= len(v) <= 64 and all(
            isinstance(p, list) and len(p) == 2 and all(_num(x) and lo <= x <= hi for x in p)
            for p in v)
        if not ok:
            _fail(where, f"{path} = {v!r} is not allowed (a list of [a, b] pairs, each number "
                         f"from {rng})")
        return [[float(a), float(b)] for a, b in v]
    raise AssertionError(key.kind)


def _table(where: str, name: str, data, schema: dict[str, Key], required_table=False) -> dict:
    if data is None:
        if required_table:
            _fail(where, f"missing table [{name}]")
        data = {}
    if not isinstance(data, dict):
        _fail(where, f"[{name}] must be a table")
    out = {}
    for k in data:
        if name == "constraints" and k in RENAMED_CONSTRAINTS:
            _fail(where, f"'constraints.{k}' was renamed: write constraints."
                         f"{RENAMED_CONSTRAINTS[k]}")
        if k not in schema:
            _fail(where, f"unknown key '{name}.{k}' (allowed: {', '.join(schema)})")
    for k, key in schema.items():
        if k in data:
            out[k] = _check(where, f"{name}.{k}", key, data[k])
        elif key.required:
            _fail(where, f"missing key '{name}.{k}'")
        else:
            out[k] = copy.deepcopy(key.default)
            if key.kind == "range" and _num(out[k]):
                out[k] = [float(out[k])] * 2
    return out


# --- the typed, frozen study -------------------------------------------------------------------


@dataclass(frozen=True)
class Point:
    """One operating point."""

    name: str
    cl: float
    cl_range: tuple[float, float] | None
    reynolds: float | None
    mach: float | None = None
    compressibility: str = "karman-tsien"
    sigma: float | None = None  # cavitation number (given, or from speed, depth, temperature)
    #: target Cp stations (x, upper, cp), read once at load, for the target_cp_rms objective
    target: tuple | None = None

    @property
    def cls(self) -> tuple[float, ...]:
        """Lift coefficients evaluated: the design Cl, then the range ends if any."""
        if self.cl_range is None:
            return (self.cl,)
        return (self.cl, self.cl_range[0], self.cl_range[1])


@dataclass(frozen=True)
class Station:
    """One span station of a family: its operating point, weight and own constraints."""

    name: str
    position: float  # span fraction, 0 (root) to 1 (tip)
    point: Point
    weight: float
    constraints: dict  # the study's [constraints] with the station's own over them


@dataclass(frozen=True)
class RunSpec:
    """One run of a study: one search with one seed at one point for one variant (and, in an
    ε-constraint sweep, one bound on the second objective)."""

    run_id: str
    seed: int
    point: Point
    variant: str
    shape: dict
    search: dict
    epsilon: float | None = None
    epsilon_index: int | None = None
    #: a station run's constraints (the study's with the station's own); None: the study's
    constraints: dict | None = None
    #: True for a family's joint search (its point is a stand-in named ``family``)
    family: bool = False

    @property
    def front_key(self) -> str:
        """Runs with the same key form one front (an ε sweep's levels merge into one)."""
        base = f"{self.point.name}.{self.variant}" if self.variant else self.point.name
        return f"{base}.s{self.seed}"


@dataclass(frozen=True)
class Study:
    """A validated study; ``text`` is the file verbatim (stored in every run log)."""

    name: str
    description: str
    seeds: tuple[int, ...]
    shape: dict
    points: tuple[Point, ...]
    objectives: dict[str, float]
    constraints: dict
    search: dict
    variants: tuple[tuple[str, dict], ...]
    text: str = field(repr=False)
    source: str = "<text>"
    base_dir: str = "."  # folder that relative paths in the study (shape.start) are read from
    reference_point: tuple[float, ...] | None = None  # [fronts] reference_point
    engine: dict = field(default_factory=lambda: {"kind": "local", "scheduler": "", "workers": 0})
    budget: int | None = None  # a budget set by with_budget (the text keeps the study's own)
    #: a family study's span stations (then ``points`` are their points) and [family] table
    stations: tuple[Station, ...] = ()
    family: dict | None = None

    @property
    def is_family(self) -> bool:
        return bool(self.stations)

    def runs(self) -> list[RunSpec]:
        """Expand into runs: variants × points × seeds, in that order.  A family study has a
        run per station (when it starts from the stations) and then the joint search, per
        variant and seed."""
        return list(self._runs)

    def run(self, run_id: str) -> RunSpec:
        """The run with id ``run_id`` (KeyError when the study has none)."""
        return self._run_by_id[run_id]

    def __getstate__(self) -> dict:
        # the expanded runs are not sent along (a worker gets the study with every task)
        return {k: v for k, v in self.__dict__.items() if k not in ("_runs", "_run_by_id")}

    @cached_property
    def _run_by_id(self) -> dict[str, RunSpec]:
        return {r.run_id: r for r in self._runs}

    @cached_property
    def _runs(self) -> tuple[RunSpec, ...]:
        # expanded once per study object (a study of a thousand runs is asked for its runs
        # by every task and every summary: expanding each time made that quadratic)
        out = []
        for vname, over in self.variants:
            shape = {**self.shape, **over.get("shape", {})}
            search = {**self.search, **over.get("search", {})}
            levels = search.get("epsilon_levels") if search["method"] == "epsilon" else None
            if self.is_family:
                cases = [(st.point, st.constraints, False) for st in self.stations
                         if self.family["start"] == "stations"]
                joint = {**search}
                if self.family["evaluations"] and self.budget is None:
                    joint["max_evaluations"] = self.family["evaluations"]
                cases.append((family_point(self.stations), None, True))
            else:
                cases = [(p, None, False) for p in self.points]
            for p, cons, fam in cases:
                srch = joint if fam else search
                for s in self.seeds:
                    base = f"{p.name}.{vname}" if vname else p.name
                    if levels:
                        for i, eps in enumerate(levels):
                            out.append(RunSpec(f"{base}.e{i}.s{s}", s, p, vname, shape, srch,
                                               eps, i, cons, fam))
                    else:
                        out.append(RunSpec(f"{base}.s{s}", s, p, vname, shape, srch,
                                           constraints=cons, family=fam))
        return tuple(out)

    def with_budget(self, evals: int) -> "Study":
        """The same study with every run's evaluation budget replaced."""
        search = {**self.search, "max_evaluations": int(evals)}
        variants = tuple(
            (n, {**o, "search": {**o.get("search", {}), "max_evaluations": int(evals)}})
            for n, o in self.variants)
        return Study(self.name, self.description, self.seeds, self.shape, self.points,
                     self.objectives, self.constraints, search, variants, self.text, self.source,
                     self.base_dir, self.reference_point, self.engine, int(evals),
                     self.stations, self.family)


def family_point(stations) -> Point:
    """The stand-in point of a family's joint search: named ``family``, with the first
    station's figures (each station keeps its own; see :mod:`foilmap.design.family`)."""
    p = stations[0].point
    return Point(FAMILY_RUN, p.cl, p.cl_range, p.reynolds, p.mach, p.compressibility, p.sigma)


def parse_study(text: str, source: str = "<text>", base_dir: str | None = None,
                read_start=None, read_target=None) -> Study:
    """Parse and validate a study's text; raises :class:`InputError` with one line.

    This layer reads no files: a ``shape.start`` that names a file is handed to
    ``read_start(file_name, base_dir)``, which returns ``(coefficients, te_angle_deg)`` or
    raises :class:`InputError`.  :func:`foilmap.store.studyfile.load_study` supplies the reader
    (section files and coordinate files, fitted); without one such a study is refused.
    ``read_target(file_name, base_dir)`` likewise reads a point's ``target_cp`` table and
    returns its stations as a tuple ``(x, upper, cp)``.
    """
    where = repr(source)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        _fail(where, f"is not valid TOML: {exc}")
    for k in data:
        if k not in _TOP:
            _fail(where, f"unknown table or key {k!r} (allowed: {', '.join(_TOP)})")
    st = _table(where, "study", data.get("study"), SCHEMA["study"], required_table=True)
    shape = _table(where, "shape", data.get("shape"), SCHEMA["shape"])
    raw_points, raw_stations = data.get("point"), data.get("station")
    if raw_stations is not None and raw_points is not None:
        _fail(where, "has both [[point]] and [[station]] tables: a study designs one section at "
                     "its points, or a family at its stations, not both")
    if data.get("family") is not None and raw_stations is None:
        _fail(where, "a [family] table needs [[station]] tables (span stations with name, "
                     "position and cl)")
    stations: list[Station] = []
    family = None
    if raw_stations is not None:
        stations = _parse_stations(where, raw_stations, data, base_dir, read_target)
        points = [st.point for st in stations]
        family = _table(where, "family", data.get("family"), SCHEMA["family"])
    else:
        if not isinstance(raw_points, list) or not raw_points:
            _fail(where, "needs at least one [[point]] table (an operating point with name and "
                         "cl), or [[station]] tables for a family")
        points = [_parse_point(where, "point", i, rp, SCHEMA["point"], base_dir, read_target)[0]
                  for i, rp in enumerate(raw_points, start=1)]
    if len({p.name for p in points}) != len(points):
        _fail(where, f"{'station' if stations else 'point'} names must be distinct")
    if stations and FAMILY_RUN in {p.name for p in points}:
        _fail(where, f"station name {FAMILY_RUN!r} is kept for the family's joint search; "
                     "choose another")
    obj = data.get("objectives")
    if not isinstance(obj, dict) or not obj:
        _fail(where, f"needs an [objectives] table naming at least one of: {', '.join(OBJECTIVES)}")
    objectives = {k: v for k, v in _table(where, "objectives", obj, SCHEMA["objectives"]).items()
                  if v is not None}
    if not any(w > 0 for w in objectives.values()):
        _fail(where, "[objectives]: at least one weight must be positive")
    if "target_cp_rms" in objectives:
        for p in points:
            if p.target is None:
                _fail(where, f"objective target_cp_rms needs 'target_cp' at point {p.name!r}")
    for needs_re in ("stratford_margin", "profile_drag"):
        if needs_re in objectives:
            for p in points:
                if p.reynolds is None:
                    _fail(where, f"objective {needs_re} needs 'reynolds' at point {p.name!r}")
    cons = _table(where, "constraints", data.get("constraints"), SCHEMA["constraints"])
    cons = {k: v for k, v in cons.items() if v is not None}
    _check_constraints(where, cons, shape, points)
    for i, sta in enumerate(stations):
        merged = {**cons, **sta.constraints}
        _check_constraints(where, merged, shape, [sta.point])
        stations[i] = Station(sta.name, sta.position, sta.point, sta.weight, merged)
    search = _table(where, "search", data.get("search"), SCHEMA["search"])
    variants: list[tuple[str, dict]] = []
    raw_var = data.get("variant", [])
    if not isinstance(raw_var, list):
        _fail(where, "'variant' must be a list of [[variant]] tables")
    for i, rv in enumerate(raw_var, start=1):
        if not isinstance(rv, dict) or "name" not in rv:
            _fail(where, f"variant[{i}] needs a 'name'")
        vname = _check(where, f"variant[{i}].name", Key("name", None, ""), rv["name"])
        over = {}
        for k, v in rv.items():
            if k == "name":
                continue
            if k not in _VARIANT_TABLES or not isinstance(v, dict):
                _fail(where, f"unknown key 'variant[{i}].{k}' (allowed: name, "
                             f"{', '.join(t + '.KEY' for t in _VARIANT_TABLES)})")
            sub = {}
            for kk, vv in v.items():
                if kk not in SCHEMA[k]:
                    _fail(where, f"unknown key 'variant[{i}].{k}.{kk}' "
                                 f"(allowed: {', '.join(SCHEMA[k])})")
                sub[kk] = _check(where, f"variant[{i}].{k}.{kk}", SCHEMA[k][kk], vv)
            over[k] = sub
        variants.append((vname, over))
    if len({n for n, _ in variants}) != len(variants):
        _fail(where, "variant names must be distinct")
    if not variants:
        variants = [("", {})]
    fr = _table(where, "fronts", data.get("fronts"), SCHEMA["fronts"])
    ref = fr["reference_point"]
    if ref is not None and len(ref) != len(objectives):
        _fail(where, f"fronts.reference_point has {len(ref)} values but [objectives] names "
                     f"{len(objectives)} ({', '.join(objectives)})")
    for vname, over in [("", {})] + variants:
        srch = {**search, **over.get("search", {})}
        tag = f"variant {vname!r}: " if vname else ""
        if srch["method"] in ("comocma", "epsilon") and not 2 <= len(objectives) <= 3:
            _fail(where, f"{tag}search.method = {srch['method']!r} needs 2 or 3 objectives in "
                         f"[objectives], not {len(objectives)}")
        if srch["method"] == "comocma" and ref is None:
            _fail(where, f"{tag}search.method = 'comocma' needs fronts.reference_point")
        if srch["method"] == "epsilon":
            if len(objectives) != 2:
                _fail(where, f"{tag}search.method = 'epsilon' sweeps the second of exactly 2 "
                             "objectives")
            if not srch.get("epsilon_levels"):
                _fail(where, f"{tag}search.method = 'epsilon' needs search.epsilon_levels")
    _resolve_start(where, "shape.start", shape, base_dir, read_start)
    for i, (_, over) in enumerate(variants, start=1):
        if "start" in over.get("shape", {}):
            _resolve_start(where, f"variant[{i}].shape.start", over["shape"], base_dir,
                           read_start)
    eng = _table(where, "engine", data.get("engine"), SCHEMA["engine"])
    study = Study(st["name"], st["description"], tuple(st["seeds"]), shape, tuple(points),
                  objectives, cons, search, tuple(variants), text, source, base_dir,
                  None if ref is None else tuple(ref), eng, None, tuple(stations), family)
    for run in study.runs():
        _check_shape(where, run)
    return study


def _parse_point(where: str, label: str, i: int, rp, schema: dict, base_dir, read_target):
    """One [[point]] or [[station]] table: its Point and the validated table."""
    p = _table(where, f"{label}[{i}]", rp, schema)
    if p["cl_range"] is not None and not p["cl_range"][0] <= p["cl"] <= p["cl_range"][1]:
        _fail(where, f"{label}[{i}].cl = {p['cl']:g} is outside its cl_range "
                     f"{p['cl_range']!r}")
    target = None
    if p["target_cp"] is not None:
        if read_target is None:
            _fail(where, f"{label}[{i}].target_cp = {p['target_cp']!r} names a file; load "
                         "the study with foilmap.load_study(path), which reads it")
        try:
            target = read_target(p["target_cp"], base_dir)
        except InputError as exc:
            _fail(where, f"{label}[{i}].target_cp = {p['target_cp']!r}: {exc}")
    point = Point(p["name"], p["cl"], None if p["cl_range"] is None else tuple(p["cl_range"]),
                  p["reynolds"], p["mach"], p["compressibility"],
                  _point_sigma(where, i, p, label), target)
    return point, p


def _parse_stations(where: str, raw, data: dict, base_dir, read_target) -> list[Station]:
    """The [[station]] tables of a family: at least two, positions increasing."""
    if not isinstance(raw, list) or len(raw) < 2:
        _fail(where, "a family needs at least two [[station]] tables")
    out = []
    for i, rs in enumerate(raw, start=1):
        if not isinstance(rs, dict):
            _fail(where, f"station[{i}] must be a table")
        rs = dict(rs)
        own = rs.pop("constraints", {})
        point, st = _parse_point(where, "station", i, rs, SCHEMA["station"], base_dir,
                                 read_target)
        if not isinstance(own, dict):
            _fail(where, f"station[{i}].constraints must be a table")
        table = _table(where, f"station[{i}].constraints", own, SCHEMA["constraints"])
        own = {k: table[k] for k in own}
        if out and not st["position"] > out[-1].position:
            _fail(where, f"station[{i}].position = {st['position']:g} does not increase (the "
                         f"station before it, {out[-1].name!r}, is at {out[-1].position:g}); "
                         "positions run from root to tip")
        out.append(Station(point.name, st["position"], point, st["weight"], own))
    if not any(s.weight > 0 for s in out):
        _fail(where, "at least one station weight must be positive")
    return out


def _point_sigma(where: str, i: int, p: dict, label: str = "point") -> float | None:
    """A point's cavitation number: given, or from its speed, depth and water temperature."""
    parts = ("speed", "depth", "water_temperature")
    given = [k for k in parts if p[k] is not None]
    if p["sigma"] is not None:
        if given:
            _fail(where, f"{label}[{i}]: give sigma or {', '.join(parts)}, not both ({label}[{i}]."
                         f"{given[0]} was also given)")
        return p["sigma"]
    if not given:
        return None
    missing = [k for k in parts if p[k] is None]
    if missing:
        _fail(where, f"{label}[{i}]: the cavitation number from speed needs {', '.join(parts)}; "
                     f"missing {label}[{i}].{missing[0]}")
    if p["speed"] <= 0:
        _fail(where, f"{label}[{i}].speed = {p['speed']!r} is not allowed (a speed above 0)")
    from foilmap.section.operating import cavitation_number

    return float(cavitation_number(p["speed"], p["depth"], p["water_temperature"], p["water"]))


def _check_constraints(where: str, cons: dict, shape: dict, points: list) -> None:
    """Constraints that contradict each other, or the shape or the points, fail at load naming
    both keys."""
    if "thickness" in cons:
        lo, hi = cons["thickness"]
        for x, tt in cons.get("station_thickness", []):
            if tt > hi:
                _fail(where, f"constraints.station_thickness asks t/c {tt:g} at x/c {x:g}, above "
                             f"the largest maximum thickness constraints.thickness = "
                             f"[{lo:g}, {hi:g}]: the two contradict each other")
    if shape.get("symmetric") and "camber" in cons:
        lo, hi = cons["camber"]
        if not lo <= 0.0 <= hi:
            _fail(where, f"constraints.camber = [{lo:g}, {hi:g}] excludes zero, but "
                         "shape.symmetric = true makes the camber exactly 0")
    if "te_angle_deg" in cons:
        lo, hi = cons["te_angle_deg"]
        slo, shi = shape["te_angle_deg"]
        if hi < slo or lo > shi:
            _fail(where, f"constraints.te_angle_deg = [{lo:g}, {hi:g}] lies outside the searched "
                         f"range shape.te_angle_deg = [{slo:g}, {shi:g}]")
    if "cavitation_margin" in cons:
        for p in points:
            if p.sigma is None:
                _fail(where, f"constraints.cavitation_margin needs a cavitation number at point "
                             f"{p.name!r}: point.sigma, or point.speed, depth and "
                             "water_temperature")


def _resolve_start(where: str, path: str, shape: dict, base_dir: str | None, read_start) -> None:
    """Resolve a start given as a file name through ``read_start``.

    The coefficients go to ``start_pairs`` (all of them: a run keeps its first N) and the
    section's trailing-edge angle to ``start_te_angle_deg``.
    """
    start = shape["start"]
    if not isinstance(start, str):
        return
    if read_start is None:
        _fail(where, f"{path} = {start!r} names a file; load the study with "
                     "foilmap.load_study(path), which reads it")
    try:
        coeffs, tau = read_start(start, base_dir)
    except InputError as exc:
        _fail(where, f"{path} = {start!r}: {exc}")
    shape["start_pairs"] = [[float(a.real), float(a.imag)] for a in coeffs]
    shape["start_te_angle_deg"] = float(tau)


def _check_shape(where: str, run: RunSpec) -> None:
    n = run.shape["coefficients"]
    if run.shape.get("symmetric"):
        given = run.shape.get("start_pairs") or run.shape["start"]
        if not isinstance(given, str) and run.shape["start"] != SCHEMA["shape"]["start"].default \
                and any(abs(b) > 1e-12 for _, b in given[:n]):
            _fail(where, f"shape.symmetric = true needs a symmetric start (real coefficients: "
                         f"[a, 0] pairs); shape.start has imaginary parts (run {run.run_id})")
    if not isinstance(run.shape["start"], str) and len(run.shape["start"]) > n:
        _fail(where, f"shape.start has {len(run.shape['start'])} pairs but shape.coefficients "
                     f"= {n} (run {run.run_id})")


# --- design variables --------------------------------------------------------------------------


@dataclass(frozen=True)
class Parametrisation:
    """Map between search vectors y and sections.

    y holds 2N scaled shape components, then (if τ varies) one τ coordinate in [0, 1]:
    A_n = start_n + (step/n)(y_{2n−2} + i y_{2n−1}) and τ = τ_lo + (τ_hi − τ_lo) y_τ.
    A symmetric section has N real components: A_n = start_n + (step/n) y_{n−1}, all real.
    Dividing by n gives higher harmonics smaller steps, which conditions the search
    (docs/method.md).
    """

    n: int
    start: np.ndarray  # complex (N,)
    step: float
    limit: float
    tau_range: tuple[float, float]  # radians

    start_tau: float | None = None  # radians, the starting section's own angle if given
    symmetric: bool = False  # real coefficients only: y holds N real components (then τ)

    @classmethod
    def from_shape(cls, shape: dict) -> "Parametrisation":
        n = shape["coefficients"]
        start = np.zeros(n, dtype=complex)
        pairs = shape.get("start_pairs") or shape["start"]
        for i, (a, b) in enumerate(pairs[:n]):  # coefficients beyond N are dropped
            start[i] = complex(a, b)
        lo, hi = shape["te_angle_deg"]
        tau0 = shape.get("start_te_angle_deg")
        symmetric = bool(shape.get("symmetric", False))
        if symmetric:
            start = start.real.astype(complex)
        return cls(n, start, shape["step"], shape["limit"], (math.radians(lo), math.radians(hi)),
                   None if tau0 is None else math.radians(tau0), symmetric)

    @property
    def shape_dimension(self) -> int:
        """Search coordinates of the shape: 2N, or N for a symmetric section."""
        return self.n if self.symmetric else 2 * self.n

    @property
    def tau_free(self) -> bool:
        return self.tau_range[1] > self.tau_range[0]

    @property
    def dimension(self) -> int:
        return self.shape_dimension + (1 if self.tau_free else 0)

    def x0(self) -> np.ndarray:
        """The start: the start coefficients and the starting section's τ (else mid-range)."""
        y = np.zeros(self.dimension)
        if self.tau_free:
            lo, hi = self.tau_range
            y[-1] = 0.5 if self.start_tau is None else float(
                np.clip((self.start_tau - lo) / (hi - lo), 0.0, 1.0))
        return y

    def bounds(self) -> tuple[list, list]:
        """Per-coordinate bounds for CMA-ES's BoundTransform."""
        b = self.limit / self.step  # |y| ≤ limit/step gives |ΔA_n| ≤ limit/n
        lo = [-b] * self.shape_dimension
        hi = [b] * self.shape_dimension
        if self.tau_free:
            lo.append(0.0)
            hi.append(1.0)
        return lo, hi

    def sigma_scales(self) -> np.ndarray:
        """Relative initial step per coordinate (CMA_stds): τ gets a quarter of its range."""
        s = np.ones(self.dimension)
        if self.tau_free:
            s[-1] = 0.25
        return s

    def sections(self, y: np.ndarray):
        """Sections of search vectors ``y`` (B, D)."""
        from foilmap.section.conformal import SectionSet

        y = np.atleast_2d(y)
        n = np.arange(1, self.n + 1)
        if self.symmetric:
            a = self.start[None, :] + (self.step / n) * y[:, : self.n]
        else:
            a = self.start[None, :] + (self.step / n) * (y[:, 0 : 2 * self.n : 2]
                                                         + 1j * y[:, 1 : 2 * self.n : 2])
        if self.tau_free:
            lo, hi = self.tau_range
            tau = lo + (hi - lo) * np.clip(y[:, -1], 0.0, 1.0)
        else:
            tau = np.full(y.shape[0], self.tau_range[0])
        return SectionSet(a, tau)

