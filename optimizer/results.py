"""Result files of a run (``results/<run-id>/``) and :func:`load_run`.

Files (every one written atomically: a temp file in the same folder, then
``os.replace``, so a killed run never leaves a half-written file):

- ``front.parquet``: the non-dominated feasible designs over every evaluation.
- ``evaluations.parquet``: every evaluated design with its generation
  (while a run is under way, ``evaluations.parts/`` holds one file per
  checkpoint interval; :func:`load_run` reads those when the whole file is
  not written yet).
- ``generations.parquet``: per generation: evaluations, feasible count and
  share, front size, hypervolume on normalised objectives, times.
- ``run.json``: config as run, seed, problem description, template,
  package versions, timings, status.
- ``checkpoint.npz``: the algorithm and run state for ``tiltopt run --resume``
  (arrays and JSON only, never a pickle: :mod:`tiltopt.optimizer.checkpoint`).
- ``inputs/``: a copy of every input file (config, mechanism, shell, loads ...),
  hashed in ``run.json``; resume, explorer and sheet read these copies.
- ``run.lock``: the OS lock of the process writing the folder
  (:mod:`tiltopt.optimizer.runfolder`).
- ``progress.json``: in a batch, the run's latest generation (generation, front size, ETA), for the
  batch's progress lines; rewritten about once a second.

Columns of front/evaluations: ``candidate_id``, ``generation``, ``feasible``,
``violation``, ``reason``, ``var.<name>``, ``obj.<name>`` (as minimised),
``con.<name>`` (constraint values, feasible where <= 0) and the metric
columns (names end in their unit). The Parquet schema metadata key
``tiltopt`` holds JSON ``{"units": {column: unit}, "run_id", "seed",
"config", "versions", "caution"}``.
"""
from __future__ import annotations

import json
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from tiltopt.base import files
from tiltopt.base.errors import InputError, read_text
from tiltopt.base.provenance import package_versions  # noqa: F401 (R.package_versions for the run writers)
from tiltopt.base.safety import SAFETY_CAUTION
from tiltopt.base.units import unit_of_name

FRONT, EVALUATIONS, GENERATIONS, RUN_JSON, CHECKPOINT = (
    "front.parquet", "evaluations.parquet", "generations.parquet", "run.json", "checkpoint.npz")
PROGRESS = "progress.json"       # a batch run's latest generation, for the batch's progress lines
PARTS_DIR = "evaluations.parts"
META_KEY = b"tiltopt"
CAUTION = SAFETY_CAUTION

GENERATION_UNITS = {"generation": "1", "evaluations": "1", "feasible": "1", "feasible_share": "1",
                    "front_size": "1", "hypervolume": "1 (population front, normalised objectives, reference 1.1 each)",
                    "elapsed_s": "s", "generation_s": "s", "evaluation_s": "s"}
BASE_UNITS = {"candidate_id": "", "generation": "1", "feasible": "", "violation": "sum of positive constraint "
              "values (units of each constraint)", "reason": ""}

# ------------------------------------------------------------------ atomic writes (tiltopt.base.files)
def write_bytes(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically."""
    files.atomic_write_bytes(path, data)


def write_json(path: Path, obj: Any) -> None:
    """Write ``obj`` as indented JSON atomically (non-JSON values as strings)."""
    write_bytes(path, (json.dumps(obj, indent=2, default=str) + "\n").encode("utf-8"))


def metric_unit(name: str) -> str:
    """Unit of a metric column from the end of its name (``_mm`` -> mm ...); "1" otherwise."""
    return unit_of_name(name)


def write_parquet(path: Path, df: pd.DataFrame, units: dict, meta: dict) -> None:
    """Write ``df`` atomically with ``units`` and ``meta`` in the schema metadata key ``tiltopt``."""
    table = pa.Table.from_pandas(df, preserve_index=False)
    info = dict(meta)
    info["units"] = {c: units.get(c, metric_unit(c)) for c in df.columns}
    md = dict(table.schema.metadata or {})
    md[META_KEY] = json.dumps(info, default=str).encode("utf-8")
    table = table.replace_schema_metadata(md)
    files.atomic_write(path, lambda fh: pq.write_table(table, fh))


def read_parquet(path: Path) -> tuple[pd.DataFrame, dict]:
    """A result Parquet file and its ``tiltopt`` metadata.

    Raises
    ------
    InputError
        Naming the file, when it is truncated, damaged or not a Parquet file.
    """
    try:
        table = pq.read_table(path)
        df = table.to_pandas()
    except (pa.ArrowException, OSError, ValueError) as exc:
        raise InputError(f"this Parquet file is damaged or not a tiltopt result file ({exc}). Restore it, or run "
                         f"again.", str(path)) from None
    raw = (table.schema.metadata or {}).get(META_KEY)
    try:
        info = json.loads(raw) if raw else {}
    except (ValueError, RecursionError):
        info = None
    if not isinstance(info, dict) or not isinstance(info.get("units", {}), dict):
        raise InputError("the tiltopt metadata of this Parquet file is damaged (expected a JSON object with a "
                         "'units' table). Restore the file, or run again.", str(path))
    return df, info


def _require_columns(df: pd.DataFrame, columns, path: Path, why: str) -> None:
    missing = [c for c in columns if c not in df.columns]
    if missing:
        raise InputError(f"the column(s) {', '.join(missing)} that {why} are missing: the file is damaged or "
                         f"belongs to another run.", str(path))


# ------------------------------------------------------------------ reading a run
@dataclass
class Run:
    """A run folder, loaded.

    Attributes
    ----------
    run_dir : Path
    run_id : str
    meta : dict
        run.json.
    front, generations : pandas.DataFrame
    evaluations : pandas.DataFrame
        Read on first use.
    """

    run_dir: Path
    run_id: str
    meta: dict
    front: pd.DataFrame
    generations: pd.DataFrame
    units: dict = field(default_factory=dict)

    @cached_property
    def evaluations(self) -> pd.DataFrame:
        path = self.run_dir / EVALUATIONS
        parts_dir = self.run_dir / PARTS_DIR
        whole = read_parquet(path)[0] if path.is_file() else None
        parts = sorted(parts_dir.glob("evaluations-*.parquet")) if parts_dir.is_dir() else []
        if parts and self.meta.get("status") != "finished":
            # a run under way or killed: the parts reach its last checkpoint, the whole file (if any)
            # its last stop; take whichever holds more generations
            from_parts = pd.concat([read_parquet(p)[0] for p in parts], ignore_index=True)
            _require_columns(from_parts, ["candidate_id", "generation"], parts_dir, "every result file has")
            if whole is not None:
                _require_columns(whole, ["candidate_id", "generation"], path, "every result file has")
            if whole is None or from_parts["generation"].max() > whole["generation"].max():
                return from_parts
        if whole is not None:
            return whole
        return self.front.iloc[0:0].copy()

    @property
    def variable_names(self) -> list[str]:
        return list((self.meta.get("problem") or {}).get("variables") or [])

    @property
    def objective_names(self) -> list[str]:
        return list((self.meta.get("problem") or {}).get("objectives") or [])

    @cached_property
    def config(self):
        """The :class:`~tiltopt.optimizer.config.RunConfig` as run (parsed again from run.json)."""
        from .config import parse_config

        cfg = self.meta.get("config")
        if not isinstance(cfg, dict):
            raise InputError("run.json holds no config (this folder is a merge of runs).", str(self.run_dir / RUN_JSON),
                             "config")
        from tiltopt.base.inputs import reading_copies

        from .runfolder import copies_of

        with reading_copies(copies_of(self.meta, self.run_dir)):   # the files the run started with
            return parse_config(cfg, str(self.run_dir / RUN_JSON), self.meta.get("config_base_dir"))

    @cached_property
    def template(self):
        """The :class:`tiltopt.problems.templates.Template` the run searched."""
        d = self.meta.get("template")
        if not d:
            raise InputError("this run has no mechanism template (it ran a benchmark problem).",
                             str(self.run_dir / RUN_JSON), "template")
        from tiltopt.problems.templates import Template

        src = str(self.run_dir / RUN_JSON)
        try:
            tpl = Template.from_dict(d, src)
        except InputError:
            raise
        except (KeyError, TypeError, ValueError, AttributeError) as exc:
            raise InputError(f"the template record is damaged ({type(exc).__name__}: {exc}). Restore run.json, or "
                             f"run again.", src, "template") from None
        if tpl.names != self.variable_names:
            raise InputError(f"the template's variables ({', '.join(tpl.names)}) are not the problem's "
                             f"({', '.join(self.variable_names) or 'none'}): run.json is damaged.", src, "template")
        _require_columns(self.front, [f"var.{v}" for v in tpl.names], self.run_dir / FRONT, "the template names")
        return tpl

    def _row(self, candidate_id: str) -> pd.Series:
        for name in ("front", "evaluations"):   # evaluations are read only when the id is not on the front
            df = getattr(self, name)
            hit = df.index[df["candidate_id"] == candidate_id] if "candidate_id" in df else []
            if len(hit):
                return df.loc[hit[0]]
        raise InputError(f"no candidate {candidate_id!r} in this run. Candidate ids look like "
                         f"{self.front['candidate_id'].iloc[0] if len(self.front) else 'g001-0000'!r}.",
                         str(self.run_dir), "candidate_id")

    def candidate_x(self, candidate_id: str) -> np.ndarray:
        """Design vector of a candidate, in the template's variable order.

        Returns
        -------
        x : ndarray of shape (n_var,)
        """
        row = self._row(candidate_id)
        return np.array([float(row[f"var.{v}"]) for v in self.variable_names])

    def candidate_mechanism(self, candidate_id: str):
        """The :class:`kinematics.Mechanism` of a candidate (template with its design vector)."""
        return self.template.mechanism_for(self.candidate_x(candidate_id))


def load_run(run_dir: str | Path) -> Run:
    """Load a run folder (or a merged front folder).

    Raises
    ------
    InputError
        When the folder or its run.json / front.parquet is missing or unreadable.
    """
    d = Path(run_dir)
    if not d.is_dir():
        raise InputError("expected a run folder (results/<run-id>/). " + ("This is not a folder." if d.exists() else
                                                                          "It does not exist."), str(d))
    rj = d / RUN_JSON
    if not rj.exists():        # a device or pipe in its place gets its own message from the reader
        raise InputError("expected a run folder with run.json; none found. Is this a results/<run-id>/ folder?", str(d))
    meta = read_run_json(rj)
    units: dict = {}
    if (d / FRONT).is_file():
        front, fm = read_parquet(d / FRONT)
        units.update(fm.get("units", {}))
        problem = meta.get("problem") or {}
        _require_columns(front, ["candidate_id"] + [f"obj.{o}" for o in problem.get("objectives") or []]
                         + [f"var.{v}" for v in problem.get("variables") or []], d / FRONT, "run.json names")
    elif meta.get("status") in ("running", "interrupted", "failed"):
        front = pd.DataFrame({"candidate_id": pd.Series(dtype=str)})
    else:
        raise InputError("front.parquet is missing from this run folder.", str(d))
    gens = read_parquet(d / GENERATIONS)[0] if (d / GENERATIONS).is_file() else pd.DataFrame()
    return Run(run_dir=d, run_id=str(meta.get("run_id", d.name)), meta=meta, front=front, generations=gens,
               units=units)


#: run.json keys the readers use, with the JSON type each must have when present
_META_TYPES = {"format": str, "run_id": str, "status": str, "problem": dict, "template": dict, "config": dict,
               "config_base_dir": str, "config_sha256": str, "inputs": list, "seed": int, "sources": list,
               "envelope": dict, "timings": dict}


_JSON_NAMES = {dict: "object", list: "array", str: "string", int: "integer", float: "number", bool: "boolean"}


def read_run_json(path: Path) -> dict:
    """A run's ``run.json`` (a run or a merge), checked to be the record the readers expect.

    Raises
    ------
    InputError
        Naming the file (and key) when it is unreadable, not JSON, not a JSON object, or a key the
        readers use has the wrong type.
    """
    src = str(path)
    try:
        meta = json.loads(read_text(path, "run.json"))
    except InputError:
        raise
    except (ValueError, RecursionError) as exc:
        raise InputError(f"run.json is not valid JSON ({exc}). Restore it, or run again.", src) from None
    if not isinstance(meta, dict):
        raise InputError(f"expected a JSON object (the run's record). Got a JSON "
                         f"{_JSON_NAMES.get(type(meta), 'value')} instead.", src)
    for key, kind in _META_TYPES.items():
        v = meta.get(key)
        if v is not None and (not isinstance(v, kind) or isinstance(v, bool)):
            raise InputError(f"expected a JSON {_JSON_NAMES[kind]}. Got {v!r:.80} instead.", src, key)
    for key in ("variables", "objectives", "constraints"):
        v = (meta.get("problem") or {}).get(key)
        if v is not None and not (isinstance(v, list) and all(isinstance(x, str) for x in v)):
            raise InputError(f"expected a list of names. Got {v!r:.80} instead.", src, f"problem.{key}")
    return meta
