"""A search's endgame: the floor in study files, the search and the reports that tell of it.

The study is an invented first study (five coefficients, one Cl, peak suction only, no station
thickness) with a high floor, so that the search reaches it within a few hundred evaluations.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from foilmap.design.problem import Problem
from foilmap.design.study import parse_study
from foilmap.errors import InputError
from foilmap.report.study import floor_warnings, format_status
from foilmap.section.status import Status
from foilmap.store.folder import StudyFolder
from foilmap.store.runlog import read_run

FIRST = """
[study]
name = "first"
seeds = [1]
[shape]
coefficients = 5
start = [[-0.09, 0.03]]
te_angle_deg = [6.0, 14.0]
[[point]]
name = "design"
cl = 0.6
[objectives]
peak_suction = 1.0
[constraints]
thickness = [0.10, 1.0]
min_le_radius = 0.005
{floor}
[search]
max_evaluations = {budget}
restarts = 0
"""


def _study(floor: str = "", budget: int = 600):
    return parse_study(FIRST.format(floor=floor, budget=budget))


def test_the_floor_is_on_by_default_and_can_be_changed_or_switched_off():
    assert _study().constraints["min_local_thickness"] == 0.005
    st = _study("min_local_thickness = 0.01")
    assert Problem.from_run(st, st.runs()[0]).floor == 0.01
    st = _study("min_local_thickness = 0")
    assert Problem.from_run(st, st.runs()[0]).floor == 0.0
    for bad in ("-0.001", "0.5", '"thin"'):
        with pytest.raises(InputError, match=r"constraints.min_local_thickness = .* is not "
                                             r"allowed \(a number from 0 to 0.1\)"):
            _study(f"min_local_thickness = {bad}")


@pytest.fixture(scope="module")
def on_the_floor(tmp_path_factory):
    """A short search with a floor of 0.03 c, which its best design reaches."""
    from foilmap.run.local import drive_study

    out = tmp_path_factory.mktemp("endgame") / "first"
    study = _study("min_local_thickness = 0.03", budget=1500)
    summaries = drive_study(study, out, workers=1)
    assert [s["state"] for s in summaries] == ["complete"]
    return out


def test_the_search_refuses_sections_below_the_floor(on_the_floor):
    log = read_run(next((on_the_floor / "runs").glob("*.h5")))
    status = np.asarray(log.evals["status"])
    assert np.sum(status == Status.BELOW_FLOOR) > 0
    # the run log's counts are what status and the report show
    st = StudyFolder(on_the_floor).status()
    rejected = st["runs"][0]["rejected"]
    assert rejected["below_floor"] == int(np.sum(status == Status.BELOW_FLOOR))
    assert "uncertified" not in rejected  # none gave up on this study
    text = format_status(st)
    share = rejected["below_floor"] / st["runs"][0]["evaluations"]
    assert (f"{rejected['below_floor']} evaluations ({share:.2%}) below the local-thickness "
            "floor") in text


def test_best_and_status_warn_when_the_best_design_sits_on_the_floor(on_the_floor, capsys):
    from foilmap.cli import main

    lines = floor_warnings(on_the_floor)
    assert len(lines) == 1
    assert "best design of run design.s1 sits on the local-thickness floor" in lines[0]
    assert "constraints.min_local_thickness = 0.03 c" in lines[0]
    assert main(["status", str(on_the_floor)]) == 0
    assert "sits on the local-thickness floor" in capsys.readouterr().out
    assert main(["status", str(on_the_floor), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["warnings"] == lines
    assert main(["best", str(on_the_floor), "-o", str(on_the_floor / "best.toml")]) == 0
    assert "sits on the local-thickness floor" in capsys.readouterr().out


def test_a_finished_runs_warnings_come_from_the_index_without_opening_its_log(
        on_the_floor, tmp_path, monkeypatch):
    import shutil

    import foilmap.store.folder as folder_mod
    from foilmap.report.study import design_warnings

    out = tmp_path / "copy"
    shutil.copytree(on_the_floor, out)
    from_logs = floor_warnings(on_the_floor)
    entry = json.loads((out / "index.json").read_text())["runs"][0]
    log = read_run(next((out / "runs").glob("*.h5")))
    assert entry["best_shape"] == StudyFolder(out).best_shape(entry["run"], log)
    assert entry["best_shape"]["floor_margin"] < 0.05 * 0.03  # what the warning reads

    def no_log(*a, **k):
        raise AssertionError("a finished run's log was opened")

    with monkeypatch.context() as m:
        m.setattr(folder_mod, "read_run", no_log)
        assert design_warnings(out) == from_logs and len(from_logs) == 1
    # an index written without best shapes (an older foilmap): the same lines, from the logs
    index = json.loads((out / "index.json").read_text())
    for e in index["runs"]:
        del e["best_shape"]
    (out / "index.json").write_text(json.dumps(index))
    assert design_warnings(out) == from_logs


def test_no_warning_far_from_the_floor(tmp_path):
    """A floor the design never nears gives no warning (the same short search, floor 0.0005)."""
    from foilmap.run.local import drive_study

    out = tmp_path / "low"
    drive_study(_study("min_local_thickness = 0.0005", budget=120), out, workers=1)
    assert floor_warnings(out) == []
    drive_study(_study("min_local_thickness = 0", budget=120), tmp_path / "off", workers=1)
    assert floor_warnings(tmp_path / "off") == []


def test_the_same_seed_gives_the_same_bits(on_the_floor, tmp_path):
    from foilmap.run.local import drive_study

    out = tmp_path / "again"
    drive_study(_study("min_local_thickness = 0.03", budget=1500), out, workers=1)
    a = read_run(next((on_the_floor / "runs").glob("*.h5")))
    b = read_run(next((out / "runs").glob("*.h5")))
    np.testing.assert_array_equal(np.asarray(a.evals["x"]), np.asarray(b.evals["x"]))
    np.testing.assert_array_equal(np.asarray(a.evals["status"]), np.asarray(b.evals["status"]))
