"""Study files: read a study from disk, with its start files read and fitted once.

The parsing and validation are :func:`foilmap.design.study.parse_study` (no files); this module
adds the file system: the study file itself, and ``shape.start`` files (a section file, or a
coordinates file fitted with the shape series).
"""

from __future__ import annotations

import math
from pathlib import Path

from foilmap.design.study import Study
from foilmap.design.study import parse_study as _parse_text
from foilmap.errors import InputError, read_input_text

__all__ = ["load_study", "load_study_text", "read_start", "read_target"]

#: coefficient pairs fitted to a coordinates file given as a start (a run keeps its first N)
START_FIT_PAIRS = 32


def read_start(name: str, base_dir: str) -> tuple:
    """The coefficients and trailing-edge angle (degrees) of a start file."""
    from foilmap.section.fitting import fit_section
    from foilmap.store.coordfile import load_coordinates
    from foilmap.store.sectionfile import load_section

    file = Path(base_dir) / name
    if not file.is_file():
        raise InputError(f"no such file (looked in {base_dir})")
    if file.suffix.lower() == ".toml":
        rec = load_section(file)
        return rec.coefficients, rec.te_angle_deg
    coords = load_coordinates(file)
    fit = fit_section(coords.xy, coords.le_index, START_FIT_PAIRS)
    return fit.coefficients, math.degrees(fit.te_angle)


def read_target(name: str, base_dir: str) -> tuple:
    """A point's target Cp table as ``(x, upper, cp)`` tuples."""
    from foilmap.store.targetfile import load_target

    file = Path(base_dir) / name
    if not file.is_file():
        raise InputError(f"no such file (looked in {base_dir})")
    t = load_target(file)
    return (tuple(map(float, t.x)), tuple(map(bool, t.upper)), tuple(map(float, t.cp)))


def load_study_text(text: str, source: str = "<text>", base_dir: str | None = None) -> Study:
    """Parse and validate a study's text, reading its start files.

    Relative paths in the study (``shape.start``) are read from ``base_dir``, by default the
    study file's folder (or the working folder for text without a file).
    """
    if base_dir is None:
        src = Path(source)
        base_dir = str(src.parent.resolve()) if src.is_file() else str(Path.cwd())
    return _parse_text(text, source, base_dir, read_start, read_target)


def load_study(path: str | Path) -> Study:
    """Read and validate a study file."""
    return load_study_text(read_input_text(path, "study"), str(path))
