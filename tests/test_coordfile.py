"""Coordinate files (store/coordfile.py): the layouts, the chord frame, an open trailing edge,
and bad files, each refused in one line that names the problem (in-process: quick)."""

from __future__ import annotations

import numpy as np
import pytest

from foilmap import InputError
from foilmap.section.naca import naca4_coordinates
from foilmap.store.coordfile import load_coordinates, normalise_loop, parse_coordinates

#: NACA 2412 from the four-digit formula, 61 points TE → upper → LE → lower → TE (test data)
XY = naca4_coordinates("2412", 61)
LOOP = "\n".join(f"{x:.8f} {y:.8f}" for x, y in XY)


def surfaces_text():
    le = int(np.argmin(XY[:, 0]))
    up, lo = XY[: le + 1][::-1], XY[le:]
    rows = [f"{len(up)}. {len(lo)}."] + [f"{x:.8f} {y:.8f}" for x, y in up]
    rows += [f"{x:.8f} {y:.8f}" for x, y in lo]
    return "NACA 2412 two surfaces\n" + "\n".join(rows)


@pytest.mark.parametrize("text,layout,rev,rows", [
    ("NACA 2412\n" + LOOP, "loop", False, 61),
    ("# a comment\nNACA 2412\n" + "\n".join(LOOP.splitlines()[::-1]), "loop", True, 61),
    (surfaces_text(), "surfaces", False, 62),  # the leading edge on both surfaces
    ("x,y\n" + LOOP.replace(" ", ","), "csv (loop)", False, 61),
])
def test_layouts_are_detected(text, layout, rev, rows):
    c = parse_coordinates(text, "f.dat")
    assert c.layout == layout and c.reversed == rev
    xy = c.xy
    assert tuple(xy[0]) == (1.0, 0.0) and tuple(xy[-1]) == (1.0, 0.0)
    le = c.le_index
    assert tuple(xy[le]) == (0.0, 0.0)
    # whatever the file's direction, the upper surface comes first
    assert np.all(xy[1:le, 1] > 0) and np.all(xy[le + 1 : -1, 1] < 0)
    assert c.rows_read == rows


def test_a_reversed_loop_gives_the_same_points():
    fwd = parse_coordinates(LOOP, "f.dat")
    back = parse_coordinates("\n".join(LOOP.splitlines()[::-1]), "b.dat")
    assert not fwd.reversed and back.reversed
    np.testing.assert_array_equal(back.xy, fwd.xy)


def test_a_loaded_file_keeps_its_name_line(tmp_path):
    p = tmp_path / "n.dat"
    p.write_text("NACA 2412 from the formula\n" + LOOP + "\n")
    c = load_coordinates(p)
    assert c.name == "NACA 2412 from the formula" and c.layout == "loop"
    with pytest.raises(InputError, match="cannot read coordinates file"):
        load_coordinates(tmp_path / "missing.dat")


def test_open_trailing_edge_is_reported_and_closed():
    xy = naca4_coordinates("0012", 101, closed_te=False)
    c = normalise_loop(xy, "open")
    # the open four-digit edge is 0.00252 c thick (2 × 0.00126, Abbott & von Doenhoff,
    # Theory of Wing Sections, §6.4; test_fit.py works it from the formula)
    assert c.te_gap == pytest.approx(0.00252, abs=2e-5)
    assert c.closing_shift == pytest.approx(c.te_gap / 2, rel=1e-6)
    assert tuple(c.xy[0]) == (1.0, 0.0) and tuple(c.xy[-1]) == (1.0, 0.0)
    assert tuple(c.xy[c.le_index]) == (0.0, 0.0)  # the leading edge does not move


def _moved(k: int, dx: float) -> tuple[str, int, tuple[float, float]]:
    """LOOP with point k (0-based) moved by dx along the chord: text, its line, the point."""
    xy = XY.copy()
    xy[k, 0] += dx
    text = "NACA 2412\n" + "\n".join(f"{x:.8f} {y:.8f}" for x, y in xy)
    return text, k + 2, (float(f"{xy[k, 0]:.8f}"), float(f"{xy[k, 1]:.8f}"))


@pytest.mark.parametrize("k,dx", [(8, 0.1), (50, -0.1)], ids=["upper", "lower"])
def test_a_point_out_of_order_is_named_by_its_line(k, dx):
    # one point of the upper surface moved aft of its predecessor (x must fall towards the
    # leading edge), one of the lower surface moved ahead of its predecessor (x must rise)
    text, line, (x, y) = _moved(k, dx)
    with pytest.raises(InputError) as err:
        parse_coordinates(text, "bad.dat")
    msg = str(err.value)
    assert f"line {line}: the point ({x:g}, {y:g}) is out of order" in msg, msg
    assert "\n" not in msg and "'bad.dat'" in msg


def test_swapped_points_are_refused_in_the_surfaces_layout():
    rows = surfaces_text().splitlines()
    rows[5], rows[6] = rows[6], rows[5]  # two upper-surface points (lines 6 and 7) swapped
    # read from the trailing edge, x must fall: line 6 now holds the point farther aft
    x, y = (float(v) for v in rows[5].split())
    with pytest.raises(InputError) as err:
        parse_coordinates("\n".join(rows), "s.dat")
    assert f"line 6: the point ({x:g}, {y:g}) is out of order" in str(err.value)


def _bad(kind):
    rows = LOOP.splitlines()
    if kind == "few":
        return "\n".join(rows[:8])
    if kind == "open":
        return "\n".join(rows[: len(rows) // 2 + 5])
    if kind == "cross":
        xy = naca4_coordinates("0012", 61)
        xy[10], xy[50] = xy[50].copy(), xy[10].copy()
        return "\n".join(f"{x} {y}" for x, y in xy)
    if kind == "dup":
        return "\n".join(rows[:20] + [rows[19]] + rows[20:])
    if kind == "text":
        return "[section]\nname = 'x'\n"
    if kind == "word":
        return "\n".join(rows[:20] + ["0.5 abc"] + rows[20:])
    if kind == "three":
        return "\n".join(rows[:20] + ["0.5 0.1 0.2"] + rows[20:])
    if kind == "inf":
        return "\n".join(rows[:20] + ["0.5 inf"] + rows[20:])
    if kind == "coincide":
        return "\n".join(["0.5 0.0", "0.5 0.0"] * 7)
    raise AssertionError(kind)


@pytest.mark.parametrize("kind,message", [
    ("few", "has 8 points; at least 12 are needed"),
    ("open", "the contour is not closed"),
    ("cross", "the contour crosses itself"),
    ("dup", "duplicate point (0.295082, 0.0786495) at rows 20 and 21 (line 21)"),
    ("text", "this does not look like a coordinates file"),
    ("word", "line 21 is not numeric"),
    ("three", "line 21 has 3 numbers; expected two"),
    ("inf", "line 21"),
])
def test_bad_coordinate_files(kind, message):
    with pytest.raises(InputError) as err:
        parse_coordinates(_bad(kind), "bad.dat")
    msg = str(err.value)
    assert message in msg and "\n" not in msg and "'bad.dat'" in msg, msg
