"""Evaluate a run's batches on several processes of this machine.

:class:`ParallelProblem` wraps a problem built from a run config: each batch of designs is cut into
contiguous chunks, one per process; the calling process evaluates the first chunk while worker
processes (spawned once, each building the same problem from the pickled config) evaluate the
others, and the :class:`~tiltopt.problems.problem.Evaluation` of the whole batch is put back
together in order. Every design is evaluated on its own (no figure of one design depends on the
others in its batch), so the result is the same as one process's, design for design; the tests
hold it to that.

CPU only; workers are plain processes. Batches run their runs in parallel already and use one
process per run.
"""
from __future__ import annotations

import os
import pickle
from concurrent.futures import ProcessPoolExecutor

import numpy as np

#: processes a single run uses by default: this machine's cores, at most 4
DEFAULT_WORKERS = max(1, min(os.cpu_count() or 1, 4))
#: below this many designs per process a batch is evaluated in one process (start-up is not worth it)
MIN_CHUNK = 8

_worker_problem = None


def _init(cfg_bytes: bytes):
    global _worker_problem
    cfg = pickle.loads(cfg_bytes)
    _worker_problem = cfg.make_problem()


def _evaluate(X):
    ev = _worker_problem.evaluate_designs(X)
    ev.units = dict(ev.units)
    return ev


def concat_evaluations(parts):
    """One Evaluation from the Evaluations of consecutive chunks of a batch (rows in order)."""
    from tiltopt.problems.problem import Evaluation

    first = parts[0]
    keys = list(first.metrics)
    return Evaluation(
        X=np.concatenate([p.X for p in parts]), F=np.concatenate([p.F for p in parts]),
        G=np.concatenate([p.G for p in parts]), feasible=np.concatenate([p.feasible for p in parts]),
        violation=np.concatenate([p.violation for p in parts]), reason=[r for p in parts for r in p.reason],
        metrics={k: np.concatenate([p.metrics[k] for p in parts]) for k in keys},
        objective_names=list(first.objective_names), constraint_names=list(first.constraint_names),
        units=dict(first.units))


class ParallelProblem:
    """A problem whose ``evaluate_designs`` runs on ``workers`` processes (see module docs).

    Parameters
    ----------
    cfg : RunConfig
        The config the problem is made from (the workers make their own copy).
    workers : int
        Processes in all, the calling one included (>= 2).

    Every other attribute is the wrapped problem's.
    """

    def __init__(self, cfg, workers: int, problem=None):
        self._problem = problem if problem is not None else cfg.make_problem()
        self.workers = int(workers)
        self._cfg_bytes = pickle.dumps(cfg)
        self._pool = None

    def __getattr__(self, name):
        return getattr(self._problem, name)

    def _ensure_pool(self):
        if self._pool is None:
            import multiprocessing as mp

            self._pool = ProcessPoolExecutor(max_workers=self.workers - 1, mp_context=mp.get_context("spawn"),
                                             initializer=_init, initargs=(self._cfg_bytes,))
        return self._pool

    def evaluate_designs(self, X):
        X = np.atleast_2d(np.asarray(X, dtype=float))
        k = min(self.workers, max(1, len(X) // MIN_CHUNK))
        if k < 2:
            return self._problem.evaluate_designs(X)
        chunks = np.array_split(X, k)
        pool = self._ensure_pool()
        futures = [pool.submit(_evaluate, c) for c in chunks[1:]]
        hook = getattr(self._problem, "on_evaluation", None)
        self._problem.on_evaluation = None                # the hook sees the whole batch, once
        try:
            first = self._problem.evaluate_designs(chunks[0])
        finally:
            self._problem.on_evaluation = hook
        ev = concat_evaluations([first] + [f.result() for f in futures])
        self._problem.last_evaluation = ev
        if hook is not None:
            hook(ev)
        return ev

    def close(self):
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None

    def __del__(self):
        try:
            self.close()
        except Exception:  # noqa: BLE001 - interpreter shutdown
            pass


def make_parallel(cfg, workers: int | None, problem=None):
    """The problem of ``cfg`` (or ``problem``, already made from it) on ``workers`` processes (default
    :data:`DEFAULT_WORKERS`); the plain problem for one worker or a benchmark config."""
    n = DEFAULT_WORKERS if workers is None else int(workers)
    if n < 2 or cfg.spec is None:
        return problem if problem is not None else cfg.make_problem()
    return ParallelProblem(cfg, n, problem)
