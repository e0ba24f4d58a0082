"""Section files: round trip and a table of malformed files, each with its one-line message."""

from __future__ import annotations

import numpy as np
import pytest

from foilmap import InputError, format_section, load_section
from foilmap.store.sectionfile import parse_section

GOOD = """
[section]
name = "example"
te_angle_deg = 12.0
coefficients = [[-0.10, 0.05], [0.01, -0.004]]   # A_1..A_N as [real, imag]
"""


def test_good_file_and_round_trip(tmp_path):
    rec = parse_section(GOOD)
    assert rec.name == "example" and rec.te_angle_deg == 12.0
    np.testing.assert_array_equal(rec.coefficients, [-0.10 + 0.05j, 0.01 - 0.004j])
    p = tmp_path / "s.toml"
    p.write_text(format_section(rec.name, rec.coefficients, rec.te_angle_deg,
                                {"origin": "test", "cl": 0.5}))
    back = load_section(p)
    np.testing.assert_array_equal(back.coefficients, rec.coefficients)  # bit-exact repr
    assert back.provenance == {"origin": "test", "cl": 0.5}


BAD = [
    ("[section\nname='x'", "is not valid TOML"),
    ("name = 'x'", "unknown table or key 'name'"),
    ("[other]\na = 1", "unknown table or key 'other'"),
    ("[provenance]\na = 1", "missing table [section]"),
    ("[section]\nname='x'\nte_angle_deg=1.0", "missing key 'section.coefficients'"),
    ("[section]\nname='x'\nte_angle_deg=1.0\ncoefficients=[[0.1,0]]\ncolour='red'",
     "unknown key 'section.colour'"),
    ("[section]\nname=3\nte_angle_deg=1.0\ncoefficients=[[0.1,0]]", "'section.name' must be"),
    ("[section]\nname='x'\nte_angle_deg=75.0\ncoefficients=[[0.1,0]]",
     "'section.te_angle_deg' = 75.0 is not allowed (a number of degrees from 0 to 60)"),
    ("[section]\nname='x'\nte_angle_deg='ten'\ncoefficients=[[0.1,0]]",
     "'section.te_angle_deg' = 'ten' is not allowed"),
    ("[section]\nname='x'\nte_angle_deg=10\ncoefficients=[]",
     "'section.coefficients' must be a list of 1 to 64"),
    ("[section]\nname='x'\nte_angle_deg=10\ncoefficients=[[0.1, 0.0], [0.2]]",
     "entry 2 (A_2) = [0.2] is not a [real, imag] pair"),
    ("[section]\nname='x'\nte_angle_deg=10\ncoefficients=[[0.1, nan]]",
     "entry 1 (A_1) = [0.1, nan] is not a [real, imag] pair of finite numbers"),
    ("[section]\nname='x'\nte_angle_deg=10\ncoefficients=[[3.0, 0.0]]",
     "entry 1 (A_1) has modulus 3; allowed: at most 1"),
]


@pytest.mark.parametrize("text,message", BAD)
def test_malformed_files_name_the_problem(text, message):
    with pytest.raises(InputError) as err:
        parse_section(text, "bad.toml")
    assert message in str(err.value)
    assert "\n" not in str(err.value)
    assert "bad.toml" in str(err.value)


def test_missing_file(tmp_path):
    with pytest.raises(InputError, match="cannot read section file .*No such file"):
        load_section(tmp_path / "nope.toml")
