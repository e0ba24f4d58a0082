"""Family files: a family of sections along a span, in TOML a person can read.

::

    # foilmap family (ideal-flow screening result: ...)
    [family]
    name = "tidal-blade"
    rule = "linear"               # how coefficients vary between stations: linear or pchip

    [[station]]
    name = "root"
    position = 0.0                # span fraction, increasing from station to station
    te_angle_deg = 12.0
    coefficients = [[-0.10, 0.05], [0.01, -0.004]]   # A_1..A_N as [real, imag]
    cl = 0.9                      # optional: the station's design Cl, for reading

    [provenance]                  # optional, free-form

Every station has the same number of coefficients.  The section at any span position between
the first and the last station comes from :meth:`foilmap.design.family.Family.section_at`.
Validation happens once, at load; every failure is an :class:`~foilmap.errors.InputError`
naming the file, the key, the value and what is allowed.
"""

from __future__ import annotations

import math
import os
import tomllib
from dataclasses import dataclass, field

import numpy as np

from foilmap.design.family import RULES, Family
from foilmap.errors import InputError, read_input_text
from foilmap.store.sectionfile import (
    SectionRecord,
    _toml_value,
    parse_section,
)

__all__ = ["load_family", "parse_family", "format_family", "is_family_text",
           "load_section_at", "section_record_at", "best_family", "family_design",
           "BestFamily"]

_TOP = ("family", "station", "provenance")
_FAMILY_KEYS = ("name", "rule")
_STATION_KEYS = ("name", "position", "te_angle_deg", "coefficients", "cl")


def _num(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def is_family_text(text: str) -> bool:
    """Whether a file's text is a family file (it has a [family] table)."""
    try:
        return "family" in tomllib.loads(text)
    except tomllib.TOMLDecodeError:
        return False


def parse_family(text: str, source: str = "<text>") -> Family:
    """Parse and validate the text of a family file."""
    where = f"family file {source!r}"
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{where} is not valid TOML: {exc}") from None
    for key in data:
        if key not in _TOP:
            raise InputError(f"{where}: unknown table or key {key!r} (allowed: "
                             f"{', '.join(_TOP)})")
    fam = data.get("family")
    if not isinstance(fam, dict):
        raise InputError(f"{where}: missing table [family]")
    for key in fam:
        if key not in _FAMILY_KEYS:
            raise InputError(f"{where}: unknown key 'family.{key}' (allowed: "
                             f"{', '.join(_FAMILY_KEYS)})")
    name = fam.get("name")
    if not isinstance(name, str) or not name.strip() or "\n" in name:
        raise InputError(f"{where}: 'family.name' must be a non-empty one-line string")
    rule = fam.get("rule", "linear")
    if rule not in RULES:
        raise InputError(f"{where}: 'family.rule' = {rule!r} is not allowed (one of: "
                         f"{', '.join(RULES)})")
    raw = data.get("station")
    if not isinstance(raw, list) or len(raw) < 2:
        raise InputError(f"{where}: a family needs at least two [[station]] tables")
    names, pos, coeffs, taus, figs = [], [], [], [], []
    for i, st in enumerate(raw, start=1):
        at = f"station[{i}]"
        if not isinstance(st, dict):
            raise InputError(f"{where}: {at} must be a table")
        for key in st:
            if key not in _STATION_KEYS:
                raise InputError(f"{where}: unknown key '{at}.{key}' (allowed: "
                                 f"{', '.join(_STATION_KEYS)})")
        for key in _STATION_KEYS[:4]:
            if key not in st:
                raise InputError(f"{where}: missing key '{at}.{key}'")
        p = st["position"]
        if not _num(p) or not 0.0 <= p <= 1.0:
            raise InputError(f"{where}: '{at}.position' = {p!r} is not allowed (a span "
                             "fraction from 0 to 1)")
        if pos and not p > pos[-1]:
            raise InputError(f"{where}: '{at}.position' = {p!r} does not increase (the "
                             f"station before it is at {pos[-1]:g})")
        # one station's section is checked by the section file's own rules
        sec_text = (f"[section]\nname = {_toml_value(str(st['name']))}\n"
                    f"te_angle_deg = {_toml_value(st['te_angle_deg'])}\n"
                    f"coefficients = {_toml_value(st['coefficients'])}\n")
        try:
            rec = parse_section(sec_text, f"{source} {at}")
        except (InputError, TypeError) as exc:
            raise InputError(f"{where}: {at}: " + str(exc).split(": ", 1)[-1]) from None
        if coeffs and len(rec.coefficients) != len(coeffs[0]):
            raise InputError(f"{where}: '{at}.coefficients' has {len(rec.coefficients)} pairs "
                             f"but station[1] has {len(coeffs[0])}; every station has as "
                             "many")
        cl = st.get("cl")
        if cl is not None and not _num(cl):
            raise InputError(f"{where}: '{at}.cl' = {cl!r} is not a number")
        names.append(rec.name)
        pos.append(float(p))
        coeffs.append(rec.coefficients)
        taus.append(rec.te_angle_deg)
        figs.append({} if cl is None else {"cl": float(cl)})
    if len(set(names)) != len(names):
        raise InputError(f"{where}: station names must be distinct")
    prov = data.get("provenance", {})
    if not isinstance(prov, dict):
        raise InputError(f"{where}: 'provenance' must be a table")
    return Family(tuple(names), np.array(pos), np.array(coeffs, dtype=complex),
                  np.array(taus, dtype=float), rule, tuple(figs),
                  {"name": name.strip(), **prov})



def load_family(path: str | os.PathLike) -> Family:
    """Read and validate a family file."""
    return parse_family(read_input_text(path, "family"), str(path))


def format_family(name: str, family: Family, provenance: dict | None = None) -> str:
    """Text of a family file (coefficients to full double precision)."""
    lines = [
        "# foilmap family (ideal-flow screening result: a section that carries loads or",
        "# people must be checked by viscous analysis and tests; local codes govern)",
        "[family]",
        f"name = {_toml_value(name)}",
        f"rule = {_toml_value(family.rule)}",
    ]
    for i, st in enumerate(family.names):
        c = np.asarray(family.coefficients[i], dtype=complex)
        pairs = ",\n    ".join(f"[{float(a.real)!r}, {float(a.imag)!r}]" for a in c)
        lines += ["", "[[station]]", f"name = {_toml_value(st)}",
                  f"position = {float(family.positions[i])!r}",
                  f"te_angle_deg = {float(family.te_angle_deg[i])!r}",
                  f"coefficients = [\n    {pairs},\n]"]
        figs = family.figures[i] if i < len(family.figures) else {}
        if figs.get("cl") is not None:
            lines.append(f"cl = {float(figs['cl'])!r}")
    if provenance:
        lines += ["", "[provenance]"]
        lines += [f"{k} = {_toml_value(v)}" for k, v in provenance.items() if v is not None]
    return "\n".join(lines) + "\n"


def load_section_at(path: str | os.PathLike, at: float | None) -> SectionRecord:
    """A section file, or the section at span position ``at`` of a family file, as a
    :class:`SectionRecord` (what every command that takes a section reads)."""
    from foilmap.store.sectionfile import load_section

    text = read_input_text(path, "section")
    if not is_family_text(text):
        if at is not None:
            raise InputError(f"--at {at:g} needs a family file; {str(path)!r} holds one section")
        return load_section(path)
    fam = parse_family(text, str(path))
    if at is None:
        lo, hi = fam.span
        raise InputError(f"{str(path)!r} is a family file: give --at POSITION (a span position "
                         f"from {lo:g} to {hi:g})")
    return section_record_at(fam, at, str(path))


def section_record_at(fam: Family, at: float, source: str | None = None) -> SectionRecord:
    """The section at span position ``at`` of a family as a :class:`SectionRecord` named
    ``FAMILY@POSITION`` (at a station's position, the station's section bit for bit)."""
    try:
        fam.check_position(at)
    except ValueError as exc:
        where = f" of {source!r}" if source else ""
        raise InputError(f"--at {float(at):g}: {exc}{where}") from None
    a, tau_deg = fam.coefficients_at(at)
    name = f"{(fam.provenance or {}).get('name', 'family')}@{float(at):g}"
    prov = {"position": float(at)}
    if source:
        prov["family"] = source
    return SectionRecord(name, float(tau_deg[0]), a[0], prov)


# --- a family study's designs ------------------------------------------------------------


@dataclass
class BestFamily:
    """A family study's best family: ``.family`` (a :class:`Family`), ``.design`` (the logged
    design it comes from) and ``.stations``: per station its objective in the family beside
    the best of its independent run (None where the folder holds none), and ``.price`` the
    relative difference — the price of continuity."""

    family: Family
    design: object
    stations: list = field(default_factory=list)

    def to_toml(self) -> str:
        d = self.design
        return format_family(f"{d.study_name}-{d.run_id}", self.family, d.provenance())


def best_family(folder, run: str | None = None) -> BestFamily:
    """The best feasible family of a family study's folder (or of one of its family runs)."""
    from foilmap.store.folder import StudyFolder

    f = StudyFolder(folder)
    study = f.study
    if not study.is_family:
        raise InputError(f"study {study.name!r} designs single sections, not a family: use "
                         "foilmap best (a section file)")
    return family_design(f, f.best_design(run))


def family_design(folder, d) -> BestFamily:
    """The family of one logged design ``d`` of a family run (from ``best`` or ``pick``), with
    each station's objective beside its independent station run's."""
    from foilmap.design.family import build_problem, family_of
    from foilmap.store.folder import StudyFolder
    from foilmap.store.runlog import read_run

    f = folder if isinstance(folder, StudyFolder) else StudyFolder(folder)
    study = f.study
    if not d.run.family:
        raise InputError(f"run {d.run_id!r} is a station run; its family's run is "
                         f"family{d.run_id[len(d.run.point.name):]}")
    problem = build_problem(study, d.run)
    fam = family_of(study, problem, d.x, d.provenance())
    rows = problem.station_figures(d.x)
    suffix = d.run_id[len(d.run.point.name):]
    for r in rows:
        r["independent"] = None
        sid = r["station"] + suffix
        if f.log_path(sid).exists():
            b = read_run(f.log_path(sid)).best()
            if b is not None:
                r["independent"] = float(b["f"])
        r["price"] = (None if not r["independent"] else
                      (r["f"] - r["independent"]) / abs(r["independent"]))
    return BestFamily(fam, d, rows)
