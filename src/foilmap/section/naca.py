"""NACA four-digit sections from the published formula (a built-in generator for tests and seeds).

Thickness (Abbott & von Doenhoff, Theory of Wing Sections, 1959, §6.4; NACA Report 824, 1945):

    y_t = 5t (0.2969 √x − 0.1260 x − 0.3516 x² + 0.2843 x³ − 0.1015 x⁴)

with −0.1036 in place of −0.1015 for a closed trailing edge (a common practice variant), and
the two-parabola mean line of maximum camber m at p:

    y_c = m/p² (2px − x²)  (x < p),   y_c = m/(1 − p)² ((1 − 2p) + 2px − x²)  (x ≥ p)

applied normal to the mean line: x_u = x − y_t sin θ, y_u = y_c + y_t cos θ (lower: signs swapped),
tan θ = dy_c/dx.
"""

from __future__ import annotations

import re

import numpy as np

from foilmap.errors import InputError

__all__ = ["parse_naca4", "naca4_surfaces", "naca4_coordinates"]

_OPEN = -0.1015
_CLOSED = -0.1036


#: thickness (percent of chord) the four-digit formula is used for: the family was published
#: from 6 to 25 %; beyond about 30 % the formula's nose and trailing edge lose their shape
#: (common practice)
THICKNESS_RANGE = (1, 30)


def parse_naca4(code: str) -> tuple[float, float, float]:
    """(m, p, t) of a four-digit code such as '2412' (m = 0.02, p = 0.4, t = 0.12)."""
    c = code.strip().upper().removeprefix("NACA").strip()
    if not re.fullmatch(r"\d{4}", c):
        raise InputError(f"NACA code {code!r} is not four digits (for example 0012 or 2412)")
    m, p, t = int(c[0]) / 100.0, int(c[1]) / 10.0, int(c[2:]) / 100.0
    lo, hi = THICKNESS_RANGE
    if not lo <= int(c[2:]) <= hi:
        raise InputError(f"NACA code {code!r}: thickness {int(c[2:])} % is outside the formula's "
                         f"sensible range, {lo} to {hi} % (the last two digits)")
    if m > 0 and p == 0:
        raise InputError(f"NACA code {code!r} has camber but no camber position (the second "
                         "digit, 1 to 9, tenths of the chord)")
    if m == 0 and p > 0:
        raise InputError(f"NACA code {code!r} has a camber position but no camber (a symmetric "
                         f"section is 00{c[2:]})")
    return m, p, t


def naca4_surfaces(m: float, p: float, t: float, x: np.ndarray, closed_te: bool = True):
    """Upper and lower surface points at mean-line stations ``x`` (0..1): (xu, yu, xl, yl)."""
    x = np.asarray(x, dtype=float)
    a4 = _CLOSED if closed_te else _OPEN
    yt = 5 * t * (0.2969 * np.sqrt(x) - 0.1260 * x - 0.3516 * x**2 + 0.2843 * x**3 + a4 * x**4)
    if m == 0:
        yc = np.zeros_like(x)
        dyc = np.zeros_like(x)
    else:
        fore = x < p
        yc = np.where(fore, m / p**2 * (2 * p * x - x**2),
                      m / (1 - p) ** 2 * ((1 - 2 * p) + 2 * p * x - x**2))
        dyc = np.where(fore, 2 * m / p**2 * (p - x), 2 * m / (1 - p) ** 2 * (p - x))
    th = np.arctan(dyc)
    return x - yt * np.sin(th), yc + yt * np.cos(th), x + yt * np.sin(th), yc - yt * np.cos(th)


def naca4_coordinates(code: str, points: int = 201, closed_te: bool = True) -> np.ndarray:
    """Coordinates TE → upper → LE → lower → TE with cosine spacing, shape (points, 2).

    The points are in the formula's own frame (chord line from (0, 0) to (1, 0)); ``points`` of
    at least 11, the LE included once.
    """
    m, p, t = parse_naca4(code)
    n_up = (points + 2) // 2
    n_lo = points + 1 - n_up
    bu = 0.5 * (1 - np.cos(np.linspace(0, np.pi, n_up)))
    bl = 0.5 * (1 - np.cos(np.linspace(0, np.pi, n_lo)))
    xu, yu, _, _ = naca4_surfaces(m, p, t, bu, closed_te)
    _, _, xl, yl = naca4_surfaces(m, p, t, bl, closed_te)
    x = np.concatenate([xu[::-1], xl[1:]])
    y = np.concatenate([yu[::-1], yl[1:]])
    return np.column_stack([x, y])
