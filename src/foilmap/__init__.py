"""foilmap: aerofoil and hydrofoil sections by generalised conformal maps, with exact ideal flow.

Every command is a library call first (see docs/python-api.md); every angle is in degrees, and
every call takes a section as a file path, the :class:`SectionRecord` :func:`load_section`
returns, or a one-section :class:`SectionSet`.

Public names
------------
evaluate, sweep, inverse, fit, screen, coordinates, export
    One section: the figures of ``foilmap evaluate``, ``sweep``, ``inverse``, ``fit``,
    ``screen``, ``coords`` and ``export`` as result objects (``.record`` is the command's
    ``--json``).
compare_fronts, report_page, status, best_design, pick
    Study folders: ``foilmap fronts``, ``report``, ``status``, ``best`` and ``pick``.
load_family, best_family, loft, family_section, Family
    Section families along a span: a family file (``.section_at(pos)`` is the exact section
    at a span position, a ``SectionSet``), a family study's best family with each station's
    price of continuity, the loft table and the section at a position (``foilmap family``).
load_study, run_study, open_results
    Studies from Python (notebooks): a validated study, its runs into a folder, and the folder's
    results (:class:`~foilmap.api.StudyResults`: ``.runs``, ``.best()``, ``.front()``,
    ``.history(run_id)``).
SectionSet, SectionRecord, load_section, format_section, offset_circle_coefficients
    Sections: a batch of shape-series coefficients, a section file's contents.
cavitation_number
    σ from speed, depth and water temperature (IAPWS-IF97 vapour pressure).
Status, InputError
    Evaluation status codes; the one-line error every bad input raises.

The numerical kernels (radians, batches of sections) live in :mod:`foilmap.section`, for
example :func:`foilmap.section.evaluation.analyse`.

Ideal-flow results are screening results: a section that carries loads or people must be checked
by viscous analysis and physical tests; local codes and licensed engineering practice govern.

Names are imported on first use, so that ``import foilmap`` (and ``foilmap --help``) stays
quick: the compiled kernel loads when a figure is first computed.
"""

from __future__ import annotations

import importlib

from foilmap._version import __version__
from foilmap.errors import InputError

#: public name → the module that defines it
_PUBLIC = {
    "evaluate": "foilmap.api.sections",
    "sweep": "foilmap.api.sections",
    "inverse": "foilmap.api.sections",
    "fit": "foilmap.api.sections",
    "screen": "foilmap.api.sections",
    "coordinates": "foilmap.api.sections",
    "export": "foilmap.api.sections",
    "as_section": "foilmap.api.sections",
    "compare_fronts": "foilmap.api.folders",
    "report_page": "foilmap.api.folders",
    "status": "foilmap.api.folders",
    "best_design": "foilmap.api.folders",
    "pick": "foilmap.api.folders",
    "load_family": "foilmap.api.families",
    "best_family": "foilmap.api.families",
    "loft": "foilmap.api.families",
    "family_section": "foilmap.api.families",
    "Family": "foilmap.design.family",
    "run_study": "foilmap.api.studies",
    "open_results": "foilmap.api.studies",
    "StudyResults": "foilmap.api.studies",
    "RunResult": "foilmap.api.studies",
    "RunState": "foilmap.api.studies",
    "RunsFailed": "foilmap.api.studies",
    "Study": "foilmap.design.study",
    "load_study": "foilmap.store.studyfile",
    "SectionSet": "foilmap.section.conformal",
    "offset_circle_coefficients": "foilmap.section.conformal",
    "SectionRecord": "foilmap.store.sectionfile",
    "load_section": "foilmap.store.sectionfile",
    "format_section": "foilmap.store.sectionfile",
    "cavitation_number": "foilmap.section.operating",
    "Status": "foilmap.section.status",
}
#: the kernel's names, kept importable from the package for existing code (radians, batches);
#: new code calls the degree-based functions above or imports these from their modules
_KERNEL = {
    "analyse": "foilmap.section.evaluation",
    "Analysis": "foilmap.section.evaluation",
    "Evaluation": "foilmap.section.evaluation",
    "surface_distribution": "foilmap.section.evaluation",
}

__all__ = ["__version__", "InputError", *_PUBLIC]


def __getattr__(name: str):
    module = _PUBLIC.get(name) or _KERNEL.get(name)
    if module is None:
        raise AttributeError(f"module 'foilmap' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(__all__))
