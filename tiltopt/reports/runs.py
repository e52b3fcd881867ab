"""Reports from results runs (``tiltopt.optimizer.results.load_run``, see docs/formats.md)."""
from __future__ import annotations

import shlex
from pathlib import Path
from typing import Sequence

import numpy as np
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


def best_compromise(front: pd.DataFrame) -> str:
    """Candidate id of the feasible front design nearest the ideal point.

    Each objective is scaled to [0, 1] over the feasible front (min-max); the
    design with the smallest Euclidean distance to the all-zero (ideal) point
    wins; ties go to the first row.
    """
    obj = [c for c in front.columns if c.startswith("obj.")]
    df = front[front["feasible"].astype(bool)] if "feasible" in front else front
    if not len(df):
        raise InputError("the run has no feasible design on its front, so there is no best compromise to export.")
    if not obj:
        return str(df["candidate_id"].iloc[0])
    F = df[obj].to_numpy(float)
    lo, hi = np.nanmin(F, axis=0), np.nanmax(F, axis=0)
    Z = (F - lo) / np.where(hi - lo > 0, hi - lo, 1.0)
    d = np.sqrt(np.nansum(Z ** 2, axis=1))
    return str(df["candidate_id"].iloc[int(np.argmin(d))])


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
                   shell=None, allow_changed_inputs: bool = False, notice=None) -> dict[str, Path]:
    """Write the build sheet of one candidate of a run (default folder ``RUN_DIR/sheets/ID``).

    Shell and loads are the run's own copies unless given; a changed original is refused
    (:func:`check_inputs`) unless ``allow_changed_inputs``.
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
    inp = SheetInputs(
        mech=mech, candidate_id=str(candidate_id), run_id=str(getattr(run, "run_id", "")),
        lean_limit_deg=env["lean_limit_deg"], travel_mm=env["travel_mm"], lean_step_deg=env.get("lean_step_deg"),
        both_sides=env["both_sides"],
        row=row, units=run_units(run), shell=shell if shell is not None else run_shell(run),
        loads=loads if loads is not None else run_loads(run), jig_datum=tuple(jig_datum),
        sag_mm=sag_mm, corner_load_n=corner_load_n,
        provenance={"config": meta.get("config"), "seed": meta.get("seed"),
                    "versions": meta.get("versions") or package_versions()},
        scenario=scenario,
        command=f"tiltopt sheet {shlex.quote(str(run_dir))} --candidate {shlex.quote(str(candidate_id))}")
    return write_sheet(out_dir, inp)


def explore_runs(run_dirs: Sequence, out_path, *, runs=None, beside: bool = False,
                 allow_changed_inputs: bool = False, notice=None, **kw) -> Path:
    """Write the explorer page of one or more run folders (input changes: see :func:`check_inputs`)."""
    from .explorer import run_from_results, write_explorer

    runs = runs if runs is not None else [load(d) for d in run_dirs]
    for r in runs:
        check_inputs(r, allow_changed_inputs, notice)
    ex = [run_from_results(r, d) for r, d in zip(runs, run_dirs)]
    ids = [e.run_id for e in ex]
    if len(set(ids)) != len(ids):
        raise InputError(f"the same run is given twice ({', '.join(ids)}). Give each run folder once.")
    title = "Pareto explorer: " + ", ".join(ids)
    return write_explorer(out_path, ex, beside=beside, title=title, **kw)
