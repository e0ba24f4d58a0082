"""Reading section coordinates in the trade's common layouts, and normalising them.

Layouts detected:

``loop``
    one loop of x y rows from the trailing edge over one surface to the leading edge and back
    (either direction: a loop over the lower surface first is reversed);
``surfaces``
    a line with the two point counts, then the upper surface from LE to TE, then the lower
    surface from LE to TE;
``csv``
    either of the above with commas, an optional ``x,y`` header row.

Name lines (the first non-numeric line) and comment lines (``#``, ``!``, ``%``) are skipped.  The
result is normalised to the chord frame: the leading edge, farthest from the trailing edge (the
midpoint of the two end points), is moved to (0, 0), the trailing edge to (1, 0).
The leading edge is the sample farthest from the trailing edge.  An open trailing edge is
reported with its gap and, for the fit, closed by a linear thickness ramp ±(gap/2)·x on the two
surfaces (common practice: the leading edge does not move).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from foilmap.errors import InputError, read_input_text

__all__ = ["Coordinates", "parse_coordinates", "load_coordinates", "normalise_loop",
           "MIN_POINTS"]

#: fewest points a coordinates file may hold
MIN_POINTS = 12
_COMMENT = ("#", "!", "%", "//")
_NUM = re.compile(r"^[\s,;]*[-+]?(\d+\.?\d*|\.\d+)([eEdD][-+]?\d+)?([\s,;]+[-+]?(\d+\.?\d*|\.\d+)"
                  r"([eEdD][-+]?\d+)?)+[\s,;]*$")


@dataclass(frozen=True)
class Coordinates:
    """A section read from a file, in the chord frame, TE → upper → LE → lower → TE.

    Attributes
    ----------
    name : name line of the file (or the file name)
    xy : (n, 2) closed loop in chords, first and last points (1, 0)
    layout : "loop", "surfaces" or "csv (loop)", "csv (surfaces)"
    reversed : the file ran over the lower surface first and was reversed
    te_gap : trailing-edge thickness in chords before closing (0 for a closed edge)
    closing_shift : largest movement of a point by the closing ramp, chords
    source_le : the file's own leading edge in the chord frame — its sample at the origin (the
        usual layout, chord on the x-axis), else its sample of least x: the file's chord line
        runs from there to the trailing edge (1, 0)
    """

    name: str
    xy: np.ndarray
    layout: str
    reversed: bool
    te_gap: float
    closing_shift: float
    source_le: complex = 0j
    rows_read: int = 0  # points as the file gives them (before a leading edge is inserted)

    @property
    def le_index(self) -> int:
        return int(np.argmin(np.hypot(self.xy[:, 0], self.xy[:, 1])))


def _fail(source: str, msg: str):
    raise InputError(f"coordinates file {source!r}: {msg}")


def _rows(text: str, source: str):
    """Numeric rows with their line numbers, and the name line."""
    name = None
    rows = []
    csv = False
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith(_COMMENT):
            continue
        if "," in line:
            csv = True
        if _NUM.match(line.replace("d", "e").replace("D", "E")):
            parts = re.split(r"[\s,;]+", line.strip(" ,;"))
            try:
                vals = [float(p.replace("d", "e").replace("D", "E")) for p in parts]
            except ValueError:
                _fail(source, f"line {lineno} is not numeric: {line[:40]!r}")
            if len(vals) != 2:
                _fail(source, f"line {lineno} has {len(vals)} numbers; expected two (x y)")
            if not all(math.isfinite(v) for v in vals):
                _fail(source, f"line {lineno} holds a non-finite number")
            rows.append((lineno, vals[0], vals[1]))
        elif not rows and name is None:
            name = line
        elif rows:
            _fail(source, f"line {lineno} is not numeric: {line[:40]!r}")
        else:
            _fail(source, f"line {lineno} is neither a name nor x y numbers: {line[:40]!r}; "
                          "this does not look like a coordinates file")
    if name is not None and re.fullmatch(r"x\s*[,;\s]\s*y", name.lower()):
        name = None  # a CSV header row
    return name, rows, csv


def parse_coordinates(text: str, source: str = "<text>") -> Coordinates:
    """Parse, check and normalise a coordinates file's text."""
    name, rows, csv = _rows(text, source)
    if not rows:
        _fail(source, "holds no x y rows; this does not look like a coordinates file")
    layout = "loop"
    first = rows[0]
    counts = (first[1], first[2])
    if all(c >= 2 and float(c).is_integer() for c in counts) and len(rows) - 1 == sum(counts):
        layout = "surfaces"
        nu = int(counts[0])
        body = rows[1:]
        up = np.array([[r[1], r[2]] for r in body[:nu]])
        lo = np.array([[r[1], r[2]] for r in body[nu:]])
        up_lines = [r[0] for r in body[:nu]]
        lo_lines = [r[0] for r in body[nu:]]
        if np.allclose(up[0], lo[0]):
            lo = lo[1:]
            lo_lines = lo_lines[1:]
        xy = np.concatenate([up[::-1], lo])
        lines = up_lines[::-1] + lo_lines
    else:
        xy = np.array([[r[1], r[2]] for r in rows])
        lines = [r[0] for r in rows]
    if csv:
        layout = f"csv ({layout})"
    if xy.shape[0] < MIN_POINTS:
        _fail(source, f"has {xy.shape[0]} points; at least {MIN_POINTS} are needed")
    step = np.hypot(*np.diff(xy, axis=0).T)
    dup = np.flatnonzero(step == 0.0)
    if dup.size:
        i = int(dup[0])
        _fail(source, f"duplicate point ({xy[i, 0]:g}, {xy[i, 1]:g}) at rows {i + 1} and {i + 2}"
                      + (f" (line {lines[i + 1]})" if i + 1 < len(lines) else ""))
    _check_order(xy, lines, source)
    from dataclasses import replace

    return replace(normalise_loop(xy, name or Path(source).stem, layout, source),
                   rows_read=int(len(rows) - (1 if layout.endswith("surfaces)")
                                              or layout == "surfaces" else 0)))


def _check_order(xy: np.ndarray, lines: list, source: str) -> None:
    """Along the loop x falls from the trailing edge to the leading edge (the least x) and
    rises back: a point out of that order is named with its line."""
    j = int(np.argmin(xy[:, 0]))
    dx = np.diff(xy[:, 0])
    bad_up = np.flatnonzero(dx[:j] > 0)
    bad_lo = np.flatnonzero(dx[j:] < 0) + j
    for bad, row_of in ((bad_up, lambda i: i + 1), (bad_lo, lambda i: i + 1)):
        if bad.size:
            k = row_of(int(bad[0]))
            _fail(source, f"line {lines[k]}: the point ({xy[k, 0]:g}, {xy[k, 1]:g}) is out of "
                          "order (x must fall from the trailing edge to the leading edge and "
                          "rise back to the trailing edge); correct or remove that line")


def _self_intersects(xy: np.ndarray, block: int = 256) -> int | None:
    """Index of a segment that crosses a non-adjacent one, or None.

    All pairs, in blocks of rows: bounding boxes first, the exact crossing test only for the
    pairs whose boxes overlap (memory O(block · n)).
    """
    p, q = xy[:-1], xy[1:]
    n = p.shape[0]
    lo, hi = np.minimum(p, q), np.maximum(p, q)
    d = q - p

    def cross(a, b):
        return a[..., 0] * b[..., 1] - a[..., 1] * b[..., 0]

    for start in range(0, n, block):
        rows = np.arange(start, min(start + block, n))
        over = ((lo[rows, None, 0] <= hi[None, :, 0]) & (hi[rows, None, 0] >= lo[None, :, 0])
                & (lo[rows, None, 1] <= hi[None, :, 1]) & (hi[rows, None, 1] >= lo[None, :, 1]))
        i, j = np.nonzero(over)
        i = rows[i]
        sel = (np.abs(i - j) > 1) & ~((i == 0) & (j == n - 1)) & ~((j == 0) & (i == n - 1))
        i, j = i[sel], j[sel]
        if i.size == 0:
            continue
        r = p[j] - p[i]
        den = cross(d[i], d[j])
        with np.errstate(all="ignore"):
            t = cross(r, d[j]) / den
            u = cross(r, d[i]) / den
        hit = (den != 0) & (t > 0) & (t < 1) & (u > 0) & (u < 1)
        if hit.any():
            return int(i[np.argmax(hit)])
    return None


def normalise_loop(xy: np.ndarray, name: str, layout: str = "loop",
                   source: str = "<points>") -> Coordinates:
    """Orient, normalise to the chord frame and close a loop of points."""
    xy = np.asarray(xy, dtype=float)
    te = 0.5 * (xy[0] + xy[-1])
    gap_vec = xy[0] - xy[-1]
    size = np.ptp(xy, axis=0).max()
    if size == 0:
        _fail(source, "all points coincide")
    dist = np.hypot(*(xy - te).T)
    j = int(np.argmax(dist))
    if np.hypot(*gap_vec) > 0.1 * dist[j] or j in (0, xy.shape[0] - 1):
        _fail(source, "the contour is not closed: it must start and end at the trailing edge "
                      "(gap larger than 10 % of the chord)")
    hit = _self_intersects(xy)
    if hit is not None:
        _fail(source, f"the contour crosses itself (segment {hit + 1})")
    # chord frame: the LE is the point farthest from the TE on the quadratic through the
    # farthest sample and its neighbours (the sample itself when that is within 1 % of a step)
    z = xy[:, 0] + 1j * xy[:, 1]
    zte = te[0] + 1j * te[1]
    t = np.linspace(-1.0, 1.0, 2001)
    zq = z[j] + 0.5 * t * (z[j + 1] - z[j - 1]) + 0.5 * t * t * (z[j + 1] - 2 * z[j] + z[j - 1])
    tb = float(t[np.argmax(np.abs(zq - zte))])
    zle = z[j] if abs(tb) <= 0.01 else zq[np.argmax(np.abs(zq - zte))]
    zc = (z - zle) / (zte - zle)
    # the file's own leading edge: its origin when it has a sample there (the usual normalised
    # layout, chord line on the x-axis from (0, 0) to (1, 0)), else its sample of least x
    at_origin = np.flatnonzero(np.hypot(xy[:, 0], xy[:, 1]) <= 1e-9 * size)
    i_src = int(at_origin[0]) if at_origin.size else int(np.argmin(xy[:, 0]))
    # orientation: the first half must be the upper surface (counter-clockwise loop)
    area = 0.5 * np.sum(zc.real * np.roll(zc.imag, -1) - np.roll(zc.real, -1) * zc.imag)
    rev = area < 0
    if rev:
        zc = zc[::-1]
        j = len(zc) - 1 - j
        i_src = len(zc) - 1 - i_src
    gap = zc[0] - zc[-1]
    te_gap = float(abs(gap))
    source_le = complex(zc[i_src])
    # close an open edge: shift upper by −(gap/2)·x and lower by +(gap/2)·x (LE unmoved)
    shift = np.zeros_like(zc)
    if te_gap > 0:
        shift[: j + 1] = -0.5 * gap * zc.real[: j + 1]
        shift[j + 1 :] = 0.5 * gap * zc.real[j + 1 :]
        zc = zc + shift
        zc[0] = zc[-1] = 1.0
    source_le = complex(zc[i_src])
    # the LE as a point of the loop: the farthest sample moved onto it, or inserted beside it
    if abs(tb) <= 0.01:
        zc[j] = 0.0
    else:
        k = j + 1 if (tb > 0) != rev else j
        zc = np.insert(zc, k, 0.0)
    xy_out = np.column_stack([zc.real, zc.imag])
    return Coordinates(name, xy_out, layout, bool(rev), te_gap, float(np.abs(shift).max()),
                       source_le if abs(source_le) > 1e-15 else 0j)


def load_coordinates(path: str | Path) -> Coordinates:
    """Read, check and normalise a coordinates file."""
    return parse_coordinates(read_input_text(path, "coordinates"), str(path))
