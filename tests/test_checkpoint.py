"""Checkpoints that cannot run code (arrays + JSON in an uncompressed .npz), and resume from them.

The property checked is the one the runner promises: a run stopped after any generation and resumed
from its checkpoint ends with exactly the evaluations of a straight run of the same seed; and the
algorithm rebuilt from a checkpoint is, attribute by attribute, the algorithm of the straight run
(a deep comparison of the two objects, so state that pymoo adds in a new version is noticed).
Problems: ZDT1 (Zitzler, Deb and Thiele, Evolutionary Computation 8(2), 2000) and a constrained
tilting-linkage config. The hostile files are built here: a pickle whose loading would create a
marker file, and .npz files crafted to hold one."""
from __future__ import annotations

import io
import json
import math
import pickle
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

from tests.helpers import NSGA3_TILT, one_error
from tiltopt.base.errors import InputError
from tiltopt.cli import main
from tiltopt.optimizer.config import RunSettings, load_config
from tiltopt.optimizer.reference_problems import ZDTProblem
from tiltopt.optimizer.runner import Runner, resume_run, run_problem, start_run

ZDT_CONFIG = """
[run]
name = "ck"
seed = 3
population = 12
generations = 8
output = "out"
checkpoint_every = 3

[benchmark]
name = "zdt1"
n_var = 6
"""

# attributes that are rebuilt by every generation before they are read, or are not search state
SKIP = {"start_time", "display", "output", "callback", "history", "opt", "off"}


def _deep_equal(a, b, path="alg", seen=None):
    """Assert two object graphs hold equal values (arrays bit for bit, NaN equal to NaN)."""
    seen = set() if seen is None else seen
    if (id(a), id(b)) in seen:
        return
    seen.add((id(a), id(b)))
    assert type(a) is type(b), f"{path}: {type(a).__name__} vs {type(b).__name__}"
    if isinstance(a, np.random.Generator):
        assert a.bit_generator.state == b.bit_generator.state, f"{path}: random state"
    elif isinstance(a, np.ndarray) and a.dtype == object:
        assert a.shape == b.shape, f"{path}: shape {a.shape} vs {b.shape}"
        for i, (x, y) in enumerate(zip(a.ravel(), b.ravel())):
            _deep_equal(x, y, f"{path}[{i}]", seen)
    elif isinstance(a, np.ndarray):
        assert a.dtype == b.dtype and a.shape == b.shape, f"{path}: {a.dtype}{a.shape} vs {b.dtype}{b.shape}"
        assert np.array_equal(a, b, equal_nan=a.dtype.kind == "f"), f"{path}: values differ"
    elif isinstance(a, (float, np.floating)):
        assert (math.isnan(a) and math.isnan(b)) or a == b, f"{path}: {a} vs {b}"
    elif isinstance(a, (bool, int, str, bytes, type(None), np.generic)):
        assert a == b, f"{path}: {a!r} vs {b!r}"
    elif isinstance(a, dict):
        assert set(a) == set(b), f"{path}: keys {sorted(map(str, a))} vs {sorted(map(str, b))}"
        for k in a:
            _deep_equal(a[k], b[k], f"{path}[{k!r}]", seen)
    elif isinstance(a, (list, tuple)):
        assert len(a) == len(b), f"{path}: length {len(a)} vs {len(b)}"
        for i, (x, y) in enumerate(zip(a, b)):
            _deep_equal(x, y, f"{path}[{i}]", seen)
    elif isinstance(a, (set, frozenset)):
        assert a == b, f"{path}: {a} vs {b}"
    elif callable(a) and not hasattr(a, "__dict__") or isinstance(a, type) or hasattr(a, "__code__"):
        assert a is b or getattr(a, "__qualname__", None) == getattr(b, "__qualname__", None), path
    elif hasattr(a, "__dict__"):
        keys = set(vars(a)) - SKIP
        assert keys == set(vars(b)) - SKIP, f"{path}: attributes differ"
        for k in sorted(keys):
            _deep_equal(vars(a)[k], vars(b)[k], f"{path}.{k}", seen)
    else:
        assert a == b, f"{path}: {a!r} vs {b!r}"


def _live_and_restored(problem_factory, settings, tmp_path, stop):
    live = Runner(problem_factory(), settings, tmp_path / "live", "live", progress=False, notices=False,
                  stop_after=stop)
    live.run()
    again = Runner(problem_factory(), settings, tmp_path / "live", "live", progress=False, notices=False)
    assert again._load_checkpoint()
    return live, again


@pytest.mark.parametrize("algorithm", ["nsga2", "nsga3"])
def test_restored_algorithm_is_the_live_one(tmp_path, algorithm):
    s = RunSettings(name="t", seed=7, algorithm=algorithm, population=14, generations=9, output=tmp_path,
                    checkpoint_every=4)
    live, again = _live_and_restored(lambda: ZDTProblem("zdt1", 6), s, tmp_path, stop=5)
    _deep_equal(live.algorithm, again.algorithm)
    _deep_equal(vars(live.state), vars(again.state), "state")


def test_restored_nsga3_with_constraints_is_the_live_one(tmp_path):
    (tmp_path / "n3.toml").write_text(NSGA3_TILT.replace("generations = 8", "generations = 6"))
    cfg = load_config(tmp_path / "n3.toml")
    live, again = _live_and_restored(cfg.make_problem, cfg.run, tmp_path, stop=3)
    _deep_equal(live.algorithm, again.algorithm)
    _deep_equal(vars(live.state), vars(again.state), "state")
    assert live.state.archive and any(a.dtype == object for a in live.state.archive.values())  # string columns too


@pytest.mark.parametrize("algorithm", ["nsga2", "nsga3"])
def test_resume_after_every_generation_equals_a_straight_run(tmp_path, algorithm):
    s = RunSettings(name="t", seed=2, algorithm=algorithm, population=10, generations=7, output=tmp_path,
                    checkpoint_every=3)
    run_problem(ZDTProblem("zdt1", 5), s, tmp_path / "straight")
    ref = pq.read_table(tmp_path / "straight" / "evaluations.parquet").to_pandas()
    ref_g = pq.read_table(tmp_path / "straight" / "generations.parquet").to_pandas()
    for stop in range(1, 7):
        d = tmp_path / f"stop{stop}"
        assert run_problem(ZDTProblem("zdt1", 5), s, d, stop_after=stop).status == "interrupted"
        assert run_problem(ZDTProblem("zdt1", 5), s, d, resume=True).status == "finished"
        ev = pq.read_table(d / "evaluations.parquet").to_pandas()
        pd.testing.assert_frame_equal(ev, ref)
        g = pq.read_table(d / "generations.parquet").to_pandas()
        cols = ["generation", "evaluations", "feasible", "front_size", "hypervolume"]
        pd.testing.assert_frame_equal(g[cols], ref_g[cols])


# ------------------------------------------------------------------ hostile and damaged checkpoints
class _Marker:
    """Unpickling this creates ``path`` (what an attacker's pickle would do, harmlessly)."""

    def __init__(self, path):
        self.path = str(path)

    def __reduce__(self):
        return (Path.touch, (Path(self.path),))


@pytest.fixture
def stopped_run(tmp_path):
    (tmp_path / "ck.toml").write_text(ZDT_CONFIG)
    o = start_run(load_config(tmp_path / "ck.toml"), progress=False, stop_after=4)
    assert o.status == "interrupted" and (o.run_dir / "checkpoint.npz").is_file()
    return o.run_dir


def _resume_cli(run_dir):
    return CliRunner().invoke(main, ["run", "--resume", str(run_dir), "--quiet"])


def test_old_pickled_checkpoint_is_never_loaded(stopped_run, tmp_path):
    marker = tmp_path / "pwned"
    (stopped_run / "checkpoint.npz").unlink()
    (stopped_run / "checkpoint.pkl").write_bytes(pickle.dumps(_Marker(marker)))
    assert pickle.loads((stopped_run / "checkpoint.pkl").read_bytes()) is None and marker.exists()  # it is live
    marker.unlink()
    r = _resume_cli(stopped_run)
    one_error(r, "checkpoint.pkl", "never loads pickles")
    assert not marker.exists()
    # the same bytes under the new name: not an .npz archive, refused before anything is read
    (stopped_run / "checkpoint.npz").write_bytes(pickle.dumps(_Marker(marker)))
    r = _resume_cli(stopped_run)
    one_error(r, "checkpoint.npz", "not an .npz archive")
    assert not marker.exists()


def _rewrite(path: Path, edit):
    """Read a checkpoint's members, let ``edit(doc, arrays)`` change them, write it back uncompressed."""
    with np.load(path, allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    doc = json.loads(arrays.pop("checkpoint.json").tobytes())
    edit(doc, arrays)
    buf = io.BytesIO()
    np.savez(buf, **{"checkpoint.json": np.frombuffer(json.dumps(doc).encode(), np.uint8)}, **arrays)
    path.write_bytes(buf.getvalue())


def test_crafted_npz_with_a_pickled_member_does_not_run_code(stopped_run, tmp_path):
    marker = tmp_path / "pwned"
    ck = stopped_run / "checkpoint.npz"

    def plant(doc, arrays):
        key = doc["algorithm"]["pop"]["X"]["key"]
        arrays[key] = np.array([_Marker(marker)] * 3, dtype=object)     # saved as a pickle inside the .npy

    _rewrite(ck, plant)      # np.savez stores an object array as a pickle inside its .npy member
    assert not marker.exists()
    with zipfile.ZipFile(ck) as z:   # the planted member really is a live pickle
        assert any(b"pathlib" in z.read(n) for n in z.namelist())
    r = _resume_cli(stopped_run)
    one_error(r, str(ck), "holds Python objects (a pickle)")
    assert not marker.exists()


@pytest.mark.parametrize("damage, needle", [
    ("truncate", "not an .npz archive"),
    ("compressed", "is compressed"),
    ("json", "is not JSON"),
    ("shape", "expected shape"),
    ("random_state", "random_state"),
    ("format", "format"),
    ("missing_array", "is missing"),
])
def test_damaged_checkpoint_gives_one_message_naming_the_file(stopped_run, damage, needle):
    ck = stopped_run / "checkpoint.npz"
    if damage == "truncate":
        ck.write_bytes(ck.read_bytes()[:200])
    elif damage == "compressed":
        with np.load(ck, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
        buf = io.BytesIO()
        np.savez_compressed(buf, **arrays)
        ck.write_bytes(buf.getvalue())
    elif damage == "json":
        with np.load(ck, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
        arrays["checkpoint.json"] = np.frombuffer(b"{not json", np.uint8)
        buf = io.BytesIO()
        np.savez(buf, **arrays)
        ck.write_bytes(buf.getvalue())
    elif damage == "shape":
        _rewrite(ck, lambda doc, a: a.__setitem__(doc["algorithm"]["pop"]["X"]["key"], np.zeros((12, 2))))
    elif damage == "random_state":
        _rewrite(ck, lambda doc, a: doc["algorithm"].__setitem__("random_state", {"bit_generator": "MT19937"}))
    elif damage == "format":
        _rewrite(ck, lambda doc, a: doc.__setitem__("format", "tiltopt-checkpoint-99"))
    elif damage == "missing_array":
        _rewrite(ck, lambda doc, a: a.pop(doc["algorithm"]["pop"]["F"]["key"]))
    r = _resume_cli(stopped_run)
    one_error(r, str(ck), needle)


def test_zip_bomb_member_is_refused_before_reading(stopped_run):
    ck = stopped_run / "checkpoint.npz"
    with zipfile.ZipFile(ck, "w", compression=zipfile.ZIP_DEFLATED) as z:
        z.writestr("checkpoint.json.npy", b"\0" * (1 << 22))       # 4 MiB of zeros in a few kB
    assert ck.stat().st_size < 100_000
    with pytest.raises(InputError, match="is compressed"):
        resume_run(stopped_run, progress=False)


def test_member_claiming_a_huge_array_is_refused_before_any_allocation(stopped_run):
    ck = stopped_run / "checkpoint.npz"
    header = io.BytesIO()
    np.lib.format.write_array_header_1_0(header, {"descr": "<f8", "fortran_order": False,
                                                  "shape": (10 ** 12,)})   # 8 TB claimed, 8 bytes held
    with zipfile.ZipFile(ck, "a", compression=zipfile.ZIP_STORED) as z:
        z.writestr("a9999.npy", header.getvalue() + b"\0" * 8)
    with pytest.raises(InputError, match="claims shape"):
        resume_run(stopped_run, progress=False)


def test_checkpoint_of_another_problem_is_refused(stopped_run):
    ck = stopped_run / "checkpoint.npz"
    _rewrite(ck, lambda doc, a: doc["problem"].__setitem__("objectives", ["f1", "f3"]))
    with pytest.raises(InputError, match="different problem"):
        resume_run(stopped_run, progress=False)


def test_hostile_checkpoint_inside_a_batch_never_runs(tmp_path):
    from tiltopt.optimizer.batch import load_batch, run_local

    (tmp_path / "ck.toml").write_text(ZDT_CONFIG)
    (tmp_path / "b.toml").write_text('[batch]\nname = "hb"\noutput = "res"\nretries = 0\n'
                                     '[[runs]]\nconfig = "ck.toml"\nseeds = [1, 2]\n')
    b = load_batch(tmp_path / "b.toml")
    run_local(b, workers=2)
    marker = tmp_path / "pwned"
    a, c = (Path(it.run_dir) for it in b.items)
    for d in (a, c):     # as if stopped: unfinished, with a checkpoint
        meta = json.loads((d / "run.json").read_text())
        meta["status"] = "interrupted"
        (d / "run.json").write_text(json.dumps(meta))
    (a / "checkpoint.npz").unlink()
    (a / "checkpoint.pkl").write_bytes(pickle.dumps(_Marker(marker)))      # old style: ignored and replaced

    def plant(doc, arrays):
        arrays[doc["algorithm"]["pop"]["F"]["key"]] = np.array([_Marker(marker)], dtype=object)

    _rewrite(c / "checkpoint.npz", plant)
    df = run_local(b, workers=2)
    assert not marker.exists()
    st = dict(zip(df["run_id"], df["status"]))
    assert st[b.items[0].run_id] == "finished" and not (a / "checkpoint.pkl").exists()
    assert st[b.items[1].run_id] == "failed"
    assert "checkpoint.npz" in df["error"].iloc[1] and "holds Python objects" in df["error"].iloc[1]


def test_damaged_checkpoint_inside_a_batch_is_one_message_not_a_dead_worker(tmp_path):
    """A damaged checkpoint is the same on every attempt: the batch says once which file is damaged and
    how, and does not start the run again as if its worker had died (retries = 2 here)."""
    from tiltopt.optimizer.batch import load_batch, run_local

    (tmp_path / "ck.toml").write_text(ZDT_CONFIG)
    (tmp_path / "b.toml").write_text('[batch]\nname = "db"\noutput = "res"\nretries = 2\n'
                                     '[[runs]]\nconfig = "ck.toml"\nseeds = [1]\n')
    b = load_batch(tmp_path / "b.toml")
    run_local(b, workers=1)
    d = Path(b.items[0].run_dir)
    straight = pq.read_table(d / "front.parquet").to_pandas()
    meta = json.loads((d / "run.json").read_text())
    meta["status"] = "interrupted"          # as if stopped, with a checkpoint cut short
    (d / "run.json").write_text(json.dumps(meta))
    ck = d / "checkpoint.npz"
    ck.write_bytes(ck.read_bytes()[:300])
    said = []
    df = run_local(b, workers=1, echo=said.append)
    row = df.iloc[0]
    assert row["status"] == "failed" and row["attempts"] == 1, row.to_dict()
    assert str(ck) in row["error"] and "not an .npz archive" in row["error"] and "Delete it" in row["error"]
    assert not any("worker died" in m or "attempt 2" in m for m in said), said
    assert sum(str(ck) in m for m in said) == 1, said
    # what the message says to do works: without the checkpoint the run starts again, to the same front
    ck.unlink()
    df = run_local(b, workers=1)
    assert df["status"].iloc[0] == "finished"
    again = pq.read_table(d / "front.parquet").to_pandas()
    pd.testing.assert_frame_equal(again[["candidate_id", "obj.f1", "obj.f2"]],
                                  straight[["candidate_id", "obj.f1", "obj.f2"]])
