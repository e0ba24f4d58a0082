"""Result types (design/results.py): run states and their log codes, a run's history by column,
what counts as a successful run, and the provenance a logged design carries."""

from __future__ import annotations

import numpy as np
import pytest

from foilmap.design.results import FolderDesign, History, RunResult, RunState
from foilmap.design.study import parse_study
from foilmap.section.conformal import SectionSet


def test_log_codes_round_trip_and_unknown_codes_are_unreadable():
    # the one-byte meta/state of a run log (docs/run-log.md): running 0, complete 1, failed 2
    assert [RunState.RUNNING.code, RunState.COMPLETE.code, RunState.FAILED.code] == [0, 1, 2]
    for state in (RunState.RUNNING, RunState.COMPLETE, RunState.FAILED):
        assert RunState.from_code(state.code) is state
    assert RunState.from_code(7) is RunState.UNREADABLE
    with pytest.raises(KeyError):
        RunState.PENDING.code  # never written to a log
    assert RunState("interrupted") is RunState.INTERRUPTED and RunState.COMPLETE == "complete"


def test_a_state_is_parsed_with_a_default_for_names_it_does_not_know():
    assert RunState.parse("interrupted", RunState.PENDING) is RunState.INTERRUPTED
    for odd in ("paused", None, 3):  # an index written by another version
        assert RunState.parse(odd, RunState.UNFINISHED) is RunState.UNFINISHED
    # the merge of an index entry and a log goes through it
    from foilmap.store.folder import StudyFolder

    assert StudyFolder.merged_state("paused", "running") is RunState.UNFINISHED
    assert StudyFolder.merged_state("failed", "running") is RunState.FAILED
    assert StudyFolder.merged_state("running", "complete") is RunState.COMPLETE


def test_history_columns():
    h = History({"generation": np.arange(3), "best_f": np.array([3.0, 2.0, 1.5])})
    assert h.names == ["generation", "best_f"] and len(h) == 3
    np.testing.assert_array_equal(h["best_f"], [3.0, 2.0, 1.5])
    with pytest.raises(KeyError, match="no column 'sigma'; columns: generation, best_f"):
        h["sigma"]
    assert len(History({})) == 0


def _result(state, section):
    return RunResult("p.s1", state, 1, "p", "", None, section, None, None, None, 0, 0, None,
                     0.5, "")


def test_success_needs_a_complete_run_with_a_design():
    sec = SectionSet(np.array([[-0.1 + 0.05j]]), [0.1])
    assert _result(RunState.COMPLETE, sec).success
    assert not _result(RunState.COMPLETE, None).success  # no feasible design
    assert not _result(RunState.INTERRUPTED, sec).success


def test_a_designs_provenance_names_its_run():
    study = parse_study("""
[study]
name = "prov"
seeds = [4]
[[point]]
name = "p"
cl = 0.6
[objectives]
peak_suction = 1.0
""")
    run = study.runs()[0]
    sec = SectionSet(np.array([[-0.1 + 0.05j, 0.01j]]), np.radians([12.0]))
    d = FolderDesign("p.s4#17", run, "prov", 17, 2, np.zeros(3), sec, 0.8, {}, {}, "runs/p.s4.h5")
    assert d.run_id == "p.s4" and d.design_cl == 0.6
    assert d.te_angle_deg == pytest.approx(12.0, rel=1e-12)
    np.testing.assert_array_equal(d.coefficients, [-0.1 + 0.05j, 0.01j])
    assert d.provenance() == {"study": "prov", "run": "p.s4", "log": "runs/p.s4.h5",
                              "evaluation": 17, "generation": 2, "seed": 4, "objective": 0.8,
                              "design_cl": 0.6}
