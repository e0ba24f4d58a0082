"""Inverse design: the section whose ideal-flow speed is a given distribution (Lighthill).

Lighthill's exact inverse ("A new method of two-dimensional aerodynamic design", ARC R&M 2112,
1945) in its one-stage form: the map of the unit circle to the section is

    dz/dζ = (1 − 1/ζ)^a · exp(Σ_{n≥0} Cₙ ζ⁻ⁿ),    a = 1 − τ/π,

and the Kutta flow at circle-plane angle α has, on ζ = e^{iφ},

    ln q(φ) = ln(4 |sin(φ/2) cos(φ/2 − α)|) − a ln(2 |sin(φ/2)|) − Re Σ Cₙ e^{−inφ}.

So P(φ) = Re Σ Cₙ e^{−inφ} is known from a target q(φ), and one FFT gives the coefficients:
Re C₀ is P's mean, and Cₙ = (2/M) Σⱼ P(φⱼ) e^{inφⱼ} for n ≥ 1 (Im C₀, a rotation of the plane,
is free and set to 0).  Three real conditions must hold:

* Re C₀ = 0 — the speed at infinity is the free-stream speed (dz/dζ → e^{C₀});
* C₁ = a — the contour closes (the ζ⁻¹ coefficient of dz/dζ, e^{C₀}(C₁ − a), is the residue
  whose 2πi-multiple ∮ dz/dζ dζ is the gap of the contour).

A target generally violates them.  foilmap meets them by the least change: each step fits the
closed series (C₀ = 0 and C₁ = a fixed, C₂ … free) to the wanted P in the least-squares sense,
over the points where the target is read (weight 1), with a small smoothness penalty
Σ (n/10)⁴ |Cₙ|².  For a full target this is the FFT with the three closure modes (the mean,
cos φ, sin φ) replaced: the least uniform change of ln q.  Where the target is not read — near
the two stagnation points, where the speeds are too small to guide the iteration, and in the
trailing-edge zone x/c > 0.99 — the smooth series decides; outside a partial target the contour
keeps its current speed with a small weight.  The change the closure makes where the target is
given is reported.

A target given in x/c is carried to circle angle by fixed-point iteration on the current shape:
the contour (by integration of dz/dζ) gives x(φ), the target is read at x(φ) (a cubic spline in
√x of the speed signed through a stagnation point), ln q moves towards it (at most 0.1 a step),
and again until the coefficients settle; the steps are combined by Anderson mixing.  For a
target Cl, α follows the current chord each time: Cl = 8π sin α / c (unit circle, unit free
stream).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Target", "InverseResult", "InverseSection", "inverse_design", "inverse_section",
           "lighthill_contour", "lighthill_speed", "section_coefficients", "read_order",
           "achieved_cp", "cp_rms", "target_cp_rms"]

#: Gauss–Legendre nodes per grid interval of the contour integration
_GAUSS = np.polynomial.legendre.leggauss(6)
#: grading exponent of the end intervals, where the integrand behaves as θ^a (θ = h s^p)
_GRADE = 4
#: weight of the trailing-edge zone's straight continuation of P (see :func:`_lighthill_step`)
TE_WEIGHT = 1e-4
#: the firm weight, and the departure from the continuation that calls for it
TE_WEIGHT_FIRM = 0.1
TE_DEPARTURE = 0.05
#: read points whose line continues P into the trailing-edge zone
TE_FIT_POINTS = 8
#: weight of the points outside a partial target (they keep the current P, weakly)
FREE_WEIGHT = 0.01
#: chord station beyond which a target is not read (the trailing-edge stagnation zone)
TE_ZONE = 0.99
#: weight of the smoothness penalty of the least-squares step (see :func:`_closed_series`)
SMOOTHING = 1e-5
#: largest change of ln q per iteration at a point (see :func:`inverse_design`)
STEP_LIMIT = 0.1
#: speeds below this, in the target or the current flow, are not moved to the target: near a
#: stagnation point the ratio of two small speeds is an unstable guide (the iteration would
#: amplify any misplacement of the stagnation point); the smooth flow fills them in
QMIN = 0.4


@dataclass(frozen=True)
class Target:
    """A target distribution: chord stations, surface and speed ratio q = V/V∞ (= √(1 − Cp))."""

    x: np.ndarray  # (M,)
    upper: np.ndarray  # (M,) bool
    q: np.ndarray  # (M,)

    @classmethod
    def from_cp(cls, x, upper, cp) -> "Target":
        cp = np.asarray(cp, dtype=float)
        return cls(np.asarray(x, dtype=float), np.asarray(upper, dtype=bool),
                   np.sqrt(np.maximum(1.0 - cp, 0.0)))

    @property
    def cp(self) -> np.ndarray:
        return 1.0 - self.q**2

    def reaches_te(self, upper: bool) -> bool:
        """Whether the target on this surface runs into the trailing-edge zone."""
        m = self.upper == upper
        return bool(m.any() and self.x[m].max() > TE_ZONE)

    def surface(self, upper: bool):
        """(x, u) of one surface, sorted by x, duplicates and the trailing-edge zone dropped.

        u is the speed signed smooth: the speed |V| has a corner at a stagnation point, where
        the flow along the surface reverses, so between the leading edge and a stagnation point
        near it (the least speed within x < 0.05, below a quarter of the largest speed) u = −q.
        Beyond ``TE_ZONE`` a finite-angle trailing edge stagnates like a power of (1 − x),
        which no table resolves: that zone is left free.
        """
        m = (self.upper == upper) & (self.x <= TE_ZONE)
        x, q = self.x[m], self.q[m]
        order = np.argsort(x, kind="stable")
        x, q = x[order], q[order]
        keep = np.concatenate([[True], np.diff(x) > 1e-12]) if x.size else np.zeros(0, bool)
        x, q = x[keep], q[keep].copy()
        nose = np.flatnonzero(x < 0.05)
        if nose.size > 2:
            j = nose[np.argmin(q[nose])]
            if 0 < j and q[j] < 0.25 * q.max():
                # the corner lies beside the slowest station, on the side of its slower
                # neighbour (the speed falls linearly to it on both sides)
                after = j + 1 < x.size and q[j + 1] < q[j - 1]
                q[: j + 1 if after else j] *= -1.0
        return x, q


def _series(c: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """Σ Cₙ e^{−inθ} at angles θ (any shape)."""
    n = np.arange(c.size)
    t = np.asarray(theta, dtype=float)
    return (np.exp(-1j * np.multiply.outer(t, n)) @ c)


def _integrand(c: np.ndarray, a: float, theta: np.ndarray, series=None) -> np.ndarray:
    """dz/dφ = i ζ dz/dζ on ζ = e^{iθ}, 0 < θ < 2π, with (1 − e^{−iθ})^a written exactly as
    (2 sin(θ/2))^a e^{i a (π − θ)/2}."""
    s = 2.0 * np.sin(0.5 * theta)
    ser = _series(c, theta) if series is None else series
    return s**a * np.exp(1j * a * 0.5 * (np.pi - theta) + ser + 1j * theta) * 1j


def _series_on_grid(c: np.ndarray, count: int, offset: float) -> np.ndarray:
    """Σ Cₙ e^{−inθ} at θⱼ = 2πj/count + offset, j < count, by one FFT."""
    if c.size > count:
        raise ValueError("more coefficients than grid points")
    spec = np.zeros(count, dtype=complex)
    spec[: c.size] = c * np.exp(-1j * np.arange(c.size) * offset)
    return np.fft.fft(spec)


def lighthill_contour(c: np.ndarray, a: float, intervals: int) -> np.ndarray:
    """z(φ) at φⱼ = 2πj/intervals, j = 0 … intervals, with z(0) = 0 (the trailing edge).

    Each interval is integrated by 6-point Gauss–Legendre; the two end intervals, where the
    integrand vanishes as θ^a, in the graded variable θ = h s⁴ (smooth in s).  A closed
    contour has z at j = intervals equal to z at 0.
    """
    h = 2.0 * np.pi / intervals
    xg, wg = _GAUSS
    s = 0.5 * (xg + 1.0)
    w = 0.5 * wg
    starts = h * np.arange(intervals)
    nodes = starts[:, None] + h * s[None, :]
    ser = np.stack([_series_on_grid(c, intervals, h * sk) for sk in s], axis=1)
    # the weighted sums without a BLAS product (whose threads cost more than the arithmetic)
    vals = np.einsum("ij,j->i", _integrand(c, a, nodes[1:-1], ser[1:-1]), w) * h
    # end intervals, graded towards the trailing edge
    sp = s**_GRADE
    jac = h * _GRADE * s ** (_GRADE - 1)
    first = (_integrand(c, a, h * sp) * jac) @ w
    last = (_integrand(c, a, 2.0 * np.pi - h * sp) * jac) @ w
    parts = np.concatenate([[first], vals, [last]])
    return np.concatenate([[0.0], np.cumsum(parts)])


def lighthill_speed(c: np.ndarray, a: float, alpha: float, phi: np.ndarray,
                    series: np.ndarray | None = None) -> np.ndarray:
    """q(φ) of the Kutta flow at circle-plane angle ``alpha`` (radians); ``series`` is
    Σ Cₙ e^{−inφ} at ``phi`` when already known."""
    phi = np.asarray(phi, dtype=float)
    ser = _series(c, phi) if series is None else series
    with np.errstate(divide="ignore"):
        lnq = (np.log(4.0 * np.abs(np.sin(0.5 * phi) * np.cos(0.5 * phi - alpha)))
               - a * np.log(2.0 * np.abs(np.sin(0.5 * phi))) - np.real(ser))
    return np.exp(lnq)


class _PhiGrid:
    """The fixed circle-plane grid of one inverse solve, for its many steps: the uniform grid
    φⱼ = 2πj/M + φ₀ and the last factorised normal equations of :func:`_closed_series` for the
    closure basis B (cos nφ, sin nφ, n ≥ 2), reused while the point weights stay the same (they
    change only when the shape moves a point across a target's end or a speed threshold).

    The sums over the grid of each step, Σ Cₙ e^{−inφⱼ}, Σⱼ wⱼ yⱼ (cos nφⱼ, sin nφⱼ) and the
    Gram matrix Bᵀ W B, come from FFTs of length M instead of dense products over the grid: no
    BLAS product of the grid's size (whose threads, on a busy machine, cost each step far more
    than its arithmetic)."""

    #: factorised normal equations kept, one per pattern of weights (each (2N)² floats)
    FACTORS_KEPT = 32

    def __init__(self, phi: np.ndarray, terms: int):
        m = phi.size
        offset = float(phi[0])
        if not np.allclose(phi, 2.0 * np.pi * np.arange(m) / m + offset, rtol=0, atol=1e-12):
            raise ValueError("the grid is not uniform")
        self.phi = phi
        self.terms = terms
        # Σⱼ vⱼ e^{−ikφⱼ} = e^{−ikφ₀} FFT(v)_{k mod M}: the phase and the FFT's index of each
        # harmonic k < 2 terms (a harmonic at or past M is its alias on the grid)
        k = np.arange(2 * terms)
        self.shift = np.exp(-1j * k * offset)
        self.index = k % m
        n = np.arange(2, terms)
        # the harmonics k = n ∓ n' of the products of two basis functions, for the Gram matrix
        self._dif = np.abs(np.subtract.outer(n, n))
        self._sum = np.add.outer(n, n)
        self._sgn = np.sign(np.subtract.outer(n, n).T)  # of n' − n
        self._factors = {}  # weights (bytes) → LU factors, the latest last

    def series(self, c: np.ndarray) -> np.ndarray:
        """Σ Cₙ e^{−inφ} on the grid (as :func:`_series`, to rounding), by one FFT."""
        spec = np.zeros(self.phi.size, dtype=complex)
        np.add.at(spec, self.index[: c.size], c * self.shift[: c.size])
        return np.fft.fft(spec)

    def project(self, v: np.ndarray) -> np.ndarray:
        """Bᵀ v for the closure basis B (cos nφ, then sin nφ, n = 2 … terms − 1), by one FFT:
        Σⱼ vⱼ e^{−inφⱼ} = Σ vⱼ cos nφⱼ − i Σ vⱼ sin nφⱼ."""
        g = np.fft.fft(v)[self.index[2 : self.terms]] * self.shift[2 : self.terms]
        return np.concatenate([g.real, -g.imag])

    def gram(self, weight: np.ndarray) -> np.ndarray:
        """Bᵀ W B from the harmonics of the weights, Σⱼ wⱼ e^{−ikφⱼ} = C(k) − i S(k) (one FFT),
        by cos a cos b = ½ (cos(a − b) + cos(a + b)) and its kin."""
        g = np.fft.fft(weight)[self.index] * self.shift
        cos_k, sin_k = g.real, -g.imag
        d, t = self._dif, self._sum
        cc = 0.5 * (cos_k[d] + cos_k[t])
        ss = 0.5 * (cos_k[d] - cos_k[t])
        cs = 0.5 * (sin_k[t] + self._sgn * sin_k[d])  # Σ w cos nφ sin n'φ
        return np.block([[cc, cs], [cs.T, ss]])

    def normal_factor(self, weight: np.ndarray, pen: np.ndarray):
        """LU factors of Bᵀ W B + diag(pen) for these weights, computed once per weights: the
        weights of a solve alternate among a few patterns (a point near a threshold moves back
        and forth across it), so the last ``FACTORS_KEPT`` patterns' factors are kept."""
        from scipy.linalg import lu_factor

        key = weight.tobytes()
        factor = self._factors.pop(key, None)
        if factor is None:
            factor = lu_factor(self.gram(weight) + np.diag(pen))
            if len(self._factors) >= self.FACTORS_KEPT:
                del self._factors[next(iter(self._factors))]  # the least recently used
        self._factors[key] = factor
        return factor


def _closed_series(phi, p, weight, a, terms, smoothing: float | None = None,
                   grid: "_PhiGrid | None" = None):
    """The coefficients C of a closed section (C₀ = 0, C₁ = a) whose P = Re Σ Cₙ e^{−inφ} is
    nearest to ``p`` in the least-squares sense with point weights ``weight``, with a penalty
    ``smoothing`` · Σ (n/10)⁴ |Cₙ|² against roughness.

    With every point a row this is the FFT of ``p`` with its three closure modes (the mean,
    cos φ and sin φ) replaced by the closure values: the least uniform change.  With a partial
    target the change and the free part come out together, smooth across the ends of the
    target."""
    n = np.arange(2, terms)
    y = p - a * np.cos(phi)
    m = phi.size
    smoothing = SMOOTHING if smoothing is None else smoothing
    pen = smoothing * m * np.concatenate([(n / 10.0) ** 4, (n / 10.0) ** 4])
    if grid is not None:  # the steps of one solve: by FFTs, the factors kept
        from scipy.linalg import lu_solve

        sol = lu_solve(grid.normal_factor(weight, pen), grid.project(weight * y))
    else:
        basis = np.concatenate([np.cos(np.multiply.outer(phi, n)),
                                np.sin(np.multiply.outer(phi, n))], axis=1)
        gram = (basis * weight[:, None]).T @ basis + np.diag(pen)
        sol = np.linalg.solve(gram, (basis * weight[:, None]).T @ y)
    c = np.zeros(terms, dtype=complex)
    c[1] = a
    c[2:] = sol[: n.size] + 1j * sol[n.size :]
    return c


@dataclass(frozen=True)
class InverseResult:
    """An inverse design in Lighthill's form, and how closely it meets its target."""

    coefficients: np.ndarray  # C₀ … C_{N−1} (complex); C₀ = 0 and C₁ = a exactly
    a: float  # 1 − τ/π
    alpha_circle: float  # radians
    xy: np.ndarray  # (P, 2) contour in its chord frame, TE → upper → LE → lower → TE
    le_index: int
    target: Target
    achieved_q: np.ndarray  # (M,) the design's speed at the target's stations
    iterations: int
    converged: bool
    gap: float  # |z(2π) − z(0)| / chord of the integrated contour (closure, by integration)
    phi: np.ndarray  # (G,) the FFT grid
    covered: np.ndarray  # (G,) bool: the target covers the point
    x: np.ndarray  # (G,) chord station of each grid point
    upper: np.ndarray  # (G,) bool
    closure_dlnq: np.ndarray  # (G,) the change of ln q the closure made in the last step

    @property
    def te_angle(self) -> float:
        return float(np.pi * (1.0 - self.a))

    @property
    def cp_deviation(self) -> np.ndarray:
        """Achieved minus target Cp at each target station."""
        return (1.0 - self.achieved_q**2) - self.target.cp


def _chord_frame(z: np.ndarray):
    """The leading edge (farthest from the TE z[0]; its sample index, and the point refined on
    the parabola through it and its neighbours) and the chord-frame points."""
    zte = z[0]
    d = np.abs(z - zte) ** 2
    j = int(np.argmax(d))
    d0, d1, d2 = d[j - 1], d[j], d[j + 1]
    den = d0 - 2.0 * d1 + d2
    t = 0.5 * (d0 - d2) / den if den != 0 else 0.0
    zle = z[j] + 0.5 * t * (z[j + 1] - z[j - 1]) + 0.5 * t * t * (z[j + 1] - 2 * z[j] + z[j - 1])
    return j, (z - zle) / (zte - zle)


class _Shape:
    """The contour of coefficients C on a fine grid, with x(φ) inverted on each surface."""

    def __init__(self, c: np.ndarray, a: float, intervals: int):
        z = lighthill_contour(c, a, intervals)
        self.gap = abs(z[-1] - z[0])
        self.phi = 2.0 * np.pi * np.arange(intervals + 1) / intervals
        j, zc = _chord_frame(z[:-1])
        self.j_le = j
        self.zc = np.concatenate([zc, [1.0 + 0j]])
        te_minus_le = (z[1] - z[0]) / (zc[1] - zc[0])  # the frame's scale: dz = dzc (te − le)
        self.chord = abs(te_minus_le)
        self.gamma = float(np.angle(te_minus_le))

    def phi_at(self, x: np.ndarray, upper: np.ndarray) -> np.ndarray:
        """Circle angles of chord stations ``x`` on the given surfaces.

        Upper: φ from 0 to φ_LE, x from 1 down to 0; lower: φ_LE to 2π, x from 0 up to 1; a
        spline of φ in √x on each (x grows as the square of the distance from the nose).  A
        surface that turns back in x is read along its monotone envelope.
        """
        from scipy.interpolate import CubicSpline

        if not hasattr(self, "_spl"):
            j, x_all = self.j_le, self.zc.real
            self._spl = {}
            xu = np.minimum.accumulate(x_all[: j + 1])
            xl = np.maximum.accumulate(x_all[j:])
            for side, xs, ph in ((True, xu, self.phi[: j + 1]), (False, xl, self.phi[j:])):
                order = np.argsort(xs, kind="stable")
                u = np.sqrt(np.maximum(xs[order], 0.0))
                keep = np.concatenate([[True], np.diff(u) > 1e-13])
                self._spl[side] = CubicSpline(u[keep], ph[order][keep])
        out = np.empty_like(x)
        for side in (True, False):
            m = upper == side
            out[m] = self._spl[side](np.sqrt(np.maximum(x[m], 0.0)))
        return out


def inverse_design(target: Target, *, cl: float | None = None, alpha: float | None = None,
                   te_angle: float = np.radians(10.0), terms: int = 96, grid: int = 1024,
                   iterations: int = 800, tol: float = 1e-9) -> InverseResult:
    """The section whose speed meets ``target`` (see the module docstring).

    ``cl`` or ``alpha`` (radians, to the chord line) sets the operating point; ``te_angle`` is
    τ in radians; ``terms`` coefficients C₀ … C_{terms−1} are kept (C₀ = 0 and C₁ = a by the
    closure); ``grid`` circle samples carry the FFT.  Each step reads the target at x(φ) of the
    current shape and applies Lighthill's inverse (:func:`_lighthill_step`); the steps are
    combined by Anderson mixing (depth 8, half steps), which converges where the plain
    iteration creeps.  Converged when a step changes no coefficient by more than ``tol``.
    """
    if (cl is None) == (alpha is None):
        raise ValueError("give exactly one of cl and alpha")
    a = 1.0 - te_angle / np.pi
    phi = 2.0 * np.pi * (np.arange(grid) + 0.5) / grid
    surfaces = {}
    for side in (True, False):  # each surface's (x, u), whether it reaches the TE, its reader
        xs, us = target.surface(side)
        surfaces[side] = (xs, us, target.reaches_te(side), _surface_reader(xs, us))
    from foilmap.section.conformal import SectionSet, offset_circle_coefficients

    start = section_coefficients(SectionSet.single(offset_circle_coefficients(-0.1, 24),
                                                   np.degrees(te_angle)), terms, 4 * grid)

    fixed = _PhiGrid(phi, terms)  # this solve's grid, its basis and factors

    def pack(c):
        return np.concatenate([c[2:].real, c[2:].imag])

    def unpack(v):
        c = np.zeros(terms, dtype=complex)
        c[1] = a
        c[2:] = v[: terms - 2] + 1j * v[terms - 2 :]
        return c

    def solve(te_weight):
        def step(v):
            try:
                c_new, _ = _lighthill_step(unpack(v), a, cl, alpha, phi, surfaces, terms,
                                           te_weight, fixed)
            except ValueError:  # a contour that has folded
                return np.full(v.size, np.nan)
            return pack(c_new)

        # Anderson mixing first; a run that does not settle is repeated with gentler mixing
        # and then with plain half steps, and the run nearest to a fixed point is kept
        best = None
        for beta, depth in ((0.5, 8), (0.3, 3), (0.3, 0)):
            got = _mix(step, pack(start), beta, depth, iterations, tol)
            if best is None or got[1] < best[1]:
                best = got
            if got[1] < tol:
                break
        return best

    # the trailing-edge zone is held lightly first (a consistent target is then met closely);
    # when the result leaves that zone's straight continuation by more than TE_DEPARTURE in
    # ln q — a target the closure cannot meet pushes its mismatch there, as a spike — it is
    # solved again with the zone held firmly
    x, change, it = solve(TE_WEIGHT)
    with np.errstate(all="ignore"):
        try:
            dep = _lighthill_step(unpack(x), a, cl, alpha, phi, surfaces, terms)[1][
                "te_departure"]
        except ValueError:
            dep = np.inf
    te_weight = TE_WEIGHT
    if not dep <= TE_DEPARTURE:
        te_weight = TE_WEIGHT_FIRM
        x, change, it = solve(te_weight)
    converged = change < tol
    c = unpack(x)
    with np.errstate(all="ignore"):
        _, info = _lighthill_step(c, a, cl, alpha, phi, surfaces, terms, te_weight)
        shape = _Shape(c, a, 8 * grid)
        alpha_c = info["alpha_circle"]
        achieved = lighthill_speed(c, a, alpha_c, shape.phi_at(target.x, target.upper))
    xy, le = _loop(shape.zc, shape.j_le)
    return InverseResult(c, a, alpha_c, xy, le, target, achieved, it, converged,
                         float(shape.gap / shape.chord), phi, info["given"], info["x"],
                         info["upper"], info["closure_dlnq"])


def _loop(zc: np.ndarray, j: int) -> tuple[np.ndarray, int]:
    """The contour as a coordinates loop, TE (1, 0) → upper → LE (0, 0) → lower → TE, each
    surface strictly monotone in x (samples beside the refined leading edge that fall on its
    far side are dropped) with the leading edge itself inserted."""
    up, lo = zc[1:j + 1], zc[j + 1 : -1]
    up = up[up.real > 1e-13]
    lo = lo[lo.real > 1e-13]
    if up.size:  # each kept point nearer the leading edge than every one before it
        run = np.minimum.accumulate(np.concatenate([[1.0], up.real]))
        up = up[up.real < run[:-1]]
    if lo.size:  # and, going back to the trailing edge, farther than every one before it
        run = np.maximum.accumulate(np.concatenate([[0.0], lo.real]))
        lo = lo[lo.real > run[:-1]]
    loop = np.concatenate([[1.0 + 0j], up, [0j], lo, [1.0 + 0j]])
    return np.column_stack([loop.real, loop.imag]), int(up.size + 1)


def _mix(step, x, beta: float, depth: int, iterations: int, tol: float):
    """Fixed-point iteration x ← step(x) with Anderson mixing of ``depth`` earlier steps (0:
    plain steps of size ``beta``); returns (x, last change, iterations)."""
    hx, hf = [], []
    change = np.inf
    it = 0
    for it in range(1, iterations + 1):
        with np.errstate(all="ignore"):
            f = step(x) - x
        change = float(np.max(np.abs(f)))
        if not np.isfinite(change):
            return (hx[-1] if hx else x), np.inf, it
        if change < tol:
            break
        hx.append(x.copy())
        hf.append(f.copy())
        if len(hx) > depth + 1:
            hx.pop(0)
            hf.pop(0)
        if len(hx) > 1:
            dx = np.diff(np.array(hx), axis=0).T
            df = np.diff(np.array(hf), axis=0).T
            gamma = np.linalg.lstsq(df, f, rcond=None)[0]
            x = x + beta * f - (dx + beta * df) @ gamma
        else:
            x = x + beta * f
    return x, change, it


def _lighthill_step(c, a, cl, alpha, phi, surfaces, terms, te_weight=None, grid=None):
    """One step of Lighthill's inverse on the current shape: the target read at x(φ), ln q
    moved to it (at most ``STEP_LIMIT`` per point; points slower than ``QMIN`` in the target
    or the current flow, near the stagnation points, and points the target does not cover
    keep the current speed), then the closed series nearest to it (:func:`_closed_series`)."""
    m = phi.size
    shape = _Shape(c, a, 2 * m)
    if cl is not None:
        alpha_c = float(np.arcsin(np.clip(cl * shape.chord / (8.0 * np.pi), -1.0, 1.0)))
    else:
        alpha_c = float(alpha + shape.gamma)
    x = shape.zc.real[1:-1:2]  # the odd points of the contour grid are the FFT grid
    upper = phi < shape.phi[shape.j_le]
    ser_now = _series(c, phi) if grid is None else grid.series(c)
    q_now = lighthill_speed(c, a, alpha_c, phi, ser_now)
    q_t = q_now.copy()
    covered = np.zeros(m, dtype=bool)
    spans = np.zeros(m, dtype=bool)  # the target's span: read, or its unread trailing-edge zone
    for side in (True, False):
        xs, _, to_te, read = surfaces[side]
        if xs.size < 2:
            continue
        on = (upper == side) & (x >= xs[0]) & (x <= xs[-1])
        q_t[on] = read(x[on])
        covered |= on
        spans |= ((upper == side) & (x >= (-1.0 if xs[0] < 1e-3 else xs[0]))
                  & (x <= (2.0 if to_te else xs[-1])))
    with np.errstate(divide="ignore", invalid="ignore"):
        dlnq = np.log(q_t) - np.log(q_now)
    covered &= np.isfinite(dlnq)
    # the move fades out smoothly below QMIN (no switch that the mixing would trip on); where
    # it has faded out entirely, as where no target is read, P is left to the smooth series
    s = np.clip((np.minimum(q_t, q_now) - 0.5 * QMIN) / (0.5 * QMIN), 0.0, 1.0)
    rows = covered & (s > 0.0)
    dlnq = np.clip(np.where(rows, s * s * (3.0 - 2.0 * s) * dlnq, 0.0), -STEP_LIMIT,
                   STEP_LIMIT)
    p_now = np.real(ser_now)
    p_t = p_now - dlnq
    # weights: 1 where the target is read; 0 inside its span where it is not (the smooth
    # series decides: near the stagnation points, in the trailing-edge zone); FREE_WEIGHT
    # outside it (a partial target: the rest of the contour keeps its current speed unless
    # the target and the closure ask otherwise)
    weight = np.where(rows, 1.0, np.where(spans, 0.0, FREE_WEIGHT))
    te_weight = TE_WEIGHT if te_weight is None else te_weight
    # the trailing-edge zone of a target that runs into it: P continued along the straight line
    # through the last points read on that surface (by least squares in φ), with a small
    # weight, so that no mismatch elsewhere is pushed into the unread zone
    te_dev = 0.0
    for side in (True, False):
        on_side = np.flatnonzero((upper == side) & rows & (x > 0.5))
        zone = (upper == side) & spans & ~covered & (x > 0.5)
        if on_side.size >= 2 and zone.any():
            last = on_side[np.argsort(x[on_side])[-TE_FIT_POINTS:]]
            slope, icept = np.polyfit(phi[last], p_t[last], 1)
            p_t[zone] = icept + slope * phi[zone]
            weight[zone] = te_weight
            te_dev = max(te_dev, float(np.max(np.abs(p_now[zone] - p_t[zone]))))
    c_new = _closed_series(phi, p_t, weight, a, terms, grid=grid)
    dp = np.where(rows, p_t - np.real(_series(c_new, phi) if grid is None
                                      else grid.series(c_new)), 0.0)
    return c_new, {"alpha_circle": alpha_c, "given": covered, "x": x, "upper": upper,
                   "closure_dlnq": dp, "te_departure": te_dev}


def _surface_reader(xs: np.ndarray, qs: np.ndarray):
    """A surface's target as a function of the stations x: a cubic spline in √x (smooth
    through the nose, where x grows as the square of the arc length), built once for the many
    steps of a solve."""
    from scipy.interpolate import CubicSpline

    if xs.size < 4:
        return lambda x: np.abs(np.interp(x, xs, qs))
    u = np.sqrt(np.maximum(xs, 0.0))
    keep = np.concatenate([[True], np.diff(u) > 1e-12])
    spline = CubicSpline(u[keep], qs[keep])
    return lambda x: np.abs(spline(np.sqrt(np.maximum(x, 0.0))))


def section_coefficients(sections, terms: int, samples: int = 2048) -> np.ndarray:
    """Lighthill's C₀ … of a foilmap section (a batch of one), normalised to Re C₀ = 0:
    ln(dz/dζ) − a ln(1 − 1/ζ) on the circle, by FFT."""
    from foilmap.section.conformal import map_at

    phi = 2.0 * np.pi * (np.arange(samples) + 0.5) / samples
    m = map_at(sections, np.exp(1j * phi)[None, :])
    a = float(sections.k[0] - 1.0)
    one_minus = 2.0 * np.sin(0.5 * phi) * np.exp(0.5j * (np.pi - phi))  # 1 − e^{−iφ}, exact
    lg = np.log(m.dz[0]) - a * np.log(one_minus)
    lg = np.real(lg) + 1j * np.unwrap(np.imag(lg))
    n = np.arange(terms)
    c = np.exp(1j * np.multiply.outer(n, phi)) @ lg / samples
    c[0] = 1j * c[0].imag  # Re C₀ = 0: the plane scaled to a unit free stream
    return c


@dataclass(frozen=True)
class InverseSection:
    """An inverse design re-expressed in foilmap's two-stage coefficients, and its figures."""

    design: InverseResult  # Lighthill's form
    fit: object  # foilmap.section.fitting.SectionFit of design.xy
    achieved_cp: np.ndarray  # (M,) the fitted section's exact Cp at the target's stations
    cl: float
    alpha: float  # radians, to the chord line

    @property
    def read(self) -> np.ndarray:
        """Target stations that are read (outside the trailing-edge zone)."""
        return self.design.target.x <= TE_ZONE

    @property
    def deviation(self) -> np.ndarray:
        """Achieved minus target Cp at each target station (NaN in the trailing-edge zone)."""
        d = self.achieved_cp - self.design.target.cp
        return np.where(self.read, d, np.nan)

    @property
    def rms_deviation(self) -> float:
        """RMS of :attr:`deviation` over the stations read (:func:`cp_rms`)."""
        t = self.design.target
        return float(cp_rms(self.deviation[None, :], t.x, t.upper)[0])

    @property
    def worst(self) -> tuple[float, float, bool]:
        """(|Cp deviation|, x, upper) of the station farthest from the target."""
        d = np.where(self.read, np.abs(self.deviation), -1.0)
        j = int(np.argmax(d))
        t = self.design.target
        return float(d[j]), float(t.x[j]), bool(t.upper[j])


def read_order(x, upper) -> np.ndarray:
    """Indices of the target stations that are read (x ≤ ``TE_ZONE``): the upper surface's
    first, then the lower's, each in the target's order."""
    x, upper = np.asarray(x, dtype=float), np.asarray(upper, dtype=bool)
    read = x <= TE_ZONE
    return np.concatenate([np.flatnonzero(read & (upper == side)) for side in (True, False)])


def cp_rms(deviation, x, upper) -> np.ndarray:
    """RMS over the read stations (:func:`read_order`) of a Cp deviation (B, M) given at every
    target station, shape (B,)."""
    return _rms(np.asarray(deviation)[:, read_order(x, upper)])


def _rms(d: np.ndarray) -> np.ndarray:
    return np.sqrt(np.mean(d * d, axis=1))


def achieved_cp(analysis, x, upper) -> np.ndarray:
    """The exact Cp of analysed sections at chord stations ``x`` (M,) on the surfaces ``upper``
    (M,) says, shape (B, M) (exact contour points: :func:`~foilmap.section.evaluation.\
speed_at_stations`)."""
    from foilmap.section.evaluation import speed_at_stations

    x, upper = np.asarray(x, dtype=float), np.asarray(upper, dtype=bool)
    q = np.empty((len(analysis.sections), x.size))
    for side in (True, False):
        m = upper == side
        if m.any():
            with np.errstate(all="ignore"):
                q[:, m] = speed_at_stations(analysis, x[m], "upper" if side else "lower")
    return 1.0 - q * q


def target_cp_rms(analysis, x, upper, cp) -> np.ndarray:
    """RMS of the exact Cp of analysed sections minus a target ``cp`` at its stations ``x`` on
    the surfaces ``upper``, over the stations read (outside the trailing-edge zone), shape
    (B,): the objective ``target_cp_rms`` and :attr:`InverseSection.rms_deviation`."""
    x, upper = np.asarray(x, dtype=float), np.asarray(upper, dtype=bool)
    j = read_order(x, upper)
    return _rms(achieved_cp(analysis, x[j], upper[j]) - np.asarray(cp, dtype=float)[j][None, :])


def inverse_section(target: Target, *, cl: float | None = None, alpha: float | None = None,
                    te_angle: float = np.radians(10.0), coefficients: int = 24,
                    **kwargs) -> InverseSection:
    """:func:`inverse_design`, then the fit of its contour with ``coefficients`` shape-series
    terms, and the fitted section's exact Cp at the target's stations."""
    from foilmap.section.conformal import SectionSet
    from foilmap.section.evaluation import analyse
    from foilmap.section.fitting import fit_section

    design = inverse_design(target, cl=cl, alpha=alpha, te_angle=te_angle, **kwargs)
    fit = fit_section(design.xy, design.le_index, coefficients)
    sec = SectionSet(fit.coefficients[None, :], [fit.te_angle])
    kw = {"cl": cl} if cl is not None else {"alpha": alpha}
    an = analyse(sec, proxies=(), **kw)
    return InverseSection(design, fit, achieved_cp(an, target.x, target.upper)[0],
                          float(an.evaluation.cl[0]), float(an.evaluation.alpha[0]))
