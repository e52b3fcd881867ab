"""Batches and merge: grid expansion, local worker processes vs a real Dask LocalCluster (same
fronts), a killed worker retried from its checkpoint, finished runs kept on restart, the merged front
against a brute-force numpy dominance filter. Problems: ZDT1 and ZDT2 (Zitzler, Deb and Thiele,
Evolutionary Computation 8(2), 2000)."""
from __future__ import annotations

import json
import os
import re
import signal
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest

from tiltopt.base.errors import InputError
from tiltopt.optimizer.batch import load_batch, run_dask, run_local
from tiltopt.optimizer.merge import merge_fronts

CONFIG = """
[run]
name = "z"
seed = 1
population = 12
generations = 8
output = "unused"
checkpoint_every = 2

[benchmark]
name = "zdt1"
n_var = 6
"""


def _write(tmp_path, out="res", extra=""):
    tmp_path.mkdir(parents=True, exist_ok=True)
    (tmp_path / "z.toml").write_text(CONFIG)
    (tmp_path / "batch.toml").write_text(f"""
[batch]
name = "b"
output = "{out}"
retries = 2

[[runs]]
config = "z.toml"
seeds = [1, 2]
{extra}
""")
    return load_batch(tmp_path / "batch.toml")


def _fronts(batch):
    return {it.run_id: pq.read_table(Path(it.run_dir) / "front.parquet").to_pandas() for it in batch.items}


def _assert_same_front_as_straight_run(tmp_path, run_dir):
    """The front in run_dir equals that of an uninterrupted local run of the same batch item."""
    b2 = load_batch(tmp_path / "batch.toml")
    b2.batch_dir = tmp_path / "straight"
    for it in b2.items:
        it.run_dir = str(b2.batch_dir / it.run_id)
        it.data["benchmark"]["eval_delay_s"] = 0.0
    run_local(b2, workers=1)
    a = pq.read_table(run_dir / "front.parquet").to_pandas()
    c = pq.read_table(Path(b2.items[0].run_dir) / "front.parquet").to_pandas()
    pd.testing.assert_frame_equal(a[["candidate_id", "obj.f1", "obj.f2"]], c[["candidate_id", "obj.f1", "obj.f2"]])


def test_grid_expansion_and_errors(tmp_path):
    (tmp_path / "z.toml").write_text(CONFIG)
    (tmp_path / "g.toml").write_text("""
[batch]
name = "g"
[[grid]]
config = "z.toml"
seeds = [1, 2, 3]
set = { "run.generations" = 3 }
[grid.values]
"benchmark.n_var" = [4, 8]
"benchmark.name" = ["zdt1", "zdt2"]
""")
    b = load_batch(tmp_path / "g.toml")
    assert len(b.items) == 2 * 2 * 3 and len({it.run_id for it in b.items}) == 12
    assert {it.data["run"]["generations"] for it in b.items} == {3}
    assert {(it.data["benchmark"]["n_var"], it.data["benchmark"]["name"]) for it in b.items} == {
        (4, "zdt1"), (4, "zdt2"), (8, "zdt1"), (8, "zdt2")}
    assert "z-n_var4_namezdt2-s3" in {it.run_id for it in b.items}
    (tmp_path / "bad.toml").write_text('[batch]\nname = "x"\n[[runs]]\nconfig = "z.toml"\nseed = [1]\n')
    with pytest.raises(InputError) as e:
        load_batch(tmp_path / "bad.toml")
    assert e.value.key == "runs[0].seed"
    (tmp_path / "bad2.toml").write_text('[batch]\nname = "x"\n[[runs]]\nconfig = "z.toml"\n'
                                        'set = { "run.colour" = 1 }\n')
    with pytest.raises(InputError) as e:     # every expanded config is validated before anything runs
        load_batch(tmp_path / "bad2.toml")
    assert e.value.key == "run.colour"


def test_local_and_dask_batches_give_the_same_fronts(tmp_path):
    from distributed import LocalCluster

    local = _write(tmp_path / "l")
    df = run_local(local, workers=2)
    assert list(df["status"]) == ["finished", "finished"]
    summary = pq.read_table(local.batch_dir / "summary.parquet").to_pandas()
    fl = _fronts(local)
    assert list(summary["front_size"]) == [len(fl[r]) for r in summary["run_id"]]
    remote = _write(tmp_path / "d")
    # a real scheduler on loopback (tcp), reached by its address as `tiltopt batch --scheduler` does
    with LocalCluster(n_workers=1, threads_per_worker=2, processes=False, protocol="tcp://", host="127.0.0.1",
                      dashboard_address=None) as cluster:
        dd = run_dask(remote, cluster.scheduler_address)
    assert list(dd["status"]) == ["finished", "finished"]
    fd = _fronts(remote)
    assert set(fl) == set(fd)
    for rid in fl:
        cols = ["candidate_id", "obj.f1", "obj.f2"]
        pd.testing.assert_frame_equal(fl[rid][cols], fd[rid][cols])
    assert not fl["z-s1"]["obj.f1"].equals(fl["z-s2"]["obj.f1"])     # the seeds differ
    # restart: finished runs are not redone
    mtimes = {it.run_id: os.stat(Path(it.run_dir) / "front.parquet").st_mtime_ns for it in local.items}
    msgs = []
    run_local(local, workers=2, echo=msgs.append)
    assert msgs[0].startswith("batch b: 2 runs in ")
    assert all("finished earlier" in m for m in msgs[1:]) and len(msgs) == 3
    assert mtimes == {it.run_id: os.stat(Path(it.run_dir) / "front.parquet").st_mtime_ns for it in local.items}



def _slow_batch(tmp_path, name: str, generations: int, seeds: list[int]):
    """A batch of one slowed-down config (30 ms per evaluation), so a test can act mid-run."""
    (tmp_path / "z.toml").write_text(CONFIG.replace("generations = 8", f"generations = {generations}")
                                     .replace('n_var = 6', 'n_var = 6\neval_delay_s = 0.03'))
    (tmp_path / "batch.toml").write_text(f'[batch]\nname = "{name}"\noutput = "res"\n[[runs]]\n'
                                         f'config = "z.toml"\nseeds = {seeds}\n')
    return load_batch(tmp_path / "batch.toml")

def test_killed_worker_is_retried_and_resumes(tmp_path):
    b = _slow_batch(tmp_path, "k", 30, [4])
    run_dir = Path(b.items[0].run_dir)
    killed = []

    def echo(msg):
        if "attempt 1, pid" in msg:
            pid = int(msg.rsplit("pid ", 1)[1].rstrip(")"))

            def kill_later():
                t0 = time.time()
                while not (run_dir / "checkpoint.npz").exists() and time.time() - t0 < 60:
                    time.sleep(0.02)
                os.kill(pid, signal.SIGKILL)
                killed.append(pid)

            threading.Thread(target=kill_later, daemon=True).start()

    df = run_local(b, workers=1, echo=echo)
    assert killed and df["status"].iloc[0] == "finished" and df["attempts"].iloc[0] == 2
    # the retried run continued from its checkpoint to the same front as a straight run
    _assert_same_front_as_straight_run(tmp_path, run_dir)


def test_merge_is_the_nondominated_union(tmp_path):
    b = _write(tmp_path)
    run_local(b, workers=2)
    dirs = [it.run_dir for it in b.items]
    out, merged = merge_fronts(dirs, tmp_path / "merged")
    union = pd.concat([pq.read_table(Path(d) / "front.parquet").to_pandas() for d in dirs], ignore_index=True)
    F = union[["obj.f1", "obj.f2"]].to_numpy()
    # brute force: keep a point unless another is <= everywhere and < somewhere
    keep = [not np.any(np.all(F <= f, axis=1) & np.any(F < f, axis=1)) for f in F]
    assert sorted(map(tuple, F[keep])) == sorted(map(tuple, merged[["obj.f1", "obj.f2"]].to_numpy()))
    assert set(merged["source_run"]) <= {"z-s1", "z-s2"} and merged["candidate_id"].is_unique
    assert (out / "front.parquet").is_file() and (out / "run.json").is_file()
    # different objectives: a clear error
    (tmp_path / "t.toml").write_text("""
objectives = ["overall_width", "max_scrub"]
[run]
name = "t"
seed = 1
population = 8
generations = 2
output = "res"
[template]
name = "twin_beam"
[envelope]
lean_step_deg = 15.0
""")
    from tiltopt.optimizer.config import load_config
    from tiltopt.optimizer.runner import start_run

    t = start_run(load_config(tmp_path / "t.toml"), progress=False)
    with pytest.raises(InputError, match="same objectives"):
        merge_fronts([dirs[0], t.run_dir], tmp_path / "m2")


def test_cli_batch_and_merge(tmp_path):
    from click.testing import CliRunner

    from tiltopt.cli import main

    b = _write(tmp_path)
    r = CliRunner().invoke(main, ["batch", str(tmp_path / "batch.toml"), "--workers", "2"])
    assert r.exit_code == 0, r.output
    assert "status: finished 2" in r.output and str(b.batch_dir / "summary.parquet") in r.output
    dirs = [it.run_dir for it in b.items]
    r = CliRunner().invoke(main, ["merge", *dirs, "-o", str(tmp_path / "m")])
    assert r.exit_code == 0 and "non-dominated designs" in r.output and "Caution" in r.output
    r = CliRunner().invoke(main, ["merge", dirs[0], str(tmp_path / "nothing"), "-o", str(tmp_path / "m3")])
    assert r.exit_code == 2 and "does not exist" in r.output


def test_dask_worker_killed_mid_run_is_retried(tmp_path):
    from distributed import Client, LocalCluster

    b = _slow_batch(tmp_path, "dk", 30, [4])
    run_dir = Path(b.items[0].run_dir)
    # one worker process under a nanny on loopback: killing it loses the task; the nanny starts a new one
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, protocol="tcp://", host="127.0.0.1",
                      dashboard_address=None) as cluster, Client(cluster) as client:
        pids = list(client.run(os.getpid).values())
        killed = []

        def kill_later():
            t0 = time.time()
            while not (run_dir / "checkpoint.npz").exists() and time.time() - t0 < 60:
                time.sleep(0.02)
            killed.append(json.loads((run_dir / "run.json").read_text())["status"])
            os.kill(pids[0], signal.SIGKILL)

        threading.Thread(target=kill_later, daemon=True).start()
        df = run_dask(b, client)
    assert killed == ["running"]                 # the worker died in the middle of the run
    assert df["status"].iloc[0] == "finished"
    ev = pq.read_table(run_dir / "evaluations.parquet").to_pandas()
    assert len(ev) == 30 * 12 and ev["candidate_id"].is_unique
    # the same front as a straight local run of the same item
    _assert_same_front_as_straight_run(tmp_path, run_dir)


def test_ctrl_c_stops_a_local_batch_and_a_restart_finishes_it(tmp_path):
    import subprocess
    import sys

    b = _slow_batch(tmp_path, "c", 40, [1, 2])
    cmd = [sys.executable, "-c", "from tiltopt.cli import main; main()", "batch", str(tmp_path / "batch.toml"),
           "--workers", "2"]
    # a session of its own, so Ctrl-C goes to the batch and its workers as a terminal would send it
    proc = subprocess.Popen(cmd, start_new_session=True, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    t0 = time.time()
    while not all((Path(it.run_dir) / "checkpoint.npz").exists() for it in b.items):
        assert proc.poll() is None and time.time() - t0 < 60
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGINT)
    out, _ = proc.communicate(timeout=120)
    assert proc.returncode == 130, out     # stopped by Ctrl-C, as shells report it
    summary = pq.read_table(b.batch_dir / "summary.parquet").to_pandas()
    assert list(summary["status"]) == ["interrupted", "interrupted"], out
    df = run_local(b, workers=2)          # the restart continues both from their checkpoints
    assert list(df["status"]) == ["finished", "finished"]
    for it in b.items:
        ev = pq.read_table(Path(it.run_dir) / "evaluations.parquet").to_pandas()
        assert len(ev) == 40 * 12 and ev["candidate_id"].is_unique


def _tilt_run(folder: Path, name: str, template: str = "wishbone_rocker", lean: float = 30.0) -> Path:
    """A real tiny tilt run (tests/helpers.py TINY_CONFIG) with another name, template or lean limit."""
    from tests.helpers import TINY_CONFIG
    from tiltopt.optimizer.config import load_config
    from tiltopt.optimizer.runner import start_run

    folder.mkdir(parents=True, exist_ok=True)
    text = (TINY_CONFIG.replace('name = "tiny"', f'name = "{name}"')
            .replace('name = "wishbone_rocker"', f'name = "{template}"')
            .replace("lean_limit_deg = 30.0", f"lean_limit_deg = {lean}"))
    (folder / f"{name}.toml").write_text(text, encoding="utf-8")
    return Path(start_run(load_config(folder / f"{name}.toml"), overwrite=True, progress=False).run_dir)


def test_merge_refuses_fronts_of_different_problems(tmp_path):
    from click.testing import CliRunner

    from tiltopt.cli import main

    a = _tilt_run(tmp_path, "a30")
    b = _tilt_run(tmp_path, "b35", lean=35.0)
    c = _tilt_run(tmp_path, "c30", template="twin_beam_sprung")
    r = CliRunner().invoke(main, ["merge", str(a), str(b), "-o", str(tmp_path / "m")])
    assert r.exit_code == 2 and "Traceback" not in r.output
    assert "envelope lean limit deg: 30 in a30-s2, 35 in b35-s2" in r.output and "--allow-different" in r.output
    assert not (tmp_path / "m" / "front.parquet").exists()
    # anyway, on request: each source keeps its problem
    r = CliRunner().invoke(main, ["merge", str(a), str(b), "-o", str(tmp_path / "m"), "--allow-different"])
    assert r.exit_code == 0, r.output
    meta = json.loads((tmp_path / "m" / "run.json").read_text())
    assert meta["allow_different"] is True and meta["problem_record"] is None
    assert [s["problem_record"]["envelope"]["lean_limit_deg"] for s in meta["sources"]] == [30.0, 35.0]
    # different templates over one problem merge freely, and the command says who owns the front
    r = CliRunner().invoke(main, ["merge", str(a), str(c), "-o", str(tmp_path / "t")])
    assert r.exit_code == 0, r.output
    meta = json.loads((tmp_path / "t" / "run.json").read_text())
    assert meta["allow_different"] is False and meta["problem_record"]["envelope"]["lean_limit_deg"] == 30.0
    merged = pq.read_table(tmp_path / "t" / "front.parquet").to_pandas()
    if merged["source_run"].nunique() > 1:
        n = merged["source_run"].value_counts()
        assert f"wishbone_rocker {n['a30-s2']} (" in r.output and f"twin_beam_sprung {n['c30-s2']} (" in r.output
    # a merged front merges again with a run of its problem, and is refused with another
    r = CliRunner().invoke(main, ["merge", str(tmp_path / "t"), str(b), "-o", str(tmp_path / "tb")])
    assert r.exit_code == 2 and "lean limit" in r.output


def test_batch_shows_progress_lines_and_a_final_table(tmp_path):
    """Two workers, output not a terminal (a log): a progress line per run (generation, front, ETA), then the table."""
    import subprocess
    import sys

    b = _slow_batch(tmp_path, "p", 12, [1, 2])
    cmd = [sys.executable, "-c", "from tiltopt.cli import main; main()", "batch", str(tmp_path / "batch.toml"),
           "--workers", "2", "--progress-every", "0.5"]
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=300).stdout
    lines = out.splitlines()
    for rid in ("z-s1", "z-s2"):      # run ids: the config's run name and the seed
        prog = [ln for ln in lines if ln.startswith(f"progress {rid} ")]
        assert prog, out
        assert all(re.search(r"gen \d+/12  front \d+  ETA ", ln) for ln in prog), prog
    head = next(k for k, ln in enumerate(lines) if ln.split() == ["run", "status", "generations", "front", "size",
                                                                   "time", "attempts"])
    rows = [ln.split() for ln in lines[head + 2:head + 4]]
    summary = pq.read_table(b.batch_dir / "summary.parquet").to_pandas()
    assert [(r[0], r[1], int(r[2]), int(r[3])) for r in rows] == \
        [(s.run_id, "finished", 12, int(s.front_size)) for s in summary.itertuples()]


# ------------------------------------------------------------------ Dask is an extra
def test_dask_is_the_cluster_extra_not_a_dependency():
    """The installed distribution's own requirements (PEP 508 strings of its metadata): dask comes with
    ``tiltopt[cluster]`` only, so a default install leaves it out; the test extra pulls the cluster extra
    in, so these Dask tests run wherever the tests do."""
    from importlib.metadata import requires

    reqs = requires("tiltopt")
    dask = [r for r in reqs if r.split(";")[0].strip().lower().startswith(("dask", "distributed"))]
    assert dask and all(r.replace(" ", "").endswith('extra=="cluster"') for r in dask), dask
    assert any(r.startswith("tiltopt[cluster]") and 'extra == "test"' in r for r in reqs), reqs


def test_scheduler_without_the_cluster_extra_is_one_message(tmp_path, monkeypatch):
    """Without Dask's distributed package (its import made to fail: None in sys.modules raises
    ImportError), --scheduler is one user error naming the extra that installs it, exit 2, and nothing runs."""
    import sys

    from click.testing import CliRunner

    from tests.helpers import one_error
    from tiltopt.cli import main

    b = _write(tmp_path)
    monkeypatch.setitem(sys.modules, "distributed", None)
    r = CliRunner().invoke(main, ["batch", str(tmp_path / "batch.toml"), "--scheduler", "tcp://127.0.0.1:8786"])
    one_error(r, "pip install 'tiltopt[cluster]'", "--scheduler")
    assert not any(Path(it.run_dir).exists() for it in b.items)
    # the library call says the same
    with pytest.raises(InputError, match=r"tiltopt\[cluster\]"):
        run_dask(b, "tcp://127.0.0.1:8786")
    # a local batch needs no Dask
    assert list(run_local(b, workers=1)["status"]) == ["finished", "finished"]
