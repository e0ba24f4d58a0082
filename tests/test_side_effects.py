"""Library calls have no process-wide side effects and write nothing outside their output
folder; what they write honours the umask (a hand-off colleagues can read)."""

from __future__ import annotations

import os
import stat

import matplotlib
from conftest import SECTION_TEXT, cli, small_study

from foilmap import analyse, load_section
from foilmap.run.local import drive_study
from foilmap.store.studyfile import load_study_text


def mode(path) -> int:
    return stat.S_IMODE(os.stat(path).st_mode)


def test_a_study_run_from_python_leaves_the_process_as_it_was(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    old_mask = os.umask(0o022)
    try:
        before = dict(os.environ)
        study = load_study_text(small_study("quiet", [1], 150))
        drive_study(study, tmp_path / "out", workers=1)
        assert dict(os.environ) == before  # no BLAS thread settings left behind
        assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]  # no outcmaes/ or others
        out = tmp_path / "out"
        for name in ("index.json", "study.toml", "options.json", "runs/p.s1.h5"):
            assert mode(out / name) == 0o644, name
        assert mode(out / "runs") == 0o755
        # a Pareto-front search too (COMO-CMA-ES names folders for its kernels' logs)
        front = small_study("front", [1], 300, objectives="peak_suction = 1.0\nseverity = 1.0",
                            extra='[fronts]\nreference_point = [3.0, 3.0]\n').replace(
            "[search]", "[search]\nmethod = \"comocma\"\nkernels = 3")
        drive_study(load_study_text(front), tmp_path / "front", workers=1)
        assert sorted(p.name for p in tmp_path.iterdir()) == ["front", "out"]
        assert dict(os.environ) == before
    finally:
        os.umask(old_mask)


def test_exports_and_section_files_are_readable_by_colleagues(tmp_path):
    old_mask = os.umask(0o022)
    try:
        section = tmp_path / "s.toml"
        section.write_text(SECTION_TEXT)
        r = cli("export", section, "--cl", "0.5", "-o", tmp_path / "bundle")
        assert r.returncode == 0, r.stderr
        assert mode(tmp_path / "bundle") == 0o755
        files = [p for p in (tmp_path / "bundle").rglob("*") if p.is_file()]
        assert files and all(mode(p) == 0o644 for p in files)
    finally:
        os.umask(old_mask)


def test_plots_do_not_switch_the_callers_backend(tmp_path):
    from foilmap.report.plots import plot_section

    previous = matplotlib.get_backend()
    matplotlib.use("pdf")
    try:
        section = tmp_path / "s.toml"
        section.write_text(SECTION_TEXT)
        an = analyse(load_section(section).to_set(), cl=0.5)
        plot_section(an, tmp_path / "s.png")
        assert (tmp_path / "s.png").stat().st_size > 10_000
        assert matplotlib.get_backend() == "pdf"
    finally:
        matplotlib.use(previous)


def test_the_section_plot_puts_cp_over_its_place_on_the_section(tmp_path):
    # regression: the Cp axes and the (equal-aspect) section axes spanned different widths, so
    # the suction peak did not sit over its place on the section
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    from foilmap.report.plots import section_figure

    section = tmp_path / "s.toml"
    section.write_text(SECTION_TEXT)
    fig = section_figure(analyse(load_section(section).to_set(), cl=0.5))
    FigureCanvasAgg(fig).draw()
    ax_cp, ax_sec = fig.axes[:2]
    a, b = ax_cp.get_position(), ax_sec.get_position()
    assert abs(a.x0 - b.x0) < 1e-6 and abs(a.x1 - b.x1) < 1e-6
    assert ax_cp.get_xlim() == ax_sec.get_xlim()
    assert ax_cp.xaxis.get_tick_params()["labelbottom"] is True  # both plots carry x labels
