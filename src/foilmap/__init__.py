"""foilmap: aerofoil and hydrofoil sections by generalised conformal maps, with exact ideal flow.

Public names
------------
SectionSet
    A batch of sections (shape-series coefficients and trailing-edge angles).
evaluate, analyse, Evaluation
    The vectorised evaluation kernel and its result.
Status
    Status codes of an evaluation (invalid shapes are a status, never an exception).
load_section, format_section
    Section files.
load_study, run_study, open_results
    Studies from Python (notebooks): a validated study, its runs into a folder, and the folder's
    results (:class:`~foilmap.api.StudyResults`: ``.runs``, ``.best()``, ``.front()``,
    ``.history(run_id)``); see docs/python-api.md.
offset_circle_coefficients
    The classic Joukowski / Kármán–Trefftz offset circle as a shape series.

Ideal-flow results are screening results: a section that carries loads or people must be checked
by viscous analysis and physical tests; local codes and licensed engineering practice govern.
"""

from __future__ import annotations

from foilmap._version import __version__
from foilmap.api import RunResult, RunState, StudyResults, open_results, run_study
from foilmap.design.study import Study
from foilmap.errors import InputError
from foilmap.section.conformal import SectionSet, offset_circle_coefficients
from foilmap.section.evaluation import (
    Analysis,
    Evaluation,
    analyse,
    evaluate,
    surface_distribution,
)
from foilmap.section.status import Status
from foilmap.store.sectionfile import SectionRecord, format_section, load_section
from foilmap.store.studyfile import load_study

__all__ = [
    "__version__",
    "SectionSet",
    "offset_circle_coefficients",
    "Evaluation",
    "Analysis",
    "evaluate",
    "analyse",
    "surface_distribution",
    "Status",
    "InputError",
    "SectionRecord",
    "load_section",
    "format_section",
    "Study",
    "load_study",
    "run_study",
    "open_results",
    "StudyResults",
    "RunResult",
    "RunState",
]
