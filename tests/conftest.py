"""Shared fixtures and helpers for the foilmap tests."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
# the panel method lives in benchmarks/ (the peer of the conformal kernel, not in the package)
sys.path.insert(0, str(ROOT / "benchmarks"))

import os  # noqa: E402
import subprocess  # noqa: E402
import tempfile  # noqa: E402

# checkpoints are signed with a key from the user's configuration: the tests, and every command
# they start, use a key of their own, never the real one in the home folder
os.environ["FOILMAP_CONFIG_DIR"] = tempfile.mkdtemp(prefix="foilmap-test-config-")

from foilmap import SectionSet, offset_circle_coefficients  # noqa: E402

#: a 12 % section with a 10° trailing edge, written by hand (test data, invented)
SECTION_TEXT = """
[section]
name = "test-section"
te_angle_deg = 10.0
coefficients = [[-0.075, 0.038], [0.004, -0.003], [-0.001, 0.0008]]
"""


def pytest_configure(config):
    """Compile the kernels once, in the controlling process, before any worker starts: on a
    fresh install every process that met them first would compile them at the same time
    (half a minute of processor each; a process started later loads them from numba's cache)."""
    if hasattr(config, "workerinput"):  # a pytest-xdist worker: the controller did it
        return
    from foilmap.section import _compiled

    _compiled.warm_cache()


def pytest_collection_modifyitems(config, items):
    """Under pytest-xdist, start the long tests first, spread over the workers.

    xdist's work-stealing hands each worker a contiguous share of the collection and later moves
    tests from the end of one worker's queue to an idle one.  Each share here begins with its
    part of the slow-marked tests (taken in turn), so that no long test starts near the end
    while the other workers run out of work; the short tests after them balance the finish."""
    n = int(os.environ.get("PYTEST_XDIST_WORKER_COUNT", "0") or 0)
    slow = [it for it in items if it.get_closest_marker("slow")]
    if n < 2 or not slow:
        return
    rest = [it for it in items if not it.get_closest_marker("slow")]
    sizes, left = [], len(items)
    for k in range(n):  # the first hand-out's sizes, as xdist cuts them
        sizes.append(left // (n - k))
        left -= sizes[-1]
    shares = [slow[k::n] for k in range(n)]
    at = 0
    for k in range(n):
        need = max(0, sizes[k] - len(shares[k]))
        shares[k] += rest[at:at + need]
        at += need
    shares[-1] += rest[at:]
    items[:] = [it for share in shares for it in share]


def reference_folder(tmp_path_factory, text: str) -> tuple[Path, Path]:
    """``(study file, folder)`` of the uninterrupted study ``text``, run once per test session
    and shared by the session's pytest workers (a file lock: the first to come runs it, the
    others wait for it).  It runs in this process, one run after another: the fault tests then
    check that the runs they cut through real processes end with the bits of the in-process
    engine, and a reference costs no process start-up."""
    import fcntl
    import hashlib

    from foilmap.run.single import execute_run
    from foilmap.store.folder import StudyFolder
    from foilmap.store.studyfile import load_study_text

    base = tmp_path_factory.getbasetemp()
    root = base.parent if os.environ.get("PYTEST_XDIST_WORKER") else base
    key = hashlib.sha256(text.encode()).hexdigest()[:16]
    here = root / f"reference-{key}"
    with open(root / f"reference-{key}.lock", "w") as fh:
        fcntl.flock(fh, fcntl.LOCK_EX)
        if not (here / "done").exists():
            here.mkdir(exist_ok=True)
            (here / "s.toml").write_text(text)
            folder, study = StudyFolder.prepare(load_study_text(text), here / "ref", None)
            for run in study.runs():
                execute_run(study, run, folder.path)
            (here / "done").touch()
    return here / "s.toml", here / "ref"


def cli(*args, cwd=None, timeout=300, real: bool = False):
    """Run the foilmap command: its exit code and what it printed on each stream.

    By default through the command's own entry point ``foilmap.cli.main`` in this process, with
    its standard streams captured: the same code from the parsing of the arguments to the exit
    code, without the second of interpreter start-up and kernel loading a new process costs
    (most of the quick subset's time, once).  ``real`` runs it in a subprocess, as a user's
    shell does: for what only a process shows (what it imports, signals, its environment)."""
    if real:
        return subprocess.run([sys.executable, "-m", "foilmap.cli", *map(str, args)],
                              capture_output=True, text=True, cwd=cwd, timeout=timeout)
    import contextlib
    import io
    import signal

    from foilmap.cli import main

    out, err = io.StringIO(), io.StringIO()
    here = os.getcwd()
    handler = signal.getsignal(signal.SIGTERM)
    try:
        if cwd is not None:
            os.chdir(cwd)
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                code = main([str(a) for a in args])
            except SystemExit as exc:  # argparse's usage errors and --help
                code = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
    finally:
        os.chdir(here)
        signal.signal(signal.SIGTERM, handler)
    return subprocess.CompletedProcess(["foilmap", *map(str, args)], code or 0,
                                       out.getvalue(), err.getvalue())


def small_study(name: str, seeds, evals: int, objectives: str = "peak_suction = 1.0",
                constraints: str = "thickness = [0.10, 1.0]", extra: str = "") -> str:
    """Text of a small study of 4-coefficient sections at Cl 0.5 (test data, invented)."""
    return f"""
# test study (invented data)
[study]
name = "{name}"
seeds = [{", ".join(map(str, seeds))}]
[shape]
coefficients = 4
[[point]]
name = "p"
cl = 0.5
[objectives]
{objectives}
[constraints]
{constraints}
{extra}[search]
max_evaluations = {evals}
"""


@pytest.fixture
def section_file(tmp_path):
    p = tmp_path / "section.toml"
    p.write_text(SECTION_TEXT)
    return p


def joukowski(mu: complex, tau_deg: float = 0.0, n: int = 24) -> SectionSet:
    """The offset circle through ζ = 1 with centre μ as a one-section batch."""
    return SectionSet(offset_circle_coefficients(mu, n)[None, :], np.radians([tau_deg]))


@pytest.fixture
def cambered() -> SectionSet:
    """A 13 % cambered Kármán–Trefftz section with a 10° trailing edge (test data, invented)."""
    return joukowski(-0.08 + 0.04j, 10.0, 16)


@pytest.fixture
def shaped() -> SectionSet:
    """A section with higher harmonics switched on (test data, invented)."""
    a = offset_circle_coefficients(-0.075 + 0.035j, 8)
    a[1:4] += np.array([0.004 - 0.003j, -0.001 + 0.0008j, 0.0005 + 0.0002j])
    return SectionSet(a[None, :], np.radians([8.0]))
