"""Shared fixtures and helpers for the foilmap tests."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
# the panel method lives in benchmarks/ (the peer of the conformal kernel, not in the package)
sys.path.insert(0, str(ROOT / "benchmarks"))

from foilmap import SectionSet, offset_circle_coefficients  # noqa: E402


def joukowski(mu: complex, tau_deg: float = 0.0, n: int = 24) -> SectionSet:
    """The offset circle through ζ = 1 with centre μ as a one-section batch."""
    return SectionSet(offset_circle_coefficients(mu, n)[None, :], np.radians([tau_deg]))


@pytest.fixture
def cambered() -> SectionSet:
    """A 13 % cambered Kármán–Trefftz section with a 10° trailing edge (test data, invented)."""
    return joukowski(-0.08 + 0.04j, 10.0, 16)


@pytest.fixture
def shaped() -> SectionSet:
    """A section with higher harmonics switched on (test data, invented)."""
    a = offset_circle_coefficients(-0.075 + 0.035j, 8)
    a[1:4] += np.array([0.004 - 0.003j, -0.001 + 0.0008j, 0.0005 + 0.0002j])
    return SectionSet(a[None, :], np.radians([8.0]))
