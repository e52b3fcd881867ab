"""The compiled Newton kernel against the numpy path of the same solver.

Independent check: tiltopt.kinematics.kernel re-implements positions, residual,
Jacobian and step per item in compiled scalar code; the numpy path
(SolveSettings(engine="numpy")) assembles them array-at-a-time through the
constant maps of Model.functional_map. Both must give the same states,
statuses, iteration counts, Jacobians, tangents and det(J) signs. (Both are
checked against outside references elsewhere: test_kinematics_reference.py
runs the default, compiled engine against the scalar scipy solver.)
"""
from __future__ import annotations

import numpy as np
import pytest

from tests.helpers import CONFIGS
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.solver import (
    CONVERGED,
    NONFINITE,
    Batch,
    SolveSettings,
    hold_free_directions,
    residual,
    solve_states,
)
from tiltopt.kinematics.sweep import SweepSettings, sweep

NUMPY = SolveSettings(engine="numpy")
COMPILED = SolveSettings(engine="compiled")
NAMES = ["twin_beam", "twin_beam_sprung", "wishbone_rocker"]


def variants(model: Model, n: int, seed: int) -> np.ndarray:
    """Random variants: lateral and vertical scale of all points (symmetry kept)."""
    rng = np.random.default_rng(seed)
    pts = np.repeat(model.default_geometry.points, n, 0).copy()
    pts[..., 0] *= rng.uniform(0.9, 1.1, size=(n, 1))
    pts[..., 1] *= rng.uniform(0.95, 1.05, size=(n, 1))
    return pts


@pytest.fixture(scope="module", params=NAMES)
def case(request):
    model = Model(load_mechanism(CONFIGS / f"{request.param}.toml"))
    return request.param, model, model.batch_geometry(variants(model, 12, seed=3))


def test_sweeps_agree(case):
    name, model, geom = case
    leans, travels = np.arange(-10.0, 40.0 + 1e-9, 5.0), [-25.0, 0.0, 25.0]
    a = sweep(model, geom, leans, travels, SweepSettings(solve=NUMPY))
    b = sweep(model, geom, leans, travels, SweepSettings(solve=COMPILED))
    assert np.array_equal(a.status, b.status), name
    assert np.array_equal(a.iterations, b.iterations), name
    ok = a.converged
    assert ok.any()
    assert np.max(np.abs(a.q[ok] - b.q[ok])) < 1e-9
    for key in ("track", "scrub", "heave", "lean_point_offset"):
        assert np.allclose(getattr(a, key), getattr(b, key), atol=1e-9, equal_nan=True), key
    assert np.allclose(a.points, b.points, atol=1e-9, equal_nan=True)


@pytest.mark.parametrize("stage", ["lean", "travel"])
def test_one_solve_agrees(case, stage):
    """q, status, residual, iterations, Jacobian, tangent and det sign of one batched solve."""
    name, model, geom = case
    C = geom.n_candidates
    b = Batch(model, geom, np.arange(C))
    rng = np.random.default_rng(7)
    if stage == "travel":
        hold_free_directions(model, b)
        target = rng.uniform(-20.0, 20.0, C)
        target[::2] = 0.0                        # reachable by the rigid twin beam too
        lean = np.zeros(C)
    else:
        target = np.asarray(b.L_spring0 * rng.uniform(0.98, 1.02, size=b.L_spring0.shape))
        lean = np.radians(rng.uniform(-15.0, 15.0, C))
    q0 = model.design_q(C) + rng.normal(scale=1e-3, size=(C, model.n_q))
    items = rng.permutation(C)[: C - 3]          # a subset of the batch, out of order
    a = solve_states(model, b, q0[items], lean[items], target[items], stage, NUMPY, items)
    k = solve_states(model, b, q0[items], lean[items], target[items], stage, COMPILED, items)
    assert np.array_equal(a[1], k[1]) and np.array_equal(a[3], k[3]), name
    assert (a[1] == CONVERGED).any()
    assert np.allclose(a[0], k[0], atol=1e-9)
    assert np.allclose(a[2], k[2], atol=1e-10)
    assert np.allclose(a[4], k[4], rtol=1e-9, atol=1e-9)
    scale = np.max(np.abs(a[5]), axis=1, keepdims=True) + 1.0
    assert np.allclose(a[5] / scale, k[5] / scale, atol=1e-9)
    assert np.array_equal(a[6], k[6])
    # the Jacobian returned is the numpy residual's Jacobian at the returned state
    sub = b.take(items)
    _, J = residual(model, sub, k[0], lean[items], target[items], stage)
    assert np.allclose(J, k[4], rtol=1e-9, atol=1e-9)


def test_last_step_tangent_agrees_and_is_close(case):
    """final_jacobian=False: both engines give the tangent of the last step's Jacobian, and it
    is within the last Newton step of the tangent at the returned state."""
    name, model, geom = case
    C = geom.n_candidates
    b = Batch(model, geom, np.arange(C))
    rng = np.random.default_rng(11)
    target = b.L_spring0 * rng.uniform(0.99, 1.01, size=b.L_spring0.shape)
    lean = np.radians(rng.uniform(-10.0, 10.0, C))
    q0 = model.design_q(C) + rng.normal(scale=1e-2, size=(C, model.n_q))
    exact = solve_states(model, b, q0, lean, target, "lean", COMPILED)
    scale = np.max(np.abs(exact[5]), axis=1, keepdims=True) + 1.0
    # chord steps (default): the tangent of the last factorised Jacobian, which may be that of
    # the start (here 1e-2 off); without them, that of the last Newton iterate
    for chord, atol in ((SolveSettings().chord_below_mm, 1e-2), (0.0, 1e-5)):
        a = solve_states(model, b, q0, lean, target, "lean", SolveSettings(engine="numpy", chord_below_mm=chord),
                         final_jacobian=False)
        k = solve_states(model, b, q0, lean, target, "lean", SolveSettings(chord_below_mm=chord),
                         final_jacobian=False)
        ok = a[1] == CONVERGED
        assert ok.any() and np.array_equal(a[1], k[1]) and np.array_equal(a[3], k[3])
        assert np.allclose(a[5][ok] / scale[ok], k[5][ok] / scale[ok], atol=1e-9)
        assert np.array_equal(a[6][ok], k[6][ok])
        assert np.allclose(k[5][ok] / scale[ok], exact[5][ok] / scale[ok], atol=atol)
        assert np.array_equal(k[6][ok], exact[6][ok])
        assert np.allclose(k[0][ok], exact[0][ok], atol=1e-9)


def test_chord_steps_keep_the_solution():
    """Chord steps change the path to the solution, not the solution: a sweep with and without."""
    model = Model(load_mechanism(CONFIGS / "wishbone_rocker.toml"))
    geom = model.batch_geometry(variants(model, 12, seed=4))
    leans, travels = np.arange(0.0, 40.0 + 1e-9, 5.0), [-25.0, 0.0, 25.0]
    a = sweep(model, geom, leans, travels, SweepSettings(solve=SolveSettings(chord_below_mm=0.0)))
    b = sweep(model, geom, leans, travels)
    assert np.array_equal(a.status, b.status)
    ok = a.converged
    assert ok.mean() > 0.9
    assert np.max(np.abs(a.q[ok] - b.q[ok])) < 1e-9
    assert np.max(b.residual_mm[ok]) <= SolveSettings().tol_mm


def test_jacobian_matches_finite_differences(case):
    """The kernel's Jacobian against central differences of its own residual (h = 1e-6)."""
    name, model, geom = case
    C = geom.n_candidates
    b = Batch(model, geom, np.arange(C))
    q = model.design_q(C) + np.random.default_rng(2).normal(scale=0.05, size=(C, model.n_q))
    lean = np.full(C, 0.2)
    one = SolveSettings(engine="compiled", max_iter=0)
    J = solve_states(model, b, q, lean, b.L_spring0, "lean", one)[4]
    h = 1e-6
    for c in range(model.n_q + 1):
        dq = np.zeros_like(q)
        dl = np.zeros(C)
        if c < model.n_q:
            dq[:, c] = h
        else:
            dl[:] = h
        Fp = residual(model, b, q + dq, lean + dl, b.L_spring0, "lean", jac=False)[0]
        Fm = residual(model, b, q - dq, lean - dl, b.L_spring0, "lean", jac=False)[0]
        assert np.allclose(J[:, :, c], (Fp - Fm) / (2 * h), atol=1e-5), (name, c)


def test_positions_agree(case):
    from tiltopt.kinematics import kernel

    name, model, geom = case
    C = geom.n_candidates
    rng = np.random.default_rng(5)
    N = 40
    cand = rng.integers(0, C, N)
    q = rng.normal(scale=0.1, size=(N, model.n_q))
    lean = rng.uniform(-0.5, 0.5, N)
    for which, tab in (("needed", model._np), ("all", model._all)):
        V, U = model.design_vectors(geom, tab)
        x_ref, _, ang_ref = model.positions(q, lean, V[cand], U[cand], tab)
        x, ang = kernel.positions(model, q, lean, V, U, cand, which)
        assert np.allclose(x, x_ref, atol=1e-9), which
        assert np.allclose(ang, ang_ref, atol=0)


def test_nonfinite_start_is_reported_not_a_number():
    model = Model(load_mechanism(CONFIGS / "wishbone_rocker.toml"))
    geom = model.default_geometry
    b = Batch(model, geom, np.zeros(2, int))
    q0 = model.design_q(2)
    q0[1, 3] = np.nan
    for s in (NUMPY, COMPILED):
        q, st, res, it, *_ = solve_states(model, b, q0, np.zeros(2), b.L_spring0, "lean", s)
        assert st[0] == CONVERGED and st[1] == NONFINITE
        assert not np.isfinite(res[1])


def test_unknown_engine_is_refused():
    with pytest.raises(ValueError, match="engine"):
        SolveSettings(engine="gpu")
