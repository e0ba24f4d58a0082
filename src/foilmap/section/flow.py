"""Exact ideal flow past the mapped sections (docs/method.md, "Flow").

With V∞ = 1 at angle α_z in the map plane, the circle-plane complex velocity is::

    w(ζ) = U (e^{−iα'} − e^{iα'}/ζ²) + iΓ/(2πζ),   U = e^{Re A₀},  α' = α_z − Im A₀

The Kutta condition w(1) = 0 gives Γ = 4πU sin α' (clockwise positive, lift ρV∞Γ).  On the circle
|w| = 2U |sin(φ − α') + sin α'| and the surface speed is q = |w| / |z'(ζ)|.  In the chord frame
α = α_z − γ and Cl = 2Γ/c = 8πU sin(α + γ − Im A₀)/c, so the angle for a target Cl is closed form.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from foilmap.section import _compiled
from foilmap.section.conformal import CircleGrid, MapValues, SectionSet
from foilmap.section.geometry import ChordFrame
from foilmap.section.status import Status

__all__ = [
    "speed_on_circle",
    "FlowState",
    "flow_at_alpha",
    "flow_at_cl",
    "max_ideal_cl",
    "zero_lift_angle",
    "surface_speed",
    "speed_log_derivative",
    "peak_speed",
    "certified_peak",
    "moment_quarter_chord",
]


@dataclass(frozen=True)
class FlowState:
    """Kutta flow of each section at one incidence, shapes (B,).

    Attributes
    ----------
    alpha : angle of attack to the chord line, radians
    alpha_circle : α' = α + γ − Im A₀, the circle-plane flow angle, radians
    speed : U = e^{Re A₀}, the circle-plane free-stream speed
    circulation : Γ = 4πU sin α' (clockwise positive, V∞ = 1, map units)
    cl : lift coefficient 2Γ/c
    lift_slope : dCl/dα per radian, 8πU cos α' / c
    status : OK, or ABOVE_MAX_LIFT where a target Cl cannot be reached
    """

    alpha: np.ndarray
    alpha_circle: np.ndarray
    speed: np.ndarray
    circulation: np.ndarray
    cl: np.ndarray
    lift_slope: np.ndarray
    status: np.ndarray


def _state(sections: SectionSet, frame: ChordFrame, alpha_c: np.ndarray, status) -> FlowState:
    a0 = sections.a0
    u = np.exp(a0.real)
    alpha = alpha_c - frame.gamma + a0.imag
    gamma_circ = 4.0 * np.pi * u * np.sin(alpha_c)
    return FlowState(
        alpha=alpha,
        alpha_circle=alpha_c,
        speed=u,
        circulation=gamma_circ,
        cl=2.0 * gamma_circ / frame.chord,
        lift_slope=8.0 * np.pi * u * np.cos(alpha_c) / frame.chord,
        status=status,
    )


def flow_at_alpha(sections: SectionSet, frame: ChordFrame, alpha) -> FlowState:
    """Kutta flow at angle of attack ``alpha`` (radians, scalar or (B,)) to the chord."""
    alpha = np.broadcast_to(np.asarray(alpha, dtype=float), (len(sections),))
    alpha_c = alpha + frame.gamma - sections.a0.imag  # α' = α_z − Im A₀, α_z = α + γ
    return _state(sections, frame, alpha_c, np.zeros(len(sections), dtype=np.int8))


def max_ideal_cl(sections: SectionSet, frame: ChordFrame) -> np.ndarray:
    """Largest ideal Cl the section reaches, 8π e^{Re A₀}/c (at α' = 90°)."""
    return 8.0 * np.pi * np.exp(sections.a0.real) / frame.chord


def flow_at_cl(sections: SectionSet, frame: ChordFrame, cl) -> FlowState:
    """Kutta flow at a target lift coefficient, met exactly by the closed-form angle.

    α = asin(Cl c / (8π e^{Re A₀})) − γ + Im A₀.  Where |Cl| exceeds the maximum ideal lift the
    status is ABOVE_MAX_LIFT and the figures are NaN.
    """
    cl = np.broadcast_to(np.asarray(cl, dtype=float), (len(sections),))
    ratio = cl / max_ideal_cl(sections, frame)
    status = np.where(np.abs(ratio) <= 1.0, Status.OK, Status.ABOVE_MAX_LIFT).astype(np.int8)
    with np.errstate(invalid="ignore"):
        alpha_c = np.arcsin(np.where(status == Status.OK, ratio, np.nan))
    return _state(sections, frame, alpha_c, status)


def zero_lift_angle(sections: SectionSet, frame: ChordFrame) -> np.ndarray:
    """α_L0 = Im A₀ − γ, radians."""
    return sections.a0.imag - frame.gamma


def speed_on_circle(flow: FlowState, phi: np.ndarray, dz: np.ndarray) -> np.ndarray:
    """Surface speed ratio q = |w|/|z'| = 2U |sin(φ − α') + sin α'| / |z'(e^{iφ})|, shape (B, P),
    at circle angles ``phi`` (B, P) or (P,) where the map's derivative is ``dz`` (B, P).

    This is the one place the surface-speed formula is written; Cp = 1 − q².
    """
    ap = flow.alpha_circle[:, None]
    return 2.0 * flow.speed[:, None] * np.abs(np.sin(phi - ap) + np.sin(ap)) / np.abs(dz)


def surface_speed(flow: FlowState, mv: MapValues, grid: CircleGrid) -> np.ndarray:
    """Surface speed ratio q on the grid, shape (B, P) (see :func:`speed_on_circle`)."""
    return speed_on_circle(flow, grid.phi, mv.dz)


def speed_log_derivative(phi: np.ndarray, alpha_c: np.ndarray, q2: np.ndarray,
                         grid: CircleGrid | None = None) -> np.ndarray:
    """d ln q / dφ on the circle, from the analytic map derivatives (ζ z''/z' = ``q2``).

    d ln|w|/dφ = cos(φ − α')/(sin(φ − α') + sin α') and d ln|z'|/dφ = −Im(ζ z''/z').  With
    ``grid`` (whose angles ``phi`` are) the same by angle addition on the grid's own cos φ and
    sin φ, with no trigonometric function of φ.  The one place the formula is written on the
    numpy side (the compiled one: ``foilmap.section._kmap._dlnq``).
    """
    with np.errstate(all="ignore"):
        if grid is not None:
            ca, sa = np.cos(alpha_c), np.sin(alpha_c)
            return ((grid.cos * ca + grid.sin * sa) / (grid.sin * ca - grid.cos * sa + sa)
                    + np.imag(q2))
        return np.cos(phi - alpha_c) / (np.sin(phi - alpha_c) + np.sin(alpha_c)) + np.imag(q2)


def peak_speed(sections: SectionSet, flow: FlowState, samples: int = 256
               ) -> tuple[np.ndarray, np.ndarray]:
    """Largest surface speed q_max on the whole contour, certified between samples.

    Every sampled local maximum is refined to round-off, and every arc of the circle is shown
    by rigorous bounds of the map to hold no speed above the reported one by more than
    :data:`~foilmap.section._compiled.PEAK_TOLERANCE` (relative); ``samples`` only sets where the search
    starts (docs/method.md, "What is exact between samples").

    Returns ``(q_max, phi_peak)``, shapes (B,); the peak suction is −Cp_min = q_max² − 1.
    NaN where the flow angle is not finite.
    """
    q, phi, _ = certified_peak(sections, flow, samples)
    return q, phi


def certified_peak(sections: SectionSet, flow: FlowState, samples: int = 256
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`peak_speed` with its certificate: ``(q_max, phi_peak, certified)``.

    ``certified`` is False where the branch and bound ran out of budget or stack before it
    showed every arc below the reported speed: there the value is only the largest speed found
    (a lower bound), and evaluations give the section the status ``uncertified``.  Rows whose
    flow angle is not finite are True (nothing was asked).
    """
    alpha_c = np.asarray(flow.alpha_circle, dtype=float)
    q, phi, cert = _compiled.peak_batch(np.ascontiguousarray(sections.coefficients),
                                        sections.te_angle, alpha_c, int(samples),
                                        _compiled.PEAK_TOLERANCE)
    return q, phi, cert | ~np.isfinite(alpha_c)


def moment_quarter_chord(sections: SectionSet, frame: ChordFrame, flow: FlowState) -> np.ndarray:
    """Cm about the quarter chord, nose-up positive, exact from the Laurent coefficients.

    Near ζ = ∞ the map is z = a₁ζ + a₀ + a₋₁/ζ + …, with (from z = z₁ + (k² − 1)/(3z₁) + O(z₁⁻³)
    for the Kármán–Trefftz stage, which is z = k coth(k artanh(1/z₁))):

        a₁ = E,  a₀ = E A₁,  a₋₁ = E (A₂ + A₁²/2) + (k² − 1)/(3E),   E = e^{A₀}

    Blasius' theorem M₀ = Re[−(ρ/2) ∮ z (dW/dz)² dz] (counter-clockwise, about z = 0), with the
    contour moved to infinity, keeps only these three coefficients:

        M₀ = 2πρ Im(w₀² a₋₁/a₁ + A₁ w₀ w₁),   w₀ = U e^{−iα'},  w₁ = iΓ/(2π)

    The force is X + iY = iρΓ e^{iα_z}; moving to the quarter-chord point z_q and changing to the
    nose-up sign gives Cm = −2 (M₀ − Im(conj(z_q) (X + iY))) / c²  (ρ = V∞ = 1).
    """
    c = sections.coefficients
    a1 = c[:, 0]
    a2 = c[:, 1] if c.shape[1] > 1 else np.zeros_like(a1)
    e = np.exp(sections.a0)
    k = sections.k
    am1 = e * (a2 + 0.5 * a1 * a1) + (k * k - 1.0) / (3.0 * e)
    w0 = flow.speed * np.exp(-1j * flow.alpha_circle)
    w1 = 1j * flow.circulation / (2.0 * np.pi)
    m0 = 2.0 * np.pi * np.imag(w0 * w0 * am1 / e + a1 * w0 * w1)
    alpha_z = flow.alpha + frame.gamma
    force = 1j * flow.circulation * np.exp(1j * alpha_z)
    z_q = frame.z_le + 0.25 / frame.scale  # LE + ¼ (TE − LE)
    m_q = m0 - np.imag(np.conj(z_q) * force)
    return -2.0 * m_q / frame.chord**2
