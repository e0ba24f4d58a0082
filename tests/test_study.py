"""Study files: expansion into runs, defaults, and a table of bad files with their messages."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

from foilmap import InputError
from foilmap.design.study import SCHEMA
from foilmap.store.studyfile import load_study_text

ROOT = Path(__file__).resolve().parents[1]

BASE = """
[study]
name = "t"
seeds = [1, 2]
[[point]]
name = "a"
cl = 0.5
[objectives]
peak_suction = 1.0
"""

#: a family study: two span stations (the schema tests set the first station's keys)
FAMILY_BASE = """
[study]
name = "t"
seeds = [1, 2]
[[station]]
name = "root"
position = 0.0
cl = 0.5
[[station]]
name = "tip"
position = 1.0
cl = 0.4
[objectives]
peak_suction = 1.0
"""


def test_defaults_and_expansion():
    text = BASE + """
[[point]]
name = "b"
cl = 0.8
cl_range = [0.6, 1.0]
[[variant]]
name = "n4"
shape = { coefficients = 4 }
[[variant]]
name = "n8"
shape = { coefficients = 8 }
search = { max_evaluations = 500 }
"""
    st = load_study_text(text)
    runs = st.runs()
    assert len(runs) == 2 * 2 * 2  # variants × points × seeds
    assert [r.run_id for r in runs[:3]] == ["a.n4.s1", "a.n4.s2", "b.n4.s1"]
    assert runs[0].shape["coefficients"] == 4 and runs[-1].shape["coefficients"] == 8
    assert runs[-1].search["max_evaluations"] == 500 and runs[0].search["max_evaluations"] == 3000
    assert runs[2].point.cls == (0.8, 0.6, 1.0)
    assert st.with_budget(77).runs()[-1].search["max_evaluations"] == 77
    assert st.text == text
    # a budget changes the budget only: the text, file, folder, engine and fronts stay
    b = st.with_budget(77)
    assert (b.text, b.source, b.base_dir, b.engine, b.reference_point) == (
        st.text, st.source, st.base_dir, st.engine, st.reference_point)


def test_engine_and_fronts_tables_reach_the_study():
    st = load_study_text(BASE.replace("peak_suction = 1.0", "peak_suction = 1.0\nseverity = 1.0")
                     + '[engine]\nkind = "dask"\nworkers = 3\n'
                     "[fronts]\nreference_point = [2.0, 3.0]\n")
    assert st.engine == {"kind": "dask", "scheduler": "", "workers": 3}
    assert st.reference_point == (2.0, 3.0)


def test_a_symmetric_study_may_bound_camber_from_zero():
    # zero camber inside [0, 0.05] (a symmetric section has none): allowed
    st = load_study_text(BASE + "[shape]\nsymmetric = true\n[constraints]\ncamber = [0.0, 0.05]\n")
    assert st.constraints["camber"] == [0.0, 0.05]


def _param(**shape):
    from foilmap.design.study import Parametrisation

    base = {"coefficients": 3, "start": [[-0.09, 0.03], [0.01, -0.02]], "step": 0.02,
            "limit": 0.15, "te_angle_deg": [6.0, 14.0]}
    return Parametrisation.from_shape({**base, **shape})


def test_parametrisation_bounds_start_and_trailing_edge_angle():
    import numpy as np

    # docs/method.md: A_n = start_n + (step/n)(y + i y'), |ΔA_n| ≤ limit/n at the bounds
    par = _param()
    assert not par.symmetric and par.dimension == 7
    lo, hi = par.bounds()
    assert hi[:6] == [0.15 / 0.02] * 6 and lo[:6] == [-0.15 / 0.02] * 6
    assert (lo[6], hi[6]) == (0.0, 1.0)
    sec = par.sections(np.array([hi]))
    n = np.arange(1, 4)
    start = np.array([-0.09 + 0.03j, 0.01 - 0.02j, 0.0])
    np.testing.assert_allclose(sec.coefficients[0] - start, (0.15 / n) * (1 + 1j), atol=1e-15)
    assert np.degrees(sec.te_angle[0]) == pytest.approx(14.0)
    # the start: the start pairs, τ mid-range; or the start section's own τ, clipped to the range
    x0 = par.x0()
    assert list(x0[:6]) == [0.0] * 6 and x0[6] == 0.5
    np.testing.assert_array_equal(par.sections(x0).coefficients[0], start)
    assert _param(start_te_angle_deg=8.0).x0()[6] == pytest.approx(0.25)
    assert _param(start_te_angle_deg=30.0).x0()[6] == 1.0
    assert _param(start_te_angle_deg=2.0).x0()[6] == 0.0
    # a fixed τ has no coordinate and every section gets it
    fixed = _param(te_angle_deg=[9.0, 9.0])
    assert fixed.dimension == 6
    assert np.degrees(fixed.sections(np.zeros((2, 6))).te_angle) == pytest.approx([9.0, 9.0])
    # coefficients beyond N are dropped; start_pairs (a start file's) win over start
    par = _param(coefficients=1, start_pairs=[[-0.1, 0.02], [0.5, 0.5]])
    np.testing.assert_array_equal(par.start, [-0.1 + 0.02j])
    # symmetric: N real components, no imaginary part even from a complex start
    sym = _param(symmetric=True)
    assert sym.symmetric and sym.dimension == 4
    assert np.all(sym.sections(np.ones((1, 4))).coefficients.imag == 0)
    assert not _param().symmetric


BAD = [
    ("[study\n", "is not valid TOML"),
    (BASE + "[colour]\nred = 1\n", "unknown table or key 'colour'"),
    (BASE.replace('name = "t"', 'name = "t"\nowner = "me"'), "unknown key 'study.owner'"),
    (BASE.replace("seeds = [1, 2]", "seeds = [1, 1]"), "study.seeds = [1, 1] is not allowed"),
    (BASE.replace("seeds = [1, 2]", "seeds = 3"), "study.seeds = 3 is not allowed"),
    (BASE.replace("seeds = [1, 2]\n", ""), "missing key 'study.seeds'"),
    (BASE.replace('name = "t"', 'name = "my study"'), "study.name = 'my study' is not allowed"),
    (BASE + "[shape]\ncoefficients = 40\n",
     "shape.coefficients = 40 is not allowed (a whole number from 1 to 32)"),
    (BASE + "[shape]\ncoefficients = 2.5\n", "shape.coefficients = 2.5 is not allowed"),
    (BASE + "[shape]\nte_angle_deg = [14.0, 6.0]\n", "shape.te_angle_deg = [14.0, 6.0] is not allowed"),
    (BASE + "[shape]\ncoefficients = 1\nstart = [[-0.1, 0.0], [0.0, 0.0]]\n",
     "shape.start has 2 pairs but shape.coefficients = 1"),
    (BASE.replace("cl = 0.5", "cl = 9.0"), "point[1].cl = 9.0 is not allowed (a number from -5 to 5)"),
    (BASE.replace("cl = 0.5", "cl = 0.5\ncl_range = [0.6, 0.9]"), "point[1].cl = 0.5 is outside its cl_range"),
    (BASE.replace("[[point]]\nname = \"a\"\ncl = 0.5\n", ""), "needs at least one [[point]] table"),
    (BASE.replace("peak_suction = 1.0", "drag = 1.0"), "unknown key 'objectives.drag'"),
    (BASE.replace("peak_suction = 1.0", "peak_suction = 0.0"), "at least one weight must be positive"),
    (BASE.replace("peak_suction = 1.0", "stratford_margin = 1.0"),
     "objective stratford_margin needs 'reynolds' at point 'a'"),
    (BASE + "[constraints]\nthickness = 'thick'\n", "constraints.thickness = 'thick' is not allowed"),
    (BASE + "[constraints]\nmin_thickness = 0.1\n", "'constraints.min_thickness' was renamed: write constraints.thickness = [low, high]"),
    (BASE + "[constraints]\ncm = [0.1]\n", "constraints.cm = [0.1] is not allowed"),
    (BASE + "[search]\nmethod = 'random'\n", "search.method = 'random' is not allowed (one of: cmaes, comocma, epsilon)"),
    (BASE + "[search]\nmax_evaluations = 5\n", "search.max_evaluations = 5 is not allowed"),
    (BASE + "[[variant]]\nname = 'v'\nflow = { cl = 1 }\n", "unknown key 'variant[1].flow'"),
    (BASE + "[[variant]]\nname = 'v'\nshape = { n = 1 }\n", "unknown key 'variant[1].shape.n'"),
    (BASE + "[[variant]]\nname = 'v'\nshape = { coefficients = 0 }\n",
     "variant[1].shape.coefficients = 0 is not allowed"),
    (BASE + "[[point]]\nname = \"a\"\ncl = 0.3\n", "point names must be distinct"),
    (BASE + "[[variant]]\nname = 'v'\n[[variant]]\nname = 'v'\n",
     "variant names must be distinct"),
    ("variant = 3\n" + BASE, "'variant' must be a list of [[variant]] tables"),
    (BASE + "[[variant]]\nshape = { coefficients = 4 }\n", "variant[1] needs a 'name'"),
    (BASE + "[shape]\nstart = ' '\n", "shape.start = ' ' is not allowed (pairs, or a file path)"),
    (BASE.replace("peak_suction = 1.0", "target_cp_rms = 1.0"),
     "objective target_cp_rms needs 'target_cp' at point 'a'"),
    (BASE.replace("cl = 0.5", "cl = 0.5\nspeed = 0.0\ndepth = 1.0\nwater_temperature = 20.0"),
     "point[1].speed = 0.0 is not allowed (a speed above 0)"),
    (BASE + "[constraints]\ncavitation_margin = 0.1\n",
     "constraints.cavitation_margin needs a cavitation number at point"),
    (BASE + "[shape]\nsymmetric = true\n[constraints]\ncamber = [0.01, 0.05]\n",
     "constraints.camber = [0.01, 0.05] excludes zero"),
]


@pytest.mark.parametrize("text,message", BAD)
def test_bad_study_files(text, message):
    with pytest.raises(InputError) as err:
        load_study_text(text, "bad.toml")
    msg = str(err.value)
    assert message in msg
    assert "\n" not in msg and "bad.toml" in msg


def test_docs_describe_every_key():
    doc = (ROOT / "docs" / "study-file.md").read_text()
    for table, keys in SCHEMA.items():
        for key in keys:
            assert re.search(rf"`{re.escape(key)}`", doc), f"{table}.{key} missing from docs"


STUDIES = sorted(p for p in (ROOT / "studies").glob("*.toml") if "[study]" in p.read_text())


def test_studies_are_shipped():
    assert len(STUDIES) >= 2


@pytest.mark.parametrize("path", STUDIES, ids=lambda p: p.name)
def test_shipped_studies_load(path):
    st = load_study_text(path.read_text(), str(path))
    assert st.runs()


# --- every key of the schema refuses what it does not allow --------------------------------------

def _toml(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return '"' + value + '"'
    if isinstance(value, list):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    return repr(value)


def _study_with(table: str, key: str, value) -> str:
    """BASE's study with one key set (replaced where BASE has it; its table added when BASE
    has none)."""
    line = f"{key} = {_toml(value)}"
    base = FAMILY_BASE if table in ("station", "family") else BASE
    header = {"study": "[study]", "point": "[[point]]", "station": "[[station]]",
              "objectives": "[objectives]"}.get(table)
    if header is None:
        return base + f"[{table}]\n{line}\n"
    out, inside, done = [], False, False
    for ln in base.splitlines():
        if ln.startswith("["):
            if inside and not done:
                out.append(line)
                done = True
            inside = ln == header and not done
        elif inside and ln.split(" = ")[0] == key:
            ln, done = line, True
        out.append(ln)
    if inside and not done:
        out.append(line)
    return "\n".join(out) + "\n"


def _bad_values(key):
    """Values outside what the key allows: beyond each end, the wrong type, a reversed range."""
    lo, hi = key.lo, key.hi
    if key.kind == "int":
        return [hi + 1, lo - 1, 2.5, "3"]
    if key.kind == "float":
        return [hi + abs(hi) + 1, lo - abs(lo) - 1, "x", True]
    if key.kind == "range":
        return [[lo - abs(lo) - 1, hi], [lo, hi + abs(hi) + 1], [hi, lo], [lo]]
    if key.kind in ("pairs", "start"):
        return [[[hi + abs(hi) + 1, lo]], [[lo, lo - abs(lo) - 1]], [[lo]], []]
    if key.kind == "ints":
        return [[lo - 1], [1, 1], [], [1.5]]
    if key.kind == "floats":
        return [[hi + abs(hi) + 1], [lo - abs(lo) - 1], [], ["x"]]
    if key.kind == "choice":
        return ["nonsense", 1]
    if key.kind == "bool":
        return ["yes", 1]
    if key.kind == "name":
        return ["two words", "", "x" * 65, 3]
    if key.kind == "str":
        return [3, [1]]
    raise AssertionError(key.kind)


CASES = [(table, key, value) for table, keys in SCHEMA.items() for key, spec in keys.items()
         for value in _bad_values(spec)]


@pytest.mark.parametrize("table,key,value", CASES,
                         ids=[f"{t}.{k}={v!r}" for t, k, v in CASES])
def test_every_key_refuses_what_it_does_not_allow(table, key, value):
    # the schema's own limits (design.study.SCHEMA): every check of every key is exercised, so
    # a check dropped from the validation lets a value through and fails here
    path = f"{table}[1].{key}" if table in ("point", "station") else f"{table}.{key}"
    with pytest.raises(InputError) as err:
        load_study_text(_study_with(table, key, value), "bad.toml")
    msg = str(err.value)
    assert f"{path} = " in msg and "is not allowed" in msg, msg
    assert "\n" not in msg and "bad.toml" in msg


def test_every_key_accepts_its_limits():
    # the ends of every numeric range are allowed (so the refusals above are the bounds')
    for table, keys in SCHEMA.items():
        for key, spec in keys.items():
            if spec.kind not in ("int", "float") or table in ("objectives",):
                continue
            for v in (spec.lo, spec.hi):
                v = int(v) if spec.kind == "int" else float(v)
                text = _study_with(table, key, v)
                try:
                    load_study_text(text, "ok.toml")
                except InputError as exc:  # another key's rule (a cross-check) may object
                    assert f"{table}.{key} = " not in str(exc) and \
                        f"{table}[1].{key} = " not in str(exc), str(exc)


def test_a_run_is_found_by_its_id_and_the_expansion_is_not_sent_to_workers():
    import pickle

    from conftest import small_study

    st = load_study_text(small_study("many", range(1, 301), 20))
    sent = len(pickle.dumps(st))
    runs = st.runs()
    assert [st.run(r.run_id) for r in runs] == runs and len(runs) == 300
    runs.pop()  # the caller's list is its own
    assert len(st.runs()) == 300
    with pytest.raises(KeyError):
        st.run("p.s301")
    back = pickle.loads(pickle.dumps(st))
    assert len(pickle.dumps(st)) == sent  # a worker gets the study, not its 300 runs
    assert back == st and back.runs() == st.runs()
