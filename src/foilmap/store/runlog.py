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

import hashlib
import hmac
import json
import os
import pickle
import secrets
import struct
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from foilmap.design.results import Generation, RunState
from foilmap.errors import InputError

__all__ = [
    "SCHEMA_VERSION",
    "RunLogWriter",
    "RunLog",
    "read_run",
    "save_checkpoint",
    "load_checkpoint",
    "read_checkpoint_info",
    "checkpoint_problem",
    "CheckpointError",
    "generation_digest",
    "key_path",
    "KEY_ENV",
    "EVAL_FIELDS",
    "GEN_FIELDS",
]

SCHEMA_VERSION = "1.1"
_LIBVER = ("v110", "v110")
#: seconds a writer waits for readers to let go of a log's file lock (a ``foilmap status``
#: reading it just as a resume reopens it) before the open fails
LOCK_WAIT = 10.0
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


#: HDF5 files whose close failed (a write the disk refused: full, or gone).  HDF5 cannot
#: close such a file later either: collecting its objects crashes the process (SIGSEGV in
#: libhdf5), so they are kept here until the process ends.  foilmap's own processes (pool
#: workers, the command) then leave without collecting them: :func:`leave_if_unclosed`.
UNCLOSED: list = []


def close_or_keep(f, *handles, cause: BaseException | None = None) -> None:
    """Close an HDF5 file; when HDF5 fails to (it re-raises), keep the file and ``handles``
    (its datasets) in :data:`UNCLOSED`, with the error that made the file unclosable
    (``cause``, the refused write, when the caller has it), so that they are never
    collected."""
    try:
        f.close()
    except (OSError, RuntimeError) as exc:
        UNCLOSED.append((f, handles, f"{cause}; then {exc}" if cause is not None else str(exc)))
        raise


def check_writable_process() -> None:
    """Raise OSError when this process holds a file HDF5 could not close (:data:`UNCLOSED`):
    HDF5's state in the process is then spoilt for other files too (a later file fails with
    errors of HDF5's own), so no run log is begun here; the error names the first refusal."""
    if UNCLOSED:
        raise OSError(f"a run log of this process could not be closed after the disk refused a "
                      f"write, so HDF5 cannot write logs in it any more ({UNCLOSED[0][2]})")


def quiet_refused_writes() -> None:
    """Drop, in this process, the messages h5py prints ("Exception ignored in ... __dealloc__")
    when it frees an object of a file whose writes the disk refused: after a full disk each
    leftover object of that file says so with a traceback, while the run's failure is already
    reported in one line.  Any other unraisable exception is printed as before.  Only for a
    process of foilmap's own (the command, a pool worker)."""
    previous = sys.unraisablehook

    def hook(unraisable) -> None:
        exc = unraisable.exc_value
        if isinstance(exc, (RuntimeError, OSError)) and "write failed" in str(exc):
            return
        previous(unraisable)

    sys.unraisablehook = hook


def leave_if_unclosed(code: int) -> None:
    """End this process at once with ``code`` (streams flushed, nothing collected) if it holds
    a file HDF5 could not close (:data:`UNCLOSED`); return otherwise.  Only for a process of
    foilmap's own, at its very end."""
    if UNCLOSED:
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (OSError, ValueError):
                pass
        os._exit(code)


class RunLogWriter:
    """Append-only writer of one run's log (use as a context manager)."""

    def __init__(self, path: Path, h5file):
        self.path = Path(path)
        self.f = h5file
        # dataset handles looked up once: a group lookup costs more than a small write
        self._ev = {k: h5file["evals"][k] for k in EVAL_FIELDS}
        self._gen = {k: h5file["gen"][k] for k in GEN_FIELDS}
        self._front = h5file["front/index"]
        self._meta = {k: h5file["meta"][k] for k in ("state", "finished")}

    @classmethod
    def create(cls, path: str | Path, *, attrs: dict, study_text: str, dimension: int,
               objective_names: list[str], constraint_names: list[str],
               chunk_rows: int, resumes: int = 0) -> "RunLogWriter":
        import h5py

        path = Path(path)
        f = h5py.File(path, "w", libver=_LIBVER)
        ev = gen = front = meta = None  # held on failure with the file (close_or_keep)
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
            front = f.create_group("front")
            _create(front, "index", (), "i8", 256)
            meta = f.create_group("meta")
            meta.create_dataset("state", data=np.array([RunState.RUNNING.code], dtype="i1"))
            meta.create_dataset("finished", data=np.array([np.nan]))
            meta.create_dataset("resumes", data=np.array([resumes], dtype="i4"))
            f.swmr_mode = True
            f.flush()
        except BaseException as exc:
            close_or_keep(f, ev, gen, front, meta, cause=exc)
            raise
        return cls(path, f)

    @classmethod
    def reopen(cls, path: str | Path, generations: int, old: "RunLog | None" = None
               ) -> "RunLogWriter":
        """Continue a log from its first ``generations`` generations (drop anything later).

        The kept rows are copied into a new file that replaces the old one by rename, so the
        log is never left half-rewritten.  The resume counter is incremented.  ``old`` is the
        log as already read (at least its first ``generations`` generations).
        """
        import h5py

        path = Path(path)
        old = old if old is not None else read_run(path)
        n_eval = int(old.gen["evaluations"][generations - 1]) if generations else 0
        tmp = path.with_name(f".{path.name}.resume.tmp")
        f = h5py.File(tmp, "w", libver=_LIBVER)
        ev = gen = ds = meta = None  # held on failure with the file (close_or_keep)
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
            f = _open_for_writing(path)
            f.swmr_mode = True
        except BaseException as exc:
            try:
                close_or_keep(f, ev, gen, ds, meta, cause=exc)
            except (OSError, RuntimeError):
                pass  # kept (UNCLOSED); the first error is the one to raise
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

    @property
    def generations(self) -> int:
        return int(self._gen["evaluations"].shape[0])

    def digest(self) -> str:
        """The checksum of the last generation's rows as written (see :func:`generation_digest`),
        read back from the file: what a resume recomputes from the log."""
        return generation_digest(self._ev, self._gen, self._front, self.generations)

    def finish(self, state: RunState = RunState.COMPLETE) -> None:
        self._meta["state"][0] = state.code
        self._meta["finished"][0] = time.time()
        self.f.flush()

    def close(self, cause: BaseException | None = None) -> None:
        f, self.f = self.f, None
        if f:
            close_or_keep(f, self._ev, self._gen, self._front, self._meta, cause=cause)

    def __enter__(self):
        return self

    def __exit__(self, kind, exc, tb):
        self.close(cause=exc)  # exc: a refused write names the disk in a later run's error
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


def generation_digest(evals, gen, front_index, g: int) -> str:
    """SHA-256 of generation ``g``'s rows (counted from 1): its evaluation rows, its row of every
    ``gen/*`` dataset and its archive in ``front/index``, each with its dtype and shape.  Works
    on arrays read into memory (:class:`RunLog`) and on open datasets alike; ``""`` for g = 0.
    The checkpoint carries the digest of its generation, so a resume can tell whether the log
    it continues holds the very rows the checkpoint followed."""
    if g <= 0:
        return ""
    h = hashlib.sha256()

    def add(name, arr):
        arr = np.ascontiguousarray(arr)
        h.update(f"{name}:{arr.dtype.str}:{arr.shape};".encode())
        h.update(arr.tobytes())

    end = int(gen["evaluations"][g - 1])
    start = int(gen["evaluations"][g - 2]) if g > 1 else 0
    for k in EVAL_FIELDS:
        add(k, evals[k][start:end])
    for k in GEN_FIELDS:
        add(k, gen[k][g - 1 : g])
    if front_index is not None:
        o, n = int(gen["front_offset"][g - 1]), int(gen["front_size"][g - 1])
        add("front", front_index[o : o + n])
    return h.hexdigest()


def read_run(path: str | Path, upto: int | None = None, settle: bool = True) -> RunLog:
    """Read a run log, also while another process is writing it (SWMR).

    ``upto`` reads only the first ``upto`` generations (and their evaluations and archives):
    what a resume keeps of a log whose later rows are damaged.  A damaged file raises
    ``OSError``, ``KeyError`` or ``ValueError`` (HDF5's other errors become ``OSError``).
    ``settle`` gives a live writer's flush a second to lengthen a file that reads short; the
    holder of the run's lock (nobody else writes the log then) passes False, and a truncated
    log is then named at once."""
    try:
        return _read_run(Path(path), upto, settle)
    except (OSError, KeyError, ValueError):
        raise
    except Exception as exc:  # noqa: BLE001 - h5py reports some damage as RuntimeError
        raise OSError(f"{type(exc).__name__}: {exc}") from exc


def _check_length(path: Path, settle: bool = True) -> None:
    """Raise ``OSError`` when the file is shorter than the end its HDF5 superblock records (a
    truncated log: HDF5's SWMR reader does not check this itself, and then retries its reads
    of the missing metadata for minutes).  A live writer's flush can leave the file short for a
    moment, so the check is repeated for 0.75 s before it counts (when ``settle``)."""
    tries = 6 if settle else 1
    for attempt in range(tries):
        with open(path, "rb") as fh:
            head = fh.read(48)
            size = os.fstat(fh.fileno()).st_size
        if len(head) < 8 or head[:8] != b"\x89HDF\r\n\x1a\n":
            raise OSError(f"log {path.name} is not an HDF5 file ({size} bytes)")
        if len(head) < 44:
            raise OSError(f"log {path.name} is truncated ({size} bytes)")
        if head[8] not in (2, 3):
            return  # an older superblock layout: HDF5 checks it itself
        width = head[9]
        if width != 8:
            return
        (end,) = struct.unpack("<Q", head[12 + 2 * width:12 + 3 * width])
        if size >= end:
            return
        if attempt + 1 < tries:
            time.sleep(0.05 * (attempt + 1))
    raise OSError(f"log {path.name} is truncated ({size} of {end} bytes)")


def _open_for_writing(path: Path):
    """Open a closed log for writing, waiting up to :data:`LOCK_WAIT` seconds while a reader
    holds its file lock (HDF5 refuses the open with errno 11 meanwhile; readers hold it for
    the moment of a read)."""
    import errno

    import h5py

    deadline = time.monotonic() + LOCK_WAIT
    while True:
        try:
            return h5py.File(path, "r+", libver=_LIBVER)
        except OSError as exc:
            locked = exc.errno in (errno.EAGAIN, errno.EACCES) or "lock" in str(exc).lower()
            if not locked or time.monotonic() > deadline:
                raise
            time.sleep(0.02)


def _read_run(path: Path, upto: int | None, settle: bool = True) -> RunLog:
    import h5py

    _check_length(path, settle)
    with h5py.File(path, "r", libver="latest", swmr=True) as f:
        for ds in ("evals/x", "gen/evaluations"):
            f[ds].refresh()
        # read generations first: the evaluation rows they count were flushed before them
        gen = {}
        for k in f["gen"]:
            f["gen"][k].refresh()
            gen[k] = f["gen"][k][()] if upto is None else f["gen"][k][:upto]
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
            front = f["front/index"][()]
        # a write cut short (a full disk) can leave generation rows whose evaluations or
        # archive never reached the file, or rows resized but never written (they read as
        # zeros): such a log is read up to its last whole generation
        counts = gen["evaluations"][:ng]
        grows = np.flatnonzero(np.diff(np.concatenate([[0], counts])) <= 0)
        if grows.size:
            ng = int(grows[0])
        have_e = min(a.shape[0] for a in evals.values())
        have_f = front.shape[0] if front is not None else None
        while ng and (int(gen["evaluations"][ng - 1]) > have_e or (have_f is not None and int(
                gen["front_offset"][ng - 1] + gen["front_size"][ng - 1]) > have_f)):
            ng -= 1
        if ng < gen["evaluations"].shape[0]:
            gen = {k: v[:ng] for k, v in gen.items()}
            ne = int(gen["evaluations"][-1]) if ng else 0
            evals = {k: v[:ne] for k, v in evals.items()}
        if front is not None:
            front = front[:int(gen["front_offset"][-1] + gen["front_size"][-1]) if ng else 0]
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

#: the environment variable naming the folder of foilmap's own user configuration (default
#: ``$XDG_CONFIG_HOME/foilmap``, else ``~/.config/foilmap``), where the checkpoint key lives
KEY_ENV = "FOILMAP_CONFIG_DIR"
KEY_NAME = "checkpoint.key"
#: first bytes of a signed checkpoint (format 2); format 1 was a bare pickle
_MAGIC = b"FMCKPT2\n"
_KEYS: dict[str, bytes] = {}


class CheckpointError(Exception):
    """A checkpoint that cannot be used: ``kind`` is ``"missing"``, ``"damaged"`` or
    ``"unsigned"``; ``str(err)`` is one line."""

    def __init__(self, kind: str, message: str):
        super().__init__(message)
        self.kind = kind


def key_path() -> Path:
    """Where the user's checkpoint key is kept (see :data:`KEY_ENV`)."""
    env = os.environ.get(KEY_ENV)
    if env:
        return Path(env) / KEY_NAME
    xdg = os.environ.get("XDG_CONFIG_HOME")
    return (Path(xdg) if xdg else Path.home() / ".config") / "foilmap" / KEY_NAME


def _key(create: bool) -> bytes | None:
    """The user's checkpoint key (32 random bytes, hex in a file readable by the user alone);
    created on first use when ``create``; None when there is none and ``create`` is False."""
    p = key_path()
    if str(p) in _KEYS:
        return _KEYS[str(p)]
    try:
        text = p.read_text(encoding="ascii").strip()
    except FileNotFoundError:
        if not create:
            return None
        p.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
        tmp = p.with_name(f".{KEY_NAME}.{os.getpid()}.tmp")
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
        try:
            with os.fdopen(fd, "w") as fh:
                fh.write(secrets.token_hex(32) + "\n")
                fh.flush()
                os.fsync(fh.fileno())
            try:
                os.link(tmp, p)  # never replaces a key another process made first
            except FileExistsError:
                pass
        finally:
            tmp.unlink(missing_ok=True)
        text = p.read_text(encoding="ascii").strip()
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the checkpoint key {str(p)!r}: {exc}") from None
    try:
        key = bytes.fromhex(text)
    except ValueError:
        key = b""
    if len(key) < 16:
        raise InputError(f"the checkpoint key {str(p)!r} is damaged (not a hex key of 32 "
                         "bytes); remove it (checkpoints it signed will then restart their runs)")
    _KEYS[str(p)] = key
    return key


def _file_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def save_checkpoint(path: str | Path, state, info: dict | None = None) -> None:
    """Write the signed checkpoint of ``state`` to ``path`` atomically (temporary file, rename;
    fsync every 10 s).

    The file is ``MAGIC, header length (4 bytes), header (JSON: run, generation, evaluations,
    digest of the generation's log rows, payload length), HMAC-SHA256 (32 bytes), payload (the
    pickled state)``; the HMAC, keyed by the user's own key (:func:`key_path`), covers all of
    it, so :func:`load_checkpoint` unpickles only what that key signed.
    """
    path = Path(path)
    payload = pickle.dumps(state, protocol=pickle.HIGHEST_PROTOCOL)
    header = json.dumps({"format": 2, **(info or {}), "payload_bytes": len(payload)},
                        sort_keys=True).encode()
    head = _MAGIC + struct.pack(">I", len(header)) + header
    mac = hmac.new(_key(create=True), head + payload, hashlib.sha256).digest()
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(head)
            fh.write(mac)
            fh.write(payload)
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


def _split(path: Path) -> tuple[dict, bytes, bytes, bytes]:
    """(header, signed bytes before the MAC, MAC, payload) of a checkpoint, checked for shape
    only; raises :class:`CheckpointError` (missing, damaged)."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise CheckpointError("missing", f"checkpoint {path.name} is missing") from None
    except OSError as exc:
        raise CheckpointError("damaged", f"checkpoint {path.name} cannot be read "
                              f"({exc.strerror or exc})") from None
    if not data.startswith(_MAGIC):
        kind = "an unsigned checkpoint of an older foilmap" if data[:1] == b"\x80" else \
            "not a foilmap checkpoint"
        raise CheckpointError("unsigned" if data[:1] == b"\x80" else "damaged",
                              f"checkpoint {path.name} is {kind}")
    n0 = len(_MAGIC) + 4
    if len(data) < n0:
        raise CheckpointError("damaged", f"checkpoint {path.name} is truncated "
                              f"({len(data)} bytes)")
    (hlen,) = struct.unpack(">I", data[len(_MAGIC):n0])
    try:
        header = json.loads(data[n0:n0 + hlen])
        if not isinstance(header, dict):
            raise ValueError
        size = int(header["payload_bytes"])
    except (ValueError, KeyError, TypeError):
        raise CheckpointError("damaged", f"checkpoint {path.name} has a damaged header "
                              f"({len(data)} bytes)") from None
    body = n0 + hlen + 32
    if len(data) != body + size:
        raise CheckpointError("damaged", f"checkpoint {path.name} is truncated or padded "
                              f"({len(data)} bytes of {body + size})")
    return header, data[:n0 + hlen], data[n0 + hlen:body], data[body:]


def read_checkpoint_info(path: str | Path) -> dict:
    """A checkpoint's header (run, generation, evaluations, digest), its shape checked but its
    signature not: for status lines, never for loading."""
    return _split(Path(path))[0]


def load_checkpoint(path: str | Path, with_info: bool = False):
    """The search state of a checkpoint that the user's key signed (and its header with
    ``with_info``); raises :class:`CheckpointError` for a missing, damaged or unsigned one.
    Nothing is unpickled before the signature is checked."""
    path = Path(path)
    header, head, mac, payload = _split(path)
    key = _key(create=False)
    if key is None or not hmac.compare_digest(
            mac, hmac.new(key, head + payload, hashlib.sha256).digest()):
        raise CheckpointError("unsigned", f"checkpoint {path.name} is not signed by this "
                              f"user's key ({key_path()}), or is damaged; not loaded")
    try:
        state = pickle.loads(payload)
    except Exception as exc:  # signed by us, so only a defect of ours; still one line
        raise CheckpointError("damaged", f"checkpoint {path.name} cannot be unpickled "
                              f"({type(exc).__name__})") from None
    return (state, header) if with_info else state


def checkpoint_problem(path: str | Path) -> str | None:
    """One line naming what is wrong with an existing checkpoint (damaged, not signed by this
    user's key), or None when it is sound or absent.  Creates no key."""
    path = Path(path)
    if not path.exists():
        return None
    try:
        _, head, mac, payload = _split(path)
    except CheckpointError as exc:
        return str(exc)
    key = _key(create=False)
    if key is None or not hmac.compare_digest(
            mac, hmac.new(key, head + payload, hashlib.sha256).digest()):
        return (f"checkpoint {path.name} is not signed by this user's key ({key_path()}), or "
                "is damaged")
    return None
