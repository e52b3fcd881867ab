"""The batched solver against an independent scalar solve of the same states.

Outside reference: tests.reference_solver, written from docs/domain.md alone with a
different formulation (absolute body coordinates, one state at a time with
scipy.optimize.least_squares, Levenberg-Marquardt), sharing only the file
reader with the batched code.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from tests.helpers import CONFIGS, mech_of, sprung_twin_beam, twin_beam, wishbone_rocker
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tests.reference_solver import (_Evaluator, free_modes, lean_start, prepare, reference_solve_state,
                                    reference_sweep, residuals)
from tiltopt.kinematics.solver import SolveSettings
from tiltopt.kinematics.sweep import SweepSettings, sweep

LENGTH_KEYS = ["track_mm", "track_change_mm", "scrub_mm", "heave_mm", "lean_point_offset_mm"]
ANGLE_KEYS = ["camber_error_left_deg", "camber_error_right_deg"]
LEANS = [-20.0, -5.0, 0.0, 5.0, 10.0, 20.0, 30.0]


def compare(mech, leans, travels, atol=1e-6, tolerate_fold_jumps=False):
    """Compare every state; returns the number of states both solvers reached.

    ``tolerate_fold_jumps``: skip states the reference cannot reach but the
    batched solver reports, when the batched solver in 0.25 deg steps cannot
    reach them either: it jumped over a fold to another branch (the known bug
    of test_second_fold_case_batched_coarse_step); only for random geometries.
    """
    ref = reference_sweep(mech, leans, travels)
    got = sweep(Model(mech), lean_deg=leans, travel_mm=travels).records()
    assert len(ref) == len(got)
    n_ok = 0
    for a, b in zip(ref, got):
        assert (a["travel_mm"], a["lean_deg"]) == (b["travel_mm"], b["lean_deg"])
        if tolerate_fold_jumps and not a["converged"] and b["converged"]:
            # the batched solver in small steps must then stop too: a jump over a fold
            fine = sweep(Model(mech), lean_deg=[0.0, a["lean_deg"]], travel_mm=[a["travel_mm"]],
                         settings=SweepSettings(max_lean_step_deg=0.25))
            assert not fine.converged[0, 0, 1], (a["lean_deg"], a["travel_mm"], a["status"])
            continue
        # both solvers agree on which states can be reached
        assert a["converged"] == b["converged"], (a["lean_deg"], a["travel_mm"], a["status"], b["status"])
        if not a["converged"]:
            assert all(b[k] is None for k in LENGTH_KEYS + ANGLE_KEYS)
            continue
        n_ok += 1
        for k in LENGTH_KEYS:                       # tests.reference_solver, 1e-6 mm
            assert b[k] == pytest.approx(a[k], abs=atol), (k, a["lean_deg"], a["travel_mm"])
        for k in ANGLE_KEYS:                        # tests.reference_solver, 1e-6 deg
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


# ------------------------------------------------------------ more topologies
def with_static_camber(d: dict, camber_deg: float) -> dict:
    """Left wheel top out by camber_deg (negative camber in the lean sense), right mirrored."""
    from tests.helpers import hub_height
    for w in d["wheels"]:
        c = -camber_deg if w["name"] == "left" else camber_deg
        w["static_camber_deg"] = c
        body, pt = w["centre"].split(".")
        d["bodies"][body][pt][1] = hub_height(w["outer_radius_mm"], w["crown_radius_mm"], c)
    return d


def with_inclined_legs(d: dict, slope: float) -> dict:
    """Tilt the slider guides of a sprung twin beam: the legs run dy/dz = -+slope (top inboard)."""
    b = d["bodies"]
    for side, s in (("left", -1.0), ("right", 1.0)):
        up, leg = b[f"upright_{side}"], b[f"leg_{side}"]
        y0, z0 = up["bottom"]
        on = (lambda z: [y0 - s * slope * (z - z0), z])
        up["guide_top"] = on(up["guide_top"][1])
        up["guide_bottom"] = on(up["guide_bottom"][1])
        leg["runner"] = on(leg["runner"][1])
    return d


def with_upper_links(d: dict) -> dict:
    """Replace the upper beam by one two-force link per side (chassis pivot -> upright top)."""
    d["bodies"].pop("upper_beam")
    d["pins"] = [p for p in d["pins"] if "upper_beam" not in p["a"] + p["b"]]
    d["links"] = [{"name": "upper_link_left", "a": "chassis.upper_pivot", "b": "upright_left.top"},
                  {"name": "upper_link_right", "a": "chassis.upper_pivot", "b": "upright_right.top"}]
    return d


@pytest.mark.parametrize("build", [
    lambda: with_static_camber(twin_beam(), 3.0),
    lambda: with_static_camber(sprung_twin_beam(), -2.0),
    lambda: with_inclined_legs(sprung_twin_beam(), 0.15),
    lambda: with_upper_links(twin_beam()),
    lambda: with_upper_links(twin_beam(e_left=40.0, e_right=40.0, z_upper=480.0)),
], ids=["static_camber", "sprung_static_camber", "inclined_legs", "upper_links", "upper_links_inboard"])
def test_more_topologies_match_reference(build):
    assert compare(mech_of(build()), LEANS, [-20.0, 0.0, 20.0]) > 0


def test_upper_links_parallelogram_is_ideal():
    """Links parallel to the lower beam make the same parallelogram: zero scrub and heave (docs/domain.md)."""
    res = sweep(Model(mech_of(with_upper_links(twin_beam()))), lean_deg=LEANS, travel_mm=[0.0])
    assert res.converged.all()
    np.testing.assert_allclose(res.scrub, 0.0, atol=1e-9)
    np.testing.assert_allclose(res.heave, 0.0, atol=1e-9)


def test_static_camber_error_is_camber_minus_lean():
    """docs/domain.md: camber error = gamma - phi, with gamma including the static camber."""
    mech = mech_of(with_static_camber(twin_beam(), 3.0))
    recs = reference_sweep(mech, [0.0, 20.0], [0.0])
    res = sweep(Model(mech), lean_deg=[0.0, 20.0], travel_mm=[0.0]).records()
    # a parallelogram keeps the uprights parallel to the chassis: camber error = static camber
    for r in recs + res:
        assert r["camber_error_left_deg"] == pytest.approx(-3.0, abs=1e-9)
        assert r["camber_error_right_deg"] == pytest.approx(3.0, abs=1e-9)


def test_batch_of_candidates_matches_reference_per_candidate():
    """Many geometries of one topology in one batched call, each against its own scalar solve."""
    variants = [dict(), dict(w_left=280.0, w_right=280.0, e_left=30.0, e_right=30.0),
                dict(z_upper=560.0, z_lower=300.0, w_left=350.0, w_right=350.0, e_left=60.0, e_right=60.0)]
    mechs = [mech_of(sprung_twin_beam(**v)) for v in variants]
    model = Model(mechs[0])
    pts = np.concatenate([model.geometry_from(m).points for m in mechs])
    geom = model.batch_geometry(pts)
    leans, travels = [-10.0, 0.0, 10.0, 25.0], [-15.0, 0.0, 15.0]
    res = sweep(model, geom, lean_deg=leans, travel_mm=travels)
    assert res.converged.all()
    for c, mech in enumerate(mechs):
        ref = reference_sweep(mech, leans, travels)
        got = res.records(c)
        for a, b in zip(ref, got):
            for k in LENGTH_KEYS + ANGLE_KEYS:      # tests.reference_solver
                assert b[k] == pytest.approx(a[k], abs=1e-6), (c, k, a["lean_deg"], a["travel_mm"])


@pytest.mark.parametrize("leans", [[10.0, -5.0, 0.0, 10.0, 3.0], [25.0, 5.0], [-7.5]])
def test_lean_order_and_repeats_do_not_change_states(leans):
    mech = load_mechanism(CONFIGS / "wishbone_rocker.toml")
    model = Model(mech)
    got = sweep(model, lean_deg=leans, travel_mm=[10.0]).records()
    ref = reference_sweep(mech, sorted(set(leans)), [10.0])
    by_lean = {r["lean_deg"]: r for r in ref}
    assert [r["lean_deg"] for r in got] == leans
    for b in got:
        a = by_lean[b["lean_deg"]]
        for k in LENGTH_KEYS + ANGLE_KEYS:          # tests.reference_solver
            assert b[k] == pytest.approx(a[k], abs=1e-6), k


def _own_mobility(mech):
    """Degrees of freedom relative to the chassis from the rank of the joint equations
    (reference Jacobian, chassis held), springs held and springs free."""
    ref = prepare(mech)
    x = ref.design_x()
    n_joint = 2 * len(mech.pins) + len(mech.links) + len(mech.springs) + 2 * len(mech.sliders)
    lengths = [math.dist(mech.point(s.a), mech.point(s.b)) for s in mech.springs]
    J_held = residuals(ref, x, 0.0, spring_lengths_mm=lengths)[1][:n_joint, 3:]
    J_free = residuals(ref, x, 0.0, travel_mm=0.0)[1][:n_joint - len(mech.springs), 3:]
    col = np.ones(J_held.shape[1])
    col[2::3] = ref.char_length_mm
    n = J_held.shape[1]
    return (n - np.linalg.matrix_rank(J_held * col, tol=1e-9 * np.abs(J_held * col).max()),
            n - np.linalg.matrix_rank(J_free * col, tol=1e-9 * np.abs(J_free * col).max()))


@pytest.mark.parametrize("name", ["twin_beam", "twin_beam_sprung", "wishbone_rocker"])
def test_check_mobility_matches_own_rank_and_count(name):
    from click.testing import CliRunner
    from tiltopt.cli import main
    mech = load_mechanism(CONFIGS / f"{name}.toml")
    held, free = _own_mobility(mech)
    nb = len(mech.bodies)
    # Gruebler-Kutzbach for planar linkages relative to a fixed body: 3 (n - 1) - 2 j1 - j_links
    # (standard textbook count, e.g. Norton, Design of Machinery, ch. 2; sliders are full joints)
    gk_held = 3 * (nb - 1) - 2 * (len(mech.pins) + len(mech.sliders)) - len(mech.links) - len(mech.springs)
    text = CliRunner().invoke(main, ["check", str(CONFIGS / f"{name}.toml")]).output
    assert f"springs held: Gruebler-Kutzbach {gk_held}, Jacobian rank {held}" in text
    assert f"springs free:  Gruebler-Kutzbach {gk_held + len(mech.springs)}, Jacobian rank {free}" in text
    # own count: one lean freedom (with springs held), plus one travel freedom per spring when free
    assert (held, free) == {"twin_beam": (1, 1), "twin_beam_sprung": (1, 3), "wishbone_rocker": (1, 3)}[name]


@pytest.mark.parametrize("name", ["twin_beam_sprung", "wishbone_rocker"])
def test_bump_metrics_match_reference(name):
    """Bump track change, camber change (against the design position) and motion ratio
    (spring shortening per mm of bump), against the reference solver and its central differences."""
    mech = load_mechanism(CONFIGS / f"{name}.toml")
    travels = [-20.0, 0.0, 20.0]
    bump = sweep(Model(mech), lean_deg=[0.0], travel_mm=travels).bump_records()
    h = 0.01
    ref = reference_sweep(mech, [0.0], [0.0] + travels + [s + h for s in travels] + [s - h for s in travels])
    design, at, up, down = ref[0], ref[1:4], ref[4:7], ref[7:10]
    for b, a, p, m in zip(bump, at, up, down):
        assert b["converged"] and a["converged"]
        # tests.reference_solver: lean-0 states against the design position
        assert b["track_change_mm"] == pytest.approx(a["track_mm"] - design["track_mm"], abs=1e-6)
        assert b["camber_change_left_deg"] == pytest.approx(a["camber_left_deg"] - design["camber_left_deg"],
                                                            abs=1e-6)
        assert b["camber_change_right_deg"] == pytest.approx(a["camber_right_deg"] - design["camber_right_deg"],
                                                             abs=1e-6)
        for n, mr in b["motion_ratio"].items():
            # central difference of the reference spring lengths, O(h^2)
            fd = -(p["spring_lengths_mm"][n] - m["spring_lengths_mm"][n]) / (2 * h)
            assert mr == pytest.approx(fd, abs=1e-5), n


def swing_arms() -> dict:
    """One swing arm per side pinned to the chassis, a spring from the chassis to each arm.

    Own count: 2 arms x 3 - 2 pins x 2 - 2 springs = 0 with springs held (cannot lean),
    2 with springs free (one travel freedom per side)."""
    return {"name": "swing_arms", "chassis": "chassis",
            "bodies": {"chassis": {"datum": [0.0, 0.0], "pl": [-100.0, 300.0], "pr": [100.0, 300.0],
                                   "sl": [-150.0, 500.0], "sr": [150.0, 500.0]},
                       "arm_left": {"pivot": [-100.0, 300.0], "hub": [-350.0, 250.0], "mount": [-250.0, 280.0]},
                       "arm_right": {"pivot": [100.0, 300.0], "hub": [350.0, 250.0], "mount": [250.0, 280.0]}},
            "pins": [{"a": "chassis.pl", "b": "arm_left.pivot"}, {"a": "chassis.pr", "b": "arm_right.pivot"}],
            "springs": [{"name": "left_spring", "a": "chassis.sl", "b": "arm_left.mount"},
                        {"name": "right_spring", "a": "chassis.sr", "b": "arm_right.mount"}],
            "wheels": [{"name": "left", "upright": "arm_left", "centre": "arm_left.hub", "outer_radius_mm": 250.0,
                        "crown_radius_mm": 23.0},
                       {"name": "right", "upright": "arm_right", "centre": "arm_right.hub",
                        "outer_radius_mm": 250.0, "crown_radius_mm": 23.0}]}


def test_swing_arms_travel_but_do_not_lean(write_mech):
    from click.testing import CliRunner
    from tiltopt.cli import main
    mech = mech_of(swing_arms())
    # both solvers: every travel reached at lean 0, no lean reached with the springs held
    assert compare(mech, [-5.0, 0.0, 5.0], [-20.0, 0.0, 20.0]) == 3
    text = CliRunner().invoke(main, ["check", str(write_mech(swing_arms()))]).output
    assert "leans: NO" in text and "suspension travel: yes, 2 degree(s)" in text


@pytest.mark.parametrize("name", ["twin_beam_sprung", "wishbone_rocker"])
def test_long_travel_and_lean_match_reference(name):
    """Several continuation steps in travel (+-60 mm) and lean (to 40 deg)."""
    mech = load_mechanism(CONFIGS / f"{name}.toml")
    assert compare(mech, [-30.0, 0.0, 15.0, 30.0, 40.0], [-60.0, -35.0, 0.0, 35.0, 60.0]) >= 24


FOLD_CASE = dict(upper_inner=(63.0, 460.0), upper_outer=(279.0, 414.0), lower_inner=(30.0, 180.0),
                 lower_outer=(316.0, 190.0), hub_y=344.0, rocker_z=544.0, rocker_half=118.0,
                 mount_frac=0.69140625, R=200.0, r=5.0)


def test_fold_of_the_lean_path_is_found_by_the_reference():
    """A wishbone-rocker linkage (found by the random tests) whose lean path folds near 21.45 deg at
    travel 10 mm: the rocker turns ever faster (dtheta/dphi 2.6, 3.2, 4.5 from 18 to 21 deg) and,
    in steps of 0.05 deg, the equations have no solution on this branch past 21.45 deg.
    Reference: the tangent of the solution curve of F(x, phi) = 0, the null vector of
    [dF/dx, dF/dphi], turns back in phi at a fold (Keller's pseudo-arclength continuation)."""
    mech = mech_of(wishbone_rocker(**FOLD_CASE))
    fine = reference_sweep(mech, [21.4, 21.45, 21.5], [10.0], max_lean_step_deg=0.05)
    assert [r["converged"] for r in fine] == [True, True, False]
    coarse = reference_sweep(mech, np.arange(0.0, 26.0, 1.0), [10.0])
    assert [r["converged"] for r in coarse] == [True] * 22 + [False] * 4
    assert "fold" in coarse[22]["status"]
    # the batched solver in fine steps stops there too
    fine_b = sweep(Model(mech), lean_deg=np.arange(0.0, 26.0, 1.0), travel_mm=[10.0],
                   settings=SweepSettings(max_lean_step_deg=0.25))
    assert fine_b.converged[0, 0].tolist() == [True] * 22 + [False] * 4


def test_lean_path_past_a_fold_is_not_reached():
    """The batched solver must not step over the fold onto another branch (it did before its
    branch guard: it reported 22-25 deg as converged)."""
    mech = mech_of(wishbone_rocker(**FOLD_CASE))
    res = sweep(Model(mech), lean_deg=np.arange(0.0, 26.0, 1.0), travel_mm=[10.0])
    # reference: test_fold_of_the_lean_path_is_found_by_the_reference
    assert res.converged[0, 0].tolist() == [True] * 22 + [False] * 4


# a second fold case (found by the random tests): reachable to 21 deg at travel 10 mm, not 22
FOLD_CASE_2 = dict(upper_inner=(92.2, 410.5), upper_outer=(271.5, 384.9), lower_inner=(42.4, 207.0),
                   lower_outer=(296.9, 189.4), hub_y=348.5, rocker_z=547.2, rocker_half=105.4,
                   mount_frac=0.629, R=241.3, r=30.0)


def test_second_fold_case_reference():
    mech = mech_of(wishbone_rocker(**FOLD_CASE_2))
    leans = np.arange(0.0, 26.0, 1.0)
    # reference solver (1 deg steps) and the batched solver in 1 deg steps agree: 0-21 deg only
    assert [r["converged"] for r in reference_sweep(mech, leans, [10.0])] == [True] * 22 + [False] * 4
    assert sweep(Model(mech), lean_deg=leans, travel_mm=[10.0]).converged[0, 0].tolist() == [True] * 22 + [False] * 4
    # one 5 deg step from 20 deg crosses the fold: the reference's tangent test catches it
    coarse = reference_sweep(mech, [0.0, 20.0, 25.0], [10.0], max_lean_step_deg=5.0)
    assert [r["converged"] for r in coarse] == [True, True, False] and "fold" in coarse[2]["status"]


def test_second_fold_case_batched_coarse_step():
    mech = mech_of(wishbone_rocker(**FOLD_CASE_2))
    res = sweep(Model(mech), lean_deg=[0.0, 20.0, 25.0], travel_mm=[10.0])
    # reference: test_second_fold_case_reference
    assert res.converged[0, 0].tolist() == [True, True, False]


def keller_trace(mech, travel_mm: float, ds: float = 2.0, max_steps: int = 1000):
    """The lean path of one travel traced by pseudo-arclength continuation (Keller's method).

    The lean-stage equations F(x, phi) = 0 of tests.reference_solver (absolute body coordinates,
    springs held at their lengths at lean 0 and the given travel) define a curve in (x, phi). Each
    step predicts along the unit tangent (the null vector of [dF/dx, dF/dphi], scaled: angles and
    the lean times the characteristic length) by ``ds`` and corrects by Newton on F = 0 plus the
    hyperplane through the prediction normal to the tangent, so the trace passes a fold, where
    phi turns back, like any other point. It stops half a degree after the lean turned back.

    Returns the reference model, the held spring lengths, and per node the state x, the lean
    (deg), the lean component of the tangent oriented along the path, and det(dF/dx).
    """
    ref = prepare(mech)
    _, base, held = lean_start(ref, travel_mm)
    n = ref.n_unknowns
    col = np.ones(n + 1)
    col[2::3] = ref.char_length_mm
    col[-1] = ref.char_length_mm

    def fj(z):
        f, J = residuals(ref, z[:n], z[n], spring_lengths_mm=held)
        dphi = np.zeros((len(f), 1))
        dphi[-1, 0] = -ref.char_length_mm          # the last row is (theta_chassis - phi) * L
        return f, np.hstack([J, dphi])

    def tangent(J, prev):
        t = np.linalg.svd(J * col)[2][-1]
        return t if t @ prev > 0 else -t

    z = np.concatenate([base.x, [0.0]])
    f, J = fj(z)
    t = tangent(J, np.eye(n + 1)[-1])               # start toward positive lean
    xs, leans, tphi, dets = [z[:n]], [0.0], [t[-1]], [np.linalg.det(J[:, :n])]
    for _ in range(max_steps):
        zp = z + ds * t / col
        w = zp.copy()
        for _ in range(20):
            f, J = fj(w)
            dw = np.linalg.solve(np.vstack([J, t * col]), -np.concatenate([f, [t @ ((w - zp) * col)]]))
            w += dw
            if np.max(np.abs(dw * col)) < 1e-10:
                break
        f, J = fj(w)
        assert np.max(np.abs(f)) < 1e-8              # on the curve
        z, t = w, tangent(J, t)
        xs.append(z[:n])
        leans.append(math.degrees(z[n]))
        tphi.append(t[-1])
        dets.append(np.linalg.det(J[:, :n]))
        if t[-1] < 0 and leans[-1] < max(leans) - 0.5:
            break
    return ref, held, np.array(xs), np.array(leans), np.array(tphi), np.array(dets)


# a third fold case (found by the random tests): at travel -10 mm the lean path folds 0.008 deg
# past 10 deg; the batched solver's trapezoid test rejected the good 10 deg state (its plain mean
# of dq/dphi outran the secant near the fold) until the test was taken along the arclength
FOLD_CASE_3 = dict(upper_inner=(52.0, 441.25), upper_outer=(260.0, 380.0), lower_inner=(30.0, 180.0),
                   lower_outer=(300.75, 190.0), hub_y=330.0, rocker_z=520.0, rocker_half=90.0,
                   mount_frac=0.3125, R=200.0, r=5.0)


def _upper_arm_to_upright_deg(ref, x, side):
    """Angle between the upper wishbone (inner -> outer) and the upright (lower -> upper joint)."""
    ev = _Evaluator(ref, x)
    arm = ev.point(f"upper_arm_{side}.outer")[0] - ev.point(f"upper_arm_{side}.inner")[0]
    up = ev.point(f"upright_{side}.upper_joint")[0] - ev.point(f"upright_{side}.lower_joint")[0]
    return math.degrees(math.acos(arm @ up / np.linalg.norm(arm) / np.linalg.norm(up)))


@pytest.fixture(scope="module")
def third_fold_trace():
    return keller_trace(mech_of(wishbone_rocker(**FOLD_CASE_3)), -10.0)


def test_third_fold_case_folds_just_past_10_deg(third_fold_trace):
    """Reference: keller_trace (pseudo-arclength continuation of the reference equations). The
    lean rises to a fold between 10.0 and 10.02 deg, where the lean component of the tangent and
    det(dF/dx) change sign together, once. There the left (high-side) upper wishbone has swung
    nearly in line with its upright: the double-wishbone quadrilateral near its toggle."""
    ref, held, xs, leans, tphi, dets = third_fold_trace
    k = int(np.argmax(leans))
    # the fold between the nodes: a parabola through the three nodes around the largest lean
    # (equal arclength steps)
    a, b, c = leans[k - 1], leans[k], leans[k + 1]
    fold = b + (c - a) ** 2 / (8.0 * (2.0 * b - a - c))
    assert 10.0 < fold < 10.02
    turn = np.flatnonzero(np.diff(np.sign(tphi)))
    flip = np.flatnonzero(np.diff(np.sign(dets)))
    assert len(turn) == 1 and turn.tolist() == flip.tolist() and abs(turn[0] - k) <= 1
    assert _upper_arm_to_upright_deg(ref, xs[k], "left") > 165.0      # 123 deg at lean 0
    assert _upper_arm_to_upright_deg(ref, xs[0], "left") < 125.0


@pytest.mark.parametrize("engine", ["compiled", "numpy"])
def test_third_fold_case_state_before_the_fold_is_reached(third_fold_trace, engine):
    """The batched sweep in its default 5 deg steps reaches 10 deg at travel -10 mm (it reported
    "toggles before it"), on the branch of keller_trace, and stops after the fold."""
    ref, held, xs, leans, tphi, dets = third_fold_trace
    k = int(np.argmax(leans))
    # keller_trace's state at 10 deg, corrected from the last node below it on the rising part
    j = max(i for i in range(k) if leans[i] < 10.0)
    at10 = reference_solve_state(ref, xs[j], 10.0, spring_lengths_mm=held)
    assert at10.converged
    det10 = np.linalg.det(residuals(ref, at10.x, math.radians(10.0), spring_lengths_mm=held)[1])
    assert np.sign(det10) == np.sign(dets[0])                          # before the fold
    mech = mech_of(wishbone_rocker(**FOLD_CASE_3))
    model = Model(mech)
    res = sweep(model, lean_deg=[0.0, 10.0, 11.0], travel_mm=[-10.0],
                settings=SweepSettings(solve=SolveSettings(engine=engine)))
    assert res.converged[0, 0].tolist() == [True, True, False]
    for i, body in enumerate(ref.body_names):
        got = math.degrees(res.body_angle[0, 0, 1, model.body_names.index(body)])
        assert got == pytest.approx(math.degrees(at10.x[3 * i + 2]), abs=1e-7), body


def test_third_fold_case_matches_reference_solver():
    """The failing example of test_random_wishbones_match_reference_solver, states and metrics
    against tests.reference_solver (it reports 10 deg at travel -10 mm as reached)."""
    mech = mech_of(wishbone_rocker(**FOLD_CASE_3))
    assert compare(mech, [-15.0, 0.0, 10.0, 25.0], [-10.0, 0.0, 10.0]) == 6


def test_reference_records_have_the_sweep_record_keys():
    mech = load_mechanism(CONFIGS / "twin_beam_sprung.toml")
    ref = reference_sweep(mech, [0.0, 10.0], [0.0, 10.0])
    got = sweep(Model(mech), lean_deg=[0.0, 10.0], travel_mm=[0.0, 10.0]).records()
    assert [set(r) for r in ref] == [set(r) for r in got]
    assert [set(r["spring_lengths_mm"]) for r in ref] == [set(r["spring_lengths_mm"]) for r in got]


def test_failing_candidate_in_a_batch_does_not_touch_the_others():
    """A locked geometry (unequal beams) among parallelograms of the same topology: it is reported
    as not reaching any lean > 0, and the other candidates equal their own reference sweeps."""
    variants = [dict(), dict(w_left_lower=300.0, w_right_lower=300.0), dict(e_left=50.0, e_right=50.0)]
    mechs = [mech_of(twin_beam(**v)) for v in variants]
    model = Model(mechs[0])
    geom = model.batch_geometry(np.concatenate([model.geometry_from(m).points for m in mechs]))
    leans = [-10.0, 0.0, 10.0, 30.0]
    res = sweep(model, geom, lean_deg=leans, travel_mm=[0.0])
    assert res.converged[1, 0].tolist() == [False, True, False, False]
    assert res.converged[[0, 2]].all()
    for c in (0, 2):
        ref = reference_sweep(mechs[c], leans, [0.0])
        for a, b in zip(ref, res.records(c)):
            for k in LENGTH_KEYS + ANGLE_KEYS:      # tests.reference_solver
                assert b[k] == pytest.approx(a[k], abs=1e-6), (c, k)
