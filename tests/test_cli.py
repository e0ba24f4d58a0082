"""The command line end to end, through real subprocesses."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
from conftest import SECTION_TEXT
from conftest import cli as run_command

from foilmap import analyse, load_section


def cli(*args, **kw):
    """The command in a real subprocess: this file is the command line end to end (elsewhere
    the tests call the command's entry point in their own process)."""
    return run_command(*args, real=True, **kw)

JSON_KEYS = {"cl", "alpha_deg", "alpha_zero_lift_deg", "cm_quarter_chord", "cp_min", "cp_min_x",
             "thickness", "thickness_x", "camber", "camber_x", "le_radius", "te_angle_deg",
             "area", "status"}


def test_evaluate_json_and_table(section_file, tmp_path):
    table = tmp_path / "cp.csv"
    r = cli("evaluate", section_file, "--cl", "0.5", "--json", "--table", table)
    assert r.returncode == 0, r.stderr
    rec = json.loads(r.stdout)
    assert JSON_KEYS <= rec.keys()
    assert rec["status"] == "ok" and rec["cl"] == pytest.approx(0.5, abs=1e-12)
    assert rec["te_angle_deg"] == pytest.approx(10.0)
    rows = list(csv.reader(line for line in table.read_text().splitlines()
                           if not line.startswith("#")))
    assert rows[0] == ["x", "y", "surface", "cp", "q"]
    surface = [r[2] for r in rows[1:]]
    cp, q = (np.array([float(r[i]) for r in rows[1:]]) for i in (3, 4))
    assert len(rows) - 1 == 201  # the default, as export
    assert surface[1] == "upper" and surface[-2] == "lower"
    np.testing.assert_allclose(cp, 1 - q**2, atol=1e-9)
    assert cp.min() == pytest.approx(rec["cp_min"], abs=2e-3)  # the table is sampled
    assert "screening" in table.read_text().splitlines()[2]


def test_evaluate_human_table(section_file):
    r = cli("evaluate", section_file, "--alpha", "3", "--re", "2e6")
    assert r.returncode == 0, r.stderr
    assert "Stratford margin" in r.stdout and "Cm c/4" in r.stdout
    assert "viscous analysis" in r.stdout


def test_coords_layout(section_file, tmp_path):
    out = tmp_path / "c.dat"
    r = cli("coords", section_file, "-n", "81", "-o", out)
    assert r.returncode == 0, r.stderr
    lines = out.read_text().splitlines()
    assert lines[0].startswith("test-section")
    xy = np.loadtxt(lines[1:])
    assert xy.shape == (81, 2)
    assert tuple(xy[0]) == (1.0, 0.0) and tuple(xy[-1]) == (1.0, 0.0)
    le = np.argmin(xy[:, 0])
    assert xy[le, 0] == 0.0 and np.all(xy[1:le, 1] > 0) and np.all(xy[le + 1 : -1, 1] < 0)
    # the written points re-evaluate on the section (independent check through the panel peer
    # lives in test_panel_peer)
    rec = load_section(section_file)
    an = analyse(rec.to_set(), alpha=0.0)
    assert an.evaluation.thickness[0] == pytest.approx(
        (np.interp(0.3, xy[le::-1, 0], xy[le::-1, 1]) - np.interp(0.3, xy[le:, 0], xy[le:, 1])),
        abs=0.01,
    )


def test_plot_writes_png(section_file, tmp_path):
    out = tmp_path / "p.png"
    r = cli("plot", section_file, "--cl", "0.6", "-o", out)
    assert r.returncode == 0, r.stderr
    assert out.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.parametrize(
    "args,message",
    [
        (["evaluate", "{sec}"], "one of the arguments --alpha --cl is required"),
        (["evaluate", "{sec}", "--alpha", "95"], "angle of attack '95' is out of range"),
        (["evaluate", "{sec}", "--cl", "abc"], "'abc' is not a number"),
        (["evaluate", "{sec}", "--cl", "0.5", "--points", "7"], "points 7 is out of range"),
        (["evaluate", "{missing}", "--cl", "0.5"], "cannot read section file"),
        (["evaluate", "{bad}", "--cl", "0.5"], "'section.te_angle_deg' = 99.0 is not allowed"),
        (["evaluate", "{sec}", "--cl", "40"], "lift coefficient '40' is out of range"),
        (["evaluate", "{sec}", "--cl", "15"], "cannot reach that Cl: the ideal flow's largest Cl"),
        (["coords", "{sec}", "-n", "2"], "points 2 is out of range"),
        (["coords", "{sec}", "--spacing", "random"], "invalid choice: 'random'"),
        (["plot", "{sec}", "--cl", "0.5", "-o", "{tmp}/x.jpg"], "must end in .png"),
        (["plot", "{sec}", "--cl", "0.5", "-o", "{tmp}/no/x.png"], "does not exist"),
        (["frobnicate"], "invalid choice: 'frobnicate'"),
    ],
)
def test_bad_input_one_line_exit_2(section_file, tmp_path, args, message):
    bad = tmp_path / "bad.toml"
    bad.write_text(SECTION_TEXT.replace("10.0", "99.0"))
    subs = {"sec": section_file, "missing": tmp_path / "none.toml", "bad": bad, "tmp": tmp_path}
    r = cli(*[a.format(**subs) for a in args])
    assert r.returncode == 2
    err = r.stderr.strip().splitlines()
    assert len(err) == 1, r.stderr
    assert message in err[0]
    assert "Traceback" not in r.stderr
    assert not (tmp_path / "x.jpg").exists()


def test_invalid_shape_is_one_line(tmp_path):
    p = tmp_path / "thin.toml"
    p.write_text(SECTION_TEXT.replace("[-0.075, 0.038]", "[-0.001, 0.0]"))
    r = cli("evaluate", p, "--alpha", "0")
    assert r.returncode == 2
    assert len(r.stderr.strip().splitlines()) == 1
    assert "not usable" in r.stderr


def test_the_command_table_is_the_parser(monkeypatch):
    # every command comes from the table, and a command registered there is on the command line
    from foilmap import cli as cli_module

    parser = cli_module.build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    assert list(sub.choices) == [n for n in cli_module.ORDER if n in cli_module.COMMANDS] + [
        n for n in cli_module.COMMANDS if n not in cli_module.ORDER]
    monkeypatch.setattr(cli_module, "COMMANDS", dict(cli_module.COMMANDS))

    def options(p):
        p.add_argument("--times", type=cli_module._int_range("times", 1, 3), default=1)

    seen = []
    cli_module.command("echo-test", "a command for this test", options)(
        lambda args: seen.append(args.times) or 0)
    assert cli_module.main(["echo-test", "--times", "2"]) == 0 and seen == [2]
    assert cli_module.main(["echo-test", "--times", "9"]) == 2  # bad input: exit 2, one line
    with pytest.raises(ValueError, match="registered twice"):
        cli_module.command("echo-test", "again", options)(lambda args: 0)
