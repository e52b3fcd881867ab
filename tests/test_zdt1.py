"""The optimiser against ZDT1 (Zitzler, Deb and Thiele, "Comparison of multiobjective evolutionary
algorithms: empirical results", Evolutionary Computation 8(2), 2000), run through the project's own
runner and result writer; the pareto helpers against pymoo's indicator and a brute-force filter."""
from __future__ import annotations

import itertools

import numpy as np
import pyarrow.parquet as pq
from pymoo.indicators.hv import HV
from pymoo.problems.multi.zdt import ZDT1 as PymooZDT1

from tiltopt.optimizer.config import load_config
from tiltopt.optimizer.pareto import hypervolume, nondominated_mask
from tiltopt.optimizer.reference_problems import ZDTProblem
from tiltopt.optimizer.runner import start_run

ZDT1_CONFIG = """
[run]
name = "zdt1"
seed = 3
population = 40
generations = 250
output = "out"
checkpoint_every = 50

[benchmark]
name = "zdt1"
n_var = 30
"""


def test_zdt1_formulas():
    p = ZDTProblem("zdt1", 30)
    # Zitzler, Deb and Thiele (2000), eq. for ZDT1: f1 = x1, g = 1 + 9 sum(x2..xn)/(n-1),
    # f2 = g (1 - sqrt(f1/g)); on the front (x2..xn = 0) g = 1 and f2 = 1 - sqrt(f1)
    X = np.zeros((3, 30))
    X[:, 0] = [0.0, 0.25, 1.0]
    np.testing.assert_allclose(p.evaluate_designs(X).F, [[0.0, 1.0], [0.25, 0.5], [1.0, 0.0]], atol=1e-15)
    # and the same numbers as pymoo's own ZDT1 (general-purpose reference library) at random points
    R = np.random.default_rng(0).random((50, 30))
    np.testing.assert_allclose(p.evaluate_designs(R).F, PymooZDT1(n_var=30).evaluate(R), rtol=1e-12)


def test_zdt1_front_through_runner_and_result_files(tmp_path):
    (tmp_path / "zdt1.toml").write_text(ZDT1_CONFIG)
    out = start_run(load_config(tmp_path / "zdt1.toml"), progress=False)
    assert out.status == "finished" and out.generations == 250
    front = pq.read_table(out.run_dir / "front.parquet").to_pandas()   # read back by pyarrow itself
    F = front[["obj.f1", "obj.f2"]].to_numpy()
    hv = HV(ref_point=np.array([1.0, 1.0]))(F)     # pymoo's hypervolume indicator
    # exact ZDT1 front f2 = 1 - sqrt(f1): hypervolume at (1, 1) = 1 - int_0^1 (1 - sqrt f) df = 2/3
    assert 0.65 <= hv <= 2.0 / 3.0 + 1e-12
    # no design can lie below the exact front (g >= 1)
    assert np.all(F[:, 1] >= 1.0 - np.sqrt(F[:, 0]) - 1e-12)
    # the front file holds exactly the non-dominated feasible evaluations (brute-force numpy check)
    ev = pq.read_table(out.run_dir / "evaluations.parquet").to_pandas()
    assert len(ev) == 40 * 250 and ev["candidate_id"].is_unique
    E = ev[["obj.f1", "obj.f2"]].to_numpy()
    dominated = [bool(np.any(np.all(E <= e, axis=1) & np.any(E < e, axis=1))) for e in E]
    ref = {tuple(r) for r in E[~np.array(dominated)]}
    assert {tuple(r) for r in F} == ref


def test_hypervolume_against_pymoo():
    rng = np.random.default_rng(1)
    for m in (2, 3):
        F = rng.random((60, m))
        ref = np.full(m, 1.1)
        # pymoo's exact indicator is the reference
        assert abs(hypervolume(F, ref) - HV(ref_point=ref)(F)) < 1e-12
    # 2 objectives: against the closed form of a staircase (points (0.2, 0.6), (0.5, 0.3), ref (1, 1):
    # 0.3 * 0.4 + 0.5 * 0.7 = 0.47)
    assert abs(hypervolume(np.array([[0.2, 0.6], [0.5, 0.3], [0.6, 0.9]]), np.ones(2)) - 0.47) < 1e-12


def test_nondominated_mask_brute_force():
    rng = np.random.default_rng(2)
    F = rng.integers(0, 5, size=(300, 3)).astype(float)   # many ties and duplicates
    mask = nondominated_mask(F)
    # definition (Deb, Multi-Objective Optimization using Evolutionary Algorithms, 2001): a dominates b
    # when a is no worse in every objective and better in one; plain double loop
    ref = np.ones(len(F), dtype=bool)
    for i, j in itertools.product(range(len(F)), repeat=2):
        if np.all(F[j] <= F[i]) and np.any(F[j] < F[i]):
            ref[i] = False
    np.testing.assert_array_equal(mask, ref)
