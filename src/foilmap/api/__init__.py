"""The library behind every command, for notebooks and scripts: one call per command, each
returning a result object whose figures are those the command prints with ``--json``.

Sections (:mod:`foilmap.api.sections`): :func:`evaluate`, :func:`sweep`, :func:`inverse`,
:func:`fit`, :func:`screen`, :func:`coordinates`, :func:`export`.  Study folders
(:mod:`foilmap.api.folders`): :func:`compare_fronts`, :func:`report_page`, :func:`status`,
:func:`best_design`, :func:`pick`.  Studies (:mod:`foilmap.api.studies`): :func:`run_study`,
:func:`open_results`, :class:`StudyResults`.  Angles are in degrees throughout.
"""

from __future__ import annotations

from foilmap.api.folders import (
    FrontsComparison,
    ReportPage,
    best_design,
    compare_fronts,
    pick,
    report_page,
    status,
)
from foilmap.api.sections import (
    Evaluated,
    Exported,
    Fitted,
    InverseDesign,
    Screening,
    Sweep,
    as_section,
    coordinates,
    evaluate,
    export,
    fit,
    inverse,
    screen,
    sweep,
)
from foilmap.api.studies import (
    FrontDesign,
    History,
    RunResult,
    RunsFailed,
    RunState,
    StudyResults,
    open_results,
    run_study,
)

__all__ = ["evaluate", "sweep", "inverse", "fit", "screen", "coordinates", "export",
           "compare_fronts", "report_page", "status", "best_design", "pick", "as_section",
           "run_study", "open_results", "StudyResults", "RunResult", "RunState", "RunsFailed", "History",
           "FrontDesign", "Evaluated", "Sweep", "InverseDesign", "Fitted", "Screening",
           "Exported", "FrontsComparison", "ReportPage"]
