"""The runner: repeatable fronts, resume equals an uninterrupted run, Ctrl-C and kill -9 in a real
subprocess, NSGA-III, progress line, failures reported. Reference for ZDT1: Zitzler, Deb and Thiele,
Evolutionary Computation 8(2), 2000; the exact-equality checks are the property the issue asks for
(same seed -> same front), compared against an independent straight run."""
from __future__ import annotations

import io
import json
import os
import signal
import subprocess
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from tests.helpers import NSGA3_TILT, cli_command
from tiltopt.optimizer.config import RunSettings, load_config
from tiltopt.optimizer.progress import Progress
from tiltopt.optimizer.reference_problems import ZDTProblem
from tiltopt.optimizer.runner import resume_run, run_problem, start_run

ROOT = Path(__file__).resolve().parents[1]


def _settings(tmp_path, gens=12, pop=16, every=3, algorithm="nsga2", seed=5):
    return RunSettings(name="t", seed=seed, algorithm=algorithm, population=pop, generations=gens, output=tmp_path,
                       checkpoint_every=every)


def _front(run_dir):
    return pq.read_table(Path(run_dir) / "front.parquet").to_pandas()


def _assert_same_front(a, b):
    fa, fb = _front(a), _front(b)
    cols = ["candidate_id"] + [c for c in fa.columns if c.startswith(("obj.", "var."))]
    pd.testing.assert_frame_equal(fa[cols].reset_index(drop=True), fb[cols].reset_index(drop=True))


def _config(tmp_path, gens=40, pop=12, every=2, delay=0.0, name="sub"):
    p = tmp_path / f"{name}.toml"
    p.write_text(f"""
[run]
name = "{name}"
seed = 11
population = {pop}
generations = {gens}
output = "out"
checkpoint_every = {every}

[benchmark]
name = "zdt1"
n_var = 10
eval_delay_s = {delay}
""")
    return p


def test_same_seed_same_front(tmp_path):
    s = _settings(tmp_path)
    run_problem(ZDTProblem("zdt1", 10), s, tmp_path / "a")
    run_problem(ZDTProblem("zdt1", 10), s, tmp_path / "b")
    _assert_same_front(tmp_path / "a", tmp_path / "b")
    c = run_problem(ZDTProblem("zdt1", 10), _settings(tmp_path, seed=6), tmp_path / "c")
    assert not _front(tmp_path / "c")[["obj.f1"]].equals(_front(tmp_path / "a")[["obj.f1"]])
    assert c.status == "finished"


def test_resume_equals_uninterrupted(tmp_path):
    s = _settings(tmp_path, gens=12, every=3)
    straight = run_problem(ZDTProblem("zdt1", 10), s, tmp_path / "straight")
    part = run_problem(ZDTProblem("zdt1", 10), s, tmp_path / "resumed", stop_after=5)
    assert part.status == "interrupted" and part.generations == 5
    meta = json.loads((tmp_path / "resumed" / "run.json").read_text())
    assert meta["status"] == "interrupted" and meta["timings"]["generations_done"] == 5
    # the partial results are written and readable
    assert len(pq.read_table(tmp_path / "resumed" / "evaluations.parquet")) == 5 * 16
    done = resume_run(tmp_path / "resumed", progress=False, problem=ZDTProblem("zdt1", 10))
    assert done.status == "finished" and done.generations == straight.generations == 12
    _assert_same_front(tmp_path / "straight", tmp_path / "resumed")
    ev_a = pq.read_table(tmp_path / "straight" / "evaluations.parquet").to_pandas()
    ev_b = pq.read_table(tmp_path / "resumed" / "evaluations.parquet").to_pandas()
    pd.testing.assert_frame_equal(ev_a, ev_b)
    g = pq.read_table(tmp_path / "resumed" / "generations.parquet").to_pandas()
    assert list(g["generation"]) == list(range(1, 13))


def test_nsga3_runs(tmp_path):
    from pymoo.indicators.hv import HV

    from tests.test_zdt1 import ZDT1_FRONT_HV, check_zdt1_front_file

    out = run_problem(ZDTProblem("zdt1", 10), _settings(tmp_path, gens=30, pop=20, algorithm="nsga3"), tmp_path / "n3")
    assert out.status == "finished"
    F = check_zdt1_front_file(out.run_dir, 10)        # the published ZDT1 of the stored variables
    # a short run (20 x 30) is far from the exact front (hypervolume 2/3 at (1, 1)); this seeded one reaches
    # 0.312 with 19 points, from 0 for its random first generation: 0.28 leaves 10 % headroom
    hv = HV(ref_point=np.array([1.0, 1.0]))(F)
    assert 0.28 <= hv <= ZDT1_FRONT_HV and len(F) >= 15


def _wait_for(path: Path, proc, timeout=60.0):
    t0 = time.time()
    while not path.exists():
        assert proc.poll() is None, "the run ended before its first checkpoint"
        if time.time() - t0 > timeout:
            raise AssertionError(f"{path} did not appear")
        time.sleep(0.05)


def test_ctrl_c_stops_with_checkpoint_and_resume_matches(tmp_path):
    cfg = _config(tmp_path, gens=40, delay=0.05)
    proc = subprocess.Popen(cli_command("run", str(cfg), "--quiet"), cwd=ROOT, stderr=subprocess.PIPE, text=True)
    run_dir = tmp_path / "out" / "sub-s11"
    _wait_for(run_dir / "checkpoint.npz", proc)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err     # as shells report a command stopped by Ctrl-C
    meta = json.loads((run_dir / "run.json").read_text())
    assert meta["status"] == "interrupted" and 0 < meta["timings"]["generations_done"] < 40
    assert "stopping after this generation" in err
    # continue in-process (without the simulated delay, which changes no number) and compare with a
    # straight run of the same config
    done = resume_run(run_dir, progress=False, problem=ZDTProblem("zdt1", 10))
    assert done.status == "finished" and done.generations == 40
    straight = start_run(load_config(_config(tmp_path, gens=40, name="fast")), run_id="straight", progress=False)
    _assert_same_front(run_dir, straight.run_dir)


def test_killed_run_leaves_readable_parquet_and_resumes(tmp_path):
    cfg = _config(tmp_path, gens=60, every=1, delay=0.01, name="kill")
    run_dir = tmp_path / "out" / "kill-s11"
    proc = subprocess.Popen(cli_command("run", str(cfg), "--quiet"), cwd=ROOT, stderr=subprocess.DEVNULL)
    _wait_for(run_dir / "checkpoint.npz", proc)
    time.sleep(0.3)
    os.kill(proc.pid, signal.SIGKILL)   # no chance to clean up
    proc.wait(timeout=30)
    files = list(run_dir.glob("*.parquet")) + list((run_dir / "evaluations.parts").glob("*.parquet"))
    assert files
    for f in files:   # every Parquet file that exists is whole (pyarrow reads it)
        pq.read_table(f)
    meta = json.loads((run_dir / "run.json").read_text())
    assert meta["status"] == "running" and meta["timings"]["generations_done"] < 60
    done = resume_run(run_dir, progress=False, problem=ZDTProblem("zdt1", 10))
    assert done.status == "finished"
    straight = start_run(load_config(_config(tmp_path, gens=60, every=1, name="fast")), run_id="straight",
                         progress=False)
    _assert_same_front(run_dir, straight.run_dir)
    ev = pq.read_table(run_dir / "evaluations.parquet").to_pandas()
    assert len(ev) == 60 * 12 and ev["candidate_id"].is_unique


def test_existing_run_folder_is_an_input_error(tmp_path):
    from tiltopt.base.errors import InputError

    cfg = load_config(_config(tmp_path, gens=2))
    start_run(cfg, progress=False)
    with pytest.raises(InputError, match="--overwrite"):
        start_run(cfg, progress=False)
    assert start_run(cfg, progress=False, overwrite=True).status == "finished"


def test_bad_problem_output_is_reported(tmp_path):
    class Broken(ZDTProblem):
        def evaluate_designs(self, X):
            ev = super().evaluate_designs(X)
            ev.F[0, 0] = np.nan
            return ev

    with pytest.raises(RuntimeError, match="NaN"):
        run_problem(Broken("zdt1", 5), _settings(tmp_path, gens=3), tmp_path / "bad")
    meta = json.loads((tmp_path / "bad" / "run.json").read_text())
    assert meta["status"] == "failed" and "NaN" in meta["error"]


def test_progress_line():
    buf = io.StringIO()
    p = Progress(10, "r", stream=buf, every_s=0.0)
    p.update(10, 123.4, 0.5, 0.75, 0.0)
    line = buf.getvalue()
    for part in ("gen 10/10", "123.4 eval/s", "feasible  50.0%", "HV 0.7500", "ETA 0s"):
        assert part in line


def test_nsga3_same_seed_same_front_with_failed_designs(tmp_path):
    # many random wishbone designs fail to assemble and tie on violation; every tie must be drawn
    # from the seeded generator (pymoo 0.6.2's own NSGA-III tournament draws them unseeded)
    (tmp_path / "n3.toml").write_text(NSGA3_TILT)
    cfg = load_config(tmp_path / "n3.toml")
    a = start_run(cfg, run_id="a", progress=False)
    b = start_run(cfg, run_id="b", progress=False)
    ev = pq.read_table(a.run_dir / "evaluations.parquet").to_pandas()
    assert (~ev["feasible"]).sum() > 10
    _assert_same_front(a.run_dir, b.run_dir)
    c = start_run(cfg, run_id="c", progress=False, stop_after=4)
    assert c.status == "interrupted"
    resume_run(c.run_dir, progress=False)
    _assert_same_front(a.run_dir, c.run_dir)
