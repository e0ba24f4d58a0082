"""The caution every report, export and run log carries (the bottom layer: nothing from foilmap,
so that engines and reports both read it without importing each other)."""

from __future__ import annotations

__all__ = ["CAUTION"]

#: printed in every report and stored in every export and run log
CAUTION = (
    "Ideal-flow screening result: a section that carries loads or people must be checked by "
    "viscous analysis and physical tests; local codes and licensed engineering practice govern."
)
