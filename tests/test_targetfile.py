"""Target tables for inverse design (store/targetfile.py): columns by header name, Cp or q,
comments and extra columns ignored, and every bad table refused in one line naming its line,
column and value (in-process; test_inverse.py runs the command's end of it)."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import ROOT

from foilmap import InputError
from foilmap.section.evaluation import analyse, surface_distribution
from foilmap.store.sectionfile import load_section
from foilmap.store.targetfile import load_target, parse_target

EXAMPLE = ROOT / "studies" / "example-section.toml"

#: five upper-surface rows (test data, invented)
ROWS = "".join(f"0.{i},upper,-0.5\n" for i in range(1, 6))


def test_cp_and_q_columns_give_the_same_speeds():
    cp = parse_target("x,surface,cp\n0.1,upper,-0.44\n0.2,upper,0.19\n0.3,lower,0.0\n"
                      "0.4,lower,0.75\n0.5,lower,1.0\n")
    # q = √(1 − Cp) (Bernoulli; docs/inverse.md): 1.2, 0.9, 1, 0.5, 0
    np.testing.assert_allclose(cp.q, [1.2, 0.9, 1.0, 0.5, 0.0], atol=1e-15)
    np.testing.assert_array_equal(cp.upper, [True, True, False, False, False])
    q = parse_target("surface,q,x\nupper,1.2,0.1\nupper,0.9,0.2\nlower,1,0.3\nlower,0.5,0.4\n"
                     "lower,0,0.5\n")  # any column order
    np.testing.assert_array_equal(q.x, cp.x)
    np.testing.assert_allclose(q.q, cp.q, atol=1e-15)


def test_extra_columns_and_comments_are_ignored():
    # a table as `evaluate --table` writes it, with an id and a note column added
    sec = load_section(EXAMPLE).to_set()
    an = analyse(sec, cl=0.5, proxies=())
    zc, up, q = surface_distribution(an, 201)
    lines = ["# a comment", "id,x,y,surface,cp,q,note"]
    for i, (z, u, s) in enumerate(zip(zc[0], up[0], q[0])):
        lines.append(f"{i},{z.real},{z.imag},{'upper' if u else 'lower'},{1 - s * s},{s},n")
    t = parse_target("\n".join(lines))
    np.testing.assert_allclose(t.q, q[0], atol=1e-12)
    np.testing.assert_array_equal(t.upper, up[0])


def test_a_loaded_table(tmp_path):
    p = tmp_path / "t.csv"
    p.write_text("x,surface,cp\n" + ROWS)
    assert len(load_target(p).x) == 5
    with pytest.raises(InputError, match="cannot read target file"):
        load_target(tmp_path / "missing.csv")


@pytest.mark.parametrize("body, expect", [
    ("x,surface,cp\n0.1,upper,-0.5\nabc,upper,-0.4\n", "line 3: x = 'abc' is not a number"),
    ("x,surface,cp\n" + "".join(ROWS.splitlines(True)[:4]) + "0.5,middle,-0.2\n",
     "line 6: surface = 'middle' is neither 'upper' nor 'lower'"),
    ("x,surface,cp\n" + ROWS + "1.5,upper,-0.2\n", "line 7: x = 1.5 is outside 0 to 1"),
    ("x,surface,cp\n" + ROWS + "-0.1,upper,-0.2\n", "line 7: x = -0.1 is outside 0 to 1"),
    ("x,surface,cp\n0.1,upper,-0.5\n0.2,upper,-0.4\n", "2 points; a target needs at least 5"),
    ("x,side,cp\n0.1,upper,-0.5\n", "no column 'surface'"),
    ("surface,cp\n0.1,upper\n", "no column 'x'"),
    ("x,surface,v\n0.1,upper,-0.5\n", "the header has neither 'cp' nor 'q'"),
    ("# only a comment\n", "has no rows"),
    ("x,surface,cp\n" + ROWS + "0.5,upper,x\n", "line 7: cp = 'x' is not a number"),
    ("x,surface,cp\n" + ROWS + "0.5,upper,1.5\n", "line 7: cp = 1.5 is not allowed (at most 1"),
    ("x,surface,q\n" + ROWS.replace("-0.5", "1.1") + "0.5,upper,-0.1\n",
     "line 7: q = -0.1 is not allowed (a speed ratio of at least 0)"),
    ("x,surface,cp\n" + ROWS + "0.5,upper\n", "line 7: 2 columns, the header has 3"),
    ("x,surface,cp\n" + ROWS + "0.5,lower,0.1\n", "the lower surface has one point"),
])
def test_bad_targets_name_line_column_and_value(body, expect):
    with pytest.raises(InputError) as err:
        parse_target(body, "t.csv")
    msg = str(err.value)
    assert expect in msg and "\n" not in msg and "'t.csv'" in msg, msg
