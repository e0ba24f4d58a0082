"""Section families from Python: what ``foilmap family`` and ``foilmap best`` (for a family
study) do, as calls that return objects.

``load_family(path)`` reads a family file; its ``.section_at(pos)`` is the exact section at a
span position (a ``SectionSet``).  ``best_family(folder)`` is a family study's best family with
each station's objective beside that of its independent station run.  ``loft(family, n)`` gives
the coordinates at ``n`` span positions in one table.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from foilmap.design.family import Family
from foilmap.errors import InputError

__all__ = ["load_family", "best_family", "family_design", "BestFamily", "loft", "Loft",
           "family_section"]


def load_family(path: str | os.PathLike) -> Family:
    """Read and validate a family file (``foilmap best`` of a family study writes one)."""
    from foilmap.store.familyfile import load_family as load

    return load(path)


def _family(family) -> Family:
    if isinstance(family, Family):
        return family
    if isinstance(family, (str, os.PathLike)):
        return load_family(family)
    raise InputError(f"{type(family).__name__} is not a family (give a family file's path or "
                     "what foilmap.load_family returns)")


def family_section(family, at: float):
    """The section at span position ``at`` of a family (object or file) as a
    :class:`~foilmap.store.sectionfile.SectionRecord`, which every section call takes."""
    from foilmap.store.familyfile import section_record_at

    src = str(family) if isinstance(family, (str, os.PathLike)) else None
    return section_record_at(_family(family), at, src)


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
        from foilmap.store.familyfile import format_family

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


@dataclass
class Loft:
    """Coordinates at span positions: ``.positions`` (M,), ``.xy`` (M, P, 2), each section
    trailing edge → upper → leading edge → lower → trailing edge in its own chord frame."""

    positions: np.ndarray
    xy: np.ndarray
    name: str = "family"

    def to_csv(self) -> str:
        from foilmap.caution import CAUTION

        lines = [f"# foilmap loft of {self.name}: {len(self.positions)} span positions, "
                 f"{self.xy.shape[1]} points each (x/c, y/c in each section's own chord frame, "
                 "trailing edge - upper - leading edge - lower - trailing edge)",
                 f"# {CAUTION}", "position,x,y"]
        for p, xy in zip(self.positions, self.xy):
            lines += [f"{p:.6f},{x:.8f},{y:.8f}" for x, y in xy]
        return "\n".join(lines) + "\n"


def loft(family, n: int, *, points: int = 201) -> Loft:
    """Coordinates of the sections at ``n`` span positions evenly from the first station to
    the last, ``points`` per section (cosine spacing)."""
    from foilmap.api.sections import coordinates

    fam = _family(family)
    if not 2 <= int(n) <= 10000:
        raise InputError(f"--loft {n}: give 2 to 10000 span positions")
    pos = fam.loft_positions(int(n))
    xy = np.stack([coordinates(family_section(fam, p), points=points) for p in pos])
    return Loft(pos, xy, (fam.provenance or {}).get("name", "family"))
