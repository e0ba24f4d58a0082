"""Study files on disk (store/studyfile.py): the study file itself, start files (a section file,
or coordinates fitted once) and target tables, read relative to the study's folder; a missing
or bad file is one line naming it.  The schema and its messages: test_study.py."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import SECTION_TEXT, small_study

from foilmap import InputError
from foilmap.section.naca import naca4_coordinates
from foilmap.store.studyfile import load_study, load_study_text, read_start, read_target


def test_a_study_file_is_read_with_its_text(tmp_path):
    text = small_study("disk", [1, 2], 100)
    (tmp_path / "s.toml").write_text(text)
    st = load_study(tmp_path / "s.toml")
    assert st.name == "disk" and st.text == text and len(st.runs()) == 2
    assert st.base_dir == str(tmp_path.resolve())
    with pytest.raises(InputError, match="cannot read study file"):
        load_study(tmp_path / "missing.toml")


def test_a_section_file_start_is_read_from_the_studys_folder(tmp_path, monkeypatch):
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "start.toml").write_text(SECTION_TEXT)
    (tmp_path / "sub" / "s.toml").write_text(small_study("st", [1], 100).replace(
        "coefficients = 4", 'coefficients = 3\nstart = "start.toml"'))
    monkeypatch.chdir(tmp_path)  # not the study's folder: the start is found beside the study
    st = load_study("sub/s.toml")
    shape = st.runs()[0].shape
    # the section file's three pairs (conftest.SECTION_TEXT) as [real, imag], and its angle
    np.testing.assert_array_equal(shape["start_pairs"],
                                  [[-0.075, 0.038], [0.004, -0.003], [-0.001, 0.0008]])
    assert shape["start_te_angle_deg"] == 10.0
    coeffs, tau = read_start("start.toml", str(tmp_path / "sub"))
    assert tau == 10.0 and len(coeffs) == 3


def test_a_coordinates_start_is_fitted(tmp_path):
    xy = naca4_coordinates("0012", 201)
    (tmp_path / "n.dat").write_text("\n".join(f"{x:.8f} {y:.8f}" for x, y in xy))
    coeffs, tau = read_start("n.dat", str(tmp_path))
    assert len(coeffs) == 32  # START_FIT_PAIRS: a run keeps its first N
    # a symmetric section fits to real coefficients, its closed edge to about 16.5°
    # (test_fit.py: the closed four-digit 0012's trailing-edge angle)
    assert np.max(np.abs(np.imag(coeffs))) < 1e-6
    assert tau == pytest.approx(16.5, abs=0.2)


def test_a_target_table_is_read_for_its_point(tmp_path):
    (tmp_path / "t.csv").write_text("x,surface,cp\n" + "".join(
        f"0.{i},upper,-0.{i}\n" for i in range(1, 6)))
    x, upper, cp = read_target("t.csv", str(tmp_path))
    assert x == (0.1, 0.2, 0.3, 0.4, 0.5) and all(upper)
    np.testing.assert_allclose(cp, [-0.1, -0.2, -0.3, -0.4, -0.5], atol=1e-12)


@pytest.mark.parametrize("key", ["start", "target"])
def test_a_missing_file_names_the_key_and_the_folder(tmp_path, key):
    text = small_study("m", [1], 100)
    if key == "start":
        text = text.replace("coefficients = 4", 'coefficients = 4\nstart = "nope.toml"')
    else:
        text = text.replace("cl = 0.5", 'cl = 0.5\ntarget_cp = "nope.csv"').replace(
            "peak_suction = 1.0", "target_cp_rms = 1.0")
    with pytest.raises(InputError) as err:
        load_study_text(text, "s.toml", base_dir=str(tmp_path))
    msg = str(err.value)
    assert "nope." in msg and str(tmp_path) in msg and "\n" not in msg, msg


def test_a_bad_start_file_is_one_line_naming_it(tmp_path):
    (tmp_path / "bad.toml").write_text("[section]\nname = 'x'\n")
    text = small_study("b", [1], 100).replace("coefficients = 4",
                                              'coefficients = 4\nstart = "bad.toml"')
    with pytest.raises(InputError) as err:
        load_study_text(text, "s.toml", base_dir=str(tmp_path))
    assert "bad.toml" in str(err.value) and "\n" not in str(err.value)


def test_a_variants_own_start_file_is_read(tmp_path):
    (tmp_path / "start.toml").write_text(SECTION_TEXT)
    text = small_study("v", [1], 100) + (
        '[[variant]]\nname = "fromfile"\nshape = { coefficients = 3, start = "start.toml" }\n'
        '[[variant]]\nname = "plain"\n')
    st = load_study_text(text, "s.toml", base_dir=str(tmp_path))
    shapes = {r.variant: r.shape for r in st.runs()}
    np.testing.assert_array_equal(shapes["fromfile"]["start_pairs"],
                                  [[-0.075, 0.038], [0.004, -0.003], [-0.001, 0.0008]])
    assert shapes["fromfile"]["start_te_angle_deg"] == 10.0
    assert "start_pairs" not in shapes["plain"]
    with pytest.raises(InputError, match=r"variant\[1\]\.shape\.start = 'nope.toml'"):
        load_study_text(text.replace('"start.toml"', '"nope.toml"'), "s.toml",
                    base_dir=str(tmp_path))
