"""The compiled kernels' constants, defined once: figure columns, status codes, budgets, the
floor's stations and the proxies' trailing-edge closure.

Plain Python (no numba), so that the numpy side (:mod:`foilmap.section.evaluation`,
:mod:`foilmap.section.geometry`) reads the same values as the kernels without compiling them.
numba freezes a module-level number read inside a kernel into the compiled code; editing one
here recompiles every kernel (the cache key covers every kernel file: :mod:`._kcache`).
"""

from __future__ import annotations

import math

from foilmap.section.status import Status

#: relative tolerance of the certified peak speed: no point of the contour is faster than the
#: reported maximum q by more than this factor; the reported value itself is a local maximum
#: refined to round-off
PEAK_TOLERANCE = 1e-7
#: most arc evaluations one certification may spend before it gives up
_BUDGET = 20000
_STACK = 8192
_INF = math.inf
_TWO_PI = 2.0 * math.pi
_HALF_PI = 0.5 * math.pi

# validity codes: the values of foilmap.section.status.Status as plain ints (numba compiles
# them in as constants; tests/test_compiled.py ties each to its Status)
V_OK = int(Status.OK)
V_CRITICAL = int(Status.CRITICAL_POINT)
V_SINGULAR = int(Status.SINGULAR_POINT)
V_BRANCH_CUT = int(Status.BRANCH_CUT)
V_FOLDED = int(Status.FOLDED)
V_CROSSED = int(Status.NEGATIVE_THICKNESS)  # the surfaces cross
V_ABOVE_MAX_LIFT = int(Status.ABOVE_MAX_LIFT)
V_NON_FINITE = int(Status.NON_FINITE)
V_NOT_STARLIKE = int(Status.NOT_STARLIKE)
V_THIN = int(Status.BELOW_FLOOR)  # the local thickness falls below the floor
V_UNCERTIFIED = int(Status.UNCERTIFIED)  # a certificate ran out of budget or stack

#: the local-thickness floor (docs/study-file.md, ``min_local_thickness``): full value t₀ on
#: FLOOR_NOSE ≤ x/c ≤ FLOOR_TAPER, rising linearly from 0 at the leading edge to t₀ at
#: FLOOR_NOSE, falling as ((1 − x)/(1 − FLOOR_TAPER))² into the trailing-edge wedge.  It holds
#: exactly at FLOOR_STATIONS stations on FLOOR_START ≤ x/c ≤ FLOOR_END (whose least clearance
#: is the figure ``floor_margin``) and at FLOOR_TAIL more stations that each take the distance
#: to the trailing edge down by FLOOR_TAIL_RATIO, and between all of them it is certified to
#: hold at least FLOOR_BETWEEN times (with no floor: the thickness certified positive there)
FLOOR_START = 0.005
FLOOR_NOSE = 0.05
FLOOR_TAPER = 0.8
FLOOR_END = 0.98
FLOOR_STATIONS = 25
FLOOR_TAIL = 12
FLOOR_TAIL_RATIO = 0.5
FLOOR_BETWEEN = 0.5
#: most interval splits the floor certificate may spend before it gives up
_FLOOR_BUDGET = 4000

#: cosine-spaced chord stations where the sampled thickness and camber are read (both routes)
#: and a crossing of the surfaces looked for
THICKNESS_STATIONS = 65
_M_ST = THICKNESS_STATIONS

#: the proxies stop at this chord station by default: the ideal flow's stagnation at a
#: finite-angle trailing edge is removed in real flow by the boundary layer's displacement
#: (common practice in inviscid screening), and every gradient proxy diverges there
DEFAULT_PROXY_END = 0.9
#: speed ratio a real trailing-edge flow recovers to, q/V∞ = 0.95 (Cp_TE ≈ 0.1: common practice
#: for attached sections, value from memory); the proxies charge any recovery still owed at
#: ``proxy_end`` down to it, so that a search cannot hide a recovery behind the end station
TRAILING_EDGE_SPEED = 0.95
#: a ``proxy_end`` at or beyond this station is the trailing edge itself: nothing is charged
PROXY_CLOSE_LIMIT = 0.999

#: the columns of the figure array of the search kernel, in order: the one list both the kernel
#: (through the F_* indices below) and :meth:`foilmap.section.evaluation.Evaluation.from_figures`
#: read
FIGURES = ("cl", "alpha", "alpha_zero_lift", "lift_slope", "cl_max_ideal", "cm_quarter_chord",
           "cp_min", "cp_min_x", "thickness", "thickness_x", "camber", "camber_x", "le_radius",
           "te_angle", "area", "severity", "thwaites_sep_x_upper", "thwaites_sep_x_lower",
           "thwaites_min_lambda", "stratford_margin", "stratford_sep_x_upper",
           "stratford_sep_x_lower", "cp_min_upper", "floor_margin")
_NF = len(FIGURES)
F_CL = FIGURES.index("cl")
F_ALPHA = FIGURES.index("alpha")
F_ALPHA_ZERO_LIFT = FIGURES.index("alpha_zero_lift")
F_LIFT_SLOPE = FIGURES.index("lift_slope")
F_CL_MAX_IDEAL = FIGURES.index("cl_max_ideal")
F_CM_QUARTER_CHORD = FIGURES.index("cm_quarter_chord")
F_CP_MIN = FIGURES.index("cp_min")
F_CP_MIN_X = FIGURES.index("cp_min_x")
F_THICKNESS = FIGURES.index("thickness")
F_THICKNESS_X = FIGURES.index("thickness_x")
F_CAMBER = FIGURES.index("camber")
F_CAMBER_X = FIGURES.index("camber_x")
F_LE_RADIUS = FIGURES.index("le_radius")
F_TE_ANGLE = FIGURES.index("te_angle")
F_AREA = FIGURES.index("area")
F_SEVERITY = FIGURES.index("severity")
F_THWAITES_SEP_X_UPPER = FIGURES.index("thwaites_sep_x_upper")
F_THWAITES_SEP_X_LOWER = FIGURES.index("thwaites_sep_x_lower")
F_THWAITES_MIN_LAMBDA = FIGURES.index("thwaites_min_lambda")
F_STRATFORD_MARGIN = FIGURES.index("stratford_margin")
F_STRATFORD_SEP_X_UPPER = FIGURES.index("stratford_sep_x_upper")
F_STRATFORD_SEP_X_LOWER = FIGURES.index("stratford_sep_x_lower")
F_CP_MIN_UPPER = FIGURES.index("cp_min_upper")
F_FLOOR_MARGIN = FIGURES.index("floor_margin")

#: bit flags of the proxies the search kernel computes (its ``want`` argument)
WANT_SEVERITY = 1
WANT_THWAITES = 2
WANT_STRATFORD = 4
#: the proxy names of :data:`foilmap.section.evaluation.PROXIES` with their bits
PROXY_BITS = (("severity", WANT_SEVERITY), ("thwaites", WANT_THWAITES),
              ("stratford", WANT_STRATFORD))

# the per-section constants of a coefficient vector (``consts``, built by
# foilmap.section._kbounds._prepare), by position:
C_L1 = 0  # L1 = Σ n|Aₙ|
C_L2 = 1  # L2 = Σ n²|Aₙ|
C_L3 = 2  # L3 = Σ n³|Aₙ|
C_GDTE = 3  # G: bound of |D g| next to the trailing edge, E(1 + L1)
C_MM = 4  # M: bound of |D² g|, E((1 + L1)² + L2)
C_OMH1 = 5  # |1 − h(1)|
C_ARG1H = 6  # arg(1 − h(1))
C_M3 = 7  # M₃: bound of |D³ g|
C_KAPPA = 8  # κ = Im c₂ − Re(1 − h(1))/2, the turning of arg t at the edge
C_ABSC2 = 9  # |c₂|
C_L4 = 10  # L4 = Σ n⁴|Aₙ|
