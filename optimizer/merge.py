"""The non-dominated union of the fronts of several runs."""
from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from tiltopt.base.errors import InputError

from . import results as R
from .pareto import nondominated_mask


def merge_fronts(run_dirs, out_dir) -> tuple[Path, pd.DataFrame]:
    """Write the non-dominated union of the runs' fronts to ``out_dir`` (front.parquet, run.json).

    Every run must have the same objectives (names and order). Columns of the
    merged front: the fronts' columns plus ``source_run`` and
    ``source_candidate_id``; ``candidate_id`` becomes ``<run-id>/<candidate-id>``.

    Raises
    ------
    InputError
        Fewer than one run, unreadable runs, or different objectives.
    """
    dirs = [Path(d) for d in run_dirs]
    if not dirs:
        raise InputError("expected at least one run folder to merge.", "merge")
    runs = [R.load_run(d) for d in dirs]
    objs = [tuple(r.objective_names) for r in runs]
    for r, o in zip(runs, objs):
        if o != objs[0]:
            raise InputError(f"every run must have the same objectives to merge. {runs[0].run_id} has "
                             f"{list(objs[0])}, {r.run_id} has {list(o)}. Merge runs of one problem only.",
                             str(r.run_dir))
    frames = []
    for r in runs:
        f = r.front.copy()
        f.insert(0, "source_candidate_id", f["candidate_id"])
        f.insert(0, "source_run", r.run_id)
        f["candidate_id"] = r.run_id + "/" + f["candidate_id"].astype(str)
        frames.append(f)
    both = pd.concat(frames, ignore_index=True)
    oc = [f"obj.{o}" for o in objs[0]]
    if len(both):
        both = both[nondominated_mask(both[oc].to_numpy(float))].reset_index(drop=True)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    units = {}
    for r in runs:
        units.update(r.units)
    units.update({"source_run": "", "source_candidate_id": ""})
    templates = [json.dumps(r.meta.get("template"), sort_keys=True) for r in runs]
    same_template = len(set(templates)) == 1
    meta = {"run_id": out.name, "sources": [str(d) for d in dirs], "seed": None, "config": None,
            "versions": R.package_versions(), "caution": R.CAUTION}
    R.write_parquet(out / R.FRONT, both, units, meta)
    R.write_json(out / R.RUN_JSON, {
        "format": "tiltopt-merge-1", "run_id": out.name, "status": "finished", "kind": "merge",
        "sources": [{"run_id": r.run_id, "run_dir": str(r.run_dir), "front_size": int(len(r.front))} for r in runs],
        "problem": runs[0].meta.get("problem"), "template": runs[0].meta.get("template") if same_template else None,
        "config": None, "front_size": int(len(both)), "versions": meta["versions"], "caution": R.CAUTION})
    return out, both
