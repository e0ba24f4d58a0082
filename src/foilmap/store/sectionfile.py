"""Section files: a small TOML file a user can write by hand and that commands exchange.

::

    [section]
    name = "example"
    te_angle_deg = 12.0
    coefficients = [[-0.10, 0.05], [0.01, -0.004]]   # A_1..A_N as [real, imag]

    [provenance]                 # optional, free-form: where the section came from
    note = "hand-written"

Validation happens once, at load; every failure is an :class:`~foilmap.errors.InputError` whose
message names the file, the key, the value and what is allowed.
"""

from __future__ import annotations

import contextlib
import math
import os
import tempfile
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from foilmap.errors import InputError, read_input_text
from foilmap.section.conformal import SectionSet

__all__ = [
    "SectionRecord",
    "ReferencedSectionSet",
    "load_section",
    "parse_section",
    "format_section",
    "write_text_atomic",
    "MAX_COEFFICIENTS",
    "TE_ANGLE_RANGE_DEG",
]

#: largest number of shape-series coefficients a file may hold
MAX_COEFFICIENTS = 64
#: allowed trailing-edge angle, degrees (k = 2 − τ/π stays in (5/3, 2])
TE_ANGLE_RANGE_DEG = (0.0, 60.0)
_SECTION_KEYS = ("name", "te_angle_deg", "coefficients", "reference_le")
#: how far (chords) a reference chord line's leading-edge end may lie from the section's own
REFERENCE_LE_LIMIT = 0.05
_TOP_KEYS = ("section", "provenance")


@dataclass(frozen=True)
class SectionRecord:
    """A section as read from a file."""

    name: str
    te_angle_deg: float
    coefficients: np.ndarray  # complex, shape (N,)
    provenance: dict = field(default_factory=dict)
    #: the leading-edge end of the chord line angles are measured from, in the section's own
    #: chord frame (a fitted section's source line); None: the own line (TE to farthest point)
    reference_le: complex | None = None

    @property
    def chord_line(self) -> str:
        """Which chord line the section's angles, Cl and Cm are measured from, in words."""
        if self.reference_le is None:
            return "own: from the trailing edge to the farthest contour point"
        return (f"source: from ({self.reference_le.real:.6f}, {self.reference_le.imag:.6f}) in "
                "the own chord frame to the trailing edge (the fitted file's own chord line)")

    def to_set(self) -> SectionSet:
        """The section as a batch of one; a fitted section's batch carries its chord line
        (``reference_le``, shape (1,)), which every public call measures angles from."""
        if self.reference_le is None:
            return SectionSet(self.coefficients[None, :], np.radians([self.te_angle_deg]))
        return ReferencedSectionSet(self.coefficients[None, :], np.radians([self.te_angle_deg]),
                                    np.array([self.reference_le], dtype=complex))


@dataclass(frozen=True)
class ReferencedSectionSet(SectionSet):
    """A batch of sections whose angles, Cl and Cm are measured from reference chord lines:
    ``reference_le`` (complex, shape (B,)) is each line's leading-edge end in the section's own
    chord frame (a fitted section's source line; see :class:`SectionRecord`)."""

    reference_le: np.ndarray | None = None

    def __post_init__(self) -> None:
        super().__post_init__()
        ref = np.broadcast_to(np.asarray(self.reference_le, dtype=complex),
                              (len(self),)).copy()
        object.__setattr__(self, "reference_le", ref)

    def __getitem__(self, item) -> "ReferencedSectionSet":
        idx = np.atleast_1d(np.arange(len(self))[item])
        return ReferencedSectionSet(self.coefficients[idx], self.te_angle[idx],
                                    self.reference_le[idx])


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _looks_like_coordinates(text: str) -> bool:
    """Whether most lines hold two numbers (a coordinates file given where a section is due)."""
    rows = [ln.replace(",", " ").split() for ln in text.splitlines() if ln.strip()]
    numeric = 0
    for r in rows:
        try:
            [float(v) for v in r[:2]]
            numeric += len(r) >= 2
        except ValueError:
            pass
    return len(rows) >= 5 and numeric >= 0.8 * len(rows)


def parse_section(text: str, source: str = "<text>") -> SectionRecord:
    """Parse and validate the text of a section file."""
    where = f"section file {source!r}"
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        if _looks_like_coordinates(text):
            raise InputError(f"{where} holds coordinates, not a section: fit them first with "
                             f"foilmap fit {source} -n 24 -o SECTION.toml") from None
        raise InputError(f"{where} is not valid TOML: {exc}") from None
    for key in data:
        if key not in _TOP_KEYS:
            raise InputError(
                f"{where}: unknown table or key {key!r} (allowed: {', '.join(_TOP_KEYS)})"
            )
    sec = data.get("section")
    if not isinstance(sec, dict):
        raise InputError(f"{where}: missing table [section]")
    for key in sec:
        if key not in _SECTION_KEYS:
            raise InputError(
                f"{where}: unknown key 'section.{key}' (allowed: {', '.join(_SECTION_KEYS)})"
            )
    for key in _SECTION_KEYS[:3]:
        if key not in sec:
            raise InputError(f"{where}: missing key 'section.{key}'")
    name = sec["name"]
    if not isinstance(name, str) or not name.strip() or "\n" in name:
        raise InputError(f"{where}: 'section.name' must be a non-empty one-line string")
    tau = sec["te_angle_deg"]
    lo, hi = TE_ANGLE_RANGE_DEG
    if not _is_number(tau) or not math.isfinite(tau) or not lo <= tau <= hi:
        raise InputError(
            f"{where}: 'section.te_angle_deg' = {tau!r} is not allowed "
            f"(a number of degrees from {lo:g} to {hi:g})"
        )
    coeffs = sec["coefficients"]
    if not isinstance(coeffs, list) or not 1 <= len(coeffs) <= MAX_COEFFICIENTS:
        raise InputError(
            f"{where}: 'section.coefficients' must be a list of 1 to {MAX_COEFFICIENTS} "
            "[real, imag] pairs"
        )
    values = []
    for i, pair in enumerate(coeffs, start=1):
        ok = (
            isinstance(pair, list)
            and len(pair) == 2
            and all(_is_number(v) and math.isfinite(v) for v in pair)
        )
        if not ok:
            raise InputError(
                f"{where}: 'section.coefficients' entry {i} (A_{i}) = {pair!r} is not a "
                "[real, imag] pair of finite numbers"
            )
        if abs(complex(*pair)) > 1.0:
            raise InputError(
                f"{where}: 'section.coefficients' entry {i} (A_{i}) has modulus "
                f"{abs(complex(*pair)):.4g}; allowed: at most 1"
            )
        values.append(complex(pair[0], pair[1]))
    prov = data.get("provenance", {})
    if not isinstance(prov, dict):
        raise InputError(f"{where}: 'provenance' must be a table")
    ref = sec.get("reference_le")
    if ref is not None:
        ok = (isinstance(ref, list) and len(ref) == 2
              and all(_is_number(v) and math.isfinite(v) for v in ref)
              and abs(complex(*ref)) <= REFERENCE_LE_LIMIT)
        if not ok:
            raise InputError(f"{where}: 'section.reference_le' = {ref!r} is not allowed (an "
                             f"[x, y] pair within {REFERENCE_LE_LIMIT:g} chord of the leading "
                             "edge)")
        ref = complex(ref[0], ref[1])
    return SectionRecord(name.strip(), float(tau), np.array(values, dtype=complex), dict(prov),
                         ref)


def load_section(path: str | os.PathLike) -> SectionRecord:
    """Read and validate a section file."""
    return parse_section(read_input_text(path, "section"), str(path))


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {type(v).__name__} to a section file")


def format_section(
    name: str, coefficients, te_angle_deg: float, provenance: dict | None = None,
    reference_le: complex | None = None,
) -> str:
    """Text of a section file (coefficients to full double precision)."""
    c = np.asarray(coefficients, dtype=complex).ravel()
    pairs = ",\n    ".join(f"[{float(a.real)!r}, {float(a.imag)!r}]" for a in c)
    lines = [
        "# foilmap section (ideal-flow screening result: a section that carries loads or",
        "# people must be checked by viscous analysis and tests; local codes govern)",
        "[section]",
        f"name = {_toml_value(name)}",
        f"te_angle_deg = {float(te_angle_deg)!r}",
        f"coefficients = [\n    {pairs},\n]",
    ]
    if reference_le is not None:
        lines += ["# angles, Cl and Cm from the source's chord line: from this point (in the own",
                  "# chord frame) to the trailing edge",
                  f"reference_le = [{float(reference_le.real)!r}, {float(reference_le.imag)!r}]"]
    if provenance:
        lines.append("")
        lines.append("[provenance]")
        for k, v in provenance.items():
            lines.append(f"{k} = {_toml_value(v)}")
    return "\n".join(lines) + "\n"


def umask_mode(directory: bool = False) -> int:
    """The permissions a new file (0o666) or folder (0o777) gets under the process umask.

    Temporary files and folders are created private (0o600, 0o700); whatever is renamed into
    place as a result gets these instead, so that colleagues can read a hand-off.
    """
    mask = os.umask(0)
    os.umask(mask)
    return (0o777 if directory else 0o666) & ~mask


def write_text_atomic(path: str | os.PathLike, text: str) -> None:
    """Write a text file whole or not at all (temporary file, then rename), with the
    permissions of an ordinary new file."""
    p = Path(path)
    d = p.parent if str(p.parent) else Path(".")
    fd, tmp = tempfile.mkstemp(dir=d, prefix=f".{p.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as fh:
            fh.write(text)
        os.chmod(tmp, umask_mode())
        os.replace(tmp, p)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


@contextlib.contextmanager
def atomic_folder(out: str | os.PathLike):
    """Build a folder whole or not at all: yields a private temporary folder beside ``out``,
    renamed to ``out`` (with the permissions of an ordinary new folder) when the block ends
    without an exception, removed otherwise.  ``out`` must not exist or be an empty folder."""
    import shutil

    out = Path(out)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    os.chmod(tmp, umask_mode(directory=True))  # the bundle is a hand-off: readable as usual
    try:
        yield tmp
        if out.exists():
            out.rmdir()
        os.replace(tmp, out)
    finally:
        if tmp.exists():
            shutil.rmtree(tmp)
