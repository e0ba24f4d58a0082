"""What the study-folder commands do, as library calls that return result objects:
``foilmap fronts`` ↔ :func:`compare_fronts`, ``report`` ↔ :func:`report_page`, ``status`` ↔
:func:`status`, ``best`` ↔ :func:`best_design`, ``pick`` ↔ :func:`pick`.
"""

from __future__ import annotations

from pathlib import Path

from foilmap.errors import InputError

__all__ = ["compare_fronts", "FrontsComparison", "report_page", "ReportPage", "status",
           "best_design", "pick"]


class FrontsComparison:
    """The Pareto fronts of runs and studies compared on one reference point: ``.record`` is
    what ``foilmap fronts --json`` prints (``objectives``, ``reference_point``, ``runs`` with
    their hypervolumes, ``groups``, ``comparisons``); ``.fronts`` the runs' fronts;
    ``.to_csv()``, ``.text()`` and ``.figure()`` as the command's outputs."""

    def __init__(self, record: dict, fronts: list):
        self.record = record
        self.fronts = fronts

    def __repr__(self) -> str:
        return (f"FrontsComparison({len(self.fronts)} fronts, objectives "
                f"{', '.join(self.record['objectives'])})")

    @property
    def runs(self) -> list[dict]:
        return self.record["runs"]

    @property
    def groups(self) -> list[dict]:
        return self.record["groups"]

    def to_csv(self) -> str:
        from foilmap.report.compare import fronts_csv

        return fronts_csv(self.fronts, self.record)

    def text(self) -> str:
        from foilmap.report.compare import format_fronts

        return format_fronts(self.record)

    def figure(self):
        from foilmap.report.compare import fronts_figure

        return fronts_figure(self.fronts, self.record)


def compare_fronts(paths, *, reference=None) -> FrontsComparison:
    """Compare the fronts of study folders and run logs (``paths``: one path or a list) on the
    common hypervolume reference point ``reference`` (default: the studies' own)."""
    from foilmap.report.compare import collect_fronts
    from foilmap.report.compare import compare_fronts as compare

    if isinstance(paths, (str, Path)):
        paths = [paths]
    paths = [str(p) for p in paths]
    if not paths:
        raise InputError("fronts: give at least one study folder or run log")
    fronts = collect_fronts(paths)
    return FrontsComparison(compare(fronts, None if reference is None else list(reference)),
                            fronts)


class ReportPage:
    """The self-contained HTML page of one or more studies (``foilmap report``)."""

    def __init__(self, html: str, folders: list[str]):
        self.html = html
        self.folders = folders

    def __repr__(self) -> str:
        return f"ReportPage({', '.join(self.folders)}; {len(self.html)} characters)"

    def write(self, path) -> Path:
        """Write the page (whole or not at all) to ``path`` (.html)."""
        from foilmap.store.sectionfile import write_text_atomic

        out = Path(path)
        if out.suffix.lower() not in (".html", ".htm"):
            raise InputError(f"report: output {str(out)!r} must end in .html")
        if not out.parent.exists():
            raise InputError(f"report: folder {str(out.parent)!r} does not exist")
        write_text_atomic(out, self.html)
        return out

    def _repr_html_(self) -> str:  # a notebook shows the page
        return self.html


def report_page(folders, output=None) -> ReportPage:
    """The report page of study folders (one path or a list), side by side; written to
    ``output`` too when given."""
    from foilmap.report.page import report_page as page

    if isinstance(folders, (str, Path)):
        folders = [folders]
    folders = [str(f) for f in folders]
    res = ReportPage(page(folders), folders)
    if output is not None:
        res.write(output)
    return res


def status(folder) -> dict:
    """What ``foilmap status --json`` prints: the study, the counts by state, every run's
    progress and best, and the warnings."""
    from foilmap.report.study import design_warnings
    from foilmap.store.folder import StudyFolder

    st = StudyFolder(folder).status()
    st["warnings"] = design_warnings(Path(folder), st)
    return st


def best_design(folder, run: str | None = None):
    """The best feasible design of a study folder (or of one run) as a
    :class:`~foilmap.design.results.FolderDesign`: ``.section``, ``.fun``, ``.objectives``,
    ``.design_cl``, ``.provenance()``."""
    from foilmap.store.folder import StudyFolder

    return StudyFolder(folder).best_design(run)


def pick(folder, *, nearest: dict | None = None, knee: bool = False, index=None,
         run: str | None = None):
    """A design from a study's merged front (``foilmap pick``): nearest to objective values, the
    knee, or by position or id."""
    from foilmap.report.compare import pick_design

    return pick_design(Path(folder), nearest=nearest, knee=knee,
                       index=None if index is None else str(index), run=run)
