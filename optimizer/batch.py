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
restarted; an unfinished one continues from its checkpoint. Either only when it
is the same run: the same resolved config (``config_sha256`` of run.json: the
config file with the ``set`` and grid values applied) and the same input files
(their sha256). A run that differs is refused, or with ``rerun_changed``
started again from generation 1.

One process drives a batch at a time (``batch.lock`` in the batch folder, an
OS lock), each run folder has its own ``run.lock``, and a local worker dies
with the batch process that started it (Linux ``PR_SET_PDEATHSIG``, and a
watchdog thread that polls the parent's pid elsewhere).
"""
from __future__ import annotations

import copy
import itertools
import json
import math
import multiprocessing as mp
import os
import signal
import sys
import threading
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from tiltopt.base.errors import InputError
from tiltopt.base.inputs import reading_copies
from tiltopt.base.limits import MAX_BATCH_RUNS, check_count

from . import checkpoint as CK
from . import results as R
from . import runfolder as RF
from .config import parse_config, read_toml

BATCH_KEYS = ("batch", "runs", "grid")
BATCH_TABLE_KEYS = ("name", "output", "retries")
RUNS_KEYS = ("config", "seeds", "set")
GRID_KEYS = ("config", "seeds", "set", "values")
SUMMARY = "summary.parquet"
STOP_FILE = "batch.stop"      # in the batch folder: written on Ctrl-C; every run stops after its generation
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
    config_sha256: str = ""
    inputs: list = field(default_factory=list)   # [{role, path, builtin}] of the files the config reads

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
    return RF.safe_label(str(value).replace(" ", ""))


def _seeds(v, src, where):
    if not isinstance(v, list) or not v or not all(isinstance(s, int) and not isinstance(s, bool) and s >= 0
                                                   for s in v):
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
    name = RF.check_name(b["name"], "batch name", src, "batch.name")
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
                cfg, files = RF.collect_inputs(d, f"{cpath} (batch {where}, {combo or 'as written'}, seed {seed})",
                                               cpath.parent, cpath)
                label = "_".join(f"{k.split('.')[-1]}{_label(v)}" for k, v in combo.items())
                rid = "-".join(x for x in (RF.safe_label(cfg.run.name), label, f"s{seed}") if x)
                if rid in seen:
                    j = 2
                    while f"{rid}-{j}" in seen:
                        j += 1
                    rid = f"{rid}-{j}"
                seen.add(rid)
                RF.check_name(rid, "run id", src, where)
                items.append(BatchItem(run_id=rid, config=str(cpath), base_dir=str(cpath.parent), seed=seed,
                                       overrides={k: v for k, v in over.items()}, data=d,
                                       run_dir=str(batch_dir / rid), config_sha256=RF.config_hash(cfg.data),
                                       inputs=files))
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
def summary_row(item: dict, attempts: int = 0, status: str | None = None, error: str = "") -> dict:
    d = Path(item["run_dir"])
    meta = RF.read_meta(d) or {}
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

    Holds the run folder's lock throughout. Returns its summary row. Errors of the
    run itself (a damaged checkpoint, a changed input file, a bug) are returned as
    status 'failed' with their message: they would repeat on a retry. Only a dead
    worker is retried.
    """
    from .runner import Runner, config_record, prepare_fresh

    d = Path(item["run_dir"])
    try:
        RF.refuse_foreign(d, "batch name")
        lock = RF.FolderLock.acquire(d, command=f"tiltopt batch (run {item['run_id']}, pid {os.getpid()})")
    except InputError as exc:
        return summary_row(item, status="failed", error=str(exc))
    with lock:
        meta = RF.read_meta(d)
        same = meta is not None and _stored_hash(meta) == item.get("config_sha256")
        if meta is not None and not same:
            return summary_row(item, status="failed", error="the run folder holds a run of another config "
                                                            "(restart the batch with --rerun-changed)")
        if meta is not None and meta.get("status") == "finished":
            return summary_row(item)
        try:
            if meta is not None and CK.present(d / R.CHECKPOINT):
                copies = RF.verify_inputs(d, meta, flag="--rerun-changed")
                with reading_copies(copies):
                    cfg = parse_config(item["data"], item["config"], item["base_dir"])
                    problem = cfg.make_problem()
                record, resume = config_record(cfg, meta.get("inputs")), True
            else:
                RF.clear_run_files(d)
                cfg = parse_config(item["data"], item["config"], item["base_dir"])
                cfg, problem, record = prepare_fresh(cfg, d, item["config"])
                resume = False
            Runner(problem, cfg.run, d, item["run_id"], record, progress=False, notices=False,
                   lock=lock, restart_hint=BATCH_RESTART_HINT, report_progress=True,
                   stop_file=d.parent / STOP_FILE).run(resume=resume)
        except KeyboardInterrupt:   # a second Ctrl-C, or one before the run started: the last checkpoint stays valid
            return summary_row(item, status="interrupted")
        except InputError as exc:   # a damaged file of the run folder, a changed input: the message names it
            return summary_row(item, status="failed", error=str(exc))
        except Exception as exc:
            return summary_row(item, status="failed", error=f"{type(exc).__name__}: {exc}")
    return summary_row(item)


EXIT_FAILED, EXIT_INTERRUPTED, EXIT_ORPHANED = 3, 4, 5
#: what to do about a damaged checkpoint of a batch run
BATCH_RESTART_HINT = ("Delete it and start the batch again: this run then starts again from generation 1 (its "
                      "other files are replaced).")
MAX_ERROR_CHARS = 4000     # of a failed run's message sent from its worker


def _die_with_parent(parent_pid: int, poll_s: float = 0.5) -> None:
    """End this worker process as soon as the batch process that started it is gone (kill -9 included).

    Linux: ``prctl(PR_SET_PDEATHSIG, SIGKILL)``, so the kernel kills it with its parent; everywhere,
    a daemon thread that polls ``os.getppid()`` (a dead parent's children are re-parented).
    The run folder's lock goes with the process; its files are whole (atomic writes).
    """
    if sys.platform.startswith("linux"):
        try:
            import ctypes

            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, signal.SIGKILL, 0, 0, 0)        # 1 = PR_SET_PDEATHSIG (linux/prctl.h)
        except (OSError, AttributeError):
            pass
    if os.getppid() != parent_pid:   # the parent died before the line above
        os._exit(EXIT_ORPHANED)

    def watch():
        while True:
            time.sleep(poll_s)
            if os.getppid() != parent_pid:
                os._exit(EXIT_ORPHANED)

    threading.Thread(target=watch, name="tiltopt-parent-watch", daemon=True).start()


def _process_main(item: dict, parent_pid: int | None = None, report=None) -> None:
    """A local worker: run ``item``, send its summary row through ``report`` (a pipe to the batch
    process: a failed run's message lives only there), exit with a code that says how it ended."""
    if parent_pid is not None:
        _die_with_parent(parent_pid)
    row = execute_item(item)
    if report is not None:
        try:
            report.send({**row, "error": str(row.get("error", ""))[:MAX_ERROR_CHARS]})
            report.close()
        except OSError:     # the batch process is gone; the exit code still tells
            pass
    raise SystemExit({"finished": 0, "interrupted": EXIT_INTERRUPTED}.get(row["status"], EXIT_FAILED))


# ------------------------------------------------------------------ same run or not
def _stored_hash(meta: dict) -> str | None:
    h = meta.get("config_sha256")
    if isinstance(h, str):
        return h
    return RF.config_hash(meta["config"]) if isinstance(meta.get("config"), dict) else None


def _dotted_diff(a, b, prefix="") -> list[str]:
    if isinstance(a, dict) and isinstance(b, dict):
        out = []
        for k in sorted(set(a) | set(b), key=str):
            out += _dotted_diff(a.get(k, _ABSENT), b.get(k, _ABSENT), f"{prefix}{k}.")
        return out
    same = json.dumps(a, sort_keys=True, default=str) == json.dumps(b, sort_keys=True, default=str)
    return [] if same else [prefix[:-1]]


_ABSENT = object()


def changed_runs(batch: Batch) -> list[tuple[BatchItem, str]]:
    """Items whose run folder holds a run of another resolved config or other input files, with what differs.

    Raises
    ------
    InputError
        When an item's folder exists and is not a tiltopt run folder.
    """
    out = []
    hashes: dict[str, str | None] = {}

    def current(path):
        if path not in hashes:
            try:
                hashes[path] = RF.sha256_file(path)
            except OSError:
                hashes[path] = None
        return hashes[path]

    for it in batch.items:
        d = Path(it.run_dir)
        RF.refuse_foreign(d, "batch name")
        if RF.folder_kind(d) != "run":
            continue
        meta = RF.read_meta(d) or {}
        if _stored_hash(meta) != it.config_sha256:
            keys = _dotted_diff(meta.get("config"), it.data) if isinstance(meta.get("config"), dict) else []
            out.append((it, "config differs" + (f" ({', '.join(keys[:4])}{' ...' if len(keys) > 4 else ''})"
                                                if keys else "")))
            continue
        now = {e["role"]: e["path"] for e in it.inputs if e["role"] != "config"}
        then = {r.get("role"): r for r in (meta.get("inputs") or [])
                if isinstance(r, dict) and r.get("role") != "config"}
        if meta.get("inputs") is None:
            continue      # a run folder of an older tiltopt: no input hashes to compare
        diff = [role for role in sorted(set(now) | set(then), key=str)
                if role not in now or role not in then or current(now[role]) != then[role].get("sha256")]
        if diff:
            out.append((it, "input files changed (" + ", ".join(f"{r} {now.get(r, '(none now)')}" for r in diff) + ")"))
    return out


def settle_changed(batch: Batch, rerun_changed: bool, echo=None) -> None:
    """Refuse a batch whose runs changed, or (``rerun_changed``) clear those runs so they start again."""
    changed = changed_runs(batch)
    if not changed:
        return
    if not rerun_changed:
        shown = "; ".join(f"{it.run_id}: {why}" for it, why in changed[:5])
        more = f" and {len(changed) - 5} more" if len(changed) > 5 else ""
        raise InputError(f"{len(changed)} runs of this batch already have folders from another config or other "
                         f"input files ({shown}{more}). A run is kept or continued only when its resolved config "
                         f"and inputs are the same. Pass --rerun-changed to start them again (their old results "
                         f"are replaced), or give the batch another name.", batch.source, "batch.name")
    for it, why in changed:
        with RF.FolderLock.acquire(it.run_dir, command=f"tiltopt batch --rerun-changed (pid {os.getpid()})"):
            RF.clear_run_files(it.run_dir)
        _log(echo, f"{it.run_id}: {why}; starting it again")


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


def _batch_lock(batch: Batch) -> RF.FolderLock:
    """Take the batch folder's lock (a second driver of the same batch is refused, naming the holder's pid);
    a stop request left by an earlier session is removed."""
    lock = RF.FolderLock.acquire(batch.batch_dir, RF.BATCH_LOCK, "batch")
    RF.clean_temp_files(batch.batch_dir)
    _clear_stop(batch)
    return lock


def _request_stop(batch: Batch) -> None:
    """Ask every run of the batch to stop after its generation with a checkpoint (``batch.stop``)."""
    try:
        (batch.batch_dir / STOP_FILE).write_text("stop requested by Ctrl-C\n", encoding="utf-8")
    except OSError:
        pass


def _clear_stop(batch: Batch) -> None:
    p = batch.batch_dir / STOP_FILE
    if p.is_file() and not p.is_symlink():
        p.unlink(missing_ok=True)


def _show(monitor, running_ids, batch_dir: Path, force: bool = False) -> None:
    """The progress lines of the running runs (their progress.json)."""
    if monitor is None:
        return
    from .progress import read_progress

    monitor.show({rid: read_progress(batch_dir / rid) for rid in running_ids}, force=force)


def run_local(batch: Batch, workers: int = 2, echo=None, poll_s: float = 0.2,
              rerun_changed: bool = False, monitor=None) -> pd.DataFrame:
    """Run a batch in local worker processes (one process per run, ``workers`` at a time).

    ``monitor``: a :class:`tiltopt.optimizer.progress.BatchMonitor` for the progress lines of the
    running runs. Ctrl-C stops every running run after its generation with a checkpoint (a second
    Ctrl-C stops waiting for them); every run can be continued by starting the batch again.

    Raises
    ------
    InputError
        When another process drives this batch, or runs changed (see :func:`settle_changed`).
    """
    with _batch_lock(batch):
        settle_changed(batch, rerun_changed, echo)
        _log(echo, f"batch {batch.name}: {len(batch.items)} runs in {batch.batch_dir}")
        try:
            return _run_local(batch, workers, echo, poll_s, monitor)
        finally:
            _clear_stop(batch)
            if monitor is not None:
                monitor.close()


def _run_local(batch: Batch, workers: int, echo, poll_s: float, monitor=None) -> pd.DataFrame:
    ctx = mp.get_context("spawn")
    rows = {it.run_id: summary_row(it.to_dict()) for it in batch.items}
    todo = [it for it in batch.items if rows[it.run_id]["status"] != "finished"]
    for it in batch.items:
        if rows[it.run_id]["status"] == "finished":
            _log(echo, f"{it.run_id}: finished earlier, kept")
    attempts = {it.run_id: 0 for it in batch.items}
    running: dict[str, tuple[Any, BatchItem, Any]] = {}
    told: dict[str, dict] = {}        # the row each worker sent before it ended
    _write_summary(batch, rows)
    try:
        while todo or running:
            while todo and len(running) < max(1, workers):
                it = todo.pop(0)
                attempts[it.run_id] += 1
                recv, send = ctx.Pipe(duplex=False)
                p = ctx.Process(target=_process_main, args=(it.to_dict(), os.getpid(), send),
                                name=f"tiltopt-{it.run_id}")
                p.start()
                send.close()          # the worker holds the only sending end: a dead worker leaves the pipe empty
                running[it.run_id] = (p, it, recv)
                _log(echo, f"{it.run_id}: started (attempt {attempts[it.run_id]}, pid {p.pid})")
            time.sleep(poll_s)
            _show(monitor, list(running), batch.batch_dir)
            for rid, (p, it, recv) in list(running.items()):
                _receive(recv, rid, told)
                if p.is_alive():
                    continue
                p.join()
                _receive(recv, rid, told)
                recv.close()
                del running[rid]
                row = summary_row(it.to_dict(), attempts[rid])
                sent = told.pop(rid, None)
                if row["status"] == "finished":
                    _log(echo, f"{rid}: finished, front of {row['front_size']}")
                elif p.exitcode == EXIT_FAILED:     # the run itself failed: the same on every attempt, not retried
                    row["status"] = "failed"
                    row["error"] = (sent or {}).get("error") or row["error"] or "the run failed (no message arrived)"
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
        # Ctrl-C reaches the workers too (same process group); the stop request reaches those it does not
        # (a worker started in another session): each stops after its generation with a checkpoint.
        # Wait for them, record where they are, start nothing new.
        _request_stop(batch)
        _log(echo, "stopping: the running runs write a checkpoint after their generation (Ctrl-C again to stop "
                   "waiting; every run continues from its last checkpoint when the batch is started again) ...")
        try:
            for rid, (p, it, _recv) in running.items():
                t_end = time.monotonic() + 120
                while p.is_alive() and time.monotonic() < t_end:
                    p.join(timeout=poll_s)
                    _show(monitor, [r for r, (q, _, _) in running.items() if q.is_alive()], batch.batch_dir)
        except KeyboardInterrupt:
            pass
        for rid, (p, it, _recv) in running.items():
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


def _receive(conn, rid: str, told: dict) -> None:
    """Keep the row a worker sent, if one is waiting (a pipe that breaks is a worker that died)."""
    try:
        if conn.poll():
            told[rid] = conn.recv()
    except (EOFError, OSError):
        pass


def scheduler_address(text) -> str:
    """A Dask scheduler address as ``tiltopt batch --scheduler`` takes it (``tcp://host:port``; a bare
    ``host:port`` means tcp).

    Raises
    ------
    InputError
        When it is not such an address.
    """
    from urllib.parse import urlsplit

    t = str(text).strip()
    bad = InputError(f"expected the address of a Dask scheduler, like tcp://192.168.1.20:8786 (the address "
                     f"'dask scheduler' prints). Got {text!r}.", "--scheduler")
    if "://" not in t:
        t = "tcp://" + t
    try:
        u = urlsplit(t)
        port = u.port
    except ValueError:
        raise bad from None
    if u.scheme == "inproc":
        return t
    if u.scheme not in ("tcp", "tls", "ws", "wss") or not u.hostname or port is None or u.path not in ("", "/") \
            or u.query or u.fragment or any(c.isspace() for c in t):
        raise bad
    return t


def _probe_scheduler(address: str, timeout_s: float = 5.0) -> None:
    """Fail fast with a clear message when nothing listens at a scheduler's host and port."""
    import socket
    from urllib.parse import urlsplit

    u = urlsplit(address)
    if u.scheme == "inproc":
        return
    try:
        with socket.create_connection((u.hostname, u.port), timeout=timeout_s):
            pass
    except socket.gaierror as exc:
        raise InputError(f"cannot reach the Dask scheduler at {address}: unknown host {u.hostname!r} ({exc}).",
                         "--scheduler") from None
    except (ConnectionRefusedError, TimeoutError, OSError) as exc:
        why = ("connection refused: nothing listens there" if isinstance(exc, ConnectionRefusedError)
               else f"no answer within {timeout_s:g} s" if isinstance(exc, TimeoutError) else str(exc))
        raise InputError(f"cannot reach the Dask scheduler at {address} ({why}). Start one ('dask scheduler', "
                         f"then 'dask worker ADDRESS' on each machine) or check the address.",
                         "--scheduler") from None


CLUSTER_EXTRA = "tiltopt[cluster]"


def require_distributed():
    """The ``distributed`` package (Dask's cluster part), or one message naming the extra that installs it.

    Raises
    ------
    InputError
        When it is not installed (a default ``pip install tiltopt`` leaves it out).
    """
    try:
        import distributed
    except ImportError:
        raise InputError(f"running a batch on a Dask cluster needs Dask's distributed package, which a default "
                         f"install leaves out: install the cluster extra, pip install '{CLUSTER_EXTRA}', here and on "
                         f"every worker machine; or leave out --scheduler to run the batch on this machine.",
                         "--scheduler") from None
    return distributed


def connect_scheduler(scheduler, timeout_s: float = 10.0):
    """A ``distributed.Client`` for an address (checked first), or the given client. Returns ``(client, own)``."""
    Client = require_distributed().Client

    if isinstance(scheduler, Client):
        return scheduler, False
    address = scheduler_address(scheduler)
    _probe_scheduler(address)
    try:
        return Client(address, timeout=f"{timeout_s:g}s"), True
    except (OSError, TimeoutError) as exc:
        raise InputError(f"cannot connect to the Dask scheduler at {address} ({type(exc).__name__}: {exc}). Is it "
                         f"a Dask scheduler, of a compatible version?", "--scheduler") from None


def run_dask(batch: Batch, scheduler, echo=None, rerun_changed: bool = False, monitor=None,
             poll_s: float = 0.5) -> pd.DataFrame:
    """Run a batch on a Dask distributed cluster (``scheduler``: an address or a ``Client``).

    Workers need the same files at the same paths (configs, shells, the
    results folder): a shared filesystem, or one machine. Each run folder is
    locked by the worker that writes it; the batch folder by this process.
    ``monitor``: as :func:`run_local` (the runs' progress.json on the shared folder). Ctrl-C asks every
    running run to stop after its generation (``batch.stop``: no Ctrl-C reaches a Dask worker) and
    waits for them; a second Ctrl-C stops waiting (the runs still stop at their next generation).
    """
    as_completed = require_distributed().as_completed
    client, own = connect_scheduler(scheduler)
    try:
        with _batch_lock(batch):
            settle_changed(batch, rerun_changed, echo)
            _log(echo, f"batch {batch.name}: {len(batch.items)} runs in {batch.batch_dir} (Dask)")
            try:
                return _run_dask(batch, client, echo, as_completed, monitor, poll_s)
            finally:
                _clear_stop(batch)
                if monitor is not None:
                    monitor.close()
    finally:
        if own:
            client.close()


def _run_dask(batch: Batch, client, echo, as_completed, monitor=None, poll_s: float = 0.5) -> pd.DataFrame:
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
    live = {f.key: f for f in pending}
    stopping, waited = False, False

    def done(f):
        it = futs[f.key]
        live.pop(f.key, None)
        try:
            row = f.result()
            row["attempts"] = attempts[it.run_id]
            _log(echo, f"{it.run_id}: {row['status']}" + (f", front of {row['front_size']}"
                                                          if row["status"] == "finished" else
                                                          (" (continues from its checkpoint next time)"
                                                           if row["status"] == "interrupted" else f": {row['error']}")))
        except Exception as exc:  # worker lost (KilledWorker, connection closed ...)
            row = summary_row(it.to_dict(), attempts[it.run_id])
            if attempts[it.run_id] <= batch.retries and not stopping:
                _log(echo, f"{it.run_id}: worker lost ({type(exc).__name__}); starting it again")
                row["status"] = "retrying"
                g = submit(it)
                live[g.key] = g
                ac.add(g)
            else:
                row["status"] = "interrupted" if stopping else "died"
                row["error"] = "" if stopping else f"{type(exc).__name__}: {exc}"
        rows[it.run_id] = row
        _write_summary(batch, rows)

    while not ac.is_empty():
        try:
            for f in ac.next_batch(block=False):
                done(f)
            started = [futs[k].run_id for k, f in live.items() if f.status != "pending" or _started(futs[k])]
            _show(monitor, started, batch.batch_dir)
            time.sleep(poll_s)
        except KeyboardInterrupt:
            if stopping:               # a second Ctrl-C: stop waiting; the runs stop at their next generation
                waited = True
                break
            stopping = True
            _request_stop(batch)
            _log(echo, "stopping: the running runs write a checkpoint after their generation (Ctrl-C again to stop "
                       "waiting; every run continues from its last checkpoint when the batch is started again) ...")
            for k, f in list(live.items()):     # runs not started yet are not started
                if not _started(futs[k]):
                    f.cancel()
                    it = futs[k]
                    live.pop(k)
                    rows[it.run_id] = {**summary_row(it.to_dict(), attempts[it.run_id]), "status": "interrupted"}
    if waited:
        for k in list(live):
            it = futs[k]
            rows[it.run_id] = {**summary_row(it.to_dict(), attempts[it.run_id]), "status": "interrupted"}
    _write_summary(batch, rows)
    return pd.DataFrame([rows[it.run_id] for it in batch.items], columns=list(SUMMARY_UNITS))


def _started(item: BatchItem) -> bool:
    """A run a worker has taken up (its progress.json exists, from this session or an earlier one)."""
    return (Path(item.run_dir) / R.PROGRESS).is_file()
