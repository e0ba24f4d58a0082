"""Run logs: one HDF5 file per run, appended one generation at a time, readable while written.

The schema is documented in ``docs/run-log.md`` (schema version :data:`SCHEMA_VERSION`).  The
writer creates every object first, then switches to SWMR mode (single writer, multiple readers)
and afterwards only resizes, writes and flushes, so that ``foilmap status`` can read a live run.
The file format is capped at HDF5 1.10 (``libver=('v110', 'v110')``) so that older tools read it.

Crash safety: generations are written and flushed before the run's resume checkpoint is saved
(write-then-rename, :func:`save_checkpoint`); the engine commits both together at least every
second (every generation when generations are slower than that).  A run killed at any moment resumes from the last
checkpoint: :func:`RunLogWriter.reopen` copies the rows up to that checkpoint into a fresh file
and renames it over the old one, so a half-written generation is dropped.
"""

from __future__ import annotations

import json
import os
import pickle
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from foilmap.design.results import Generation, RunState

__all__ = [
    "SCHEMA_VERSION",
    "RunLogWriter",
    "RunLog",
    "read_run",
    "save_checkpoint",
    "load_checkpoint",
    "EVAL_FIELDS",
    "GEN_FIELDS",
]

SCHEMA_VERSION = "1.1"
_LIBVER = ("v110", "v110")
UNITS = {
    "lengths": "chords", "angles": "degrees in attributes and section files, radians nowhere",
    "cp": "1 - (V/Vinf)^2", "cm": "about the quarter chord, nose-up positive",
    "time": "seconds since the run started (gen/time), Unix time (meta/finished)",
}

#: per-evaluation datasets: name → (dtype, columns or None) — columns resolved at creation
EVAL_FIELDS = ("x", "f", "objectives", "constraints", "status", "generation")
#: per-generation datasets
GEN_FIELDS = ("evaluations", "restart", "popsize", "sigma", "mean", "best_f", "best_index",
              "feasible_fraction", "time", "hypervolume", "front_offset", "front_size")


def _create(grp, name, shape_tail, dtype, chunk_rows):
    # HDF5 chunks cannot have a zero extent: a width-0 table (a study without constraints)
    # gets chunks of width 1 and an unlimited width that stays 0
    chunk_tail = tuple(max(n, 1) for n in shape_tail)
    max_tail = tuple(None if n == 0 else n for n in shape_tail)
    return grp.create_dataset(
        name, shape=(0,) + shape_tail, maxshape=(None,) + max_tail, dtype=dtype,
        chunks=(max(chunk_rows, 1),) + chunk_tail, compression="gzip", shuffle=True)


def _append(ds, rows):
    rows = np.asarray(rows, dtype=ds.dtype)
    n = ds.shape[0]
    ds.resize(n + rows.shape[0], axis=0)
    ds[n:] = rows


class RunLogWriter:
    """Append-only writer of one run's log (use as a context manager)."""

    def __init__(self, path: Path, h5file):
        self.path = Path(path)
        self.f = h5file
        # dataset handles looked up once: a group lookup costs more than a small write
        self._ev = {k: h5file["evals"][k] for k in EVAL_FIELDS}
        self._gen = {k: h5file["gen"][k] for k in GEN_FIELDS}
        self._front = h5file["front/index"]

    @classmethod
    def create(cls, path: str | Path, *, attrs: dict, study_text: str, dimension: int,
               objective_names: list[str], constraint_names: list[str],
               chunk_rows: int) -> "RunLogWriter":
        import h5py

        path = Path(path)
        f = h5py.File(path, "w", libver=_LIBVER)
        try:
            f.attrs["schema_version"] = SCHEMA_VERSION
            f.attrs["units"] = json.dumps(UNITS)
            f.attrs["objective_names"] = json.dumps(objective_names)
            f.attrs["constraint_names"] = json.dumps(constraint_names)
            f.attrs["chunk_rows"] = int(chunk_rows)
            for k, v in attrs.items():
                f.attrs[k] = v if isinstance(v, (str, int, float)) else json.dumps(v)
            f.create_dataset("study_text", data=study_text, dtype=h5py.string_dtype())
            ev = f.create_group("evals")
            _create(ev, "x", (dimension,), "f8", chunk_rows)
            _create(ev, "f", (), "f8", chunk_rows)
            _create(ev, "objectives", (len(objective_names),), "f8", chunk_rows)
            _create(ev, "constraints", (len(constraint_names),), "f8", chunk_rows)
            _create(ev, "status", (), "i1", chunk_rows)
            _create(ev, "generation", (), "i4", chunk_rows)
            gen = f.create_group("gen")
            for name, tail, dt in (("evaluations", (), "i8"), ("restart", (), "i2"),
                                   ("popsize", (), "i4"), ("sigma", (), "f8"),
                                   ("mean", (dimension,), "f8"), ("best_f", (), "f8"),
                                   ("best_index", (), "i8"), ("feasible_fraction", (), "f8"),
                                   ("time", (), "f8"), ("hypervolume", (), "f8"),
                                   ("front_offset", (), "i8"), ("front_size", (), "i4")):
                _create(gen, name, tail, dt, 64)
            _create(f.create_group("front"), "index", (), "i8", 256)
            meta = f.create_group("meta")
            meta.create_dataset("state", data=np.array([RunState.RUNNING.code], dtype="i1"))
            meta.create_dataset("finished", data=np.array([np.nan]))
            meta.create_dataset("resumes", data=np.array([0], dtype="i4"))
            f.swmr_mode = True
            f.flush()
        except BaseException:
            f.close()
            raise
        return cls(path, f)

    @classmethod
    def reopen(cls, path: str | Path, generations: int) -> "RunLogWriter":
        """Continue a log from its first ``generations`` generations (drop anything later).

        The kept rows are copied into a new file that replaces the old one by rename, so the
        log is never left half-rewritten.  The resume counter is incremented.
        """
        import h5py

        path = Path(path)
        old = read_run(path)
        n_eval = int(old.gen["evaluations"][generations - 1]) if generations else 0
        tmp = path.with_name(f".{path.name}.resume.tmp")
        f = h5py.File(tmp, "w", libver=_LIBVER)
        try:
            for k, v in old.attrs.items():
                f.attrs[k] = v
            f.create_dataset("study_text", data=old.study_text, dtype=h5py.string_dtype())
            chunk = int(old.attrs.get("chunk_rows", 64))
            ev = f.create_group("evals")
            for name, arr in old.evals.items():
                ds = _create(ev, name, arr.shape[1:], arr.dtype, chunk)
                _append(ds, arr[:n_eval])
            gen = f.create_group("gen")
            for name, arr in old.gen.items():
                ds = _create(gen, name, arr.shape[1:], arr.dtype, 64)
                _append(ds, arr[:generations])
            n_front = (int(old.gen["front_offset"][generations - 1] + old.gen["front_size"]
                           [generations - 1]) if generations else 0)
            ds = _create(f.create_group("front"), "index", (), "i8", 256)
            _append(ds, old.front_index[:n_front])
            meta = f.create_group("meta")
            meta.create_dataset("state", data=np.array([RunState.RUNNING.code], dtype="i1"))
            meta.create_dataset("finished", data=np.array([np.nan]))
            meta.create_dataset("resumes", data=np.array([old.resumes + 1], dtype="i4"))
            f.flush()
            f.close()
            os.replace(tmp, path)
            f = h5py.File(path, "r+", libver=_LIBVER)
            f.swmr_mode = True
        except BaseException:
            try:
                f.close()
            except Exception:
                pass
            if tmp.exists():
                tmp.unlink()
            raise
        return cls(path, f)

    def append(self, gens: "Generation | list[Generation]") -> None:
        """Write one or more generations and flush (survives a process kill from here on)."""
        gens = [gens] if isinstance(gens, Generation) else list(gens)
        if not gens:
            return
        ev, gen = self._ev, self._gen
        cat = np.concatenate
        _append(ev["x"], cat([g.x for g in gens]))
        _append(ev["f"], cat([g.f for g in gens]))
        _append(ev["objectives"], cat([g.objectives for g in gens]))
        _append(ev["constraints"], cat([g.constraints for g in gens]))
        _append(ev["status"], cat([g.status for g in gens]))
        _append(ev["generation"], cat([np.full(g.x.shape[0], g.generation) for g in gens]))
        offset = self._front.shape[0]
        for g in gens:
            members = np.zeros(0, dtype=np.int64) if g.front_index is None else g.front_index
            g.front_offset, g.front_size = offset, int(members.size)
            offset += members.size
        _append(self._front, np.concatenate(
            [np.zeros(0, dtype=np.int64)] + [g.front_index for g in gens
                                             if g.front_index is not None]))
        for name in GEN_FIELDS:
            _append(gen[name], [getattr(g, name) for g in gens])
        self.f.flush()

    def finish(self, state: RunState = RunState.COMPLETE) -> None:
        self.f["meta/state"][0] = state.code
        self.f["meta/finished"][0] = time.time()
        self.f.flush()

    def close(self) -> None:
        if self.f:
            self.f.close()
            self.f = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


@dataclass
class RunLog:
    """A run log read into memory (all datasets as arrays)."""

    path: Path
    attrs: dict
    study_text: str
    evals: dict[str, np.ndarray]
    gen: dict[str, np.ndarray]
    state: RunState
    finished: float
    resumes: int
    front_index: np.ndarray = None  # all generations' archives, concatenated

    def front(self, generation: int | None = None) -> np.ndarray:
        """Evaluation indices of the non-dominated feasible archive after a generation
        (default: the last), shape (M,)."""
        if not self.generations or self.front_index is None:
            return np.zeros(0, dtype=np.int64)
        g = self.generations - 1 if generation is None else generation - 1
        o, n = int(self.gen["front_offset"][g]), int(self.gen["front_size"][g])
        return self.front_index[o : o + n]

    @property
    def objective_names(self) -> list[str]:
        return json.loads(self.attrs["objective_names"])

    @property
    def constraint_names(self) -> list[str]:
        return json.loads(self.attrs["constraint_names"])

    @property
    def state_name(self) -> str:
        return self.state.value

    @property
    def generations(self) -> int:
        return int(self.gen["evaluations"].shape[0])

    @property
    def evaluations(self) -> int:
        return int(self.gen["evaluations"][-1]) if self.generations else 0

    def best(self) -> dict | None:
        """The best feasible evaluation so far: index, x, f, objectives, or None."""
        if not self.generations or self.gen["best_index"][-1] < 0:
            return None
        i = int(self.gen["best_index"][-1])
        return {"index": i, "x": self.evals["x"][i], "f": float(self.evals["f"][i]),
                "objectives": self.evals["objectives"][i],
                "constraints": self.evals["constraints"][i],
                "generation": int(self.evals["generation"][i])}


def read_run(path: str | Path) -> RunLog:
    """Read a run log, also while another process is writing it (SWMR)."""
    import h5py

    path = Path(path)
    with h5py.File(path, "r", libver="latest", swmr=True) as f:
        for ds in ("evals/x", "gen/evaluations"):
            f[ds].refresh()
        # read generations first: the evaluation rows they count were flushed before them
        gen = {}
        for k in f["gen"]:
            f["gen"][k].refresh()
            gen[k] = f["gen"][k][()]
        ng = min(a.shape[0] for a in gen.values())
        gen = {k: v[:ng] for k, v in gen.items()}
        ne = int(gen["evaluations"][-1]) if ng else 0
        evals = {}
        for k in f["evals"]:
            f["evals"][k].refresh()
            evals[k] = f["evals"][k][:ne]
        front = None
        if "front" in f:
            f["front/index"].refresh()
            nf = int(gen["front_offset"][-1] + gen["front_size"][-1]) if ng else 0
            front = f["front/index"][:nf]
        meta = f["meta"]
        for k in meta:
            meta[k].refresh()
        attrs = {k: (v.decode() if isinstance(v, bytes) else v) for k, v in f.attrs.items()}
        return RunLog(path, attrs, f["study_text"].asstr()[()], evals, gen,
                      RunState.from_code(meta["state"][0]), float(meta["finished"][0]),
                      int(meta["resumes"][0]), front)


_LAST_FSYNC: dict[str, float] = {}
#: seconds between fsyncs of a run's checkpoint: rename-over is atomic for a killed process at
#: every generation; the fsync (against a power cut) is paid at most this often
FSYNC_INTERVAL = 10.0


def _file_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def save_checkpoint(path: str | Path, state) -> None:
    """Pickle ``state`` to ``path`` atomically (temporary file, rename; fsync every 10 s)."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            pickle.dump(state, fh, protocol=pickle.HIGHEST_PROTOCOL)
            os.chmod(tmp, _file_mode())
            now = time.monotonic()
            if now - _LAST_FSYNC.get(str(path), -1e9) >= FSYNC_INTERVAL:
                fh.flush()
                os.fsync(fh.fileno())
                _LAST_FSYNC[str(path)] = now
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def load_checkpoint(path: str | Path):
    with open(path, "rb") as fh:
        return pickle.load(fh)
