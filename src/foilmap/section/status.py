"""Status codes of a section evaluation.

An invalid candidate is a normal outcome of a search: every kernel returns one of these codes per
candidate instead of raising.  The first check that fails sets the code; later figures of that
candidate are NaN.
"""

from __future__ import annotations

from enum import IntEnum

import numpy as np

__all__ = ["Status", "describe"]


class Status(IntEnum):
    """Outcome of evaluating one candidate section."""

    OK = 0
    #: a critical point of the shape series lies at or outside |ζ| = 1 − δ₁ (docs/method.md)
    CRITICAL_POINT = 1
    #: the second singular point z₁ = −1 is not inside the near-circle by at least δ₂
    SINGULAR_POINT = 2
    #: the near-circle crosses the branch cut [−1, 1] of the Kármán–Trefftz stage
    BRANCH_CUT = 3
    #: a surface is not single-valued in x (fold-over or self-intersection)
    FOLDED = 4
    #: upper and lower surfaces cross: an exact contour point where the thickness is below zero
    NEGATIVE_THICKNESS = 5
    #: the target Cl exceeds the section's maximum ideal lift 8π e^{Re A₀} / c
    ABOVE_MAX_LIFT = 6
    #: a figure came out NaN or infinite (coefficients far outside any sensible range)
    NON_FINITE = 7
    #: the near-circle is not star-shaped about its centre, so the contour cannot be certified
    #: simple (coefficients far outside the usual range)
    NOT_STARLIKE = 8
    #: the local thickness falls below the floor of the study (``min_local_thickness``) at an
    #: exact station, or below half of it between stations (docs/study-file.md)
    BELOW_FLOOR = 9
    #: a certificate ran out of budget or stack before it could either prove the check or find
    #: a witness against it: the section is rejected unproven (counted apart, never a pass)
    UNCERTIFIED = 10

    @property
    def label(self) -> str:
        """Short lower-case name used in JSON, tables and logs."""
        return self.name.lower()


_TEXT = {
    Status.OK: "valid section",
    Status.CRITICAL_POINT: "a critical point of the shape series is too close to the circle",
    Status.SINGULAR_POINT: "the near-circle does not enclose z1 = -1 with the required margin",
    Status.BRANCH_CUT: "the near-circle crosses the branch cut [-1, 1]",
    Status.FOLDED: "a surface folds over (not single-valued in x)",
    Status.NEGATIVE_THICKNESS: "the surfaces cross (thickness below zero at an exact point)",
    Status.ABOVE_MAX_LIFT: "the target Cl is above the section's maximum ideal lift",
    Status.NON_FINITE: "the evaluation gave non-finite figures",
    Status.NOT_STARLIKE: "the near-circle is not star-shaped, so the contour is not certified simple",
    Status.BELOW_FLOOR: "the local thickness falls below the floor (min_local_thickness)",
    Status.UNCERTIFIED: "a certificate gave up before proving the section valid or invalid "
                        "(rejected unproven)",
}


def describe(code: int | np.integer) -> str:
    """One-line plain-language description of a status code."""
    return _TEXT[Status(int(code))]
