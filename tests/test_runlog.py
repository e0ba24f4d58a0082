"""Checkpoints are signed with the user's own key and loaded only when that key signed them;
the checksum of a generation's rows is the same whether taken while writing or after reading."""

from __future__ import annotations

import os
import pickle
import stat

import numpy as np
import pytest

from foilmap.store import runlog
from foilmap.store.runlog import (
    CheckpointError,
    checkpoint_problem,
    generation_digest,
    key_path,
    load_checkpoint,
    read_checkpoint_info,
    save_checkpoint,
)


@pytest.fixture(autouse=True)
def own_key(tmp_path, monkeypatch):
    """Every test keeps its key (and any home) in its own temporary folder."""
    monkeypatch.setenv("FOILMAP_CONFIG_DIR", str(tmp_path / "config"))
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    (tmp_path / "home").mkdir()
    return tmp_path / "config"


STATE = {"a": np.arange(5.0), "n": 3, "rng": np.random.RandomState(7)}
INFO = {"run": "p.s1", "generation": 4, "evaluations": 40, "digest": "ab" * 32}


def test_a_checkpoint_round_trips_with_its_header(tmp_path, own_key):
    p = tmp_path / "r.resume"
    save_checkpoint(p, STATE, INFO)
    state, info = load_checkpoint(p, with_info=True)
    assert np.array_equal(state["a"], STATE["a"]) and state["n"] == 3
    assert state["rng"].randn() == np.random.RandomState(7).randn()  # the generator's state
    assert {k: info[k] for k in INFO} == INFO and read_checkpoint_info(p)["generation"] == 4
    assert checkpoint_problem(p) is None
    # the key: in the configuration folder named by the environment, readable by its user alone
    assert key_path() == own_key / "checkpoint.key"
    assert stat.S_IMODE(os.stat(key_path()).st_mode) == 0o600
    assert stat.S_IMODE(os.stat(own_key).st_mode) == 0o700
    assert list((tmp_path / "home").iterdir()) == []  # nothing in the home folder


def test_a_checkpoint_another_key_signed_is_refused_in_one_line(tmp_path, monkeypatch):
    p = tmp_path / "r.resume"
    save_checkpoint(p, STATE, INFO)
    monkeypatch.setenv("FOILMAP_CONFIG_DIR", str(tmp_path / "someone-else"))
    with pytest.raises(CheckpointError) as exc:
        load_checkpoint(p)
    assert exc.value.kind == "unsigned" and "not signed by this user's key" in str(exc.value)
    assert len(str(exc.value).splitlines()) == 1
    assert "not signed" in checkpoint_problem(p)
    assert not (tmp_path / "someone-else").exists()  # checking creates no key


def test_a_bare_pickle_is_never_unpickled(tmp_path):
    # a checkpoint of the old format, or one crafted to run code when unpickled
    marker = tmp_path / "ran"

    class Evil:
        def __reduce__(self):
            return (open, (str(marker), "w"))

    p = tmp_path / "r.resume"
    p.write_bytes(pickle.dumps(Evil()))
    with pytest.raises(CheckpointError) as exc:
        load_checkpoint(p)
    assert exc.value.kind == "unsigned" and "older foilmap" in str(exc.value)
    assert not marker.exists()


def test_a_flipped_byte_or_a_cut_is_caught_before_unpickling(tmp_path):
    p = tmp_path / "r.resume"
    save_checkpoint(p, STATE, INFO)
    good = p.read_bytes()
    rng = np.random.default_rng(1)
    for _ in range(40):
        i = int(rng.integers(0, len(good)))
        bad = bytearray(good)
        bad[i] ^= 1 << int(rng.integers(0, 8))
        p.write_bytes(bytes(bad))
        with pytest.raises(CheckpointError) as exc:
            load_checkpoint(p)
        assert exc.value.kind in ("damaged", "unsigned")
        p.write_bytes(good[:i])
        with pytest.raises(CheckpointError) as exc:
            load_checkpoint(p)
        assert exc.value.kind in ("damaged", "unsigned"), i
    p.write_bytes(good)
    load_checkpoint(p)


def test_a_damaged_key_is_named_in_one_line(tmp_path, own_key):
    from foilmap.errors import InputError

    own_key.mkdir()
    (own_key / "checkpoint.key").write_text("not hex\n")
    runlog._KEYS.clear()
    with pytest.raises(InputError, match="checkpoint key .* is damaged"):
        save_checkpoint(tmp_path / "r.resume", STATE, INFO)


def test_the_digest_of_the_rows_written_is_the_digest_of_the_rows_read(tmp_path):
    from foilmap.run.single import execute_run
    from foilmap.store.folder import StudyFolder
    from foilmap.store.runlog import RunLogWriter, read_run
    from foilmap.store.studyfile import load_study_text

    from conftest import small_study

    st = load_study_text(small_study("dg", [1], 60))
    folder, st = StudyFolder.prepare(st, tmp_path / "o", None)
    execute_run(st, st.runs()[0], folder.path)
    path = folder.log_path("p.s1")
    log = read_run(path)
    digests = [generation_digest(log.evals, log.gen, log.front_index, g)
               for g in range(log.generations + 1)]
    assert digests[0] == "" and len(set(digests[1:])) == log.generations  # each its own
    w = RunLogWriter.reopen(path, log.generations, old=log)
    with w:
        assert w.digest() == digests[-1]
    cut = read_run(path, upto=3)
    assert cut.generations == 3 and cut.evaluations == int(log.gen["evaluations"][2])
    assert generation_digest(cut.evals, cut.gen, cut.front_index, 3) == digests[3]


def test_a_reopen_waits_for_a_reader_holding_the_log(tmp_path, monkeypatch):
    # a reader (foilmap status) opening the log just after a resume has put the rewritten log
    # in place and before it opens it for writing: HDF5 refuses the writer (errno 11) while
    # the reader holds the lock; the writer waits it out instead of failing the run.  The
    # reader is started inside that window, several times, for several lengths of hold
    import subprocess
    import sys
    import time

    from conftest import small_study

    from foilmap.run.single import execute_run
    from foilmap.store.folder import StudyFolder
    from foilmap.store.runlog import RunLogWriter, read_run
    from foilmap.store.studyfile import load_study_text

    st = load_study_text(small_study("rd", [1], 60))
    folder, st = StudyFolder.prepare(st, tmp_path / "o", None)
    execute_run(st, st.runs()[0], folder.path)
    path = folder.log_path("p.s1")
    hold = ("import h5py, sys, time\n"
            "f = h5py.File(sys.argv[1], 'r')\nprint('held', flush=True)\n"
            "time.sleep(float(sys.argv[2]))\nf.close()\n")
    replace = os.replace
    readers = []

    def replace_then_read(src, dst):
        replace(src, dst)
        r = subprocess.Popen([sys.executable, "-c", hold, str(dst), str(held)],
                             stdout=subprocess.PIPE, text=True)
        assert r.stdout.readline().strip() == "held"
        readers.append((r, time.monotonic()))

    monkeypatch.setattr(runlog.os, "replace", replace_then_read)
    for held in (0.3, 0.8, 1.5):
        log = read_run(path)
        w = RunLogWriter.reopen(path, log.generations, old=log)
        opened = time.monotonic()
        w.close()
        reader, since = readers[-1]
        reader.wait(timeout=30)
        assert opened - since >= 0.8 * held  # it met the lock and waited for the reader
        assert read_run(path).generations == log.generations


def _cut_hdf5(tmp_path):
    """An HDF5 file of the logs' superblock layout, and the same file cut 200 bytes short."""
    import h5py

    p = tmp_path / "r.h5"
    with h5py.File(p, "w", libver="latest") as f:
        f.create_dataset("x", data=np.arange(1000.0))
    whole = p.read_bytes()
    p.write_bytes(whole[:-200])
    return p, whole


def test_a_short_log_is_named_at_once_by_the_lock_holder_and_after_a_wait_by_readers(
        tmp_path, monkeypatch):
    # the run's lock holder (a resume) reads a short log as truncated at once; a reader
    # (status, beside a live writer) gives a writer's flush time before it says so
    p, _ = _cut_hdf5(tmp_path)
    sleeps = []
    monkeypatch.setattr(runlog.time, "sleep", sleeps.append)
    with pytest.raises(OSError, match="is truncated"):
        runlog.read_run(p, settle=False)
    assert sleeps == []
    with pytest.raises(OSError, match="is truncated"):
        runlog.read_run(p)
    assert len(sleeps) == 5 and sum(sleeps) == pytest.approx(0.75)


def test_a_log_that_a_writer_lengthens_meanwhile_is_read(tmp_path, monkeypatch):
    p, whole = _cut_hdf5(tmp_path)
    monkeypatch.setattr(runlog.time, "sleep", lambda s: p.write_bytes(whole))
    runlog._check_length(p)  # the flush landed during the first wait: no error
    p.write_bytes(whole[:-200])
    with pytest.raises(OSError, match=r"is truncated \(\d+ of \d+ bytes\)"):
        runlog._check_length(p, settle=False)


def test_the_key_lives_in_the_configuration_folder_the_system_names(tmp_path, monkeypatch):
    # FOILMAP_CONFIG_DIR first, then XDG_CONFIG_HOME, then ~/.config (the XDG base directory
    # specification's default)
    monkeypatch.setenv("FOILMAP_CONFIG_DIR", str(tmp_path / "own"))
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "xdg"))
    assert key_path() == tmp_path / "own" / runlog.KEY_NAME
    monkeypatch.delenv("FOILMAP_CONFIG_DIR")
    assert key_path() == tmp_path / "xdg" / "foilmap" / runlog.KEY_NAME
    monkeypatch.delenv("XDG_CONFIG_HOME")
    assert key_path() == tmp_path / "home" / ".config" / "foilmap" / runlog.KEY_NAME


def test_a_generations_digest_covers_its_own_archive_rows_and_no_others():
    evals = {k: np.arange(6.0) for k in runlog.EVAL_FIELDS}
    gen = {k: np.arange(3.0) for k in runlog.GEN_FIELDS}
    gen["evaluations"] = np.array([2, 4, 6])
    gen["front_offset"], gen["front_size"] = np.array([0, 1, 3]), np.array([1, 2, 2])
    front = np.arange(5)
    before = [generation_digest(evals, gen, front, g) for g in (1, 2, 3)]
    changed = front.copy()
    changed[2] = 99  # a row of generation 2's archive (rows 1 and 2)
    after = [generation_digest(evals, gen, changed, g) for g in (1, 2, 3)]
    assert after[0] == before[0] and after[2] == before[2] and after[1] != before[1]
    # and its own evaluation rows (rows 2 and 3), not its neighbours'
    evals2 = {k: v.copy() for k, v in evals.items()}
    evals2[runlog.EVAL_FIELDS[0]][3] = -1.0
    again = [generation_digest(evals2, gen, front, g) for g in (1, 2, 3)]
    assert again[0] == before[0] and again[2] == before[2] and again[1] != before[1]


def test_a_file_hdf5_cannot_close_is_kept_and_the_process_leaves_without_collecting_it():
    import subprocess
    import sys

    code = """
import sys
from foilmap.store import runlog

class Refusing:  # what h5py does on a full disk: close raises, the file stays unclosable
    def close(self):
        raise RuntimeError("file write failed: No space left on device")

runlog.leave_if_unclosed(5)  # nothing held: returns
runlog.check_writable_process()  # nor raises
try:
    runlog.close_or_keep(Refusing(), "a dataset")
except RuntimeError:
    pass
assert len(runlog.UNCLOSED) == 1 and runlog.UNCLOSED[0][1] == ("a dataset",)
try:  # no later run log is begun in this process: the error names the refusal
    runlog.check_writable_process()
except OSError as exc:
    assert "No space left on device" in str(exc)
else:
    raise AssertionError("a spoilt process began a run log")
class Freed:  # what h5py's leftover objects of that file raise when freed
    def __init__(self, exc):
        self.exc = exc
    def __del__(self):
        raise self.exc

runlog.quiet_refused_writes()
Freed(RuntimeError("Can't decrement id ref count (file write failed: errno = 28)"))
Freed(ValueError("another fault"))  # still printed
print("leaving", flush=False)
runlog.leave_if_unclosed(7)
print("not reached")
"""
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert (r.returncode, r.stdout) == (7, "leaving\n")
    assert "another fault" in r.stderr and "write failed" not in r.stderr, r.stderr
