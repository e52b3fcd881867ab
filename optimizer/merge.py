"""The non-dominated union of the fronts of several runs (or of merged fronts), of one problem.

Fronts merge only when their objectives mean the same thing: the same problem (:func:`problem_record`:
objectives, envelope, body shell, loads, constraints and their limits). Different templates over one
problem merge freely (comparing linkage topologies on one front is what a merge is for); fronts of
different problems are refused with one message naming the first difference, unless
``allow_different``, when each source keeps its problem in the merged run.json.
"""
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


# ------------------------------------------------------------------ what a front's objectives mean
def _input_hash(meta: dict, role: str):
    for r in meta.get("inputs") or []:
        if isinstance(r, dict) and r.get("role") == role:
            return r.get("sha256")
    return None


def problem_record(run) -> dict | None:
    """What a run's objectives mean, as JSON: ``objectives``, ``envelope`` (lean limit and step, leans,
    travels, both sides, steer override), ``shell`` and ``loads`` (the sha256 of the files, or of the
    embedded loads tables; null without), ``constraints`` (each in force, with its limit). The
    template is not part of it. A merged front's own record (its run.json ``problem_record``); None
    when a run has no config to say (a run from code, or a merge by an older tiltopt).
    """
    meta = run.meta or {}
    if meta.get("format") == MERGE_FORMAT:
        rec = meta.get("problem_record")
        return rec if isinstance(rec, dict) else None
    if not isinstance(meta.get("config"), dict):
        return None
    cfg = run.config
    if cfg.spec is None:                           # a benchmark problem
        return {"kind": "benchmark", "benchmark": json.loads(json.dumps(cfg.benchmark, sort_keys=True, default=str)),
                "objectives": list(run.objective_names)}
    spec = cfg.spec
    env = spec.envelope
    embedded = {k: cfg.data[k]
                for k in ("vehicle", "sizing", "members", "tilt_lock", "springs", "fatigue", "load_cases")
                if k in cfg.data}
    loads = None
    if spec.loads is not None:
        loads = {"file": _input_hash(meta, "loads"), "embedded": RF.config_hash(embedded) if embedded else None,
                 "materials": _input_hash(meta, "sizing.materials"), "catalogue": _input_hash(meta, "sizing.catalogue")}
    limits = {q["name"]: q["limit"] for q in spec.limits.requirements(spec.constraints)}
    return {
        "objectives": list(spec.objectives),
        "envelope": {"lean_limit_deg": float(env.lean_limit_deg), "lean_step_deg": float(env.lean_step_deg),
                     "lean_deg": [float(v) for v in env.lean_deg], "travel_mm": [float(v) for v in env.travel_mm],
                     "steer": None if env.steer is None else [list(map(float, r)) for r in env.steer]},
        "shell": None if spec.shell is None else (_input_hash(meta, "shell") or str(spec.shell_path)),
        "loads": loads,
        "constraints": {k: (v if v is None or isinstance(v, bool) else float(v)) for k, v in limits.items()},
    }


def _flat(d, prefix=""):
    if isinstance(d, dict):
        out = {}
        for k in d:
            out.update(_flat(d[k], f"{prefix}{k}."))
        return out
    return {prefix[:-1]: d}


_WORDS = {"objectives": "the objectives", "shell": "the body shell (file contents)", "loads.file": "the loads file",
          "loads.embedded": "the embedded loads tables", "loads.materials": "the materials file",
          "loads.catalogue": "the tube catalogue", "envelope.lean_deg": "the envelope's leans"}


def problem_difference(a: dict | None, b: dict | None) -> str | None:
    """The first difference between two problem records, in words; None when they are the same."""
    if a == b:
        return None
    if a is None or b is None:
        return "one of them has no problem record (a run from code, or a merge by an older tiltopt)"
    fa, fb = _flat(a), _flat(b)
    order = ["objectives", "kind", "benchmark"] + [k for k in fa if k.startswith("envelope.")] + \
        ["shell", "loads"] + [k for k in fa if k.startswith("loads.")] + sorted(set(fa) | set(fb))
    for k in dict.fromkeys(order):
        va, vb = fa.get(k, _MISSING), fb.get(k, _MISSING)
        if json.dumps(va, sort_keys=True, default=str) != json.dumps(vb, sort_keys=True, default=str):
            name = _WORDS.get(k) or (f"constraint {k.split('.', 1)[1]}" if k.startswith("constraints.")
                                     else k.replace("envelope.", "envelope ").replace("_", " "))
            show = lambda v: "absent" if v is _MISSING else ("none" if v is None else  # noqa: E731
                                                             (f"{v:g}" if isinstance(v, float) else json.dumps(v)))
            if k in ("shell", "loads.file", "loads.embedded", "loads.materials", "loads.catalogue"):
                return f"{name} differs" + (" (one has none)" if _MISSING in (va, vb) or None in (va, vb) else "")
            return f"{name}: {show(va)} in one, {show(vb)} in the other"
    return "their problems differ"


_MISSING = object()


def check_same_problem(runs, allow_different: bool = False) -> list:
    """The problem record of each run; an InputError naming the first difference unless ``allow_different``."""
    recs = [problem_record(r) for r in runs]
    for r, rec in zip(runs[1:], recs[1:]):
        why = problem_difference(recs[0], rec)
        if why is not None and not allow_different:
            why = why.replace("in one", f"in {runs[0].run_id}").replace("in the other", f"in {r.run_id}")
            raise InputError(f"{runs[0].run_id} and {r.run_id} are runs of different problems, so their objectives "
                             f"mean different things: {why}. Merge fronts of one problem (different templates are "
                             f"fine), or pass --allow-different to merge them anyway (each run's problem is then "
                             f"recorded in the merged run.json).", str(r.run_dir))
    return recs


def union_front(runs) -> pd.DataFrame:
    """The non-dominated union of the runs' fronts (``source_run``, ``source_candidate_id``; a design given
    twice is one row). The runs must have the same objectives (names and order)."""
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
    return both


def merge_fronts(run_dirs, out_dir, allow_different: bool = False) -> tuple[Path, pd.DataFrame]:
    """Write the non-dominated union of the runs' fronts to ``out_dir`` (front.parquet, run.json).

    Every run must have the same objectives (names and order) and, unless ``allow_different``, the
    same problem (:func:`problem_record`). Columns of the merged front: the fronts' columns plus
    ``source_run`` and ``source_candidate_id``; ``candidate_id`` becomes ``<run-id>/<candidate-id>``.
    A design is one row however often it is given: rows are the same when run,
    candidate and design variables are (``merge A A`` is ``A``). A merged front
    may be merged again: its rows keep their sources.

    Raises
    ------
    InputError
        Fewer than one run, unreadable runs, different objectives, different problems (without
        ``allow_different``), an output folder that is one of the inputs or holds a run, two different
        runs of one id, or a locked output folder.
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
    union_check = [tuple(r.objective_names) for r in runs]
    if len(set(union_check)) == 1:
        recs = check_same_problem(runs, allow_different)
    else:
        recs = None
    both = union_front(runs)            # different objectives are refused here
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
    same = recs is not None and all(problem_difference(recs[0], x) is None for x in recs)
    sources, seen = [], set()
    for r, rec in zip(runs, recs or [None] * len(runs)):
        for s in _sources(r):
            k = (s.get("run_id"), s.get("run_dir"))
            if k not in seen:
                seen.add(k)
                sources.append({**s, "problem_record": s.get("problem_record", rec)})
    meta = {"run_id": out.name, "sources": [str(d) for d in dirs], "seed": None, "config": None,
            "versions": R.package_versions(), "caution": R.CAUTION}
    with RF.FolderLock.acquire(out, what="merged front folder"):
        R.write_parquet(out / R.FRONT, both, units, meta)
        R.write_json(out / R.RUN_JSON, {
            "format": MERGE_FORMAT, "run_id": out.name, "status": "finished", "kind": "merge",
            "sources": sources, "inputs_given": [str(d) for d in dirs],
            "problem": runs[0].meta.get("problem"), "problem_record": recs[0] if same else None,
            "allow_different": bool(allow_different and not same),
            "template": runs[0].meta.get("template") if same_template else None,
            "config": None, "front_size": int(len(both)), "versions": meta["versions"], "caution": R.CAUTION})
    return out, both
