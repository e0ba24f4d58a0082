"""The two-stage conformal map from the unit circle to the section (docs/method.md, "The map").

Stage 1, the shape series (near-circle plane z₁)::

    z₁ = g(ζ) = ζ exp(A₀ + Σ_{n=1..N} Aₙ ζ⁻ⁿ),   A₀ = −Σ Aₙ  (so that g(1) = 1)

Stage 2, the Kármán–Trefftz map with k = 2 − τ/π::

    (z − k)/(z + k) = ((z₁ − 1)/(z₁ + 1))^k,  z = k (1 + r)/(1 − r),  r = ((z₁ − 1)/(z₁ + 1))^k

Everything is vectorised over a batch of candidates: coefficients have shape ``(B, N)``, the
trailing-edge angle shape ``(B,)``; a single section is a batch of one.  The kernels do no I/O
and draw no random numbers.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

__all__ = [
    "SectionSet",
    "MapValues",
    "CircleGrid",
    "map_on_grid",
    "map_at",
    "critical_points_inside",
    "offset_circle_coefficients",
    "DEFAULT_CRITICAL_MARGIN",
    "DEFAULT_SINGULAR_MARGIN",
]

#: δ₁: stage-1 critical points must lie inside |ζ| < 1 − δ₁.  It also bounds how sharp a local
#: feature of the near-circle can be (docs/method.md, "Validity").
DEFAULT_CRITICAL_MARGIN = 0.05
#: δ₂: smallest distance from z₁ = −1 to the near-circle.  For the Joukowski offset circle the
#: distance is 2ε, and t/c ≈ 1.3 ε, so 0.02 admits sections down to about 1.3 % thickness.
DEFAULT_SINGULAR_MARGIN = 0.02


@dataclass(frozen=True)
class SectionSet:
    """A batch of sections in map coefficients.

    Attributes
    ----------
    coefficients : ndarray of complex, shape (B, N)
        A₁..A_N of the shape series.
    te_angle : ndarray of float, shape (B,)
        Trailing-edge interior angle τ in radians, 0 ≤ τ < π.
    """

    coefficients: np.ndarray
    te_angle: np.ndarray

    def __post_init__(self) -> None:
        c = np.atleast_2d(np.asarray(self.coefficients, dtype=complex))
        t = np.broadcast_to(np.asarray(self.te_angle, dtype=float), (c.shape[0],)).copy()
        object.__setattr__(self, "coefficients", c)
        object.__setattr__(self, "te_angle", t)

    @classmethod
    def single(cls, coefficients, te_angle_deg: float) -> "SectionSet":
        """One section from A₁..A_N (complex, or ``[re, im]`` pairs) and τ in degrees."""
        c = np.asarray(coefficients)
        if c.ndim == 2 and c.shape[1] == 2 and not np.iscomplexobj(c):
            c = c[:, 0] + 1j * c[:, 1]
        return cls(np.asarray(c, dtype=complex)[None, :], np.radians([te_angle_deg]))

    @classmethod
    def from_real(cls, x: np.ndarray, te_angle: np.ndarray) -> "SectionSet":
        """From real design vectors ``x`` of shape (B, 2N): [Re A₁, Im A₁, Re A₂, ...]."""
        x = np.atleast_2d(np.asarray(x, dtype=float))
        return cls(x[:, 0::2] + 1j * x[:, 1::2], te_angle)

    def to_real(self) -> np.ndarray:
        """Real design vectors, shape (B, 2N), the inverse of :meth:`from_real`."""
        out = np.empty((len(self), 2 * self.n_coefficients))
        out[:, 0::2] = self.coefficients.real
        out[:, 1::2] = self.coefficients.imag
        return out

    def __len__(self) -> int:
        return self.coefficients.shape[0]

    def __getitem__(self, item) -> "SectionSet":
        idx = np.atleast_1d(np.arange(len(self))[item])
        return SectionSet(self.coefficients[idx], self.te_angle[idx])

    @property
    def n_coefficients(self) -> int:
        return self.coefficients.shape[1]

    @property
    def k(self) -> np.ndarray:
        """Kármán–Trefftz exponent k = 2 − τ/π, shape (B,)."""
        return 2.0 - self.te_angle / np.pi

    @property
    def a0(self) -> np.ndarray:
        """A₀ = −Σ Aₙ (closure: g(1) = 1), shape (B,)."""
        return -self.coefficients.sum(axis=1)

    def mirrored(self) -> "SectionSet":
        """The mirror image about the chord line: z → conj(z), i.e. Aₙ → conj(Aₙ)."""
        return SectionSet(np.conj(self.coefficients), self.te_angle)


def offset_circle_coefficients(mu: complex, n: int) -> np.ndarray:
    """Shape-series coefficients of the circle through ζ = 1 with centre μ (|μ| small).

    z₁ = μ + (1 − μ) ζ = (1 − μ) ζ (1 + c/ζ) with c = μ/(1 − μ), and
    log(1 + c/ζ) = Σ (−1)^{n+1} cⁿ ζ⁻ⁿ / n, so Aₙ = (−1)^{n+1} cⁿ / n.  With k = 2 this is the
    Joukowski section, otherwise the Kármán–Trefftz section (Milne-Thomson, Theoretical
    Hydrodynamics).  Truncation at ``n`` terms leaves an error of order |c|^{n+1}.
    """
    c = mu / (1.0 - mu)
    m = np.arange(1, n + 1)
    return (-1.0) ** (m + 1) * c**m / m


@dataclass(frozen=True)
class MapValues:
    """The map and its derivatives at a set of circle-plane points, all shape (B, M).

    Attributes
    ----------
    zeta : circle-plane points ζ
    g : near-circle z₁ = g(ζ)
    dg : g'(ζ)
    z : section-plane points (map units)
    dz : z'(ζ)
    q2 : ζ z''(ζ) / z'(ζ), the log-derivative needed for curvature and velocity gradients
    """

    zeta: np.ndarray
    g: np.ndarray
    dg: np.ndarray
    z: np.ndarray
    dz: np.ndarray
    q2: np.ndarray


def _power(w: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Principal branch of w^k for real k, through real arithmetic.

    |w|^k e^{ik arg w} with arg in (−π, π]: the same branch as exp(k log w), and about three
    times faster in numpy than the complex logarithm and exponential.
    """
    x, y = w.real, w.imag
    mod = x * x
    mod += y * y
    np.log(mod, out=mod)
    mod *= 0.5 * k
    np.exp(mod, out=mod)  # |w|^k
    ang = np.arctan2(y, x)
    ang *= k
    out = np.empty_like(w)
    np.cos(ang, out=out.real)
    np.sin(ang, out=out.imag)
    out.real *= mod
    out.imag *= mod
    return out


def _compose(zeta, a0, s, h, h2, k) -> MapValues:
    """Evaluate both stages from the series sums.

    ``s = Σ Aₙ ζ⁻ⁿ``, ``h = Σ n Aₙ ζ⁻ⁿ``, ``h2 = Σ n² Aₙ ζ⁻ⁿ``, shapes (B, M); ``a0``, ``k``
    of shape (B, 1).  Written with few temporaries and one reciprocal per factor: this is the
    hot loop of every search.
    """
    e = np.exp(a0 + s)  # g/ζ
    g = zeta * e
    one_m_h = 1.0 - h
    dg = e * one_m_h  # g' = (g/ζ)(1 − Σ n Aₙ ζ⁻ⁿ)
    gm1 = g - 1.0
    gp1 = g + 1.0
    r = _power(gm1 / gp1, k)  # r = ((z₁ − 1)/(z₁ + 1))^k, principal branch
    inv_1mr = 1.0 / (1.0 - r)
    z = (1.0 + r) * inv_1mr
    z *= k  # z = k (1 + r)/(1 − r)
    gm1 *= gp1
    inv_g2m1 = np.reciprocal(gm1, out=gm1)  # 1/(z₁² − 1)
    # dz/dz₁ = 4k² r / ((1 − r)² (z₁² − 1)), times dz₁/dζ
    dz = r * inv_1mr
    dz *= inv_1mr
    dz *= inv_g2m1
    dz *= dg
    dz *= 4.0 * k * k
    # ζ z''/z' = ζ g' F''/F' + ζ g''/g',  F''/F' = 2 (z − z₁)/(z₁² − 1),  ζ g' = g (1 − h),
    # ζ g''/g' = −h + h2/(1 − h)
    q2 = z - g
    q2 *= g
    q2 *= one_m_h
    q2 *= inv_g2m1
    q2 *= 2.0
    q2 -= h
    q2 += h2 / one_m_h
    return MapValues(zeta, g, dg, z, dz, q2)


class CircleGrid:
    """Uniform circle-plane sampling, offset by half a step so that ζ = 1 (the TE) is avoided.

    φⱼ = (j + ½) 2π/P, j = 0..P−1.  Powers ζ⁻ⁿ are precomputed for ``n_max`` coefficients.
    Grids are immutable and cached: ``CircleGrid.get(samples, n_max)``.
    """

    __slots__ = ("samples", "n_max", "step", "phi", "zeta", "powers", "cos", "sin")

    def __init__(self, samples: int, n_max: int) -> None:
        self.samples = int(samples)
        self.n_max = int(n_max)
        self.step = 2.0 * np.pi / self.samples
        self.phi = (np.arange(self.samples) + 0.5) * self.step
        self.zeta = np.exp(1j * self.phi)
        n = np.arange(1, self.n_max + 1)
        self.powers = np.exp(-1j * np.outer(n, self.phi))  # (N, P): ζ⁻ⁿ
        self.cos = np.cos(self.phi)
        self.sin = np.sin(self.phi)
        for a in (self.phi, self.zeta, self.powers, self.cos, self.sin):
            a.flags.writeable = False

    @staticmethod
    @lru_cache(maxsize=32)
    def get(samples: int, n_max: int) -> "CircleGrid":
        return CircleGrid(samples, n_max)


def _weighted(coefficients: np.ndarray) -> np.ndarray:
    """Stack [Aₙ, n Aₙ, n² Aₙ] along the first axis, shape (3B, N)."""
    n = np.arange(1, coefficients.shape[1] + 1)
    return np.concatenate([coefficients, coefficients * n, coefficients * (n * n)], axis=0)


def map_on_grid(sections: SectionSet, grid: CircleGrid) -> MapValues:
    """The map on a shared circle grid: one matrix product gives all three series sums."""
    nb, n = sections.coefficients.shape
    if n > grid.n_max:
        raise ValueError(f"grid holds powers up to {grid.n_max}, sections have {n} coefficients")
    sums = _weighted(sections.coefficients) @ grid.powers[:n]
    s, h, h2 = sums[:nb], sums[nb : 2 * nb], sums[2 * nb :]
    return _compose(grid.zeta[None, :], sections.a0[:, None], s, h, h2, sections.k[:, None])


def map_at(sections: SectionSet, zeta: np.ndarray) -> MapValues:
    """The map at per-candidate points ``zeta`` of shape (B, M) (|ζ| ≥ 1)."""
    zeta = np.asarray(zeta, dtype=complex)
    nb, n = sections.coefficients.shape
    # ζ⁻ⁿ by repeated multiplication (an integer complex power is far slower)
    inv = 1.0 / zeta
    inv_pow = np.empty(zeta.shape + (n,), dtype=complex)  # (B, M, N)
    inv_pow[..., 0] = inv
    for j in range(1, n):
        np.multiply(inv_pow[..., j - 1], inv, out=inv_pow[..., j])
    w = _weighted(sections.coefficients).reshape(3, nb, n).transpose(1, 2, 0)  # (B, N, 3)
    sums = np.matmul(inv_pow, w)  # (B, M, 3)
    return _compose(
        zeta, sections.a0[:, None], sums[..., 0], sums[..., 1], sums[..., 2], sections.k[:, None]
    )


def critical_points_inside(coefficients: np.ndarray, radius: float) -> np.ndarray:
    """Whether every critical point of stage 1 lies strictly inside |ζ| < ``radius``.

    The critical points are the roots of p(ζ) = ζᴺ − Σ n Aₙ ζ^{N−n} (zeros of g').  The test is
    the Schur–Cohn recursion on p(radius·ζ) (Henrici, Applied and Computational Complex
    Analysis, vol. 1, §6.8), exact apart from round-off and independent of any sampling.

    Parameters
    ----------
    coefficients : ndarray of complex, shape (B, N)
    radius : float
        1 − δ₁.

    Returns
    -------
    ndarray of bool, shape (B,)
    """
    from foilmap.section import _compiled

    c = np.ascontiguousarray(np.atleast_2d(coefficients), dtype=complex)
    return _compiled.critical_batch(c, float(radius))
