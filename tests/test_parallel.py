"""Evaluation on several processes (optimizer/parallel.py) gives the run of one process, design for design."""
from __future__ import annotations

import numpy as np
import pyarrow.parquet as pq

from tests.helpers import CONFIGS, TINY_CONFIG
from tiltopt.optimizer.config import load_config
from tiltopt.optimizer.parallel import ParallelProblem, concat_evaluations
from tiltopt.optimizer.runner import start_run


def test_parallel_batch_equals_the_serial_batch():
    cfg = load_config(CONFIGS / "demo.toml")
    serial = cfg.make_problem()
    par = ParallelProblem(cfg, 2)
    try:
        X = serial.initial_designs(40, 5)
        a, b = serial.evaluate_designs(X), par.evaluate_designs(X)
    finally:
        par.close()
    assert np.array_equal(a.F, b.F) and np.array_equal(a.G, b.G) and a.reason == b.reason
    assert all(np.array_equal(a.metrics[k], b.metrics[k], equal_nan=True) for k in a.metrics)
    # a small batch is not worth splitting: one process, the same figures
    assert np.array_equal(par.evaluate_designs(X[:3]).F, a.F[:3])


def test_concatenated_chunks_are_the_batch():
    cfg = load_config(CONFIGS / "demo.toml")
    p = cfg.make_problem()
    X = p.initial_designs(12, 2)
    whole = p.evaluate_designs(X)
    parts = concat_evaluations([p.evaluate_designs(X[:5]), p.evaluate_designs(X[5:])])
    assert np.array_equal(whole.F, parts.F) and whole.reason == parts.reason and np.array_equal(whole.X, parts.X)


def test_a_run_on_two_processes_has_the_front_of_one(tmp_path):
    (tmp_path / "tiny.toml").write_text(TINY_CONFIG)
    cfg = load_config(tmp_path / "tiny.toml")
    one = start_run(cfg, run_id="one", progress=False, workers=1)
    two = start_run(cfg, run_id="two", progress=False, workers=2)
    fa = pq.read_table(one.run_dir / "front.parquet").to_pandas()
    fb = pq.read_table(two.run_dir / "front.parquet").to_pandas()
    cols = [c for c in fa.columns if c.startswith(("var.", "obj.", "con."))] + ["candidate_id"]
    assert len(fa) and fa[cols].equals(fb[cols])
