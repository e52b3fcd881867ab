"""Run folders: plain names, --overwrite only of tiltopt's own files, locks (in this process), temp files
left by a killed writer, input copies and edited inputs, batches of a changed config, merge guards,
the --serve allow-list and Host check, a full disk, Dask scheduler addresses.

Reference for the optimiser's problem: ZDT1 (Zitzler, Deb and Thiele, Evolutionary Computation 8(2),
2000); the equality checks compare a run with an independent straight run of the same seed, the
property tiltopt promises (same config, same seed, same input bytes: the same results)."""
from __future__ import annotations

import errno
import http.client
import json
import os
import threading
import time
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

from tests.helpers import one_error
from tiltopt.base import files
from tiltopt.base.errors import InputError
from tiltopt.cli import main
from tiltopt.optimizer import results as R
from tiltopt.optimizer.config import load_config
from tiltopt.optimizer.runfolder import FolderLock
from tiltopt.optimizer.runner import resume_run, start_run

ZDT = """
[run]
name = "z"
seed = 5
population = 10
generations = {gens}
output = "out"
checkpoint_every = 2

[benchmark]
name = "zdt1"
n_var = 5
"""

EDIT = """
objectives = ["overall_width", "max_scrub", "min_clearance"]
shell = "shell.toml"
loads = "loads.toml"
[run]
name = "edit"
seed = 3
population = 8
generations = 4
output = "out"
checkpoint_every = 1
[template]
name = "wishbone_rocker"
[envelope]
lean_limit_deg = 30.0
lean_step_deg = 15.0
travel_mm = [0.0]
[constraints]
max_width_mm = 900.0
"""


def _zdt(tmp_path, gens=6, name="z.toml"):
    p = tmp_path / name
    p.write_text(ZDT.format(gens=gens))
    return p


def _invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


# ------------------------------------------------------------------ names and --overwrite
def test_run_ids_and_batch_names_must_be_plain_names(tmp_path):
    cfg = _zdt(tmp_path)
    precious = tmp_path / "precious"
    precious.mkdir()
    (precious / "thesis.txt").write_text("years of work")
    (tmp_path / "out").mkdir()
    for rid in ("../precious", "..", ".", "a/b", "", "-x", "a b", "x\\y", "/abs"):
        r = _invoke("run", cfg, "--run-id", rid, "--overwrite", "--quiet")
        one_error(r, "--run-id", "plain name")
    assert (precious / "thesis.txt").read_text() == "years of work"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "precious", "z.toml"]
    (tmp_path / "b.toml").write_text('[batch]\nname = ".."\n[[runs]]\nconfig = "z.toml"\n')
    r = _invoke("batch", tmp_path / "b.toml")
    one_error(r, "batch.name", "plain name")
    (tmp_path / "n.toml").write_text(ZDT.format(gens=2).replace('name = "z"', 'name = ".."'))
    with pytest.raises(InputError, match="run.name"):
        start_run(load_config(tmp_path / "n.toml"), progress=False)


def test_grid_values_make_plain_run_ids(tmp_path):
    from tiltopt.optimizer.batch import load_batch

    _zdt(tmp_path)
    (tmp_path / "g.toml").write_text('[batch]\nname = "g"\n[[grid]]\nconfig = "z.toml"\n'
                                     '[grid.values]\n"benchmark.name" = ["../../x", "zdt2"]\n')
    with pytest.raises(InputError):     # the value itself is refused by the config, the id never used
        load_batch(tmp_path / "g.toml")
    (tmp_path / "g2.toml").write_text('[batch]\nname = "g2"\n[[grid]]\nconfig = "z.toml"\n'
                                      '[grid.values]\n"run.name" = ["a*b", "c"]\n')
    with pytest.raises(InputError, match="run.name"):
        load_batch(tmp_path / "g2.toml")


def test_overwrite_refuses_a_folder_that_is_not_a_run_folder(tmp_path):
    cfg = _zdt(tmp_path)
    out = tmp_path / "out"
    keep = out / "z-s5"
    keep.mkdir(parents=True)
    (keep / "notes.txt").write_text("mine")
    r = _invoke("run", cfg, "--overwrite", "--quiet")
    one_error(r, "not a tiltopt run folder", "notes.txt")
    assert (keep / "notes.txt").read_text() == "mine" and sorted(os.listdir(keep)) == ["notes.txt"]
    (keep / "run.json").write_text('{"hello": 1}')            # a run.json that is not tiltopt's
    one_error(_invoke("run", cfg, "--overwrite", "--quiet"), "not a tiltopt run folder")
    assert sorted(os.listdir(keep)) == ["notes.txt", "run.json"]
    (keep / "run.json").unlink()
    (keep / "notes.txt").unlink()
    other = tmp_path / "elsewhere"
    other.mkdir()
    keep.rmdir()
    keep.symlink_to(other)                                     # a link: never followed for writing
    one_error(_invoke("run", cfg, "--overwrite", "--quiet"), "symbolic link")


def test_overwrite_removes_only_the_files_tiltopt_wrote(tmp_path):
    cfg = load_config(_zdt(tmp_path))
    first = start_run(cfg, progress=False)
    d = first.run_dir
    (d / "notes.txt").write_text("keep me")
    (d / "explorer.html").write_text("old page")
    (d / "sheets" / "g001-0000").mkdir(parents=True)
    (d / "sheets" / "g001-0000" / "sheet.html").write_text("old sheet")
    (d / "sheets" / "g001-0000" / "my-photo.jpg").write_text("keep")
    with pytest.raises(InputError, match="--overwrite"):
        start_run(cfg, progress=False)
    before = (d / "run.json").stat().st_mtime_ns
    second = start_run(cfg, progress=False, overwrite=True)
    assert second.status == "finished" and (d / "run.json").stat().st_mtime_ns != before
    assert (d / "notes.txt").read_text() == "keep me"
    assert (d / "sheets" / "g001-0000" / "my-photo.jpg").read_text() == "keep"
    assert not (d / "explorer.html").exists() and not (d / "sheets" / "g001-0000" / "sheet.html").exists()
    assert {"front.parquet", "evaluations.parquet", "run.json", "checkpoint.npz", "inputs", "run.lock"} <= set(
        os.listdir(d))


# ------------------------------------------------------------------ locks, in this process
def test_second_writer_is_refused_naming_the_holder(tmp_path):
    cfg = load_config(_zdt(tmp_path))
    o = start_run(cfg, progress=False, stop_after=2)
    with FolderLock.acquire(o.run_dir, command="tiltopt run (test)"):
        with pytest.raises(InputError, match=f"in use by another tiltopt process \\(pid {os.getpid()}"):
            resume_run(o.run_dir, progress=False)
        with pytest.raises(InputError, match=f"pid {os.getpid()}"):
            start_run(cfg, progress=False, overwrite=True)         # nothing is deleted under a writer
        assert (o.run_dir / "checkpoint.npz").is_file() and (o.run_dir / "run.json").is_file()
        r = _invoke("run", "--resume", o.run_dir, "--quiet")
        one_error(r, f"pid {os.getpid()}", "tiltopt run (test)")
    assert resume_run(o.run_dir, progress=False).status == "finished"   # the OS lock went with the holder


def test_second_driver_of_a_batch_is_refused(tmp_path):
    from tiltopt.optimizer.batch import load_batch, run_local

    _zdt(tmp_path, gens=2)
    (tmp_path / "b.toml").write_text('[batch]\nname = "b"\noutput = "res"\n[[runs]]\nconfig = "z.toml"\n'
                                     'seeds = [1]\n')
    b = load_batch(tmp_path / "b.toml")
    with FolderLock.acquire(b.batch_dir, "batch.lock", "batch"):
        with pytest.raises(InputError, match=f"batch is in use .*pid {os.getpid()}"):
            run_local(b, workers=1)
    assert list(run_local(b, workers=1)["status"]) == ["finished"]


def test_temp_files_of_a_killed_writer_are_removed_on_the_next_start(tmp_path):
    cfg = load_config(_zdt(tmp_path))
    o = start_run(cfg, progress=False, stop_after=3)
    d = o.run_dir
    ours = [d / ".run.json.k3j_x9.tmp", d / ".checkpoint.npz.ab12cd.tmp", d / ".front.parquet.zz.tmp",
            d / "evaluations.parts" / ".evaluations-g000003-g000004.parquet.q1.tmp"]
    theirs = [d / ".my-editor.swp.tmp", d / ".notes.tmp"]
    for p in ours + theirs:
        p.parent.mkdir(exist_ok=True)
        p.write_bytes(b"half written")
    assert resume_run(d, progress=False).status == "finished"
    assert not any(p.exists() for p in ours)
    assert all(p.exists() for p in theirs)


# ------------------------------------------------------------------ input copies, edited inputs
@pytest.fixture
def edit_run(tmp_path):
    from tiltopt.base.resources import config_path

    (tmp_path / "shell.toml").write_bytes(config_path("shell_demo.toml").read_bytes())
    (tmp_path / "loads.toml").write_bytes(config_path("loads_demo.toml").read_bytes())
    (tmp_path / "edit.toml").write_text(EDIT)
    return tmp_path


def _evaluations(d):
    return pq.read_table(Path(d) / "evaluations.parquet").to_pandas()


def test_edited_input_is_refused_on_resume_and_the_run_keeps_its_copy(edit_run):
    t = edit_run
    straight = start_run(load_config(t / "edit.toml"), run_id="straight", progress=False)
    o = start_run(load_config(t / "edit.toml"), progress=False, stop_after=2)
    meta = json.loads((o.run_dir / "run.json").read_text())
    roles = {r["role"]: r for r in meta["inputs"]}
    assert {"config", "shell", "loads", "template.mechanism", "template.variables"} <= set(roles)
    assert (o.run_dir / roles["shell"]["copy"]).read_bytes() == (t / "shell.toml").read_bytes()
    assert roles["template.mechanism"]["builtin"] and roles["template.mechanism"]["copy"] is None
    shell = t / "shell.toml"
    # the shell's section at the linkage station
    shell.write_text(shell.read_text().replace("half_width_mm = 190.0", "half_width_mm = 150.0", 1))
    r = _invoke("run", "--resume", o.run_dir, "--quiet")
    one_error(r, str(shell), "changed since the run started", "--allow-changed-inputs")
    r = _invoke("run", "--resume", o.run_dir, "--quiet", "--allow-changed-inputs")
    assert r.exit_code == 0, r.output
    assert "note: changed since the run started: shell" in r.output
    # the resumed run used the shell it started with: every evaluation equals the straight run's
    pd.testing.assert_frame_equal(_evaluations(o.run_dir), _evaluations(straight.run_dir))
    edited = start_run(load_config(t / "edit.toml"), run_id="edited", progress=False)
    assert not _evaluations(edited.run_dir)["min_clearance_mm"].equals(_evaluations(straight.run_dir)
                                                                        ["min_clearance_mm"])
    # explorer and sheet refuse too, naming the file, and go on with the flag
    r = _invoke("explore", o.run_dir, "-o", t / "page.html")
    one_error(r, str(shell), "--allow-changed-inputs")
    r = _invoke("explore", o.run_dir, "-o", t / "page.html", "--allow-changed-inputs")
    assert r.exit_code == 0 and (t / "page.html").is_file(), r.output
    cid = _evaluations(o.run_dir)["candidate_id"].iloc[0]
    r = _invoke("sheet", o.run_dir, "--candidate", cid, "-o", t / "sheet")
    one_error(r, str(shell))
    r = _invoke("sheet", o.run_dir, "--candidate", cid, "-o", t / "sheet", "--allow-changed-inputs")
    assert r.exit_code == 0, r.output


def test_a_run_folder_works_without_its_original_inputs(edit_run):
    t = edit_run
    o = start_run(load_config(t / "edit.toml"), progress=False, stop_after=2)
    straight = start_run(load_config(t / "edit.toml"), run_id="straight", progress=False)
    moved = t / "elsewhere"
    moved.mkdir()
    for name in ("shell.toml", "loads.toml", "edit.toml"):
        (t / name).rename(moved / name)       # as on another machine: the originals are gone
    assert resume_run(o.run_dir, progress=False).status == "finished"
    pd.testing.assert_frame_equal(_evaluations(o.run_dir), _evaluations(straight.run_dir))
    run = R.load_run(o.run_dir)
    assert run.config.spec.shell is not None and run.config.spec.loads is not None    # from the copies
    # a copy that was tampered with while the original is gone: no silent substitute
    (o.run_dir / "inputs" / "shell.toml").write_text("[[stations]]\n")
    meta = json.loads((o.run_dir / "run.json").read_text())
    meta["status"] = "interrupted"
    (o.run_dir / "run.json").write_text(json.dumps(meta))
    with pytest.raises(InputError, match="copy of its shell file is missing or damaged"):
        resume_run(o.run_dir, progress=False)


def test_batch_of_a_changed_config_is_refused_or_rerun(tmp_path):
    from tiltopt.optimizer.batch import load_batch, run_local

    _zdt(tmp_path, gens=3)
    text = '[batch]\nname = "cb"\noutput = "res"\n[[runs]]\nconfig = "z.toml"\nseeds = [1]\nset = {{ {s} }}\n'
    (tmp_path / "b.toml").write_text(text.format(s='"run.generations" = 3'))
    b = load_batch(tmp_path / "b.toml")
    assert list(run_local(b, workers=1)["generations"]) == [3]
    (tmp_path / "b.toml").write_text(text.format(s='"run.generations" = 5, "run.population" = 12'))
    r = _invoke("batch", tmp_path / "b.toml", "--workers", "1")
    one_error(r, "z-s1", "run.generations", "run.population", "--rerun-changed")
    r = _invoke("batch", tmp_path / "b.toml", "--workers", "1", "--rerun-changed")
    assert r.exit_code == 0 and "starting it again" in r.output, r.output
    summary = pq.read_table(tmp_path / "res" / "cb" / "summary.parquet").to_pandas()
    assert list(summary["generations"]) == [5] and list(summary["evaluations"]) == [60]
    meta = json.loads((tmp_path / "res" / "cb" / "z-s1" / "run.json").read_text())
    assert meta["config"]["run"]["population"] == 12
    r = _invoke("batch", tmp_path / "b.toml", "--workers", "1")       # unchanged now: kept
    assert r.exit_code == 0 and "finished earlier, kept" in r.output, r.output


def test_batch_with_a_changed_input_file_is_refused(edit_run):
    from tiltopt.optimizer.batch import load_batch, run_local

    t = edit_run
    (t / "b.toml").write_text('[batch]\nname = "eb"\noutput = "res"\n[[runs]]\nconfig = "edit.toml"\n'
                              'seeds = [1]\nset = { "run.generations" = 2 }\n')
    run_local(load_batch(t / "b.toml"), workers=1)
    (t / "loads.toml").write_text((t / "loads.toml").read_text() + "\n# edited\n")
    with pytest.raises(InputError, match=r"input files changed \(loads "):
        run_local(load_batch(t / "b.toml"), workers=1)


# ------------------------------------------------------------------ merge
def _two_runs(tmp_path):
    a = start_run(load_config(_zdt(tmp_path)), run_id="a", progress=False).run_dir
    b = start_run(load_config(_zdt(tmp_path)), run_id="b", output=tmp_path / "out2", progress=False).run_dir
    return a, b


def test_merge_refuses_an_output_that_is_an_input(tmp_path):
    from tiltopt.optimizer.merge import merge_fronts

    a, b = _two_runs(tmp_path)
    before = (a / "run.json").read_bytes()
    r = _invoke("merge", a, b, "-o", a)
    one_error(r, "-o", "one of the folders to merge")
    assert (a / "run.json").read_bytes() == before
    c = start_run(load_config(_zdt(tmp_path)), run_id="c", progress=False).run_dir
    with pytest.raises(InputError, match="holds a run"):
        merge_fronts([a, b], c)


def test_merge_deduplicates_and_merged_fronts_merge_again(tmp_path):
    from tiltopt.optimizer.merge import merge_fronts

    a, b = _two_runs(tmp_path)
    fa = pq.read_table(a / "front.parquet").to_pandas()
    _, twice = merge_fronts([a, a], tmp_path / "aa")
    assert len(twice) == len(fa) and twice["candidate_id"].is_unique
    assert sorted(twice["source_candidate_id"]) == sorted(fa["candidate_id"])
    m, ab = merge_fronts([a, b], tmp_path / "ab")
    _, again = merge_fronts([m, a], tmp_path / "ab_a")       # a merged front is an input like a run
    assert set(again["candidate_id"]) == set(ab["candidate_id"]) and again["candidate_id"].is_unique
    assert set(again["source_run"]) <= {"a", "b"} and "source_candidate_id" in again
    meta = json.loads((tmp_path / "ab_a" / "run.json").read_text())
    assert sorted(s["run_id"] for s in meta["sources"]) == ["a", "b"]
    r = _invoke("merge", tmp_path / "ab", b, "-o", tmp_path / "m3")
    assert r.exit_code == 0, r.output


# ------------------------------------------------------------------ --serve
def _get(port, path, host=None):
    c = http.client.HTTPConnection("127.0.0.1", port, timeout=5)
    c.putrequest("GET", path, skip_host=True)
    c.putheader("Host", f"127.0.0.1:{port}" if host is None else host)
    c.endheaders()
    r = c.getresponse()
    body = r.read()
    c.close()
    return r.status, body, dict(r.getheaders())


def test_serve_gives_the_page_and_nothing_else_of_a_hostile_folder(tmp_path):
    from tiltopt.commands.reports import make_server

    d = tmp_path / "run"
    d.mkdir()
    (d / "explorer.html").write_text("<html>page</html>")
    (d / "checkpoint.npz").write_bytes(b"state")
    (d / "run.json").write_text("{}")
    (d / "inputs").mkdir()
    (d / "inputs" / "shell.toml").write_text("x")
    secret = tmp_path / "secret.txt"
    secret.write_text("private key")
    (d / "plotly.min.js").symlink_to(secret)           # a link that leads out of the folder
    (d / "index.html").symlink_to(secret)
    httpd = make_server(d / "explorer.html", 0)
    port = httpd.server_address[1]
    t = threading.Thread(target=httpd.serve_forever, daemon=True)
    t.start()
    try:
        assert _get(port, "/explorer.html")[:2] == (200, b"<html>page</html>")
        assert _get(port, "/explorer.html", host=f"localhost:{port}")[0] == 200
        status, _, headers = _get(port, "/")
        assert status == 302 and headers["Location"] == "/explorer.html"          # no listing
        for path in ("/checkpoint.npz", "/run.json", "/inputs/", "/inputs/shell.toml", "/plotly.min.js",
                     "/index.html", "/../secret.txt", "/%2e%2e/secret.txt", "/explorer.html/..", "//etc/passwd"):
            status, body, _ = _get(port, path)
            assert status == 404 and b"private" not in body and b"state" not in body, path
        # DNS rebinding: a page of evil.example resolved to 127.0.0.1 sends its own Host
        for host in ("evil.example", f"evil.example:{port}", "127.0.0.1", f"127.0.0.1:{port + 1}", ""):
            status, body, _ = _get(port, "/explorer.html", host=host)
            assert status == 421 and b"page" not in body, host
    finally:
        httpd.shutdown()
        httpd.server_close()


# ------------------------------------------------------------------ a full disk
def _full_after(monkeypatch, module, name, n):
    real = getattr(module, name)
    calls = {"n": 0}

    def writer(path, *a, **kw):
        calls["n"] += 1
        if calls["n"] > n:
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(path, *a, **kw)

    monkeypatch.setattr(module, name, writer)
    return calls


def test_disk_full_during_a_run_says_so_and_the_run_resumes(tmp_path, monkeypatch):
    cfg_path = _zdt(tmp_path, gens=8)
    straight = start_run(load_config(cfg_path), run_id="straight", progress=False)
    _full_after(monkeypatch, files, "atomic_write", 14)     # a few checkpoints, then the disk is full
    r = _invoke("run", cfg_path, "--quiet")
    line = one_error(r, "the disk is full", "tiltopt run --resume")
    run_dir = tmp_path / "out" / "z-s5"
    assert str(run_dir) in line
    monkeypatch.undo()
    for f in run_dir.rglob("*.parquet"):
        pq.read_table(f)                               # every file there is whole
    r = _invoke("run", "--resume", run_dir, "--quiet")
    assert r.exit_code == 0, r.output
    pd.testing.assert_frame_equal(_evaluations(run_dir), _evaluations(straight.run_dir))


def test_disk_full_while_writing_the_explorer_page(tmp_path, monkeypatch):
    from tests.helpers import make_tiny_run

    run_dir = make_tiny_run(tmp_path)
    _full_after(monkeypatch, files, "atomic_write", 0)
    r = _invoke("explore", run_dir)
    one_error(r, "the disk is full", "free some space")
    assert not list(run_dir.glob("*.html"))


# ------------------------------------------------------------------ --scheduler
def test_scheduler_addresses_are_checked(tmp_path):
    _zdt(tmp_path, gens=2)
    (tmp_path / "b.toml").write_text('[batch]\nname = "s"\n[[runs]]\nconfig = "z.toml"\n')
    for bad in ("not a url", "tcp://", "tcp://host:notaport", "http://127.0.0.1:8786", "tcp://h:99999"):
        one_error(_invoke("batch", tmp_path / "b.toml", "--scheduler", bad), "--scheduler", "Dask scheduler")
    t0 = time.time()
    r = _invoke("batch", tmp_path / "b.toml", "--scheduler", "tcp://127.0.0.1:1")
    one_error(r, "--scheduler", "tcp://127.0.0.1:1", "connection refused")
    assert time.time() - t0 < 10


def test_input_paths_in_someone_elses_run_json_are_only_stat_ed(edit_run):
    """A run.json may name any path as an original: a device or FIFO is never read (it would never end)."""
    t = edit_run
    o = start_run(load_config(t / "edit.toml"), progress=False, stop_after=1)
    meta = json.loads((o.run_dir / "run.json").read_text())
    fifo = t / "fifo"
    os.mkfifo(fifo)
    for r in meta["inputs"]:
        if r["role"] == "shell":
            r["path"] = "/dev/zero"
        if r["role"] == "loads":
            r["path"] = str(fifo)
    (o.run_dir / "run.json").write_text(json.dumps(meta))
    t0 = time.time()
    assert resume_run(o.run_dir, progress=False).status == "finished"     # the copies stand in
    assert time.time() - t0 < 30
    (o.run_dir / "inputs" / "shell.toml").unlink()
    (o.run_dir / "inputs" / "shell.toml").symlink_to("/dev/zero")       # a copy that is a link: not a copy
    from tiltopt.reports.runs import check_inputs

    with pytest.raises(InputError, match="copy of its shell file is missing or damaged"):
        check_inputs(R.load_run(o.run_dir))
