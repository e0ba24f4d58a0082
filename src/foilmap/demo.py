"""The demo: a small invented study run end to end into a folder of its own, with its plots.

The demo's study (``foilmap/data/demo.toml``) is an invented scenario for showing the tool, not
a design case.
"""

from __future__ import annotations

import shutil
import time
from importlib.resources import files
from pathlib import Path

from foilmap.report.plots import plot_section
from foilmap.report.study import plot_runs
from foilmap.section.evaluation import analyse
from foilmap.store.folder import StudyFolder
from foilmap.store.sectionfile import format_section, write_text_atomic
from foilmap.store.studyfile import load_study_text

__all__ = ["run_demo", "DEMO_FILES"]

#: what the demo leaves in its folder
DEMO_FILES = ("demo-study.toml", "runs", "index.json", "convergence.png", "best-section.toml",
              "best-section.png")


def run_demo(out: Path, workers: int | None, run_folder) -> int:
    """Run the demo study into ``out`` (emptied first: the folder is the demo's own) with
    ``run_folder(study, out, workers, budget)``, then write its plots and best section and
    print what it found; returns ``run_folder``'s exit code."""
    text = files("foilmap").joinpath("data/demo.toml").read_text(encoding="utf-8")
    study = load_study_text(text, "foilmap demo")
    out = Path(out)
    if out.exists():
        shutil.rmtree(out)
    out.mkdir(parents=True)
    (out / "demo-study.toml").write_text(text, encoding="utf-8")
    t0 = time.time()
    code = run_folder(study, out, workers, None)
    plot_runs(out, out / "convergence.png")
    d = StudyFolder(out).best_design()
    write_text_atomic(out / "best-section.toml", format_section(
        f"demo-{d.run_id}", d.coefficients, d.te_angle_deg, d.provenance()))
    an = analyse(d.section, cl=d.design_cl)
    plot_section(an, out / "best-section.png", f"demo best ({d.run_id})")
    ev = an.evaluation
    print(f"demo finished in {time.time() - t0:.0f} s: best design (run {d.run_id}) at Cl "
          f"{d.design_cl:g}: peak suction {-float(ev.cp_min[0]):.3f}, recovery severity "
          f"{float(ev.severity[0]):.3f}, thickness {float(ev.thickness[0]):.3f} c "
          f"(weighted objective {d.fun:.5f})")
    for name in DEMO_FILES:
        print(f"  {out / name}")
    print("Next: foilmap status " + str(out) + "   |   foilmap evaluate "
          + str(out / "best-section.toml") + " --cl " + f"{d.design_cl:g}")
    return code
