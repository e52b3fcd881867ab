"""Faults in real processes: kill -9 at random points of a run and of a batch, batch workers whose
parent died, a run killed before its first checkpoint, two writers on one run folder or one batch.

The property checked is tiltopt's promise about run folders: whatever point a process is killed at,
every result file is whole, and resuming (or restarting the batch) ends with exactly the evaluations
and front of an uninterrupted run of the same seed (ZDT1: Zitzler, Deb and Thiele, Evolutionary
Computation 8(2), 2000). The kill times come from a seeded generator, so a failure repeats."""
from __future__ import annotations

import json
import os
import random
import re
import signal
import subprocess
import time
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
from click.testing import CliRunner

from tests.helpers import cli_command
from tiltopt.cli import main
from tiltopt.optimizer.batch import load_batch, run_local
from tiltopt.optimizer.config import load_config
from tiltopt.optimizer.runner import start_run

ROOT = Path(__file__).resolve().parents[1]
ENV = {**os.environ, "PYTHONUNBUFFERED": "1"}

CONFIG = """
[run]
name = "{name}"
seed = 9
population = {pop}
generations = {gens}
output = "out"
checkpoint_every = {every}

[benchmark]
name = "zdt1"
n_var = 6
eval_delay_s = {delay}
"""


def _config(tmp_path, name, gens, pop=10, every=3, delay=0.01):
    tmp_path.mkdir(parents=True, exist_ok=True)
    p = tmp_path / f"{name}.toml"
    p.write_text(CONFIG.format(name=name, gens=gens, pop=pop, every=every, delay=delay))
    return p


def _straight(tmp_path, name, gens, pop=10, every=3):
    """An uninterrupted run of the same config and seed (no simulated delay: it changes no number)."""
    cfg = _config(tmp_path / "straight", name, gens, pop, every, delay=0.0)
    return start_run(load_config(cfg), progress=False).run_dir


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except (OSError, IndexError):
        return False
    return state not in ("Z", "X")      # a zombie nobody reaped has ended


def _wait_until_it_holds_the_lock(run_dir: Path, proc, timeout=60.0):
    """Until ``proc`` has taken the run folder's lock (its pid is in run.lock), so a kill lands in the run."""
    t0 = time.time()
    while proc.poll() is None and time.time() - t0 < timeout:
        try:
            if json.loads((run_dir / "run.lock").read_text()).get("pid") == proc.pid:
                return
        except (OSError, ValueError):
            pass
        time.sleep(0.01)


def _all_whole(d: Path):
    for f in list(d.rglob("*.parquet")):
        pq.read_table(f)                        # every Parquet file that exists is whole
    for f in d.rglob("run.json"):
        json.loads(f.read_text())


def _same_results(a: Path, b: Path):
    for name in ("evaluations.parquet", "front.parquet"):
        pd.testing.assert_frame_equal(pq.read_table(a / name).to_pandas(), pq.read_table(b / name).to_pandas())


def test_kill_9_at_random_points_of_a_run_then_resume_gives_the_uninterrupted_run(tmp_path):
    cfg = _config(tmp_path, "k", gens=36, delay=0.08)       # about 3 s of generations
    run_dir = tmp_path / "out" / "k-s9"
    rng = random.Random(15)
    kills = 0
    for _ in range(4):
        meta = (run_dir / "run.json").is_file()
        cmd = cli_command("run", "--resume", run_dir, "--quiet") if meta else cli_command("run", cfg, "--quiet")
        proc = subprocess.Popen(cmd, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        _wait_until_it_holds_the_lock(run_dir, proc)
        time.sleep(rng.uniform(0.0, 1.6))       # a random point of the ~3 s of generations
        if proc.poll() is None:
            os.kill(proc.pid, signal.SIGKILL)
            kills += 1
        _, err = proc.communicate(timeout=60)
        assert proc.returncode in (0, -signal.SIGKILL), err
        if run_dir.exists():
            _all_whole(run_dir)
    assert kills >= 2
    r = subprocess.run(cli_command("run", "--resume", run_dir, "--quiet"), cwd=ROOT, capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 0, r.stderr
    assert json.loads((run_dir / "run.json").read_text())["status"] == "finished"
    _same_results(run_dir, _straight(tmp_path, "k", gens=36))


def test_run_killed_before_its_first_checkpoint_says_how_to_restart(tmp_path):
    cfg = _config(tmp_path, "d", gens=10, pop=8, every=100, delay=0.3)   # no checkpoint before the end
    run_dir = tmp_path / "out" / "d-s9"
    proc = subprocess.Popen(cli_command("run", cfg, "--quiet"), cwd=ROOT, stderr=subprocess.DEVNULL)
    t0 = time.time()
    while not (run_dir / "run.json").is_file():
        assert proc.poll() is None and time.time() - t0 < 60
        time.sleep(0.05)
    time.sleep(0.5)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=30)
    assert json.loads((run_dir / "run.json").read_text())["status"] == "running"
    assert not (run_dir / "checkpoint.npz").exists()
    r = CliRunner().invoke(main, ["run", str(cfg), "--quiet"])
    assert r.exit_code == 2, r.output
    assert "stopped without finishing" in r.output and f"tiltopt run --resume {run_dir}" in r.output
    assert "starts it again from generation 1" in r.output
    r = CliRunner().invoke(main, ["run", "--resume", str(run_dir), "--quiet"])
    assert r.exit_code == 0, r.output
    _same_results(run_dir, _straight(tmp_path, "d", gens=10, pop=8, every=100))


def test_two_writers_on_one_run_folder(tmp_path):
    cfg = _config(tmp_path, "w", gens=200, pop=8, every=2, delay=0.05)
    run_dir = tmp_path / "out" / "w-s9"
    proc = subprocess.Popen(cli_command("run", cfg, "--quiet"), cwd=ROOT, stderr=subprocess.DEVNULL)
    try:
        t0 = time.time()
        while not (run_dir / "checkpoint.npz").is_file():
            assert proc.poll() is None and time.time() - t0 < 60
            time.sleep(0.05)
        for args in (["run", "--resume", str(run_dir)], ["run", str(cfg), "--overwrite"], ["run", str(cfg)]):
            r = CliRunner().invoke(main, args + ["--quiet"])
            assert r.exit_code == 2, r.output
            assert f"in use by another tiltopt process (pid {proc.pid}" in r.output, r.output
        assert (run_dir / "checkpoint.npz").is_file() and proc.poll() is None   # nothing touched
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait(timeout=30)


BATCH = '[batch]\nname = "{name}"\noutput = "res"\nretries = 2\n[[runs]]\nconfig = "{cfg}"\nseeds = [1, 2]\n'


def _batch(tmp_path, name, gens, delay):
    _config(tmp_path, "bz", gens=gens, pop=10, every=3, delay=delay)
    (tmp_path / "batch.toml").write_text(BATCH.format(name=name, cfg="bz.toml"))
    return tmp_path / "batch.toml"


def _lock_pid(run_dir) -> int | None:
    try:
        return json.loads((Path(run_dir) / "run.lock").read_text()).get("pid")
    except (OSError, ValueError):
        return None


def _worker_pids(text: str) -> list[int]:
    return [int(p) for p in re.findall(r"started \(attempt \d+, pid (\d+)\)", text)]


def test_kill_9_of_a_batch_stops_its_workers_and_a_restart_gives_the_uninterrupted_fronts(tmp_path):
    bf = _batch(tmp_path, "kb", gens=30, delay=0.1)
    b = load_batch(bf)
    rng = random.Random(4)
    for round_ in range(2):
        before = {_lock_pid(it.run_dir) for it in b.items}
        proc = subprocess.Popen(cli_command("batch", bf, "--workers", "2"), cwd=ROOT, stdout=subprocess.PIPE,
                                stderr=subprocess.STDOUT, text=True, env=ENV, start_new_session=True)
        t0 = time.time()
        while not all(_lock_pid(it.run_dir) not in (None, *before) for it in b.items):   # both workers in their runs
            assert proc.poll() is None and time.time() - t0 < 60, proc.stdout.read()
            time.sleep(0.02)
        time.sleep(rng.uniform(0.1, 1.5))           # a random point of their runs (~3 s each)
        assert proc.poll() is None
        os.kill(proc.pid, signal.SIGKILL)           # the batch process only; its workers must follow
        out, _ = proc.communicate(timeout=30)
        pids = _worker_pids(out)
        assert pids, (round_, out)
        t1 = time.time()
        while any(_alive(p) for p in pids) and time.time() - t1 < 10:
            time.sleep(0.05)
        alive = [p for p in pids if _alive(p)]
        for p in alive:
            os.kill(p, signal.SIGKILL)
        assert not alive, f"workers {alive} outlived their batch process (round {round_})"
        _all_whole(b.batch_dir)
    df = run_local(b, workers=2)       # the restart continues each run from its checkpoint
    assert list(df["status"]) == ["finished", "finished"]
    ref = tmp_path / "ref"
    ref.mkdir()
    rb = load_batch(_batch(ref, "kb", gens=30, delay=0.0))
    run_local(rb, workers=2)
    for it, rt in zip(b.items, rb.items):
        _same_results(Path(it.run_dir), Path(rt.run_dir))


def test_second_driver_of_a_running_batch_is_refused(tmp_path):
    bf = _batch(tmp_path, "tb", gens=300, delay=0.05)
    b = load_batch(bf)
    proc = subprocess.Popen(cli_command("batch", bf, "--workers", "2"), cwd=ROOT, stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True, env=ENV, start_new_session=True)
    try:
        t0 = time.time()
        while not (b.batch_dir / "summary.parquet").is_file():
            assert proc.poll() is None and time.time() - t0 < 60
            time.sleep(0.05)
        r = CliRunner().invoke(main, ["batch", str(bf), "--workers", "1"])
        assert r.exit_code == 2, r.output
        assert f"batch is in use by another tiltopt process (pid {proc.pid}" in r.output, r.output
        # and a single run of the batch is refused while its worker writes it
        while not all((Path(it.run_dir) / "run.json").is_file() for it in b.items):
            time.sleep(0.05)
        r = CliRunner().invoke(main, ["run", "--resume", b.items[0].run_dir, "--quiet"])
        assert r.exit_code == 2 and "in use by another tiltopt process (pid " in r.output, r.output
    finally:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate(timeout=30)


def _orphan_check(parent_pid):
    from tiltopt.optimizer.batch import _die_with_parent

    _die_with_parent(parent_pid)
    time.sleep(5)        # reached only when the parent check failed to see the wrong parent


def test_a_worker_whose_parent_is_already_gone_exits_at_once():
    import multiprocessing as mp

    from tiltopt.optimizer.batch import EXIT_ORPHANED

    p = mp.get_context("spawn").Process(target=_orphan_check, args=(os.getpid() + 10_000_000,))
    t0 = time.time()
    p.start()
    p.join(timeout=30)
    assert p.exitcode == EXIT_ORPHANED and time.time() - t0 < 4.5
