"""Section families from Python: what ``foilmap family`` and ``foilmap best`` (for a family
study) do, as calls that return objects.

``load_family(path)`` reads a family file; its ``.section_at(pos)`` is the exact section at a
span position (a ``SectionSet``).  ``best_family(folder)`` is a family study's best family with
each station's objective beside that of its independent station run.  ``loft(family, n)`` gives
the coordinates at ``n`` span positions in one table.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from foilmap.design.family import Family
from foilmap.errors import InputError

from foilmap.store.familyfile import BestFamily, best_family, family_design

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
