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


# ZDT1's exact Pareto front (Zitzler, Deb and Thiele 2000): f2 = 1 - sqrt(f1), 0 <= f1 <= 1 (x2..xn = 0, g = 1);
# its hypervolume against the reference point (1, 1) is 1 - int_0^1 (1 - sqrt f) df = 2/3 (closed form)
ZDT1_FRONT_HV = 2.0 / 3.0


def zdt1_published(X: np.ndarray) -> np.ndarray:
    """ZDT1 as published (Zitzler, Deb and Thiele 2000): f1 = x1, g = 1 + 9 sum(x2..xn) / (n - 1),
    f2 = g (1 - sqrt(f1 / g)); written here, apart from optimizer/reference_problems.py."""
    f1 = X[:, 0]
    g = 1.0 + 9.0 * X[:, 1:].sum(axis=1) / (X.shape[1] - 1)
    return np.column_stack([f1, g * (1.0 - np.sqrt(f1 / g))])


def check_zdt1_front_file(run_dir, n_var: int) -> np.ndarray:
    """The front file's objectives are ZDT1 of its own variables (published formula) and lie in the unit box
    of the problem; returns the objectives."""
    front = pq.read_table(run_dir / "front.parquet").to_pandas()     # read back by pyarrow itself
    X = front[[f"var.x{i}" for i in range(1, n_var + 1)]].to_numpy()
    F = front[["obj.f1", "obj.f2"]].to_numpy()
    assert np.all((X >= 0.0) & (X <= 1.0))
    # the stored objectives belong to the stored variables (a column mix-up, a wrong formula or a wrong
    # row fails here); rounding only
    np.testing.assert_allclose(F, zdt1_published(X), rtol=0, atol=1e-12)
    return F


def test_zdt1_formulas():
    p = ZDTProblem("zdt1", 30)
    # on the published front (x2..xn = 0) g = 1 and f2 = 1 - sqrt(f1)
    X = np.zeros((3, 30))
    X[:, 0] = [0.0, 0.25, 1.0]
    np.testing.assert_allclose(p.evaluate_designs(X).F, [[0.0, 1.0], [0.25, 0.5], [1.0, 0.0]], atol=1e-15)
    R = np.random.default_rng(4).random((50, 30))
    np.testing.assert_allclose(p.evaluate_designs(R).F, zdt1_published(R), rtol=1e-12)
    # and the same numbers as pymoo's own ZDT1 (general-purpose reference library) at random points
    R = np.random.default_rng(0).random((50, 30))
    np.testing.assert_allclose(p.evaluate_designs(R).F, PymooZDT1(n_var=30).evaluate(R), rtol=1e-12)


def test_zdt1_front_through_runner_and_result_files(tmp_path):
    (tmp_path / "zdt1.toml").write_text(ZDT1_CONFIG)
    out = start_run(load_config(tmp_path / "zdt1.toml"), progress=False)
    assert out.status == "finished" and out.generations == 250
    F = check_zdt1_front_file(out.run_dir, 30)
    # Against the published front: this seeded run (40 x 250) reaches a hypervolume 0.0079 short of the
    # exact front's 2/3 (pymoo's indicator, reference (1, 1)), every point within 0.0172 of the front in f2,
    # and both ends of the front (f1 from 2e-9 to 0.9998). Bounds with about 50 % headroom on those figures:
    # an optimiser that converges less (a broken variation or survival) or covers less of the front fails.
    hv = HV(ref_point=np.array([1.0, 1.0]))(F)
    assert ZDT1_FRONT_HV - 0.012 <= hv <= ZDT1_FRONT_HV + 1e-12
    gap = F[:, 1] - (1.0 - np.sqrt(F[:, 0]))
    assert gap.min() >= -1e-12 and gap.max() <= 0.025
    assert F[:, 0].min() <= 0.01 and F[:, 0].max() >= 0.99
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
