"""Result types of studies: run states, a run's result, its history, designs of a folder.

These are plain values; :mod:`foilmap.store.folder` fills them from a study folder and
:mod:`foilmap.api` hands them to notebooks.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import Enum

import numpy as np

from foilmap.section.conformal import SectionSet

__all__ = ["Generation", "RunState", "RunResult", "History", "FrontDesign", "FolderDesign"]


@dataclass
class Generation:
    """One generation of a search: its candidates and the search state after it (what a run
    log stores per generation)."""

    x: np.ndarray  # (λ, D)
    f: np.ndarray  # (λ,)
    objectives: np.ndarray  # (λ, K)
    constraints: np.ndarray  # (λ, C)
    status: np.ndarray  # (λ,)
    generation: int
    evaluations: int  # cumulative after this generation
    restart: int
    popsize: int
    sigma: float
    mean: np.ndarray  # (D,)
    best_f: float  # best feasible f so far (NaN: none yet)
    best_index: int  # evaluation index of it (−1: none)
    feasible_fraction: float
    time: float  # seconds since the run started (not part of the reproducible record)
    front_index: np.ndarray = None  # evaluation indices of the non-dominated feasible archive
    hypervolume: float = float("nan")  # of the archive against the study's reference point
    front_offset: int = 0  # set by the writer: where this generation's archive starts
    front_size: int = 0


class RunState(str, Enum):
    """The state of a run, as the study index, ``status`` and the result objects name it."""

    PENDING = "pending"  # not started
    QUEUED = "queued"  # handed to an engine, not yet running
    RUNNING = "running"
    INTERRUPTED = "interrupted"  # stopped by Ctrl-C or SIGTERM; resume continues it
    UNFINISHED = "unfinished"  # a log without a complete mark (killed); resume continues it
    COMPLETE = "complete"
    FAILED = "failed"  # failed every attempt; its error is recorded
    UNREADABLE = "unreadable"  # a log that cannot be read

    @property
    def code(self) -> int:
        """The state's code in a run log's ``meta/state`` (a one-byte dataset that a finishing
        run updates in place): running 0, complete 1, failed 2."""
        return _LOG_CODES[self]

    @classmethod
    def parse(cls, value, default: "RunState") -> "RunState":
        """The state named ``value`` (an index entry's ``state``), or ``default`` for a value
        that names none (an index written by another version)."""
        try:
            return cls(value)
        except ValueError:
            return default

    @classmethod
    def from_code(cls, code: int) -> "RunState":
        """The state a run log's ``meta/state`` code stands for (UNREADABLE for an unknown one)."""
        return {c: s for s, c in _LOG_CODES.items()}.get(int(code), cls.UNREADABLE)


@dataclass(frozen=True)
class RunResult:
    """The outcome of one run, like an optimiser's result.

    Attributes
    ----------
    id : the run id (point, variant, seed)
    state : :class:`RunState`
    x : best feasible search vector, or None
    section : the best feasible design as a one-section :class:`SectionSet` (straight into
        :func:`foilmap.evaluate`), or None
    fun : its weighted objective (the value the search minimised), or None
    objectives, constraints : its objective values and constraint values (g ≤ 0 feasible) by
        name, or None
    evaluations, generations : how much the run searched
    time : seconds of search, or None
    design_cl : the run's design lift coefficient
    message : a one-line account of the state
    """

    id: str
    state: RunState
    seed: int
    point: str
    variant: str
    x: np.ndarray | None
    section: SectionSet | None
    fun: float | None
    objectives: dict | None
    constraints: dict | None
    evaluations: int
    generations: int
    time: float | None
    design_cl: float
    message: str

    @property
    def success(self) -> bool:
        """True for a complete run with a feasible design."""
        return self.state is RunState.COMPLETE and self.section is not None


@dataclass(frozen=True)
class History:
    """A run's history, one row per generation, with named columns (``history["best_f"]``)."""

    columns: dict = field(repr=False)

    @property
    def names(self) -> list[str]:
        return list(self.columns)

    def __getitem__(self, name: str) -> np.ndarray:
        try:
            return self.columns[name]
        except KeyError:
            raise KeyError(f"no column {name!r}; columns: {', '.join(self.columns)}") from None

    def __len__(self) -> int:
        return len(next(iter(self.columns.values()))) if self.columns else 0

    def to_frame(self):
        """A pandas DataFrame of the columns (pandas must be installed)."""
        try:
            import pandas as pd
        except ImportError:
            raise ImportError("History.to_frame needs pandas (pip install pandas); the columns "
                              "are available as arrays: history[name]") from None
        return pd.DataFrame(self.columns)


@dataclass(frozen=True)
class FrontDesign:
    """One design of a study's merged Pareto front."""

    id: str  # RUN#EVALUATION, as ``foilmap pick --index`` takes it
    run: str
    objectives: dict
    section: SectionSet
    design_cl: float


_LOG_CODES = {RunState.RUNNING: 0, RunState.COMPLETE: 1, RunState.FAILED: 2}


@dataclass(frozen=True)
class FolderDesign:
    """One logged design of a study folder, found by its id ``RUN#EVALUATION``.

    ``best``, ``pick``, ``export`` and the Python API all return designs in this shape.
    """

    id: str
    run: object  # the run's RunSpec
    study_name: str
    evaluation: int
    generation: int
    x: np.ndarray
    section: SectionSet
    fun: float  # the weighted objective the search minimised
    objectives: dict
    constraints: dict  # constraint values by name (g <= 0 is feasible)
    log: str  # the run log's path

    @property
    def run_id(self) -> str:
        return self.run.run_id

    @property
    def design_cl(self) -> float:
        return self.run.point.cl

    @property
    def te_angle_deg(self) -> float:
        return float(np.degrees(self.section.te_angle[0]))

    @property
    def coefficients(self) -> np.ndarray:
        return self.section.coefficients[0]

    def provenance(self) -> dict:
        """Where the design comes from, for the header of a section file or an export."""
        return {"study": self.study_name, "run": self.run_id, "log": self.log,
                "evaluation": self.evaluation, "generation": self.generation,
                "seed": self.run.seed, "objective": self.fun, "design_cl": self.design_cl}
