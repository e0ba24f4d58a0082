"""Studies from Python: failures that speak.  A script without the main guard runs its study
(workers start as modules of their own), one worker runs in the calling process with no pool,
and run_study raises when runs fail, naming them and the first error; the results equal what
the commands print with --json.

Reference values: the commands' own --json output (worked from the rule that the API and the
command read one folder); the studies are test data, invented.
"""

from __future__ import annotations

import json
import multiprocessing.spawn
import subprocess
import sys
import textwrap

import pytest
from conftest import cli, small_study

import foilmap
from foilmap.run import local


def _study(tmp_path, seeds=(1, 2), evals=120, extra=""):
    path = tmp_path / "s.toml"
    path.write_text(small_study("api", list(seeds), evals, extra=extra))
    return path


def test_workers_start_without_the_callers_main_module():
    # spawn prepares a child from the parent's __main__: inside the block it has neither the
    # script's path nor a module name to run again
    main = sys.modules["__main__"]
    with local.workers_without_main():
        data = multiprocessing.spawn.get_preparation_data("worker")
    assert "init_main_from_path" not in data and "init_main_from_name" not in data
    assert sys.modules["__main__"] is main  # the caller's module back in place


def test_one_worker_runs_in_this_process(tmp_path, monkeypatch):
    def no_pool(*a, **k):
        raise AssertionError("a process pool was started for one worker")

    monkeypatch.setattr(local, "ProcessPoolExecutor", no_pool)
    res = foilmap.run_study(foilmap.load_study(_study(tmp_path)), tmp_path / "out", workers=1)
    assert [r.state for r in res.runs] == [foilmap.RunState.COMPLETE] * 2
    # the study's [engine] table says the same
    path = _study(tmp_path, seeds=(3,), extra="[engine]\nworkers = 1\n")
    res = foilmap.run_study(foilmap.load_study(path), tmp_path / "engine")
    assert res.runs[0].state is foilmap.RunState.COMPLETE
    st = json.loads(cli("status", tmp_path / "out", "--json").stdout)
    assert [r["best"] for r in st["runs"]] == [
        pytest.approx(r.fun, rel=1e-9) for r in foilmap.open_results(tmp_path / "out").runs]


def test_run_study_raises_naming_the_failed_runs(tmp_path, monkeypatch):
    def broken(*a, **k):
        raise ValueError("invented failure")

    monkeypatch.setattr(local, "execute_run", broken)
    with pytest.raises(foilmap.RunsFailed) as e:
        foilmap.run_study(foilmap.load_study(_study(tmp_path)), tmp_path / "out", workers=1)
    msg = str(e.value)
    assert "\n" not in msg
    assert "p.s1, p.s2" in msg and "first error: ValueError: invented failure" in msg
    assert [s["run"] for s in e.value.failed] == ["p.s1", "p.s2"]
    assert [r.state for r in e.value.results.runs] == [foilmap.RunState.FAILED] * 2


SCRIPT = """\
import json
import foilmap

study = foilmap.load_study("s.toml")
results = foilmap.run_study(study, "out", workers=2)
best = results.best()
point = foilmap.evaluate(best.section, cl=0.5, sigma=1.5, mach=0.3)
polar = foilmap.sweep(best.section, alpha=[0.0, 2.0, 4.0], sigma=1.5)
print(json.dumps({{"funs": {{r.id: r.fun for r in results.runs}}, "evaluate": point.record,
                  "sweep": polar.record}}))
"""


@pytest.mark.slow
@pytest.mark.parametrize("guard", [False, True])
def test_a_script_runs_its_study_with_or_without_the_main_guard(tmp_path, guard):
    _study(tmp_path)
    text = SCRIPT.format()
    if guard:
        body = textwrap.indent(text.split("\n", 2)[2], "    ")
        text = 'import json\nimport foilmap\n\nif __name__ == "__main__":\n' + body
    (tmp_path / "script.py").write_text(text)
    r = subprocess.run([sys.executable, "script.py"], cwd=tmp_path, capture_output=True,
                       text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    assert r.stderr == ""  # no page of multiprocessing text, no warning
    got = json.loads(r.stdout.strip().splitlines()[-1])
    funs = got["funs"]
    st = json.loads(cli("status", tmp_path / "out", "--json").stdout)
    assert {x["run"]: x["state"] for x in st["runs"]} == {"p.s1": "complete",
                                                         "p.s2": "complete"}
    for x in st["runs"]:
        assert funs[x["run"]] == pytest.approx(x["best"], rel=1e-9)
    # the script's figures of the best design are the commands' figures of its section file
    from test_api_sections import same

    assert cli("best", tmp_path / "out", "-o", tmp_path / "best.toml").returncode == 0
    for key, args in (("evaluate", ("evaluate", "--cl", "0.5", "--sigma", "1.5", "--mach", "0.3")),
                      ("sweep", ("sweep", "--alpha", "0:4:2", "--sigma", "1.5"))):
        r = cli(args[0], tmp_path / "best.toml", *args[1:], "--json")
        assert r.returncode == 0, r.stderr
        shown = json.loads(r.stdout)
        shown["name"] = got[key]["name"]  # a bare SectionSet has no name
        same(got[key], shown)
