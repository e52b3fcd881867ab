"""Reports from results runs (``tiltopt.optimizer.results.load_run``, see docs/formats.md)."""
from __future__ import annotations

import shlex
from pathlib import Path
from typing import Sequence

import pandas as pd

from tiltopt.base.errors import InputError
from tiltopt.base.provenance import package_versions

from .common import run_envelope, run_loads, run_shell, run_units


def load(run_dir):
    """``tiltopt.optimizer.results.load_run``."""
    from tiltopt.optimizer.results import load_run

    return load_run(run_dir)


def check_inputs(run, allow_changed: bool = False, notice=None) -> None:
    """Refuse a run whose input files (shell, loads, mechanism) changed since it ran, naming the file.

    The pages are drawn from the run folder's own copies (``inputs/``) either way;
    ``allow_changed`` turns the refusal into a notice. Runs without recorded inputs
    (merged fronts, runs of an older tiltopt, fixtures) pass.
    """
    from tiltopt.optimizer.runfolder import verify_inputs

    meta = getattr(run, "meta", None)
    run_dir = getattr(run, "run_dir", None)
    if isinstance(meta, dict) and meta.get("inputs") is not None and run_dir is not None:
        verify_inputs(run_dir, meta, allow_changed, notice, include_config=False)


def run_targets(run):
    """The ``[targets]`` of a run's config (:class:`tiltopt.optimizer.selection.Targets`; empty without)."""
    from tiltopt.optimizer.selection import Targets

    try:
        t = run.config.targets
    except Exception:  # a merged front, a run from code, an older tiltopt: no targets
        t = None
    return t if t is not None else Targets()


def choose(run, bounds=None, weights=None):
    """The best compromise of a run's front (:func:`tiltopt.optimizer.selection.best_compromise`) with the
    run config's targets (or the ``bounds`` and ``weights`` given). When no feasible design meets the
    targets, it is chosen among every feasible design and its ``method`` says so.

    Raises
    ------
    InputError
        When the front has no feasible design.
    """
    from tiltopt.optimizer.selection import best_compromise as pick

    t = run_targets(run)
    bounds = t.bounds if bounds is None else bounds
    weights = t.weights if weights is None else weights
    front = run.front
    units = getattr(run, "units", None)
    ch = pick(front, bounds, weights, units)
    if ch.candidate_id is None and bounds:
        first = ch.method
        ch = pick(front, (), weights, units)
        ch.method = f"{first} So it is chosen among every feasible front design: {ch.method}"
    if ch.candidate_id is None:
        raise InputError("the run has no feasible design on its front, so there is no best compromise to export.")
    return ch


def best_compromise(front: pd.DataFrame, bounds=(), weights=None) -> str:
    """Candidate id of the best compromise of a front (:func:`tiltopt.optimizer.selection.best_compromise`):
    among the feasible designs meeting ``bounds``, each objective scaled from the best of them (0) to the
    bound or their worst (1), the smallest weighted root-mean-square wins; ties go to the first row."""
    from tiltopt.optimizer.selection import best_compromise as pick

    ch = pick(front, bounds, weights)
    if ch.candidate_id is None:
        raise InputError("the run has no feasible design on its front, so there is no best compromise to export.")
    return ch.candidate_id


def _row_of(run, candidate_id: str) -> tuple[dict, bool]:
    for name in ("front", "evaluations"):
        df = getattr(run, name, None)
        if df is None or not len(df):
            continue
        hit = df[df["candidate_id"].astype(str) == str(candidate_id)]
        if len(hit):
            return hit.iloc[0].to_dict(), name == "front"
    some = ", ".join(map(str, run.front["candidate_id"].head(5)))
    raise InputError(f"no candidate '{candidate_id}' in this run. Front designs are, for example: {some}. "
                     f"'tiltopt explore' shows every id.", str(getattr(run, "run_id", "")), "--candidate")


def sheet_from_run(run_dir, candidate_id: str, out_dir=None, *, run=None, jig_datum=(0.0, 0.0),
                   sag_mm: float | None = None, corner_load_n: float | None = None, loads=None,
                   shell=None, allow_changed_inputs: bool = False, notice=None, choice=None) -> dict[str, Path]:
    """Write the build sheet of one candidate of a run (default folder ``RUN_DIR/sheets/ID``).

    Shell and loads are the run's own copies unless given; a changed original is refused
    (:func:`check_inputs`) unless ``allow_changed_inputs``. ``choice``: the
    :class:`tiltopt.optimizer.selection.Choice` that picked this design (the sheet says how it was
    chosen and what it gives up); by default the sheet of the run's best compromise says it too.
    """
    from .sheet import SheetInputs, write_sheet

    run_dir = Path(run_dir)
    run = run if run is not None else load(run_dir)
    check_inputs(run, allow_changed_inputs, notice)
    row, on_front = _row_of(run, candidate_id)
    mech = run.candidate_mechanism(candidate_id)
    env = run_envelope(run)
    meta = dict(getattr(run, "meta", {}) or {})
    scenario = {}
    if not on_front:
        scenario["note"] = "this design is not on the run's front"
    if not bool(row.get("feasible", True)):
        scenario["feasibility"] = f"INFEASIBLE: {row.get('reason', '')}"
    run_meta = meta.get("run") if isinstance(meta.get("run"), dict) else {}
    for key in ("name", "description"):
        v = meta.get(key) or run_meta.get(key)
        if v:
            scenario[f"run {key}"] = v
    objectives = [c[4:] for c in row if str(c).startswith("obj.")]
    if objectives:
        scenario["objectives"] = ", ".join(objectives)
    tpl = getattr(run, "template", None)
    if tpl is not None and getattr(tpl, "name", None):
        scenario["template"] = tpl.name
    out_dir = Path(out_dir) if out_dir is not None else run_dir / "sheets" / str(candidate_id)
    if choice is None and on_front:
        try:
            best = choose(run)
            choice = best if best.candidate_id == str(candidate_id) else None
        except InputError:
            choice = None
    inp = SheetInputs(
        mech=mech, candidate_id=str(candidate_id), run_id=str(getattr(run, "run_id", "")),
        lean_limit_deg=env["lean_limit_deg"], travel_mm=env["travel_mm"], lean_step_deg=env.get("lean_step_deg"),
        both_sides=env["both_sides"],
        row=row, units=run_units(run), shell=shell if shell is not None else run_shell(run),
        loads=loads if loads is not None else run_loads(run), jig_datum=tuple(jig_datum),
        sag_mm=sag_mm, corner_load_n=corner_load_n,
        provenance={"config": meta.get("config"), "seed": meta.get("seed"),
                    "versions": meta.get("versions") or package_versions()},
        scenario=scenario, choice=choice if choice is not None and choice.candidate_id == str(candidate_id) else None,
        command=f"tiltopt sheet {shlex.quote(str(run_dir))} --candidate {shlex.quote(str(candidate_id))}")
    return write_sheet(out_dir, inp)


def _explorer_runs(run_dirs, runs) -> tuple[list, str | None]:
    """An :class:`ExplorerRun` per run; a merged front folder stands for the runs behind it, each showing
    the rows of the merged front that came from it."""
    from tiltopt.optimizer.merge import MERGE_FORMAT

    from .explorer import run_from_results

    out, merged_name = [], None
    for r, d in zip(runs, run_dirs):
        if (getattr(r, "meta", None) or {}).get("format") != MERGE_FORMAT:
            out.append(run_from_results(r, d))
            continue
        merged_name = str(d)
        front = r.front
        for s in r.meta.get("sources") or []:
            src_dir = s.get("run_dir") if isinstance(s, dict) else None
            rows = front[front["source_run"].astype(str) == str(s.get("run_id"))]
            if not len(rows):
                continue
            if not src_dir or not Path(src_dir).is_dir():
                raise InputError(f"the run {s.get('run_id')} behind this merged front is not at {src_dir!r} any more; "
                                 f"the explorer draws each design from its run's template. Give the run folders "
                                 f"instead, or put the run back.", str(d))
            src = load(src_dir)
            rows = rows.copy()
            rows["candidate_id"] = rows["source_candidate_id"].astype(str)
            rows = rows.drop(columns=[c for c in ("source_run", "source_candidate_id") if c in rows.columns])
            out.append(run_from_results(src, src_dir, front=rows.reset_index(drop=True), shortlist_dir=str(d)))
    return out, merged_name


def explore_runs(run_dirs: Sequence, out_path, *, runs=None, beside: bool = False,
                 allow_changed_inputs: bool = False, notice=None, detail_limit: int | None = None,
                 explorer_out: list | None = None) -> Path:
    """Write the explorer page of one or more run folders or merged front folders (input changes: see
    :func:`check_inputs`). ``explorer_out``: a list the :class:`~tiltopt.reports.explorer.Explorer` is
    appended to (``--serve`` answers the page's detail requests with it)."""
    from .explorer import DEFAULT_DETAIL_LIMIT, Explorer, write_explorer

    runs = runs if runs is not None else [load(d) for d in run_dirs]
    for r in runs:
        check_inputs(r, allow_changed_inputs, notice)
    ex, merged = _explorer_runs(list(run_dirs), runs)
    ids = [e.run_id for e in ex]
    if len(set(ids)) != len(ids):
        raise InputError(f"the same run is given twice ({', '.join(ids)}). Give each run folder once.")
    if not ex:
        raise InputError("nothing to show: the merged front has no designs.", str(run_dirs[0]))
    title = "Pareto explorer: " + (f"merged front {Path(merged).name} ({', '.join(ids)})" if merged else ", ".join(ids))
    explorer = Explorer(ex, title=title, merged_front=merged)
    if explorer_out is not None:
        explorer_out.append(explorer)
    return write_explorer(out_path, explorer, beside=beside,
                          detail_limit=DEFAULT_DETAIL_LIMIT if detail_limit is None else detail_limit)
