"""The compiled per-section kernels (numba), one facade over the modules that hold them.

Why compiled: a search evaluates populations of 12 to 64 sections, and a numpy pipeline pays a
fixed cost per call (hundreds of small array operations) that swamps the work at those sizes.
Here a loop over the batch calls per-section code with no per-call overhead.  The numpy pipeline
in :mod:`foilmap.section.evaluation` stays as the reference implementation: it uses the kernels
only for the certified peak and validity, and a test holds the two to the same figures.

The kernels, by concept (each ``section/_k*.py``):

- :mod:`._kconst`: the constants (figure columns, status codes, budgets, the floor's stations);
- :mod:`._kmap`: the map at a point of the circle and its analytic derivatives;
- :mod:`._kbounds`: rigorous bounds of the map over arcs, the per-section workspace;
- :mod:`._kpeak`: the certified peak speed;
- :mod:`._kfloor`: the local-thickness floor and its certificate;
- :mod:`._kvalid`: the certified validity checks;
- :mod:`._kproxies`: the recovery proxies at the design Cl;
- :mod:`._ksearch`: the search kernel, all of it for one section at a time;
- :mod:`._kcache`: numba's cache keyed on every kernel file (an edit of a callee recompiles its
  callers; DEVELOPERS.md, "Architecture").

The bounds are derived in docs/method.md ("What is exact between samples").
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from foilmap.section._kbounds import _arc_bounds, _prepare, _workspace
from foilmap.section._kcache import _stamp
from foilmap.section._kconst import (
    DEFAULT_PROXY_END,
    FIGURES,
    FLOOR_BETWEEN,
    FLOOR_END,
    FLOOR_NOSE,
    FLOOR_START,
    FLOOR_STATIONS,
    FLOOR_TAIL,
    FLOOR_TAIL_RATIO,
    FLOOR_TAPER,
    PEAK_TOLERANCE,
    V_ABOVE_MAX_LIFT,
    V_BRANCH_CUT,
    V_CRITICAL,
    V_CROSSED,
    V_FOLDED,
    V_NON_FINITE,
    V_NOT_STARLIKE,
    V_OK,
    V_SINGULAR,
    V_THIN,
    V_UNCERTIFIED,
)
from foilmap.section._kfloor import _floor_check, floor_at, floor_stations
from foilmap.section._kmap import _grid_phi, map_point
from foilmap.section._kpeak import peak_batch
from foilmap.section._ksearch import search_batch
from foilmap.section._kvalid import _contour_keys, _frame, critical_batch, validity_batch

__all__ = ["PEAK_TOLERANCE", "map_point", "peak_batch", "validity_batch", "search_batch",
           "critical_batch", "warm_up", "warm_cache", "FIGURES", "floor_at", "floor_stations",
           "FLOOR_START", "FLOOR_NOSE", "FLOOR_TAPER", "FLOOR_END", "FLOOR_STATIONS",
           "FLOOR_TAIL", "FLOOR_TAIL_RATIO", "FLOOR_BETWEEN",
           "V_OK", "V_CRITICAL", "V_SINGULAR", "V_BRANCH_CUT", "V_FOLDED", "V_CROSSED",
           "V_ABOVE_MAX_LIFT", "V_NON_FINITE", "V_NOT_STARLIKE", "V_THIN", "V_UNCERTIFIED",
           # the internals the floor's tests call one by one
           "_arc_bounds", "_prepare", "_workspace", "_floor_check", "_grid_phi", "_frame",
           "_contour_keys"]


def warm_up() -> None:
    """Compile (or load from numba's cache) every entry point once, on a one-section batch.

    The driver calls this before it starts worker processes, so that they load the compiled
    code from the cache instead of each compiling it (about half a minute the first time after
    an install).
    """
    from foilmap.section.conformal import DEFAULT_CRITICAL_MARGIN, DEFAULT_SINGULAR_MARGIN

    a = np.array([[-0.08 + 0.04j, 0.004 - 0.003j]])
    tau = np.array([0.17])
    radius = 1.0 - DEFAULT_CRITICAL_MARGIN
    validity_batch(a, tau, 64, radius, DEFAULT_SINGULAR_MARGIN, 0.005)
    peak_batch(a, tau, np.array([0.05]), 64, PEAK_TOLERANCE)
    critical_batch(a, radius)
    for design_peak in (True, False):  # the forms commands and searches call
        search_batch(a, tau, np.array([0.5]), 64, radius, DEFAULT_SINGULAR_MARGIN,
                     DEFAULT_PROXY_END, np.zeros(0), 0, 0.0, PEAK_TOLERANCE, design_peak, 0.005)


def _warm_marker() -> Path | None:
    """The file that says numba's cache holds every entry point of these kernel files: beside
    the cache's own files (a ``.nbw`` among its ``.nbi`` and ``.nbc``, so that clearing the
    cache clears it too), named for the kernels' stamp and the numba and Python versions."""
    path = getattr(getattr(search_batch, "_cache", None), "_cache_path", None)
    if not path:
        return None
    import numba

    v = sys.version_info
    return Path(path) / (f"foilmap-kernels-{_stamp()[:16]}-numba{numba.__version__}"
                         f"-py{v.major}{v.minor}.nbw")


def warm_cache() -> bool:
    """:func:`warm_up` unless it has run since the kernel files last changed (True when it ran).

    Loading every entry point from a warm cache costs the driver half a second before its
    workers start, each of which loads them again anyway: once the cache is known to be warm the
    driver skips it.  A marker that outlived the cache files costs only that the workers compile
    at once, each for itself."""
    marker = _warm_marker()
    if marker is not None and marker.exists():
        return False
    warm_up()
    if marker is not None:
        try:
            marker.touch()
        except OSError:
            pass  # a read-only install: the driver warms up every time, as before
    return True
