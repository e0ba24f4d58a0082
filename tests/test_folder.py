"""The study folder (store/folder.py): its layout, the study and budget it keeps, the index,
status merged from index and logs, and designs by id and the best design checked against the
run log's own rows (in-process, small runs)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import small_study

from foilmap import InputError
from foilmap.design.results import RunState
from foilmap.run.single import execute_run
from foilmap.store.folder import StudyFolder
from foilmap.store.runlog import read_run
from foilmap.store.studyfile import load_study_text

TEXT = small_study("folder", [1, 2], 80)


@pytest.fixture(scope="module")
def ran(tmp_path_factory):
    """A folder whose first run (p.s1) is complete and whose second (p.s2) is pending."""
    out = tmp_path_factory.mktemp("folder") / "out"
    folder, study = StudyFolder.prepare(load_study_text(TEXT), out, None)
    execute_run(study, study.runs()[0], out)
    return out


def test_prepare_keeps_the_study_and_its_budget(tmp_path):
    out = tmp_path / "o"
    folder, study = StudyFolder.prepare(load_study_text(TEXT), out, 60)
    assert (out / "study.toml").read_text() == TEXT and (out / "runs").is_dir()
    assert folder.exists() and study.runs()[0].search["max_evaluations"] == 60
    # opened again, with no budget given: the budget recorded first holds
    again = StudyFolder(out).study
    assert again.runs()[0].search["max_evaluations"] == 60
    _, study2 = StudyFolder.prepare(load_study_text(TEXT), out, None)
    assert study2.runs()[0].search["max_evaluations"] == 60
    with pytest.raises(InputError, match="was started with a budget of 60"):
        StudyFolder.prepare(load_study_text(TEXT), out, 70)
    with pytest.raises(InputError, match="holds a different study"):
        StudyFolder.prepare(load_study_text(small_study("other", [1], 80)), out, None)


def test_not_a_study_folder(tmp_path):
    with pytest.raises(InputError, match="is not a study folder"):
        StudyFolder(tmp_path).study
    assert not StudyFolder(tmp_path).exists()


def test_index_lists_every_run_pending_unless_told(tmp_path):
    folder, _ = StudyFolder.prepare(load_study_text(TEXT), tmp_path / "o", None)
    assert folder.read_index() == {}
    folder.write_index({"p.s2": {"state": "interrupted"}})
    index = folder.read_index()
    assert list(index) == ["p.s1", "p.s2"]
    assert index["p.s1"]["state"] == "pending" and index["p.s2"]["state"] == "interrupted"
    assert index["p.s2"]["file"] == "runs/p.s2.h5" and index["p.s2"]["seed"] == 2
    text = (tmp_path / "o" / "index.json").read_text()
    on_disk = json.loads(text)
    assert on_disk["study"] == "folder" and len(on_disk["runs"]) == 2
    assert set(on_disk) == {"schema_version", "software", "study", "updated", "runs"}
    # one run a line, readable with grep and diff
    lines = text.splitlines()
    assert [json.loads(line.rstrip(","))["run"] for line in lines[1:-1]] == ["p.s1", "p.s2"]


@pytest.mark.parametrize("indexed,logged,state", [
    ("running", "complete", RunState.COMPLETE),  # the log knows when it is complete
    ("pending", "running", RunState.UNFINISHED),
    ("queued", "running", RunState.UNFINISHED),
    ("complete", "running", RunState.UNFINISHED),  # an index ahead of its log
    ("interrupted", "running", RunState.INTERRUPTED),
    ("failed", "running", RunState.FAILED),
    ("running", "running", RunState.RUNNING),
    ("nonsense", "running", RunState.UNFINISHED),
])
def test_merged_state(indexed, logged, state):
    assert StudyFolder.merged_state(indexed, logged) is state


def test_status_of_a_folder_with_one_run_done(ran):
    st = StudyFolder(ran).status()
    rows = {r["run"]: r for r in st["runs"]}
    log = read_run(ran / "runs" / "p.s1.h5")
    assert rows["p.s1"]["state"] == "complete" and rows["p.s2"]["state"] == "pending"
    assert rows["p.s1"]["evaluations"] == log.evaluations >= 80
    assert rows["p.s1"]["generations"] == log.generations
    assert rows["p.s1"]["best"] == pytest.approx(log.best()["f"], rel=0, abs=0)
    assert rows["p.s2"]["evaluations"] == 0 and rows["p.s2"]["best"] is None
    assert st["counts"] == {"complete": 1, "pending": 1}
    assert st["evaluations"] == log.evaluations


def test_the_best_design_is_the_lowest_feasible_logged_row(ran):
    folder = StudyFolder(ran)
    log = read_run(ran / "runs" / "p.s1.h5")
    ev = log.evals
    feasible = (ev["status"] == 0) & np.all(ev["constraints"] <= 0, axis=1)
    assert feasible.any()
    i = int(np.flatnonzero(feasible)[np.argmin(ev["f"][feasible])])
    best = folder.best_design()
    assert best.id == f"p.s1#{i}" and best.fun == ev["f"][i]
    assert best.objectives == {"peak_suction": float(ev["objectives"][i][0])}
    np.testing.assert_array_equal(best.x, ev["x"][i])
    assert folder.best_design("p.s1").id == best.id
    with pytest.raises(InputError, match="run 'p.s2' has no feasible design yet"):
        folder.best_design("p.s2")
    # by id, and the ids it refuses
    same = folder.design_by_id(best.id)
    np.testing.assert_array_equal(same.section.coefficients, best.section.coefficients)
    for bad, message in (("p.s1", "is not RUN#EVALUATION"), ("p.s1#x", "is not RUN#EVALUATION"),
                         (f"p.s1#{log.evaluations}", "has no evaluation"),
                         ("p.s9#0", "no run 'p.s9'")):
        with pytest.raises(InputError, match=message):
            folder.design_by_id(bad)
