"""Target pressure distributions for inverse design: CSV tables in the layout ``evaluate
--table`` writes.

Columns by header name: ``x``, ``surface`` (``upper`` or ``lower``), and ``cp`` or ``q``
(V/V∞); other columns are ignored, and ``#`` lines are comments.  The target may cover both
surfaces or part of one.  Every problem is one line naming the line number, the column, the
value and what is allowed.
"""

from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np

from foilmap.errors import InputError, read_input_text
from foilmap.section.inverse import Target

__all__ = ["load_target", "parse_target", "MIN_POINTS"]

#: fewest rows a target may have
MIN_POINTS = 5


def parse_target(text: str, source: str = "<text>") -> Target:
    """Parse a target table (see the module docstring)."""
    where = f"target file {source!r}"
    rows = [(i, line) for i, line in enumerate(text.splitlines(), start=1)
            if line.strip() and not line.lstrip().startswith("#")]
    if not rows:
        raise InputError(f"{where} has no rows (needs a header x,surface,cp and at least "
                         f"{MIN_POINTS} points)")
    head_no, head = rows[0]
    names = [h.strip().lower() for h in next(csv.reader(io.StringIO(head)))]
    for need in ("x", "surface"):
        if need not in names:
            raise InputError(f"{where}, line {head_no}: the header has no column {need!r} "
                             f"(found: {', '.join(names)}; needed: x, surface, and cp or q)")
    kind = "cp" if "cp" in names else "q" if "q" in names else None
    if kind is None:
        raise InputError(f"{where}, line {head_no}: the header has neither 'cp' nor 'q' "
                         f"(found: {', '.join(names)})")
    ix, isurf, iv = names.index("x"), names.index("surface"), names.index(kind)
    xs, up, vals = [], [], []
    for no, line in rows[1:]:
        cells = next(csv.reader(io.StringIO(line)))
        if len(cells) < len(names):
            raise InputError(f"{where}, line {no}: {len(cells)} columns, the header has "
                             f"{len(names)}")
        try:
            x = float(cells[ix])
        except ValueError:
            raise InputError(f"{where}, line {no}: x = {cells[ix].strip()!r} is not a number") \
                from None
        if not math.isfinite(x) or not 0.0 <= x <= 1.0:
            raise InputError(f"{where}, line {no}: x = {cells[ix].strip()} is outside 0 to 1 "
                             "(chord fractions)")
        surf = cells[isurf].strip().lower()
        if surf not in ("upper", "lower"):
            raise InputError(f"{where}, line {no}: surface = {cells[isurf].strip()!r} is "
                             "neither 'upper' nor 'lower'")
        try:
            v = float(cells[iv])
        except ValueError:
            raise InputError(f"{where}, line {no}: {kind} = {cells[iv].strip()!r} is not a "
                             "number") from None
        if not math.isfinite(v) or (kind == "q" and v < 0) or (kind == "cp" and v > 1.0):
            allowed = "a speed ratio of at least 0" if kind == "q" else "at most 1 (stagnation)"
            raise InputError(f"{where}, line {no}: {kind} = {cells[iv].strip()} is not allowed "
                             f"({allowed})")
        xs.append(x)
        up.append(surf == "upper")
        vals.append(v)
    if len(xs) < MIN_POINTS:
        raise InputError(f"{where}: {len(xs)} points; a target needs at least {MIN_POINTS}")
    x, u, v = np.array(xs), np.array(up), np.array(vals)
    for side, name in ((True, "upper"), (False, "lower")):
        if 0 < int(np.sum(u == side)) < 2:
            raise InputError(f"{where}: the {name} surface has one point; give at least 2 or "
                             "none")
    if kind == "cp":
        return Target.from_cp(x, u, v)
    return Target(x, u, v)


def load_target(path: str | Path) -> Target:
    """Read and check a target table."""
    return parse_target(read_input_text(path, "target"), str(path))
