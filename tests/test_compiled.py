"""The compiled kernels' rooms: the facade, the status codes, the figure columns and the cache key
that covers every kernel file."""

from __future__ import annotations

import shutil
from pathlib import Path

import numba
import pytest

from foilmap.section import _compiled, _kcache, _kconst
from foilmap.section.status import Status

KERNEL_MODULES = ("_kbounds", "_kfloor", "_kmap", "_kpeak", "_kproxies", "_ksearch", "_kvalid")


def test_every_status_has_its_kernel_code_and_back():
    codes = {name: getattr(_kconst, name) for name in dir(_kconst) if name.startswith("V_")}
    # one code a status, the same number, and no code the Status enum does not know
    assert sorted(codes.values()) == sorted(int(s) for s in Status)
    assert len(set(codes.values())) == len(codes)
    pairs = {"V_OK": Status.OK, "V_CRITICAL": Status.CRITICAL_POINT,
             "V_SINGULAR": Status.SINGULAR_POINT, "V_BRANCH_CUT": Status.BRANCH_CUT,
             "V_FOLDED": Status.FOLDED, "V_CROSSED": Status.NEGATIVE_THICKNESS,
             "V_ABOVE_MAX_LIFT": Status.ABOVE_MAX_LIFT, "V_NON_FINITE": Status.NON_FINITE,
             "V_NOT_STARLIKE": Status.NOT_STARLIKE, "V_THIN": Status.BELOW_FLOOR,
             "V_UNCERTIFIED": Status.UNCERTIFIED}
    assert set(pairs) == set(codes)
    for name, status in pairs.items():
        assert codes[name] == int(status), name
        assert getattr(_compiled, name) == int(status)  # the facade re-exports the same


def test_figure_columns_are_one_list():
    from dataclasses import fields

    from foilmap.section.evaluation import Evaluation

    assert len(set(_kconst.FIGURES)) == len(_kconst.FIGURES)
    for i, name in enumerate(_kconst.FIGURES):
        assert getattr(_kconst, "F_" + name.upper()) == i
    names = {f.name for f in fields(Evaluation)} - {"status"}
    assert names == set(_kconst.FIGURES)


def test_facade_reexports_the_kernels():
    from foilmap.section import _kfloor, _kpeak, _ksearch, _kvalid

    assert _compiled.search_batch is _ksearch.search_batch
    assert _compiled.peak_batch is _kpeak.peak_batch
    assert _compiled.validity_batch is _kvalid.validity_batch
    assert _compiled.floor_stations is _kfloor.floor_stations
    for name in _compiled.__all__:
        assert hasattr(_compiled, name), name


def _dispatchers():
    import importlib

    for mod in KERNEL_MODULES:
        m = importlib.import_module(f"foilmap.section.{mod}")
        for name, obj in vars(m).items():
            if isinstance(obj, numba.core.registry.CPUDispatcher) and obj.__module__ == m.__name__:
                yield f"{mod}.{name}", obj


def test_every_kernel_is_cached_under_the_stamp_of_all_kernel_files():
    stamp = ("foilmap-kernels", _kcache.kernel_stamp())
    seen = 0
    for name, disp in _dispatchers():
        cache = disp._cache
        assert isinstance(cache._impl.locator, _kcache._KernelLocator), name
        assert cache._cache_file._source_stamp == stamp, name
        seen += 1
    assert seen > 40
    # the files the stamp covers are the kernel modules and their constants and cache
    names = {p.stem for p in _kcache.kernel_files()}
    assert names == set(KERNEL_MODULES) | {"_kcache", "_kconst"}


def test_an_edit_of_a_callee_file_changes_every_callers_key(tmp_path):
    for path in _kcache.kernel_files():
        shutil.copy(path, tmp_path / path.name)
    before = _kcache.kernel_stamp(tmp_path)
    assert before == _kcache.kernel_stamp()
    # the map at a point is called by the search kernel from another file: an edit there
    # (even one that keeps every line number) changes the key the search kernel is cached by
    callee = tmp_path / "_kmap.py"
    text = callee.read_text()
    assert "1e-13" in text
    callee.write_text(text.replace("1e-13", "2e-13", 1))
    assert _kcache.kernel_stamp(tmp_path) != before
    callee.write_text(text)
    assert _kcache.kernel_stamp(tmp_path) == before
    (tmp_path / "_kconst.py").write_text((tmp_path / "_kconst.py").read_text() + "\n")
    assert _kcache.kernel_stamp(tmp_path) != before


@pytest.mark.parametrize("name", ["_ksearch.py", "_kcache.py"])
def test_other_files_keep_numbas_own_locator(name, tmp_path):
    # a file outside the section folder is not a kernel file, whatever its name
    other = tmp_path / name
    other.write_text("def f():\n    return 1\n")
    ns = {}
    exec(compile(other.read_text(), str(other), "exec"), ns)
    assert _kcache._KernelLocator.from_function(ns["f"], str(other)) is None


def test_the_driver_warms_the_cache_once_per_kernel_version(tmp_path, monkeypatch):
    # the first driver after an edit of a kernel file compiles (or loads) every entry point
    # before its workers start; later drivers skip it while the marker of that version stands
    from foilmap.section import _compiled

    calls = []
    monkeypatch.setattr(_compiled, "warm_up", lambda: calls.append(1))
    marker = tmp_path / "stamp.nbw"
    monkeypatch.setattr(_compiled, "_warm_marker", lambda: marker)
    assert _compiled.warm_cache() and marker.exists() and calls == [1]
    assert not _compiled.warm_cache() and calls == [1]
    marker.unlink()  # the cache cleared (or another version of the kernels)
    assert _compiled.warm_cache() and calls == [1, 1]


def test_the_warm_marker_names_the_kernels_version_beside_the_cache():
    from foilmap.section import _compiled
    from foilmap.section._kcache import kernel_stamp

    marker = _compiled._warm_marker()
    assert marker is not None and marker.suffix == ".nbw"
    assert marker.parent == Path(_compiled.search_batch._cache._cache_path)
    assert kernel_stamp()[:16] in marker.name
