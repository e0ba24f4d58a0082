"""The Python API for notebooks: the worked example of docs/python-api.md runs as written, and
the result objects agree with the run logs."""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import small_study

import foilmap

ROOT = Path(__file__).resolve().parents[1]


@pytest.mark.slow
def test_the_documented_example_runs(tmp_path):
    doc = (ROOT / "docs" / "python-api.md").read_text()
    code = "\n".join(re.findall(r"```python\n(.*?)```", doc, flags=re.S))
    shutil.copytree(ROOT / "studies", tmp_path / "studies")
    # as a plain script, without the main guard: workers never import the script again
    (tmp_path / "example.py").write_text(code)
    r = subprocess.run([sys.executable, "example.py"], cwd=tmp_path, capture_output=True,
                       text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    assert "best run:" in r.stdout and "peak suction" in r.stdout
    assert "designs on the front" in r.stdout and "cavitation margin" in r.stdout
    assert r.stderr == ""  # quiet unless asked
    assert sorted(p.name for p in tmp_path.iterdir()) == ["example.py", "results", "studies"]


def test_result_objects_match_the_logs(tmp_path):
    text = small_study("api", [1, 2], 300)
    path = tmp_path / "s.toml"
    path.write_text(text)
    study = foilmap.load_study(path)
    res = foilmap.run_study(study, tmp_path / "out", workers=1)
    runs = res.runs
    assert [r.id for r in runs] == ["p.s1", "p.s2"]
    assert all(r.state is foilmap.RunState.COMPLETE and r.success for r in runs)
    best = res.best()
    assert best.fun == min(r.fun for r in runs)
    ev = foilmap.evaluate(best.section, cl=best.design_cl)
    assert ev.ok
    # the logged objective is the certified peak suction of the section
    assert best.objectives["peak_suction"] == pytest.approx(ev.peak_suction, rel=1e-9)
    assert best.constraints["thickness_low"] <= 0
    h = res.history(best.id)
    assert len(h) == best.generations and h["evaluations"][-1] == best.evaluations
    assert np.nanmin(h["best_f"]) == pytest.approx(best.fun)
    with pytest.raises(KeyError, match="columns"):
        h["no-such-column"]
    with pytest.raises(KeyError, match="no run"):
        res.history("nope")
    front = res.front()
    assert front and all(d.id.split("#")[0] in ("p.s1", "p.s2") for d in front)
    # opening the folder again gives the same results
    again = foilmap.open_results(tmp_path / "out")
    assert again.best().id == best.id and again.best().fun == best.fun


def test_open_results_of_a_front_study_points_to_front(tmp_path):
    text = small_study("mo", [1], 200, objectives="peak_suction = 1.0\nseverity = 1.0",
                       extra="[fronts]\nreference_point = [5.0, 5.0]\n").replace(
        "[search]", '[search]\nmethod = "comocma"\nkernels = 3')
    path = tmp_path / "s.toml"
    path.write_text(text)
    res = foilmap.run_study(foilmap.load_study(path), tmp_path / "out", workers=1)
    with pytest.raises(foilmap.InputError, match="front"):
        res.best()
    front = res.front()
    assert len(front) >= 2
    assert all(np.isfinite(list(d.objectives.values())).all() for d in front)
    first = [d.objectives["peak_suction"] for d in front]
    assert first == sorted(first)


def test_run_study_from_python_reads_the_engine_table(tmp_path):
    # regression: [engine] keys were read only by the command line; a scheduler address with
    # the local engine is contradictory, and the library now says so as the command does
    text = small_study("eng", [1], 100) + '[engine]\nscheduler = "tcp://127.0.0.1:8786"\n'
    path = tmp_path / "s.toml"
    path.write_text(text)
    with pytest.raises(foilmap.InputError, match="scheduler address needs the dask engine"):
        foilmap.run_study(foilmap.load_study(path), tmp_path / "out")
    assert not (tmp_path / "out").exists()  # nothing written
