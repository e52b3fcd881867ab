"""Batches of runs: a list of configs and seeds, or grids over config values; local processes or Dask.

Batch file (TOML, our own format; paths relative to the batch file)::

    [batch]
    name = "overnight"          # folder <output>/<name>/ holds the runs and summary.parquet
    output = "../results"
    retries = 2                 # times a run whose worker died is started again (from its checkpoint)

    [[runs]]                    # explicit configs and seeds
    config = "demo.toml"
    seeds = [1, 2, 3]
    set = { "run.generations" = 50 }          # optional overrides, dotted keys into the config

    [[grid]]                    # every combination of the values (times every seed)
    config = "demo.toml"
    seeds = [1]
    set = { "run.population" = 60 }
    [grid.values]
    "envelope.lean_limit_deg" = [30.0, 35.0, 40.0]
    "constraints.max_width_mm" = [850.0, 950.0]

A run whose ``run.json`` says finished is never run again when the batch is
restarted; an unfinished one continues from its checkpoint.
"""
from __future__ import annotations

import copy
import itertools
import json
import math
import multiprocessing as mp
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from tiltopt.base.errors import InputError
from tiltopt.base.limits import MAX_BATCH_RUNS, check_count

from . import results as R
from .config import parse_config, read_toml

BATCH_KEYS = ("batch", "runs", "grid")
BATCH_TABLE_KEYS = ("name", "output", "retries")
RUNS_KEYS = ("config", "seeds", "set")
GRID_KEYS = ("config", "seeds", "set", "values")
SUMMARY = "summary.parquet"
SUMMARY_UNITS = {"run_id": "", "config": "", "seed": "1", "overrides": "JSON of dotted config keys", "status": "",
                 "attempts": "1", "front_size": "1", "generations": "1", "evaluations": "1",
                 "hypervolume": "1 (normalised objectives, reference 1.1 each)", "elapsed_s": "s", "error": "",
                 "run_dir": ""}


@dataclass
class BatchItem:
    """One run of a batch (JSON-able, sent to workers)."""

    run_id: str
    config: str
    base_dir: str
    seed: int
    overrides: dict
    data: dict
    run_dir: str

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass
class Batch:
    """A parsed batch file."""

    name: str
    source: str
    batch_dir: Path
    retries: int
    items: list = field(default_factory=list)


def _set_dotted(data: dict, key: str, value, src: str, where: str):
    parts = key.split(".")
    d = data
    for p in parts[:-1]:
        nxt = d.setdefault(p, {})
        if not isinstance(nxt, dict):
            raise InputError(f"cannot set '{key}': '{p}' is not a table in the config.", src, where)
        d = nxt
    d[parts[-1]] = value


def _label(value) -> str:
    if isinstance(value, float):
        return f"{value:g}"
    return str(value).replace("/", "_").replace(" ", "")


def _seeds(v, src, where):
    if not isinstance(v, list) or not v or not all(isinstance(s, int) and not isinstance(s, bool) and s >= 0 for s in v):
        raise InputError(f"expected a list of whole numbers >= 0. Got {v!r} instead.", src, where)
    return v


def _path_text(v, src, where) -> str:
    if not isinstance(v, str) or not v:
        raise InputError(f"expected a path (a string, relative to the batch file). Got {v!r} instead.", src, where)
    return v


def _table(v, allowed, src, where, required=()):
    if not isinstance(v, dict):
        raise InputError(f"expected a table. Got {v!r} instead.", src, where)
    for k in v:
        if k not in allowed:
            raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(allowed)}.", src, f"{where}.{k}")
    for k in required:
        if k not in v:
            raise InputError("this key is required but missing.", src, f"{where}.{k}")


def parse_batch(data: dict, src: str, base_dir: Path, confirm_above: int | None = None) -> Batch:
    """Validate a batch file and expand it into runs (every config is validated here).

    More than ``confirm_above`` runs (or :data:`~tiltopt.base.limits.MAX_BATCH_RUNS` at all) is an
    error, found before any run is expanded.
    """
    _table(data, BATCH_KEYS, src, "")
    if "batch" not in data:
        raise InputError("a batch file needs a [batch] table (name, output).", src, "batch")
    b = data["batch"]
    _table(b, BATCH_TABLE_KEYS, src, "batch", ("name",))
    name = b["name"]
    if not isinstance(name, str) or not name or any(c in name for c in '/\\:*?"<>|'):
        raise InputError(f"expected a short name usable as a folder name. Got {name!r}.", src, "batch.name")
    out = Path(_path_text(b.get("output", "results"), src, "batch.output"))
    out = (out if out.is_absolute() else base_dir / out).resolve()
    retries = b.get("retries", 2)
    if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
        raise InputError(f"expected a whole number >= 0. Got {retries!r}.", src, "batch.retries")
    batch_dir = out / name
    groups = []
    for kind, keys in (("runs", RUNS_KEYS), ("grid", GRID_KEYS)):
        entries = data.get(kind, [])
        if isinstance(entries, dict):
            entries = [entries]
        if not isinstance(entries, list):
            raise InputError(f"expected [[{kind}]] tables. Got {entries!r}.", src, kind)
        for i, e in enumerate(entries):
            where = f"{kind}[{i}]"
            _table(e, keys, src, where, ("config",))
            groups.append((kind, where, e))
    if not groups:
        raise InputError("a batch needs at least one [[runs]] or [[grid]] table.", src)
    _check_run_count(groups, src, confirm_above)
    items: list[BatchItem] = []
    seen: set[str] = set()
    for kind, where, e in groups:
        cpath = Path(_path_text(e["config"], src, f"{where}.config"))
        cpath = (cpath if cpath.is_absolute() else base_dir / cpath).resolve()
        base = read_toml(cpath)
        seeds = _seeds(e.get("seeds", [base.get("run", {}).get("seed", 0)]), src, f"{where}.seeds")
        sets = e.get("set", {})
        if not isinstance(sets, dict):
            raise InputError(f"expected a table of dotted keys. Got {sets!r}.", src, f"{where}.set")
        combos: list[dict] = [{}]
        if kind == "grid":
            vals = e.get("values")
            if not isinstance(vals, dict) or not vals:
                raise InputError("a grid needs a [grid.values] table of dotted keys and value lists.", src,
                                 f"{where}.values")
            for k, v in vals.items():
                if not isinstance(v, list) or not v:
                    raise InputError(f"expected a list of values. Got {v!r}.", src, f"{where}.values.{k}")
            keys = list(vals)
            combos = [dict(zip(keys, c)) for c in itertools.product(*(vals[k] for k in keys))]
        for combo in combos:
            for seed in seeds:
                d = copy.deepcopy(base)
                over = {**sets, **combo, "run.seed": seed}
                for k, v in over.items():
                    _set_dotted(d, k, v, src, where)
                cfg = parse_config(d, f"{cpath} (batch {where}, {combo or 'as written'}, seed {seed})", cpath.parent)
                label = "_".join(f"{k.split('.')[-1]}{_label(v)}" for k, v in combo.items())
                rid = "-".join(x for x in (cfg.run.name, label, f"s{seed}") if x)
                if rid in seen:
                    j = 2
                    while f"{rid}-{j}" in seen:
                        j += 1
                    rid = f"{rid}-{j}"
                seen.add(rid)
                items.append(BatchItem(run_id=rid, config=str(cpath), base_dir=str(cpath.parent), seed=seed,
                                       overrides={k: v for k, v in over.items()}, data=d,
                                       run_dir=str(batch_dir / rid)))
    return Batch(name=name, source=src, batch_dir=batch_dir, retries=retries, items=items)


def _check_run_count(groups, src: str, confirm_above: int | None) -> None:
    planned = 0
    for kind, _, e in groups:
        seeds, values = e.get("seeds"), e.get("values")
        n = len(seeds) if isinstance(seeds, list) and seeds else 1
        if kind == "grid" and isinstance(values, dict):
            n *= math.prod(len(v) if isinstance(v, list) else 1 for v in values.values())
        planned += n
    check_count(planned, MAX_BATCH_RUNS, "runs in this batch", "Use fewer [[grid]] values or seeds.", src)
    if confirm_above is not None and planned > confirm_above:
        raise InputError(f"this batch would start {planned:,} runs (more than {confirm_above:,}). Check the [[grid]] "
                         f"values and seeds, and pass --yes to start it.", src)


def load_batch(path: str | Path, confirm_above: int | None = None) -> Batch:
    p = Path(path)
    return parse_batch(read_toml(p), str(p), p.resolve().parent, confirm_above)


# ------------------------------------------------------------------ one run
def _status(run_dir: Path) -> dict | None:
    try:
        meta = json.loads((run_dir / R.RUN_JSON).read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError):
        return None
    return meta if isinstance(meta, dict) else None


def summary_row(item: dict, attempts: int = 0, status: str | None = None, error: str = "") -> dict:
    d = Path(item["run_dir"])
    meta = _status(d) or {}
    hv = float("nan")
    if (d / R.GENERATIONS).is_file():
        try:
            g = R.read_parquet(d / R.GENERATIONS)[0]
            if len(g):
                hv = float(g["hypervolume"].iloc[-1])
        except Exception:  # a file being replaced right now; the next summary has it
            pass
    t = meta.get("timings", {})
    return {"run_id": item["run_id"], "config": item["config"], "seed": int(item["seed"]),
            "overrides": json.dumps(item["overrides"], sort_keys=True, default=str),
            "status": status or meta.get("status", "pending"), "attempts": int(attempts),
            "front_size": int(meta.get("front_size", 0) or 0), "generations": int(t.get("generations_done", 0) or 0),
            "evaluations": int(t.get("evaluations", 0) or 0), "hypervolume": hv,
            "elapsed_s": float(t.get("elapsed_s", 0.0) or 0.0), "error": error or str(meta.get("error", "")),
            "run_dir": str(d)}


def execute_item(item: dict) -> dict:
    """Run one batch item to the end (resuming from its checkpoint, skipping it when finished).

    Returns its summary row. Errors of the run itself are returned as status
    'failed' (they would repeat on a retry); only a dead worker is retried.
    """
    from .runner import Runner, config_record

    d = Path(item["run_dir"])
    meta = _status(d)
    if meta is not None and meta.get("status") == "finished":
        return summary_row(item)
    try:
        cfg = parse_config(item["data"], item["config"], item["base_dir"])
        problem = cfg.make_problem()
        runner = Runner(problem, cfg.run, d, item["run_id"], config_record(cfg), progress=False, notices=False)
        runner.run(resume=(d / R.CHECKPOINT).is_file())
    except KeyboardInterrupt:   # a second Ctrl-C, or one before the run started: the last checkpoint stays valid
        return summary_row(item, status="interrupted")
    except Exception as exc:
        return summary_row(item, status="failed", error=f"{type(exc).__name__}: {exc}")
    return summary_row(item)


EXIT_FAILED, EXIT_INTERRUPTED = 3, 4


def _process_main(item: dict) -> None:
    row = execute_item(item)
    raise SystemExit({"finished": 0, "interrupted": EXIT_INTERRUPTED}.get(row["status"], EXIT_FAILED))


# ------------------------------------------------------------------ executors
def _write_summary(batch: Batch, rows: dict) -> Path:
    df = pd.DataFrame([rows[it.run_id] for it in batch.items], columns=list(SUMMARY_UNITS))
    path = batch.batch_dir / SUMMARY
    R.write_parquet(path, df, SUMMARY_UNITS, {"batch": batch.name, "source": batch.source,
                                              "versions": R.package_versions()})
    return path


def _log(echo, text):
    if echo is not None:
        echo(text)


def run_local(batch: Batch, workers: int = 2, echo=None, poll_s: float = 0.2) -> pd.DataFrame:
    """Run a batch in local worker processes (one process per run, ``workers`` at a time)."""
    ctx = mp.get_context("spawn")
    batch.batch_dir.mkdir(parents=True, exist_ok=True)
    rows = {it.run_id: summary_row(it.to_dict()) for it in batch.items}
    todo = [it for it in batch.items if rows[it.run_id]["status"] != "finished"]
    for it in batch.items:
        if rows[it.run_id]["status"] == "finished":
            _log(echo, f"{it.run_id}: finished earlier, kept")
    attempts = {it.run_id: 0 for it in batch.items}
    running: dict[str, tuple[Any, BatchItem]] = {}
    _write_summary(batch, rows)
    try:
        while todo or running:
            while todo and len(running) < max(1, workers):
                it = todo.pop(0)
                attempts[it.run_id] += 1
                p = ctx.Process(target=_process_main, args=(it.to_dict(),), name=f"tiltopt-{it.run_id}")
                p.start()
                running[it.run_id] = (p, it)
                _log(echo, f"{it.run_id}: started (attempt {attempts[it.run_id]}, pid {p.pid})")
            time.sleep(poll_s)
            for rid, (p, it) in list(running.items()):
                if p.is_alive():
                    continue
                p.join()
                del running[rid]
                row = summary_row(it.to_dict(), attempts[rid])
                if row["status"] == "finished":
                    _log(echo, f"{rid}: finished, front of {row['front_size']}")
                elif p.exitcode == EXIT_FAILED and row["status"] == "failed":
                    _log(echo, f"{rid}: failed: {row['error']}")
                elif p.exitcode == EXIT_INTERRUPTED:
                    row["status"] = "interrupted"
                    _log(echo, f"{rid}: interrupted (continues from its checkpoint next time)")
                elif attempts[rid] <= batch.retries:
                    _log(echo, f"{rid}: worker died (exit code {p.exitcode}); starting it again")
                    todo.append(it)
                    row["status"] = "retrying"
                else:
                    row["status"] = "died"
                    row["error"] = f"worker died {attempts[rid]} times (last exit code {p.exitcode})"
                    _log(echo, f"{rid}: {row['error']}")
                rows[rid] = row
                _write_summary(batch, rows)
    except KeyboardInterrupt:
        # Ctrl-C reaches the workers too (same process group): each stops after its generation
        # with a checkpoint. Wait for them, record where they are, start nothing new.
        _log(echo, "stopping: the running runs write a checkpoint after their generation ...")
        for rid, (p, it) in running.items():
            p.join(timeout=120)
            if p.is_alive():
                p.terminate()
                p.join()
            row = summary_row(it.to_dict(), attempts[rid])
            if row["status"] != "finished":
                row["status"] = "interrupted"
            rows[rid] = row
        running.clear()
    _write_summary(batch, rows)
    return pd.DataFrame([rows[it.run_id] for it in batch.items], columns=list(SUMMARY_UNITS))


def run_dask(batch: Batch, scheduler, echo=None) -> pd.DataFrame:
    """Run a batch on a Dask distributed cluster (``scheduler``: an address or a ``Client``).

    Workers need the same files at the same paths (configs, shells, the
    results folder): a shared filesystem, or one machine.
    """
    from distributed import Client, as_completed

    own = not isinstance(scheduler, Client)
    client = Client(scheduler) if own else scheduler
    try:
        batch.batch_dir.mkdir(parents=True, exist_ok=True)
        rows = {it.run_id: summary_row(it.to_dict()) for it in batch.items}
        attempts = {it.run_id: 0 for it in batch.items}
        _write_summary(batch, rows)
        futs = {}

        def submit(it):
            attempts[it.run_id] += 1
            f = client.submit(execute_item, it.to_dict(), pure=False,
                              key=f"tiltopt-{batch.name}-{it.run_id}-{attempts[it.run_id]}-{time.time_ns()}")
            futs[f.key] = it
            return f

        pending = []
        for it in batch.items:
            if rows[it.run_id]["status"] == "finished":
                _log(echo, f"{it.run_id}: finished earlier, kept")
            else:
                pending.append(submit(it))
        ac = as_completed(pending)
        for f in ac:
            it = futs[f.key]
            try:
                row = f.result()
                row["attempts"] = attempts[it.run_id]
                _log(echo, f"{it.run_id}: {row['status']}" + (f", front of {row['front_size']}"
                                                              if row["status"] == "finished" else f": {row['error']}"))
            except Exception as exc:  # worker lost (KilledWorker, connection closed ...)
                row = summary_row(it.to_dict(), attempts[it.run_id])
                if attempts[it.run_id] <= batch.retries:
                    _log(echo, f"{it.run_id}: worker lost ({type(exc).__name__}); starting it again")
                    row["status"] = "retrying"
                    ac.add(submit(it))
                else:
                    row["status"] = "died"
                    row["error"] = f"{type(exc).__name__}: {exc}"
            rows[it.run_id] = row
            _write_summary(batch, rows)
        return pd.DataFrame([rows[it.run_id] for it in batch.items], columns=list(SUMMARY_UNITS))
    finally:
        if own:
            client.close()
