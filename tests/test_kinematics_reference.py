"""The batched solver against an independent scalar solve of the same states.

Outside reference: kinematics.reference, written from DOMAIN.md alone with a
different formulation (absolute body coordinates, one state at a time with
scipy.optimize.least_squares, Levenberg-Marquardt), sharing only the file
reader with the batched code.
"""
from __future__ import annotations

import numpy as np
import pytest

from conftest import CONFIGS, mech_of, sprung_twin_beam, twin_beam, wishbone_rocker
from kinematics.mechanism import load_mechanism
from kinematics.model import Model
from kinematics.reference import free_modes, prepare, reference_solve_state, reference_sweep, residuals
from kinematics.sweep import sweep

LENGTH_KEYS = ["track_mm", "track_change_mm", "scrub_mm", "heave_mm", "lean_point_offset_mm"]
ANGLE_KEYS = ["camber_error_left_deg", "camber_error_right_deg"]
LEANS = [-20.0, -5.0, 0.0, 5.0, 10.0, 20.0, 30.0]


def compare(mech, leans, travels, atol=1e-6):
    ref = reference_sweep(mech, leans, travels)
    got = sweep(Model(mech), lean_deg=leans, travel_mm=travels).records()
    assert len(ref) == len(got)
    n_ok = 0
    for a, b in zip(ref, got):
        assert (a["travel_mm"], a["lean_deg"]) == (b["travel_mm"], b["lean_deg"])
        # both solvers agree on which states can be reached
        assert a["converged"] == b["converged"], (a["lean_deg"], a["travel_mm"], a["status"], b["status"])
        if not a["converged"]:
            assert all(b[k] is None for k in LENGTH_KEYS + ANGLE_KEYS)
            continue
        n_ok += 1
        for k in LENGTH_KEYS:                       # kinematics.reference, 1e-6 mm
            assert b[k] == pytest.approx(a[k], abs=atol), (k, a["lean_deg"], a["travel_mm"])
        for k in ANGLE_KEYS:                        # kinematics.reference, 1e-6 deg
            assert b[k] == pytest.approx(a[k], abs=atol), (k, a["lean_deg"], a["travel_mm"])
        for side in ("contact_left_mm", "contact_right_mm"):
            assert b[side] == pytest.approx(a[side], abs=atol)
        for n, v in a["spring_lengths_mm"].items():
            assert b["spring_lengths_mm"][n] == pytest.approx(v, abs=atol)
    return n_ok


@pytest.mark.parametrize("name", ["twin_beam", "twin_beam_sprung", "wishbone_rocker"])
def test_builtin_mechanisms_match_reference(name):
    mech = load_mechanism(CONFIGS / f"{name}.toml")
    n_ok = compare(mech, LEANS + [35.0], [-25.0, 0.0, 25.0])
    # the rigid twin beam has no travel; the others reach every state
    assert n_ok == (8 if name == "twin_beam" else 24)


@pytest.mark.parametrize("build", [
    lambda: sprung_twin_beam(),
    lambda: wishbone_rocker(),
    lambda: wishbone_rocker(upper_inner=(80.0, 430.0), upper_outer=(290.0, 400.0), hub_y=370.0,
                            rocker_half=120.0, mount_frac=0.5),
    lambda: twin_beam(e_left=60.0, e_right=60.0, r_left=0.0, r_right=0.0),
], ids=["sprung_twin_beam", "wishbone_rocker", "wishbone_rocker_b", "inboard_knife_edge"])
def test_own_symmetric_mechanisms_match_reference(build):
    assert compare(mech_of(build()), LEANS, [-20.0, 0.0, 20.0]) > 0


@pytest.mark.parametrize("build", [
    lambda: twin_beam(w_left=280.0, w_right=330.0, e_left=30.0, e_right=55.0, pivot_y=12.0, R_left=240.0,
                      r_right=10.0),
    lambda: sprung_twin_beam(w_left=280.0, w_right=330.0, e_left=30.0, e_right=55.0, pivot_y=12.0,
                             R_left=240.0),
], ids=["twin_beam", "sprung_twin_beam"])
def test_own_asymmetric_mechanisms_match_reference_at_ride_height(build):
    """Asymmetric linkages at travel 0 (see the report on free lean modes at lean 0 for travel != 0)."""
    assert compare(mech_of(build()), LEANS, [0.0]) == len(LEANS)


def test_reference_state_solver_from_a_perturbed_guess():
    """The per-state entry point the benchmark times: a disturbed guess returns to the design state."""
    mech = load_mechanism(CONFIGS / "twin_beam.toml")
    ref = prepare(mech)
    x_design = ref.design_x()
    f, J = residuals(ref, x_design, 0.0, spring_lengths_mm=[])
    assert np.max(np.abs(f)) < 1e-12                 # the design position meets every equation
    # analytic Jacobian against central differences (the derivative of the residual itself)
    h = 1e-6
    num = np.column_stack([(residuals(ref, x_design + h * e, 0.1, spring_lengths_mm=[])[0]
                            - residuals(ref, x_design - h * e, 0.1, spring_lengths_mm=[])[0]) / (2 * h)
                           for e in np.eye(ref.n_unknowns)])
    np.testing.assert_allclose(residuals(ref, x_design, 0.1, spring_lengths_mm=[])[1], num, atol=1e-6)
    rng = np.random.default_rng(7)
    guess = x_design + rng.normal(0.0, 1.0, x_design.shape) * np.tile([2.0, 2.0, 0.01], len(ref.body_names))
    sol = reference_solve_state(ref, guess, 0.0, spring_lengths_mm=[])
    assert sol.converged and sol.residual_mm < 1e-8
    np.testing.assert_allclose(sol.x, x_design, atol=1e-7)


def test_free_lean_mode_found_at_lean_zero():
    """With springs free, the sprung twin beam's beams can turn (legs slide to make up): one free mode."""
    ref = prepare(load_mechanism(CONFIGS / "twin_beam_sprung.toml"))
    N = free_modes(ref, ref.design_x())
    assert N is not None and N.shape[0] == 1
    beam = ref.body_names.index("upper_beam")
    assert abs(N[0, 3 * beam + 2]) > 0                # the mode turns the beams
    assert free_modes(prepare(load_mechanism(CONFIGS / "twin_beam.toml")), prepare(
        load_mechanism(CONFIGS / "twin_beam.toml")).design_x()) is None


def test_reference_reports_unreachable_travel():
    mech = load_mechanism(CONFIGS / "twin_beam.toml")
    recs = reference_sweep(mech, [0.0, 10.0], [10.0])
    assert [r["converged"] for r in recs] == [False, False]
    assert all(r["track_mm"] is None and r["heave_mm"] is None for r in recs)
    assert all("not converged" in r["status"] for r in recs)
