"""Result files: Parquet units metadata, front = non-dominated feasible evaluations (brute-force numpy
dominance filter as reference), load_run on a real template run (mechanism of a candidate against the
template's own batched geometry), atomic writes, errors."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from tiltopt.base.errors import InputError
from tiltopt.optimizer.config import load_config
from tiltopt.optimizer.results import CAUTION, load_run, write_parquet
from tiltopt.optimizer.runner import start_run

TILT_CONFIG = """
objectives = ["overall_width", "max_scrub"]

[run]
name = "tiny"
seed = 2
population = 16
generations = 6
output = "out"
checkpoint_every = 2

[template]
name = "twin_beam"

[envelope]
lean_limit_deg = 30.0
lean_step_deg = 10.0

[constraints]
max_width_mm = 900.0
"""


@pytest.fixture(scope="module")
def tilt_run(tmp_path_factory):
    d = tmp_path_factory.mktemp("tilt")
    (d / "tiny.toml").write_text(TILT_CONFIG)
    return start_run(load_config(d / "tiny.toml"), progress=False)


def _brute_force_front(F):
    # a row stays unless another row is <= in every objective and < in one (definition of dominance)
    keep = np.ones(len(F), dtype=bool)
    for i in range(len(F)):
        keep[i] = not np.any(np.all(F <= F[i], axis=1) & np.any(F < F[i], axis=1))
    return keep


def test_front_is_nondominated_feasible_evaluations(tilt_run):
    d = tilt_run.run_dir
    ev = pq.read_table(d / "evaluations.parquet").to_pandas()
    front = pq.read_table(d / "front.parquet").to_pandas()
    assert len(ev) == 16 * 6 and ev["candidate_id"].is_unique
    assert sorted(ev["generation"].unique()) == list(range(1, 7))
    feas = ev[ev["feasible"]]
    oc = ["obj.overall_width", "obj.max_scrub"]
    ref = feas[_brute_force_front(feas[oc].to_numpy())]
    assert set(front["candidate_id"]) == set(ref["candidate_id"].drop_duplicates())
    # failures are data: an infeasible design has a reason, a feasible one none
    assert (ev.loc[~ev["feasible"], "reason"].str.len() > 0).all()
    assert (ev.loc[ev["feasible"], "reason"] == "").all()
    assert (front["con.max_width"] <= 0).all() and (front["overall_width_mm"] <= 900.0).all()


def test_parquet_metadata_units_and_provenance(tilt_run):
    d = tilt_run.run_dir
    for name in ("front.parquet", "evaluations.parquet", "generations.parquet"):
        md = json.loads(pq.read_schema(d / name).metadata[b"tiltopt"])
        assert md["run_id"] == "tiny-s2" and md["seed"] == 2 and md["caution"] == CAUTION
        assert md["config"]["run"]["population"] == 16 and md["versions"]["pymoo"]
    units = json.loads(pq.read_schema(d / "front.parquet").metadata[b"tiltopt"])["units"]
    assert units["obj.overall_width"] == "mm" and units["max_scrub_mm"] == "mm"
    assert units["max_camber_error_deg"] == "deg" and units["var.wheel_offset"] == "mm"
    gunits = json.loads(pq.read_schema(d / "generations.parquet").metadata[b"tiltopt"])["units"]
    assert gunits["elapsed_s"] == "s"
    meta = json.loads((d / "run.json").read_text())
    assert meta["status"] == "finished" and meta["template"]["name"] == "twin_beam"
    assert meta["timings"]["generations_done"] == 6 and meta["caution"] == CAUTION


def test_load_run_candidate_mechanism(tilt_run):
    run = load_run(tilt_run.run_dir)
    assert run.run_id == "tiny-s2" and len(run.front) == tilt_run.front_size
    assert list(run.generations["generation"]) == list(range(1, 7))
    cid = run.front["candidate_id"].iloc[0]
    x = run.candidate_x(cid)
    row = run.front.iloc[0]
    np.testing.assert_array_equal(x, [row[f"var.{v}"] for v in run.variable_names])
    mech = run.candidate_mechanism(cid)
    # the template's batched geometry of the same vector is the reference for the point positions
    geom = run.template.geometry(x[None, :])
    model = run.template.model
    assert model.point_refs
    for k, ref_name in enumerate(model.point_refs):
        np.testing.assert_allclose(mech.point(ref_name), geom.points[0, k], atol=1e-9)
    assert run.config.run.population == 16 and run.config.spec.objectives == ("overall_width", "max_scrub")
    with pytest.raises(InputError, match="no candidate"):
        run.candidate_x("g999-9999")


def test_load_run_bad_folder(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        load_run(tmp_path / "nothing")
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputError, match="run.json"):
        load_run(tmp_path / "empty")


def test_atomic_write_keeps_old_file_on_failure(tmp_path):
    path = tmp_path / "f.parquet"
    write_parquet(path, pd.DataFrame({"a_mm": [1.0, 2.0]}), {}, {"run_id": "x"})
    bad = pd.DataFrame({"a_mm": [object(), object()]})     # pyarrow cannot convert: the write fails
    with pytest.raises(pa.ArrowInvalid, match="object"):     # pyarrow's own error, not one of ours
        write_parquet(path, bad, {}, {"run_id": "x"})
    assert pq.read_table(path).to_pandas()["a_mm"].tolist() == [1.0, 2.0]
    assert [p.name for p in tmp_path.iterdir()] == ["f.parquet"]   # no temp file left behind
    units = json.loads(pq.read_schema(path).metadata[b"tiltopt"])["units"]
    assert units == {"a_mm": "mm"}


def test_evaluations_of_an_unfinished_run(tmp_path):
    from tiltopt.optimizer.config import RunSettings
    from tiltopt.optimizer.reference_problems import ZDTProblem
    from tiltopt.optimizer.runner import run_problem

    s = RunSettings(name="u", seed=1, algorithm="nsga2", population=10, generations=9, output=tmp_path,
                    checkpoint_every=2)
    run_problem(ZDTProblem("zdt1", 5), s, tmp_path / "u", stop_after=3)        # stopped at 3: whole file
    run_problem(ZDTProblem("zdt1", 5), s, tmp_path / "u", stop_after=7, resume=True)
    (tmp_path / "u" / "evaluations.parquet").unlink()      # as if killed after the checkpoint at 6
    meta = json.loads((tmp_path / "u" / "run.json").read_text())
    meta["status"] = "running"
    (tmp_path / "u" / "run.json").write_text(json.dumps(meta))
    ev = load_run(tmp_path / "u").evaluations
    assert ev["generation"].max() == 7 and len(ev) == 70 and ev["candidate_id"].is_unique
