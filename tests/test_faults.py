"""Faults of the kind machines have, each followed at once by ``resume``: SIGKILL at random
times to the driver alone, to one worker and to both; logs and checkpoints truncated at random
offsets; a full disk; a read-only folder.  Every loop ends with a consistent folder holding the
same bits as an uninterrupted run.  The whole loops are slow; quick forms (few tries, in-process
where possible) run in the quick subset.  Figures are printed (``pytest -s``)."""

from __future__ import annotations

import os
import random
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from conftest import reference_folder, small_study
from faultkit import (
    index_states,
    notes_in,
    start,
    wait_gone,
    wait_running,
    workers_of,
)
from test_search import logs_equal

from foilmap.run import single
from foilmap.report.study import damage_lines
from foilmap.run.single import execute_run, recover
from foilmap.store.folder import StudyFolder
from foilmap.store.lock import Lock
from foilmap.store.runlog import read_run
from foilmap.store.studyfile import load_study_text

RUNS = ("p.s1", "p.s2")


@pytest.fixture(scope="module")
def key_dir(tmp_path_factory):
    """One checkpoint key for the module's processes, in a temporary folder (never the home)."""
    d = tmp_path_factory.mktemp("config")
    mp = pytest.MonkeyPatch()
    mp.setenv("FOILMAP_CONFIG_DIR", str(d))
    yield d
    mp.undo()


def study_text(evals: int) -> str:
    return small_study("faults", [1, 2], evals)


def finish(out: Path, ref: Path) -> subprocess.CompletedProcess:
    """The last resume: it must finish the study with no run restarted from its seed (nothing
    consistent lost), and give the uninterrupted run's bits."""
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out), "--workers", "2"],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    check_same_bits(out, ref)
    return r


def check_same_bits(out: Path, ref: Path) -> None:
    for run_id in RUNS:
        logs_equal(ref / "runs" / f"{run_id}.h5", out / "runs" / f"{run_id}.h5")
        assert read_run(out / "runs" / f"{run_id}.h5").state_name == "complete"
        assert not (out / "runs" / f"{run_id}.resume").exists()
        with Lock(out / "runs" / f"{run_id}.lock", "test").acquire(wait=0):
            pass  # nobody holds the run any more
    assert set(index_states(out).values()) == {"complete"}
    with Lock(out / "writer.lock", "test").acquire(wait=0):
        pass


@pytest.fixture(scope="module")
def loop_ref(tmp_path_factory, key_dir):
    """The uninterrupted study of the kill loops (two runs of 6,000 evaluations).

    Sized to the tries: a try commits a few hundred evaluations a run before its kill, so
    eight tries leave most of the study to the last resume.  With 12,000 that resume took 14 s
    of each loop's 35; with 4,000 a kind of eight tries had one end first on an idle machine
    (7 landed, 4 are needed): 6,000 leaves room for a machine twice as fast."""
    return reference_folder(tmp_path_factory, study_text(6000))


def prepared(out: Path) -> bool:
    """Whether a driver got as far as writing the study into the folder: one killed earlier
    (during its start-up, on a loaded machine) leaves nothing to resume, and the user runs the
    study again."""
    return (out / "study.toml").exists()


def kill_loop(kind: str, tries: int, sf: Path, ref: Path, out: Path, seed: int) -> dict:
    """``tries`` SIGKILLs at random times to the driver alone, one worker, or both, each try
    followed at once by a resume (the next try's process); then a resume to the end."""
    rng = random.Random(seed)
    fig = {"kind": kind, "tries": 0, "landed": 0, "before_progress": 0, "finished_first": 0,
           "orphan_exit_s": [], "notes": 0}
    orphans: list[int] = []
    killed_at = 0.0
    for k in range(tries):
        args = (["resume", out] if prepared(out) else ["run", sf, "--out", out]) + ["--workers",
                                                                                   "2"]
        proc = start(args)
        if orphans:  # the previous driver's workers, killed with it: they must go within 1 s
            wait_gone(orphans, 10.0)
            fig["orphan_exit_s"].append(time.monotonic() - killed_at)
            orphans = []
        fig["tries"] += 1
        early = rng.random() < 0.25
        if early:  # a random moment of the start-up (importing, spawning workers, reopening)
            time.sleep(rng.uniform(0.1, 2.0))
        elif not wait_running(out, proc, RUNS):
            fig["finished_first"] += 1
            proc.communicate(timeout=60)
            continue
        else:
            time.sleep(rng.uniform(0.0, 1.5))
        if proc.poll() is not None:
            fig["finished_first"] += 1
            proc.communicate(timeout=60)
            continue
        fig["before_progress"] += early
        if kind == "driver":
            orphans = workers_of(proc.pid)
            os.kill(proc.pid, signal.SIGKILL)
            killed_at = time.monotonic()
        elif kind == "both":
            os.killpg(proc.pid, signal.SIGKILL)
        else:
            t0 = time.monotonic()
            while not workers_of(proc.pid) and proc.poll() is None and time.monotonic() - t0 < 60:
                time.sleep(0.02)
            ws = workers_of(proc.pid)
            if ws:
                os.kill(rng.choice(ws), signal.SIGKILL)
        _, err = proc.communicate(timeout=120)
        fig["landed"] += 1
        fig["notes"] += len(notes_in(err))
        assert "Traceback" not in err, err
        if kind == "worker":  # the driver ends by itself, naming the interrupted runs
            assert proc.returncode in (0, 1), err
    if orphans:
        wait_gone(orphans, 10.0)
        fig["orphan_exit_s"].append(time.monotonic() - killed_at)
    r = finish(out, ref)
    fig["notes"] += len(notes_in(r.stderr))
    assert fig["notes"] == 0, "a run was restarted from its seed: something consistent was lost"
    if fig["orphan_exit_s"]:
        # a worker whose driver is gone commits and stops within a second (slack for a busy
        # machine); so does the resume that started at once: its workers waited for the lock
        # within a second on an idle machine (0.60 s at worst over 20 tries); the slack covers
        # a worker whose generation runs beside another test on a 2-core machine
        assert max(fig["orphan_exit_s"]) < 4.0, fig["orphan_exit_s"]
    return fig


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["driver", "worker", "both"])
def test_random_kills_then_resume_give_the_same_bits(tmp_path, loop_ref, kind):
    # eight tries a kind (twenty at first, then ten: the loop's cost is its start-ups, and
    # eight random moments a kind, three kinds, still cover the start-up, the search and the
    # commit)
    sf, ref = loop_ref
    fig = kill_loop(kind, 8, sf, ref, tmp_path / "cut", seed={"driver": 1, "worker": 2,
                                                               "both": 3}[kind])
    assert fig["landed"] >= 4, fig  # most tries really killed a running study
    worst = max(fig["orphan_exit_s"], default=float("nan"))
    print(f"\nkill loop ({kind}): {fig['tries']} tries, {fig['landed']} kills landed "
          f"({fig['before_progress']} during start-up), {fig['finished_first']} ended first; "
          f"orphans gone within {worst:.3f} s at worst; seed restarts {fig['notes']}; "
          "same bits: yes")


@pytest.fixture(scope="module")
def quick_ref(tmp_path_factory, key_dir):
    """The uninterrupted quick study (two runs of 3,000 evaluations)."""
    return reference_folder(tmp_path_factory, study_text(3000))


def test_a_killed_driver_its_orphans_and_an_immediate_resume(tmp_path, quick_ref):
    # the quick form: SIGKILL to the driver alone mid-run (this seed waits for the running
    # study), its orphaned workers gone within seconds, a resume at once, the same bits
    sf, ref = quick_ref
    fig = kill_loop("driver", 1, sf, ref, tmp_path / "cut", seed=11)
    assert fig["landed"] == 1 and fig["before_progress"] == 0 and len(fig["orphan_exit_s"]) == 1


# --- damaged files, in-process (quick) and through real processes (slow) ------------------------


def in_process_study(tmp_path, evals=400):
    st = load_study_text(study_text(evals))
    ref, _ = StudyFolder.prepare(st, tmp_path / "ref", None)
    for r in st.runs():
        execute_run(st, r, ref.path)
    return st, ref.path


def stop_after(n: int):
    count = [0]

    def stop() -> bool:
        count[0] += 1
        return count[0] >= n

    return stop


def truncate_one(out: Path, rng: random.Random, runs) -> tuple[str, Path] | None:
    files = [(r, p) for r in runs for p in (out / "runs" / f"{r}.h5", out / "runs" / f"{r}.resume")
             if p.exists() and p.stat().st_size > 0]
    if not files:
        return None
    run_id, path = rng.choice(files)
    size = path.stat().st_size
    with open(path, "r+b") as fh:
        fh.truncate(rng.randrange(0, size))
    return run_id, path


def test_truncated_logs_and_checkpoints_in_process(tmp_path, monkeypatch, key_dir):
    # quick form: a run stopped after a random number of generations, one of its files cut at
    # a random offset; status names the damage of that run alone, resume says in one line
    # what it keeps, and the study ends with the bits of an uninterrupted one
    monkeypatch.setattr(single, "COMMIT_INTERVAL", 0.0)  # a commit every generation
    st, ref = in_process_study(tmp_path)
    folder, st = StudyFolder.prepare(st, tmp_path / "cut", None)
    out = folder.path
    rng = random.Random(5)
    cut = 0
    for _ in range(6):
        for r in st.runs():
            try:
                execute_run(st, r, out, should_stop=stop_after(rng.randint(1, 6)))
            except SystemExit:
                pass
        hit = truncate_one(out, rng, RUNS)
        if hit is None:
            break
        run_id, path = hit
        cut += 1
        rows = {row["run"]: row for row in StudyFolder(out).status()["runs"]}
        assert rows[run_id].get("damage"), rows[run_id]  # status names the damage ...
        for other in set(RUNS) - {run_id}:
            assert not rows[other].get("damage")  # ... of that run alone
        if cut == 1:  # and so does the command, in a line of its own
            r = subprocess.run([sys.executable, "-m", "foilmap.cli", "status", str(out)],
                               capture_output=True, text=True, timeout=120)
            assert r.returncode == 0, r.stderr
            named = [line for line in r.stdout.splitlines() if line.startswith("damage: run ")]
            assert len(named) == 1 and named[0].startswith(f"damage: run {run_id}: "), r.stdout
        notes = {}
        for r in RUNS:
            _, _, _, note = recover(folder.log_path(r), folder.checkpoint_path(r), r)
            notes[r] = note
        assert notes[run_id] is not None and len(notes[run_id].splitlines()) == 1
        assert notes[run_id].startswith(f"run {run_id}: ")
        assert ("restarts from its seed" in notes[run_id]) or ("keeps its" in notes[run_id])
        if path.suffix == ".resume" and read_run(path.with_suffix(".h5")).generations:
            assert "could not continue it bit-identically" in notes[run_id]  # the log's figures
        assert all(notes[r] is None for r in RUNS if r != run_id)  # the others untouched
    assert cut >= 3
    for r in st.runs():
        execute_run(st, r, out)
    for r in RUNS:
        logs_equal(ref / "runs" / f"{r}.h5", out / "runs" / f"{r}.h5")


def test_checkpoint_and_log_that_disagree_roll_back_and_say_so(tmp_path, monkeypatch, key_dir):
    # a checkpoint from another moment of the run (what two writers used to leave): resume
    # finds that the checksum of its generation's rows differs from the log's, says so in one
    # line and rolls back to the last generation on which both agree
    monkeypatch.setattr(single, "COMMIT_INTERVAL", 0.0)
    st, ref = in_process_study(tmp_path)
    folder, st = StudyFolder.prepare(st, tmp_path / "cut", None)
    run = st.runs()[0]
    ck, log = folder.checkpoint_path(run.run_id), folder.log_path(run.run_id)
    try:
        execute_run(st, run, folder.path, should_stop=stop_after(4))
    except SystemExit:
        pass
    early = ck.read_bytes()
    try:
        execute_run(st, run, folder.path, should_stop=stop_after(5))
    except SystemExit:
        pass
    # the log now holds generations past the early checkpoint: fine (it is cut back) ...
    _, g, _, note = recover(log, ck, run.run_id)
    assert note is None and g == read_run(log).generations
    ck.write_bytes(early)
    _, g, _, note = recover(log, ck, run.run_id)
    assert note is None and g == 4  # ... the rows of generation 4 agree: cut back to it
    # a log rewritten since with other rows at that generation (another writer) disagrees
    other, _ = StudyFolder.prepare(st, tmp_path / "other", None)
    try:
        execute_run(st, st.runs()[1], other.path, should_stop=stop_after(6))
    except SystemExit:
        pass
    shutil.copy(other.log_path("p.s2"), log)
    _, g, _, note = recover(log, ck, run.run_id)
    assert g == 0 and "disagree at generation 4" in note and "rolled back to generation 0" in note
    execute_run(st, run, folder.path)
    logs_equal(ref / "runs" / f"{run.run_id}.h5", log)


@pytest.mark.slow
def test_truncations_between_kills_then_resume_give_the_same_bits(tmp_path, loop_ref):
    # eight tries (twenty at first, then ten; each try is a driver, a kill, a cut and two
    # readings of the status)
    sf, ref = loop_ref
    out = tmp_path / "cut"
    rng = random.Random(7)
    fig = {"tries": 0, "cut_logs": 0, "cut_checkpoints": 0, "notes": 0}
    damaged: set[str] = set()  # runs ever damaged (a resume killed early may not reach them)

    def named_by_status() -> set[str]:
        # the status command's damage lines, from this process (the driver is gone by now;
        # the command itself is tested on a damaged folder in test_wording.py)
        lines = "\n".join(damage_lines(StudyFolder(out).status()))
        return {r for r in RUNS if f"damage: run {r}:" in lines}

    for k in range(8):
        args = (["resume", out] if prepared(out) else ["run", sf, "--out", out]) + ["--workers",
                                                                                   "2"]
        proc = start(args)
        if wait_running(out, proc, RUNS):
            time.sleep(rng.uniform(0.0, 1.5))
            if proc.poll() is None:
                os.killpg(proc.pid, rng.choice([signal.SIGKILL, signal.SIGTERM]))
        _, err = proc.communicate(timeout=120)
        assert "Traceback" not in err, err
        fig["tries"] += 1
        for line in notes_in(err):  # a note names a damaged run, never another
            assert line.split(":")[0].removeprefix("run ") in damaged, (line, damaged)
            fig["notes"] += 1
        unfinished = [r for r in RUNS if (out / "runs" / f"{r}.resume").exists()
                      or not (out / "runs" / f"{r}.h5").exists()]
        before = named_by_status()
        hit = truncate_one(out, rng, unfinished or RUNS)
        if hit is None:
            continue
        run_id, path = hit
        damaged.add(run_id)
        fig["cut_logs" if path.suffix == ".h5" else "cut_checkpoints"] += 1
        after = named_by_status()
        assert run_id in after  # status names the damage ...
        assert after <= before | {run_id}  # ... and no other run newly
    r = subprocess.run([sys.executable, "-m", "foilmap.cli", "resume", str(out), "--workers", "2"],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    fig["notes"] += len(notes_in(r.stderr))
    check_same_bits(out, ref)
    print(f"\ntruncation loop: {fig['tries']} tries, {fig['cut_logs']} logs and "
          f"{fig['cut_checkpoints']} checkpoints cut at random offsets, {fig['notes']} "
          "one-line notes; same bits: yes")


# --- a full disk, a read-only folder -----------------------------------------------------------


def mount_or_skip(*args) -> None:
    r = subprocess.run(["mount", *map(str, args)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount here ({' '.join(map(str, args))}: {r.stderr.strip()}); "
                    "the full-disk and read-only tests need root and mount")


def umount(path: Path) -> None:
    # lazily: a writer that failed on a full disk may hold its file until it is collected
    subprocess.run(["umount", "-l", str(path)], capture_output=True, text=True)


def no_crash(r: subprocess.CompletedProcess) -> None:
    """No process of the command crashed: HDF5 fails to close a file whose write the disk
    refused, and collecting that file later crashed the worker (SIGSEGV in libhdf5), which
    broke the pool and cut the other runs short ("ended abruptly")."""
    text = r.stdout + r.stderr
    assert "Fatal Python error" not in text and "ended abruptly" not in text, text[-3000:]
    assert "Traceback" not in text and "Exception ignored" not in text, text[-3000:]
    assert r.returncode in (1, 2), text[-3000:]
    # every run that failed names the disk, none HDF5's own state
    failed = [line for line in text.splitlines() if " failed: " in line]
    assert failed and all("no space left on device" in line for line in failed), text[-3000:]


def test_a_full_disk_fails_cleanly_and_resume_finishes_the_same(tmp_path, quick_ref):
    # quick form: a tmpfs of 400 KB fills while the study writes; the command stops with the
    # disk's error in plain lines, every process alive to say it (one worker, then two); with
    # room again, resume finishes the same bits
    sf, ref = quick_ref
    disk = tmp_path / "disk"
    disk.mkdir()
    mount_or_skip("-t", "tmpfs", "-o", "size=400k", "tmpfs", disk)
    env = {**os.environ, "PYTHONFAULTHANDLER": "1"}  # a crash says so on stderr
    try:
        out = disk / "out"
        for workers, args in (("1", ["run", sf, "--out", out]), ("2", ["resume", out])):
            r = subprocess.run([sys.executable, "-m", "foilmap.cli", *map(str, args),
                                "--workers", workers], capture_output=True, text=True,
                               timeout=600, env=env)
            no_crash(r)
            assert "Traceback" not in r.stderr, r.stderr
            assert "no space left on device" in r.stdout + r.stderr
        mount_or_skip("-o", "remount,size=16m", disk)
        finish(out, ref)
    finally:
        umount(disk)


@pytest.mark.slow
def test_full_disks_of_random_sizes_then_resume_give_the_same_bits(tmp_path, quick_ref):
    # the quick study (two runs of 3,000 evaluations, about 760 KB in all), a quarter of the
    # kill loops' one: the disks are scaled with it (from 20 % to 85 % of the folder it needs)
    sf, ref = quick_ref
    rng = random.Random(9)
    lines = []
    for k in range(3):
        disk = tmp_path / f"disk{k}"
        disk.mkdir()
        size = rng.randrange(150, 650)
        mount_or_skip("-t", "tmpfs", "-o", f"size={size}k", "tmpfs", disk)
        try:
            out = disk / "out"
            r = subprocess.run([sys.executable, "-m", "foilmap.cli", "run", str(sf), "--out",
                                str(out), "--workers", "2"], capture_output=True, text=True,
                               timeout=600, env={**os.environ, "PYTHONFAULTHANDLER": "1"})
            no_crash(r)
            assert "Traceback" not in r.stderr, r.stderr
            assert "no space left on device" in (r.stdout + r.stderr)
            if r.returncode == 2:
                assert len(r.stderr.strip().splitlines()[-1:]) == 1
            lines.append(f"{size} KB: exit {r.returncode}")
            mount_or_skip("-o", "remount,size=64m", disk)
            finish(out, ref)
        finally:
            umount(disk)
    print("\nfull disk: " + "; ".join(lines) + "; each resumed to the same bits")


def test_a_read_only_folder_is_refused_in_one_line_and_left_as_it_was(tmp_path, monkeypatch,
                                                                       key_dir):
    monkeypatch.setattr(single, "COMMIT_INTERVAL", 0.0)
    st, ref = in_process_study(tmp_path)
    folder, st = StudyFolder.prepare(st, tmp_path / "cut", None)
    for r in st.runs():
        try:
            execute_run(st, r, folder.path, should_stop=stop_after(3))
        except SystemExit:
            pass
    out = folder.path
    before = {p: p.read_bytes() for p in out.rglob("*") if p.is_file()}
    mount_or_skip("--bind", out, out)
    try:
        mount_or_skip("-o", "remount,ro,bind", out)
        for args in (["resume", out], ["run", out / "study.toml", "--out", out]):
            r = subprocess.run([sys.executable, "-m", "foilmap.cli", *map(str, args)],
                               capture_output=True, text=True, timeout=120)
            assert r.returncode == 2, r.stdout + r.stderr
            assert len(r.stderr.strip().splitlines()) == 1, r.stderr
            assert "cannot be written" in r.stderr and "read-only" in r.stderr.lower()
        s = subprocess.run([sys.executable, "-m", "foilmap.cli", "status", str(out)],
                           capture_output=True, text=True, timeout=120)
        assert s.returncode == 0, s.stderr  # a read-only folder can still be looked at
    finally:
        umount(out)
    assert {p: p.read_bytes() for p in out.rglob("*") if p.is_file()} == before
    for r in st.runs():
        execute_run(st, r, out)
    for r in RUNS:
        logs_equal(ref / "runs" / f"{r}.h5", out / "runs" / f"{r}.h5")
