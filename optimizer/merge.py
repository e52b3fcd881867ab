"""The non-dominated union of the fronts of several runs (or of merged fronts)."""
from __future__ import annotations

import json
import os
from pathlib import Path

import pandas as pd

from tiltopt.base.errors import InputError

from . import results as R
from . import runfolder as RF
from .pareto import nondominated_mask

MERGE_FORMAT = "tiltopt-merge-1"


def _same_folder(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return False


def _source_rows(r) -> pd.DataFrame:
    """A front with ``source_run`` and ``source_candidate_id``: a run's own, or a merged front's as they are."""
    f = r.front.copy()
    if "source_run" in f.columns and "source_candidate_id" in f.columns:
        return f
    f.insert(0, "source_candidate_id", f["candidate_id"].astype(str))
    f.insert(0, "source_run", r.run_id)
    f["candidate_id"] = r.run_id + "/" + f["candidate_id"].astype(str)
    return f


def _sources(r) -> list[dict]:
    """The runs a loaded folder stands for (a merge lists its own sources)."""
    if r.meta.get("format") == MERGE_FORMAT and isinstance(r.meta.get("sources"), list):
        return [s for s in r.meta["sources"] if isinstance(s, dict)]
    return [{"run_id": r.run_id, "run_dir": str(r.run_dir), "front_size": int(len(r.front))}]


def merge_fronts(run_dirs, out_dir) -> tuple[Path, pd.DataFrame]:
    """Write the non-dominated union of the runs' fronts to ``out_dir`` (front.parquet, run.json).

    Every run must have the same objectives (names and order). Columns of the
    merged front: the fronts' columns plus ``source_run`` and
    ``source_candidate_id``; ``candidate_id`` becomes ``<run-id>/<candidate-id>``.
    A design is one row however often it is given: rows are the same when run,
    candidate and design variables are (``merge A A`` is ``A``). A merged front
    may be merged again: its rows keep their sources.

    Raises
    ------
    InputError
        Fewer than one run, unreadable runs, different objectives, an output folder that is one of
        the inputs or holds a run, two different runs of one id, or a locked output folder.
    """
    dirs = [Path(d) for d in run_dirs]
    if not dirs:
        raise InputError("expected at least one run folder to merge.", "merge")
    out = Path(out_dir)
    for d in dirs:
        if _same_folder(out, d) or os.path.abspath(out) == os.path.abspath(d):
            raise InputError("the output folder is one of the folders to merge; merging would replace its files. "
                             "Give another -o folder.", str(out), "-o")
    runs = [R.load_run(d) for d in dirs]
    objs = [tuple(r.objective_names) for r in runs]
    for r, o in zip(runs, objs):
        if o != objs[0]:
            raise InputError(f"every run must have the same objectives to merge. {runs[0].run_id} has "
                             f"{list(objs[0])}, {r.run_id} has {list(o)}. Merge runs of one problem only.",
                             str(r.run_dir))
    both = pd.concat([_source_rows(r) for r in runs], ignore_index=True)
    key = ["source_run", "source_candidate_id"] + sorted(c for c in both.columns if c.startswith("var."))
    both = both.drop_duplicates(subset=key).reset_index(drop=True)
    if len(both) and not both["candidate_id"].is_unique:
        dup = both.loc[both["candidate_id"].duplicated(), "candidate_id"].iloc[0]
        raise InputError(f"two different runs have the same run id ({str(dup).split('/')[0]}): their designs "
                         f"cannot be told apart (for example {dup}). Merge runs of different ids.", "merge")
    oc = [f"obj.{o}" for o in objs[0]]
    if len(both):
        both = both[nondominated_mask(both[oc].to_numpy(float))].reset_index(drop=True)
    if RF.folder_kind(out) == "run" and (RF.read_meta(out) or {}).get("format") != MERGE_FORMAT:
        raise InputError("the output folder holds a run; merging into it would replace its front and run.json. "
                         "Give another -o folder.", str(out), "-o")
    RF.refuse_foreign(out, "-o")
    units = {}
    for r in runs:
        units.update(r.units)
    units.update({"source_run": "", "source_candidate_id": ""})
    templates = [json.dumps(r.meta.get("template"), sort_keys=True) for r in runs]
    same_template = len(set(templates)) == 1
    sources, seen = [], set()
    for r in runs:
        for s in _sources(r):
            k = (s.get("run_id"), s.get("run_dir"))
            if k not in seen:
                seen.add(k)
                sources.append(s)
    meta = {"run_id": out.name, "sources": [str(d) for d in dirs], "seed": None, "config": None,
            "versions": R.package_versions(), "caution": R.CAUTION}
    with RF.FolderLock.acquire(out, what="merged front folder"):
        R.write_parquet(out / R.FRONT, both, units, meta)
        R.write_json(out / R.RUN_JSON, {
            "format": MERGE_FORMAT, "run_id": out.name, "status": "finished", "kind": "merge",
            "sources": sources, "inputs_given": [str(d) for d in dirs],
            "problem": runs[0].meta.get("problem"), "template": runs[0].meta.get("template") if same_template else None,
            "config": None, "front_size": int(len(both)), "versions": meta["versions"], "caution": R.CAUTION})
    return out, both
