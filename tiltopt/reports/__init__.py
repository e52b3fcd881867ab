"""Report writers: the Pareto explorer page and the build sheet of a chosen design.

- :func:`demo_outputs` - explorer and best-compromise build sheet of a run (used by ``tiltopt demo``).
- :mod:`.explorer` - ``write_explorer(path, runs)``, ``run_from_results(run)``.
- :mod:`.sheet` - ``write_sheet(out_dir, SheetInputs(...))``.
- :mod:`.runs` - ``sheet_from_run(run_dir, candidate_id, out_dir)``, ``choose(run)`` (the best compromise and why).
- :mod:`.drawing` / :mod:`.dxf` - the front-view drawing (SVG) and the jig-plate layout (DXF); :mod:`.marks` - the
  clearance figures the drawings label; :mod:`.detail` - the detail of designs the explorer shows.
"""
from __future__ import annotations

from pathlib import Path


def demo_outputs(run_dir) -> dict[str, Path]:
    """Write the explorer page and the build sheet of the best compromise design of a run.

    Returns
    -------
    dict
        ``{"explorer": path of explorer.html, "sheet": path of sheet.html}`` (no "sheet" when the run
        has no feasible design).
    """
    from .runs import choose, explore_runs, load, sheet_from_run

    run_dir = Path(run_dir)
    run = load(run_dir)
    page = explore_runs([run_dir], run_dir / "explorer.html", runs=[run])
    front = run.front
    if not len(front) or not front["feasible"].astype(bool).any():
        return {"explorer": page}   # no feasible design: nothing to build, the page shows why
    choice = choose(run)
    cid = choice.candidate_id
    paths = sheet_from_run(run_dir, cid, run_dir / "sheets" / cid, run=run, choice=choice)
    return {"explorer": page, "sheet": paths["sheet"]}
