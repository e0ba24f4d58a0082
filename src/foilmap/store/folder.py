"""The study folder: the one owner of its layout, index, run summaries, designs and fronts.

Layout::

    DIR/study.toml        the study text verbatim (what ``foilmap resume DIR`` runs)
    DIR/options.json      overrides that change results (the budget) and the start files' folder
    DIR/index.json        the study index: one entry per run (file, seed, point, variant, state)
    DIR/runs/ID.h5        the run logs (docs/run-log.md)
    DIR/runs/ID.resume    the resume checkpoint of an unfinished run (removed when it completes)

Engines write runs into a folder through :class:`StudyFolder`; every report, the command line
and the Python API read it through the same class.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from foilmap._version import __version__
from foilmap.design.fronts import is_multi_objective, merge_archive  # re-exported
from foilmap.design.results import FolderDesign, RunState
from foilmap.design.study import Parametrisation, RunSpec, Study
from foilmap.errors import InputError
from foilmap.section.status import Status
from foilmap.store.runlog import RunLog, read_run
from foilmap.store.sectionfile import write_text_atomic
from foilmap.store.studyfile import load_study_text

__all__ = ["StudyFolder", "RunFront", "collect_fronts", "INDEX_NAME", "STUDY_NAME",
           "OPTIONS_NAME", "is_multi_objective"]

INDEX_NAME = "index.json"
STUDY_NAME = "study.toml"
OPTIONS_NAME = "options.json"
#: what the index keeps of a finished run (so that status need not open complete logs)
INDEXED = ("state", "generations", "evaluations", "best", "best_objectives", "resumes",
           "elapsed_s", "hypervolume", "rejected", "best_shape")


def log_summary(run_id: str, log: RunLog) -> dict:
    """What status, the index and the engines report of a run, from its log."""
    best = log.best()
    hv = log.gen.get("hypervolume")
    return {"run": run_id, "state": log.state.value, "generations": log.generations,
            "evaluations": log.evaluations, "best": None if best is None else best["f"],
            "best_objectives": None if best is None else dict(
                zip(log.objective_names, map(float, best["objectives"]))),
            "resumes": log.resumes,
            "elapsed_s": float(log.gen["time"][-1]) if log.generations else None,
            "hypervolume": (float(hv[-1]) if hv is not None and hv.size and np.isfinite(hv[-1])
                            else None),
            "rejected": rejected_counts(log)}


def rejected_counts(log: RunLog) -> dict:
    """How many of a run's evaluations each status other than ``ok`` rejected, by label
    (``uncertified`` counts sections that a certificate gave up on: rejected unproven)."""
    st = np.asarray(log.evals["status"]).astype(np.int64)
    counts = np.bincount(st[st >= 0], minlength=len(Status)) if st.size else np.zeros(0, int)
    return {Status(c).label: int(n) for c, n in enumerate(counts) if c != Status.OK and n}


class StudyFolder:
    """A study folder on disk (see the module docstring for its layout)."""

    def __init__(self, path: str | Path, study: Study | None = None):
        """``study``: the folder's study when the caller holds it already (a worker is handed
        the validated study with its task: no need to read and check study.toml again)."""
        self.path = Path(path)
        self._study: Study | None = study

    def __repr__(self) -> str:
        return f"StudyFolder({str(self.path)!r})"

    # --- layout --------------------------------------------------------------------------

    def log_path(self, run_id: str) -> Path:
        return self.path / "runs" / f"{run_id}.h5"

    def checkpoint_path(self, run_id: str) -> Path:
        return self.path / "runs" / f"{run_id}.resume"

    def exists(self) -> bool:
        return (self.path / STUDY_NAME).exists()

    # --- the study -----------------------------------------------------------------------

    @classmethod
    def prepare(cls, study: Study, path: str | Path, budget: int | None) -> tuple:
        """Create or check the folder for ``study``; returns ``(folder, study as it is to be
        run)`` (with a budget recorded earlier, so that resume keeps it)."""
        self = cls(path)
        self.path.mkdir(parents=True, exist_ok=True)
        sfile = self.path / STUDY_NAME
        if sfile.exists():
            if sfile.read_text(encoding="utf-8") != study.text:
                raise InputError(f"folder {str(self.path)!r} holds a different study "
                                 f"({STUDY_NAME} differs); choose another output folder or remove "
                                 "this one")
            old = self._options()
            if budget is not None and old.get("budget") not in (None, budget):
                raise InputError(f"folder {str(self.path)!r} was started with a budget of "
                                 f"{old['budget']} evaluations per run; resume it with the same "
                                 "budget or choose another output folder")
            budget = old.get("budget", budget)
        else:
            write_text_atomic(sfile, study.text)
        write_text_atomic(self.path / OPTIONS_NAME, json.dumps({"budget": budget,
                                                                "base_dir": study.base_dir}))
        (self.path / "runs").mkdir(exist_ok=True)
        self._study = study.with_budget(budget) if budget is not None else study
        return self, self._study

    def _options(self) -> dict:
        p = self.path / OPTIONS_NAME
        return json.loads(p.read_text()) if p.exists() else {}

    @property
    def study(self) -> Study:
        """The folder's study, with its recorded overrides (read once)."""
        if self._study is None:
            sfile = self.path / STUDY_NAME
            if not sfile.exists():
                raise InputError(f"{str(self.path)!r} is not a study folder (no {STUDY_NAME})")
            opts = self._options()
            study = load_study_text(sfile.read_text(encoding="utf-8"), str(sfile),
                                opts.get("base_dir"))
            budget = opts.get("budget")
            self._study = study.with_budget(budget) if budget is not None else study
        return self._study

    def run_spec(self, run_id: str) -> RunSpec:
        try:
            return self.study.run(run_id)
        except KeyError:
            raise InputError(f"no run {run_id!r} in {str(self.path)!r} (runs: "
                             f"{', '.join(r.run_id for r in self.study.runs())})") from None

    # --- the index -----------------------------------------------------------------------

    def read_index(self) -> dict[str, dict]:
        """The index entries by run id ({} before the first run)."""
        p = self.path / INDEX_NAME
        if not p.exists():
            return {}
        return {e["run"]: e for e in json.loads(p.read_text())["runs"]}

    def write_index(self, states: dict[str, dict]) -> None:
        """Write the index: every run of the study with its state (pending when not given)."""
        runs = []
        for r in self.study.runs():
            entry = {"run": r.run_id, "file": f"runs/{r.run_id}.h5", "seed": r.seed,
                     "point": r.point.name, "variant": r.variant}
            entry.update(states.get(r.run_id, {"state": RunState.PENDING.value}))
            runs.append(entry)
        head = {"schema_version": "1.0", "software": f"foilmap {__version__}",
                "study": self.study.name, "updated": time.strftime("%Y-%m-%dT%H:%M:%S%z")}
        # one run a line, each by the compiled encoder (an indented dump goes through the pure
        # Python one: the driver rewrites the index as every run starts and ends, which made
        # a study of a thousand runs spend seconds on its index alone)
        text = (json.dumps(head)[:-1] + ', "runs": [\n'
                + ",\n".join(json.dumps(e) for e in runs) + "\n]}\n")
        write_text_atomic(self.path / INDEX_NAME, text)

    # --- runs ----------------------------------------------------------------------------

    def log(self, run_id: str, settle: bool = True) -> RunLog | None:
        """A run's log, or None when it has none yet or it cannot be read (``settle``: see
        :func:`~foilmap.store.runlog.read_run`)."""
        path = self.log_path(run_id)
        if not path.exists():
            return None
        try:
            return read_run(path, settle=settle)
        except (OSError, KeyError, ValueError):
            return None

    def is_complete(self, run_id: str) -> bool:
        log = self.log(run_id)
        return log is not None and log.state is RunState.COMPLETE

    def summary(self, run_id: str, log: RunLog | None = None) -> dict:
        """A run's summary from its log (see :func:`log_summary`), with ``best_shape`` (see
        :meth:`best_shape`); ``log`` is the log as already read."""
        log = log if log is not None else read_run(self.log_path(run_id))
        return {**log_summary(run_id, log), "best_shape": self.best_shape(run_id, log)}

    def best_shape(self, run_id: str, log: RunLog) -> dict:
        """What the design warnings need of a run's best feasible design, so that a finished
        run's index entry holds it and status opens no finished log: its leading-edge radius
        (``le_radius``, chords) and, when the study sets ``constraints.min_local_thickness``,
        its least clearance above that floor and where (``floor_margin``, ``floor_x``).  Empty
        when the run has no feasible design (a front study's runs included)."""
        from foilmap.section.geometry import floor_clearance, leading_edge_radius

        b = log.best()
        if b is None:
            return {}
        sec = self.design(run_id, b["index"], log).section
        shape = {"le_radius": float(leading_edge_radius(sec)[0])}  # a logged feasible design
        t0 = float(self.study.constraints.get("min_local_thickness", 0.0))
        if t0 > 0.0:
            margin, x = (float(v[0]) for v in floor_clearance(sec, t0))
            shape.update(floor_margin=margin, floor_x=x)
        return shape

    def logged_runs(self):
        """(run, log) for every run of the study whose log holds at least one generation."""
        for r in self.study.runs():
            log = self.log(r.run_id)
            if log is not None and log.generations:
                yield r, log

    def status(self) -> dict:
        """State, generations, evaluations, best feasible objectives and elapsed time per run."""
        listed = self.read_index()
        rows = []
        for run in self.study.runs():
            log_path = self.log_path(run.run_id)
            entry = listed.get(run.run_id, {})
            row = {"run": run.run_id, "seed": run.seed, "point": run.point.name,
                   "variant": run.variant, "state": entry.get("state", RunState.PENDING.value),
                   "generations": 0, "evaluations": 0, "best": None, "best_objectives": None,
                   "hypervolume": None, "elapsed_s": None, "resumes": 0,
                   "file": str(log_path.relative_to(self.path))}
            if "error" in entry:
                row["error"] = entry["error"]
            if entry.get("state") == RunState.COMPLETE.value and "generations" in entry:
                # a finished run: its index entry holds what status shows (no log to open)
                row.update({k: entry[k] for k in INDEXED if k in entry})
            elif log_path.exists():
                try:
                    s = self.summary(run.run_id)
                except (OSError, KeyError, ValueError) as exc:
                    row["state"] = RunState.UNREADABLE.value
                    row["error"] = str(exc)
                else:
                    state = self.merged_state(row["state"], s["state"])
                    row.update({k: v for k, v in s.items() if k in INDEXED and v is not None})
                    row["state"] = state.value
            damage = self.damage(run.run_id, row, entry)
            if damage:
                row["damage"] = damage
            rows.append(row)
        counts: dict[str, int] = {}
        for r in rows:
            counts[r["state"]] = counts.get(r["state"], 0) + 1
        total_e = sum(r["evaluations"] for r in rows)
        total_t = sum(r["elapsed_s"] or 0.0 for r in rows)
        return {"study": self.study.name, "folder": str(self.path), "runs": rows,
                "counts": counts, "evaluations": total_e,
                "evaluations_per_s": (total_e / total_t) if total_t > 0 else None,
                "checked": time.strftime("%Y-%m-%dT%H:%M:%S%z")}

    def damage(self, run_id: str, row: dict, entry: dict) -> str | None:
        """One line naming what is damaged in an unfinished run's files (an unreadable log, a
        checkpoint that is damaged or not signed by this user's key), or the repair the last
        resume made (the index's ``note``); None when nothing is amiss."""
        from foilmap.store.runlog import checkpoint_problem

        if row["state"] == RunState.COMPLETE.value:
            return None
        found = []
        if row["state"] == RunState.UNREADABLE.value:
            found.append(f"log {self.log_path(run_id).name} is damaged: "
                         f"{str(row.get('error', '')).splitlines()[0] if row.get('error') else ''}")
        problem = checkpoint_problem(self.checkpoint_path(run_id))
        if problem:
            found.append(problem)
        if found:
            return "; ".join(found) + " (foilmap resume keeps what agrees or restarts this run)"
        note = entry.get("note")
        return note.removeprefix(f"run {run_id}: ") if note else None

    @staticmethod
    def merged_state(indexed: str, logged: str) -> RunState:
        """A run's state from its index entry and its log: the log knows when it is complete;
        a log without the complete mark is unfinished unless the index knows better (running,
        interrupted, failed)."""
        if logged == RunState.COMPLETE.value:
            return RunState.COMPLETE
        if indexed in (RunState.PENDING.value, RunState.QUEUED.value, RunState.COMPLETE.value):
            return RunState.UNFINISHED
        return RunState.parse(indexed, RunState.UNFINISHED)

    # --- designs -------------------------------------------------------------------------

    def design(self, run_id: str, evaluation: int, log: RunLog | None = None) -> FolderDesign:
        """The logged design ``RUN#EVALUATION``."""
        spec = self.run_spec(run_id)
        log = log if log is not None else read_run(self.log_path(run_id))
        if not 0 <= evaluation < log.evaluations:
            raise InputError(f"run {run_id!r} has no evaluation {evaluation} (it has "
                             f"{log.evaluations})")
        x = np.asarray(log.evals["x"][evaluation], dtype=float)
        param = Parametrisation.from_shape(spec.shape)
        # a family run's vector holds each station's in turn: its design is their sections
        sec = param.sections(x.reshape(-1, param.dimension) if spec.family else x[None, :])
        return FolderDesign(
            id=f"{run_id}#{evaluation}", run=spec, study_name=self.study.name,
            evaluation=int(evaluation), generation=int(log.evals["generation"][evaluation]),
            x=x, section=sec, fun=float(log.evals["f"][evaluation]),
            objectives=dict(zip(log.objective_names,
                                map(float, log.evals["objectives"][evaluation]))),
            constraints=dict(zip(log.constraint_names,
                                 map(float, log.evals["constraints"][evaluation]))),
            log=str(self.log_path(run_id)))

    def design_by_id(self, design_id: str) -> FolderDesign:
        """The design with id ``RUN#EVALUATION``."""
        run_id, sep, ev = design_id.partition("#")
        if not sep or not ev.isdigit():
            raise InputError(f"design id {design_id!r} is not RUN#EVALUATION")
        return self.design(run_id, int(ev))

    def best_design(self, run_id: str | None = None) -> FolderDesign:
        """The best feasible design of a run, or of the whole (single-objective) study."""
        study = self.study
        if is_multi_objective(study):
            raise InputError(f"study {study.name!r} searches Pareto fronts, so it has no single "
                             f"best design: choose one with foilmap pick {self.path} --knee (or "
                             "--nearest, --index)")
        runs = [self.run_spec(run_id)] if run_id is not None else study.runs()
        if run_id is None and study.is_family:  # the family's best, not a station run's
            runs = [r for r in runs if r.family]
        best = None
        for r in runs:
            log = self.log(r.run_id)
            b = None if log is None else log.best()
            if b is not None and (best is None or b["f"] < best[0]["f"]):
                best = (b, r, log)
        if best is None:
            where = f"run {run_id!r}" if run_id else f"study folder {str(self.path)!r}"
            raise InputError(f"{where} has no feasible design yet")
        b, r, log = best
        return self.design(r.run_id, b["index"], log)

    # --- fronts --------------------------------------------------------------------------

    def fronts(self, run_log: Path | None = None) -> list["RunFront"]:
        """The front of every run (an ε sweep's levels merged into one), or of one run log."""
        study = self.study
        runs = study.runs()
        if run_log is not None:
            runs = [r for r in runs if self.log_path(r.run_id).resolve() == run_log.resolve()]
            if not runs:
                raise InputError(f"{str(run_log)!r} is not a run of the study in "
                                 f"{str(self.path)!r}")
        by_key: dict[str, list[RunSpec]] = {}
        for r in runs:
            by_key.setdefault(r.front_key if r.epsilon is not None else r.run_id, []).append(r)
        out = []
        for key, specs in by_key.items():
            f = self._front_of(key, specs)
            if f is not None:
                out.append(f)
        return out

    def merged_front(self, run_id: str | None = None) -> tuple[list[str], list[str], np.ndarray]:
        """The study's merged front of feasible designs, sorted by the first objective:
        ``(design ids, objective names, objective values (M, K))``."""
        fronts = self.fronts()
        if not fronts:
            raise InputError(f"{str(self.path)!r} has no run logs yet")
        if run_id is None and self.study.is_family:  # the family's fronts, not its stations'
            fronts = [f for f in fronts if all(s.family for s in f.specs)]
            if not fronts:
                raise InputError(f"{str(self.path)!r} has no family run log yet")
        if run_id is not None:
            fronts = [f for f in fronts if f.run == run_id or
                      run_id in [s.run_id for s in f.specs]]
            if not fronts:
                raise InputError(f"no run {run_id!r} in {str(self.path)!r}")
        names = fronts[0].objective_names
        allp = np.concatenate([f.objectives for f in fronts])
        ids = sum((f.ids for f in fronts), [])
        if not allp.shape[0]:
            return [], names, np.zeros((0, len(names)))
        keep, pts = merge_archive(np.zeros(0, dtype=np.int64), np.zeros((0, len(names))),
                                  np.arange(allp.shape[0]), allp)
        order = np.argsort(pts[:, 0], kind="stable")
        return [ids[i] for i in keep[order]], names, pts[order]

    def _front_of(self, key: str, specs: list[RunSpec]) -> "RunFront | None":
        ids, objs, xs = [], [], []
        evals_hist, hv_hist, names = None, None, None
        for r in specs:
            log = self.log(r.run_id)
            if log is None:
                continue
            names = log.objective_names
            fr = log.front()
            ids += [f"{r.run_id}#{int(i)}" for i in fr]
            objs.append(log.evals["objectives"][fr])
            xs.append(log.evals["x"][fr])
            if len(specs) == 1:
                evals_hist = log.gen["evaluations"]
                hv_hist = log.gen.get("hypervolume", np.full(log.generations, np.nan))
        if names is None:
            return None
        obj = np.concatenate(objs) if objs else np.zeros((0, len(names)))
        x = np.concatenate(xs) if xs else np.zeros((0, 0))
        if len(specs) > 1 and obj.shape[0]:  # merge the sweep's levels into one front
            keep_idx, _ = merge_archive(np.zeros(0, dtype=np.int64),
                                        np.zeros((0, obj.shape[1])), np.arange(obj.shape[0]),
                                        obj)
            ids = [ids[i] for i in keep_idx]
            obj, x = obj[keep_idx], x[keep_idx]
        if evals_hist is None:
            evals_hist, hv_hist = np.zeros(0), np.zeros(0)
        order = np.argsort(obj[:, 0], kind="stable") if obj.shape[0] else np.zeros(0, dtype=int)
        study = self.study
        group = f"{study.name}:{specs[0].point.name}"
        if specs[0].variant:
            group = f"{group}.{specs[0].variant}"
        return RunFront(group, key, study, specs, names, [ids[i] for i in order], obj[order],
                        x[order] if x.size else x, evals_hist, hv_hist, study.reference_point,
                        str(self.path))


@dataclass
class RunFront:
    """The front of one run (or one merged ε sweep)."""

    group: str
    run: str  # run id or the sweep's front key (FOLDER/ID when several folders are compared)
    study: Study
    specs: list[RunSpec]
    objective_names: list[str]
    ids: list[str]  # "RUN#EVALUATION" per design
    objectives: np.ndarray  # (M, K)
    variables: np.ndarray  # (M, D)
    evaluations: np.ndarray  # history: evaluations after each generation
    hv_history: np.ndarray  # history: logged hypervolume (NaN for merged sweeps)
    reference_point: tuple | None
    folder: str = ""  # the study folder the run belongs to


def _folder_of(path: Path) -> Path:
    """The study folder of a study folder or of one of its run logs."""
    if path.is_dir():
        return path
    if path.suffix == ".h5" and path.parent.name == "runs":
        return path.parent.parent
    raise InputError(f"{str(path)!r} is neither a study folder nor a run log (runs/ID.h5)")


def collect_fronts(paths: list[str]) -> list[RunFront]:
    """The fronts of the given study folders and run logs, each run once; with more than one
    folder every run and group is labelled by its folder."""
    fronts: list[RunFront] = []
    seen = set()
    for raw in paths:
        p = Path(raw)
        if not p.exists():
            raise InputError(f"{raw!r} does not exist")
        folder = StudyFolder(_folder_of(p))
        if not folder.exists():
            raise InputError(f"{str(folder.path)!r} is not a study folder (no {STUDY_NAME})")
        for f in folder.fronts(p if p.is_file() else None):
            ident = (str(folder.path.resolve()), f.run)
            if ident not in seen:
                seen.add(ident)
                fronts.append(f)
    if not fronts:
        raise InputError("no run logs found in " + ", ".join(repr(p) for p in paths))
    return _label_by_folder(fronts)


def _label_by_folder(fronts: list[RunFront]) -> list[RunFront]:
    """Keep runs of different folders apart: with more than one folder, every run and group is
    labelled by its folder (its name, or its path where two folders share a name), so that the
    same study run twice is compared as two groups rather than merged."""
    folders = sorted({str(Path(f.folder).resolve()) for f in fronts})
    if len(folders) < 2:
        return fronts
    names = [Path(p).name for p in folders]
    label = {p: (n if names.count(n) == 1 else p) for p, n in zip(folders, names)}
    for f in fronts:
        tag = label[str(Path(f.folder).resolve())]
        f.group = f"{tag}/{f.group}"
        f.run = f"{tag}/{f.run}"
    return fronts
