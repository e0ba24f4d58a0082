"""Family files: reading, writing, and the section at a span position (store/familyfile)."""

from __future__ import annotations

import numpy as np
import pytest

from foilmap.design.family import Family
from foilmap.errors import InputError
from foilmap.section.conformal import SectionSet
from foilmap.store.familyfile import format_family, load_section_at, parse_family


def _family():
    rng = np.random.default_rng(8)
    a = -0.09 + 0.01 * rng.normal(size=(3, 4)) + 1j * (0.03 + 0.005 * rng.normal(size=(3, 4)))
    return Family(("root", "mid", "tip"), np.array([0.0, 0.4, 1.0]), a,
                  np.array([13.0, 11.5, 10.25]), "linear",
                  ({"cl": 0.7}, {"cl": 0.6}, {"cl": 0.5}))


def test_family_file_round_trip_is_exact(tmp_path):
    fam = _family()
    text = format_family("blade", fam, {"study": "fam"})
    back = parse_family(text, "b.toml")
    assert back.names == fam.names and back.rule == fam.rule
    assert np.array_equal(back.coefficients, fam.coefficients)
    assert np.array_equal(back.te_angle_deg, fam.te_angle_deg)
    assert np.array_equal(back.positions, fam.positions)
    p = tmp_path / "b.toml"
    p.write_text(text)
    rec = load_section_at(p, 0.4)  # a station: its section bit for bit
    assert np.array_equal(rec.coefficients, fam.coefficients[1])
    assert rec.te_angle_deg == 11.5
    mid = load_section_at(p, 0.7)
    assert np.array_equal(mid.to_set().coefficients, fam.section_at(0.7).coefficients)


@pytest.mark.parametrize("at,needle", [
    (1.5, "outside the family's stations (0 to 1)"),
    (None, "is a family file: give --at POSITION"),
])
def test_family_file_position_checks(tmp_path, at, needle):
    p = tmp_path / "b.toml"
    p.write_text(format_family("blade", _family()))
    with pytest.raises(InputError, match=needle.replace("(", r"\(").replace(")", r"\)")):
        load_section_at(p, at)


@pytest.mark.parametrize("edit,needle", [
    (("position = 0.4", "position = 0.0"), "does not increase"),
    (("rule = \"linear\"", "rule = \"cubic\""), "'family.rule' = 'cubic' is not allowed"),
    (("te_angle_deg = 11.5", "te_angle_deg = 75.0"), "te_angle_deg"),
    (("name = \"mid\"", "name = \"mid\"\ncolour = 1"), "unknown key 'station[2].colour'"),
])
def test_bad_family_file_gets_one_line(edit, needle):
    text = format_family("blade", _family()).replace(*edit)
    with pytest.raises(InputError) as err:
        parse_family(text, "b.toml")
    assert needle in str(err.value) and "\n" not in str(err.value), str(err.value)


def test_a_section_file_with_at_is_refused(tmp_path):
    from foilmap.store.sectionfile import format_section

    p = tmp_path / "s.toml"
    p.write_text(format_section("s", [-0.09 + 0.03j], 12.0))
    with pytest.raises(InputError, match="--at 0.5 needs a family file"):
        load_section_at(p, 0.5)
    assert load_section_at(p, None).name == "s"


def test_section_set_of_a_family_matches_stations():
    fam = _family()
    sec = fam.section_at(np.array([0.0, 1.0]))
    assert isinstance(sec, SectionSet) and np.array_equal(sec.coefficients,
                                                          fam.coefficients[[0, 2]])


