"""Force analysis (tiltopt.kinematics.forces) against closed forms and the solver itself."""
from __future__ import annotations

import math

import numpy as np
import pytest

from tests.helpers import CONFIGS, G, mech_of, sprung_twin_beam, tie_link_beam, twin_beam, wishbone_rocker
from tiltopt.kinematics.forces import analyse_forces
from tiltopt.kinematics.loads import load_loads, parse_loads
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.solver import Batch, newton

DEMO_LOADS = CONFIGS / "loads_demo.toml"


VEHICLE = dict(total_mass_kg=100.0, com_height_mm=600.0, front_share=0.6, wheelbase_mm=1400.0, lean_limit_deg=20.0)


def _spec(**vehicle):
    return parse_loads({"vehicle": dict(VEHICLE, **vehicle)}, "<test>")


def _spec_cases(cases, **vehicle):
    return parse_loads({"vehicle": dict(VEHICLE, **vehicle), "cases": cases}, "<test>")


@pytest.mark.parametrize("name", ["twin_beam", "twin_beam_sprung", "wishbone_rocker"])
def test_global_equilibrium_every_case(name):
    # Newton's first law for the whole vehicle (closed form, no source needed): the tyre
    # reactions, the lateral reference force and the applied loads sum to zero, and so do
    # the moments once the balance / tilt-lock moment on the chassis is included.
    model = Model(load_mechanism(CONFIGS / f"{name}.toml"))
    spec = load_loads(DEMO_LOADS)
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    assert np.all(f.ok), [s.name for s, ok in zip(states, f.ok) if not ok]
    for i, s in enumerate(states):
        tyre = np.stack([f.tyre_side_force[i], f.wheel_load[i]], -1)             # (2, 2) forces at contacts
        total = tyre.sum(0) + f.applied_force[i]
        scale = np.abs(f.applied_force[i]).max()
        assert np.all(np.abs(total) <= 1e-9 * scale), (s.name, total)
        # vertical: the tyres carry the front load (W_f), the rear load stays on its own wheel
        assert f.wheel_load[i].sum() == pytest.approx(s.front_load_n, rel=1e-9)
        # moments about the origin (lean sense: F_y z - F_z y), N*mm
        x = f.positions[i]
        c = f.contact[i]
        m_tyre = np.sum(tyre[:, 0] * c[:, 1] - tyre[:, 1] * c[:, 0])
        # applied: resultant of front+rear at the centre of mass, rear reaction at the datum O
        ang_c = np.radians(s.lean_deg)
        ch = model.chassis
        pr = fm.ref_point[ch]
        P = model.default_geometry.points[0, pr]
        cs, sn = math.cos(ang_c), math.sin(ang_c)
        xO = x[pr] - np.array([cs * P[0] + sn * P[1], -sn * P[0] + cs * P[1]])
        xG = xO + spec.vehicle.com_height_mm * np.array([sn, cs])
        d = np.array([s.side_ratio, 1.0])
        FG = -(s.front_load_n + s.rear_load_n) * d - np.array([sum(s.kerb_force_n), 0.0])   # kerb: lateral inertia
        FO = s.rear_load_n * d
        m_app = FG[0] * xG[1] - FG[1] * xG[0] + FO[0] * xO[1] - FO[1] * xO[0]
        # the rider's balance moment acts between ground and chassis (external), and so does the roll
        # couple of the chassis's inertia in a one-wheel bump; a tilt lock acts between chassis and
        # linkage (internal) and drops out of the whole-vehicle balance
        m_total = m_tyre + m_app + (0.0 if s.locked else 1000.0 * f.lean_moment[i]) + 1000.0 * f.roll_couple[i]
        assert abs(m_total) <= 1e-9 * scale * 1000.0, (s.name, m_total)


def _spring_lengths(model, x):
    a = [model.point_index[s.a] for s in model.mech.springs]
    b = [model.point_index[s.b] for s in model.mech.springs]
    return np.linalg.norm(x[a] - x[b], axis=-1)


@pytest.mark.parametrize("builder", [wishbone_rocker, sprung_twin_beam])
@pytest.mark.parametrize("lean", [0.0, 10.0])
def test_spring_force_is_derivative_of_load_potential(builder, lean):
    # Principle of virtual work (closed form): with the lean held and the tyres on the ground,
    # lengthening spring k by dl lets its force f_k (compression +) do work f_k dl on the
    # loads, so f_k = dV/dl_k, V = potential of the applied loads. With the front load W_f at
    # the centre of mass and the rear load a couple on the chassis, V = W_f z_O + const at a
    # fixed lean (z_O: height of the chassis datum). dV/dl by central differences on the solver.
    model = Model(mech_of(builder()))
    spec = _spec_cases([{"name": "s", "kind": "static", "lean_deg": lean, "mirror": False}],
                       front_share=0.6, lean_limit_deg=20.0)
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    assert f.ok[0]
    Wf = states[0].front_load_n
    x = f.positions[0]
    L0 = _spring_lengths(model, x)
    b = Batch(model, model.default_geometry, np.zeros(1, dtype=int))
    # the solved pose's reduced coordinates: solve at the held lengths (start from the design)
    from tiltopt.kinematics.sweep import sweep

    sw = sweep(model, lean_deg=[lean], travel_mm=[0.0])
    q0 = sw.q[0, 0, 0][None]
    phi = np.radians([lean])
    h = 1e-3
    for k in range(len(model.mech.springs)):
        zO = []
        for sgn in (1.0, -1.0):
            target = L0.copy()
            target[k] += sgn * h
            q, st, res, it, _ = newton(model, b, q0.copy(), phi, target[None], "lean")
            assert st[0] == 0
            zO.append(q[0, 1])
        dV = Wf * (zO[0] - zO[1]) / (2 * h)
        assert f.spring_force[0, k] == pytest.approx(dV, rel=1e-5, abs=1e-6 * Wf)


def test_tilt_lock_torque_hand_model():
    # Hand-derived: the ideal parallelogram (docs/domain.md: zero heave, wheels lean with the chassis)
    # parked at lean phi. The datum O rises r (1 - cos phi), so the front load W_f at the centre of
    # mass (height h above O) has potential W_f (r (1 - cos phi) + h cos phi); the rear load W_r is a
    # couple on the chassis with arm h sin phi. The beams stay level, so the lock angle moves with
    # phi and the lock torque on the chassis is -dV/dphi = -(W_f (h - r) + W_r h) sin phi.
    #
    # On a cross slope beta, leaning downhill, gravity W (sin beta, -cos beta) has a part across the
    # ground too, so the lateral motion of the lean matters. The force analysis holds each tyre's
    # contact as a material point of the tyre (grip), so in the virtual lean motion the tyres roll on
    # their crowns: with the crown centres of the ideal linkage fixed relative to the contact midpoint,
    # the vehicle shifts by r dphi, and dy_O = r (1 - cos phi) dphi, dz_O = r sin phi dphi (the
    # contacts lie 23 sin phi outboard of the hubs' lean: hub +- 330 + 250 sin phi, contact 227 sin phi
    # inboard of it). With y_G - y_O = h sin phi, z_G - z_O = h cos phi:
    #   dV/dphi = -(W_f (h - r) + W_r h) sin(phi + beta) - W_f r sin beta,
    # the flat formula at phi + beta plus the work of the cross-slope part on the rolling shift.
    model = Model(mech_of(twin_beam()))
    for share, phi_deg, beta_deg in ((1.0, 20.0, 0.0), (0.45, 12.0, 0.0), (0.45, 8.0, 5.7), (0.6, 3.0, 10.0)):
        m, h, r = 150.0, 650.0, 23.0
        spec = _spec_cases([{"name": "parked", "kind": "parked", "lean_deg": phi_deg, "slope_deg": beta_deg}],
                           total_mass_kg=m, com_height_mm=h, front_share=share)
        states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
        W = m * G
        Wf, Wr = share * W, (1 - share) * W
        b = math.radians(beta_deg)
        want = -((Wf * (h - r) + Wr * h) * math.sin(math.radians(phi_deg) + b) + Wf * r * math.sin(b)) / 1000.0
        assert f.ok.all()
        assert f.lean_moment[0] == pytest.approx(want, rel=1e-9)
        assert f.lean_moment[1] == pytest.approx(-want, rel=1e-9)      # the mirrored state


def test_over_constrained_parallelogram_flagged_and_min_norm():
    # The rigid parallelogram has one redundant pin (mobility count 3*4 - 2*6 = 0 with one lean
    # freedom observed): its internal forces are indeterminate. The minimum-norm rule is the
    # solution orthogonal to the self-stress state: checked against numpy's lstsq (SVD).
    model = Model(mech_of(twin_beam()))
    states, f, status, fm = analyse_forces(model, model.default_geometry, _spec())
    assert f.redundant == 1 and f.free == 0 and f.indeterminate
    # rebuild J for the parked state and compare with numpy's minimum-norm least squares
    i = [s.name for s in states].index("parked")
    from tiltopt.kinematics.forces import state_loads

    sl = state_loads(states, _spec().vehicle, 1)
    J = fm.assemble(f.positions, f.contact, sl.side_ratio)
    J[:, fm.r_lean, 3 * fm.chassis + 2] = np.where(sl.locked, -1000.0, 1000.0)
    J[:, fm.r_lean, 3 * fm.lock_body + 2] += np.where(sl.locked, 1000.0, 0.0)
    Q, *_ = fm.applied(f.positions, np.zeros((len(states), len(model.body_names))) +
                       np.radians([s.lean_deg for s in states])[:, None], np.repeat(
                           model.default_geometry.points, len(states), 0), sl, f.contact)
    lam_ref = np.linalg.lstsq(J[i].T, -Q[i], rcond=None)[0]
    assert np.allclose(f.lam[i], lam_ref, rtol=1e-7, atol=1e-7 * np.abs(lam_ref).max())


def test_determinate_tie_link_hand_forces():
    # Hand statics of the tie-link linkage upright (static case, lean 0): the upright hangs from
    # the upper beam end (pin, 200 mm above the tie) and carries the tyre load N = W/2 at the
    # contact, e = 50 mm outboard of the upright line. Moments about the top pin: the horizontal
    # tie at the bottom carries T = N e / 200 in tension (it pulls the bottom inward).
    model = Model(mech_of(tie_link_beam(e=50.0)))
    spec = _spec_cases([{"name": "s", "kind": "static"}], total_mass_kg=120.0, front_share=1.0)
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    assert f.redundant == 0 and f.free == 0 and f.ok.all()
    N = 120.0 * G / 2
    assert np.allclose(f.wheel_load[0], [N, N], rtol=1e-12)
    assert np.allclose(f.link_tension[0], [N * 50.0 / 200.0] * 2, rtol=1e-9)


def test_unreached_state_is_not_a_number():
    # The rigid twin beam has no travel: a case at 20 mm travel cannot be reached, and its forces
    # must be NaN, never numbers.
    model = Model(mech_of(twin_beam()))
    spec = _spec_cases([{"name": "s", "kind": "static"}, {"name": "b", "kind": "bump", "travel_mm": 20.0}])
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    assert f.ok[0] and not f.ok[1]
    assert np.all(np.isnan(f.wheel_load[1])) and np.isnan(f.lean_moment[1])


def test_braking_pivot_moment_hand_model():
    # The documented out-of-plane model by hand (twin beam, both chassis pivots reached from each
    # upright): each tyre's brake force 0.7 N_i is shared equally by the two chassis pivots; pivot k
    # carries sum_i (0.7 N_i / 2) |c_i - p_k|, and its bearings the couple force M / base.
    d = twin_beam()
    d["pins"][0]["base_mm"] = 80.0
    model = Model(mech_of(d))
    spec = _spec_cases([{"name": "b", "kind": "braking", "brake_g": 0.7}], front_share=0.5)
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    N = f.wheel_load[0]
    c = f.contact[0]
    # pin 0 has base_mm = 80; pin 1 none, so the default pivot base of 50 mm applies
    for k, (p, base) in enumerate((((0.0, 520.0), 80.0), ((0.0, 320.0), 50.0))):
        lever = np.linalg.norm(c - np.array(p), axis=-1)
        M = np.sum(0.7 * N / 2 * lever)
        assert f.brake_pivot_moment[0, k] == pytest.approx(M, rel=1e-12)
        assert f.brake_bearing_force[0, k] == pytest.approx(M / base, rel=1e-12)


def test_equilibrium_holds_per_candidate_in_a_batch():
    # Newton's first law again, over a batch of 12 random wishbone-rocker candidates: no mixing of
    # candidates inside the batched solve (each candidate's tyre loads carry its own front load).
    import sys
    from pathlib import Path

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))
    from loads import candidates

    model = Model(load_mechanism(CONFIGS / "wishbone_rocker.toml"))
    spec = load_loads(DEMO_LOADS)
    geom = candidates(model, 12, 8.0, seed=3)
    states, f, status, fm = analyse_forces(model, geom, spec)
    assert f.ok.all()
    S = len(states)
    for i in range(12 * S):
        s = states[i % S]
        tyre = np.stack([f.tyre_side_force[i], f.wheel_load[i]], -1).sum(0)
        assert np.all(np.abs(tyre + f.applied_force[i]) <= 1e-9 * s.front_load_n)


def test_one_wheel_bump_hand_statics():
    # Ideal parallelogram (hubs on the upright lines, contacts at y = +-330 mm), lean 0, tilt held,
    # left wheel at 3 x its static load n_s = W_f / 2, right at n_s. The tyre loads come out as
    # prescribed. Chassis free body: its pivots lie on y = 0 and carry only vertical forces here
    # (no lateral load), the loads at the centre of mass and O act on y = 0 too, so the tilt-lock
    # torque and the roll couple of the chassis's inertia balance: T = -M. Linkage free body about
    # the pivots: the lower beam turns freely, so the locked upper beam takes the moment of the
    # tyre loads, T = 330 (N_L - N_R) on the chassis (sign: lean sense), whatever the indeterminate
    # split between the beams.
    model = Model(mech_of(twin_beam()))
    spec = _spec_cases([{"name": "owb", "kind": "one_wheel_bump", "vertical_g": 3.0}], front_share=0.5)
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    n_s = 100.0 * G * 0.5 / 2
    assert f.ok.all() and [s.name for s in states][:2] == ["owb", "owb_mirror"]
    assert f.wheel_load[0] == pytest.approx([3 * n_s, n_s], rel=1e-12)
    assert f.wheel_load[1] == pytest.approx([n_s, 3 * n_s], rel=1e-12)
    T = 330.0 * (3 * n_s - n_s) / 1000.0
    assert abs(f.lean_moment[0]) == pytest.approx(T, rel=1e-9)
    assert f.roll_couple[0] == pytest.approx(-f.lean_moment[0], rel=1e-9)
    assert f.lean_moment[1] == pytest.approx(-f.lean_moment[0], rel=1e-9)


def test_kerb_strike_hand_statics():
    # Ideal parallelogram, tilt free, a kerb pushes the left tyre inward with F = lateral_g W_f at
    # ground level; the vehicle's lateral inertia -F acts at the centre of mass (h = 600 mm). The
    # beams pivot freely, so the tyre loads stay W_f / 2 each (free body of each beam about its
    # pivot), and the rider's / roll inertia's moment on the chassis closes the balance of the whole
    # vehicle: M = F h (lean sense; inertia -F at height h has the moment -F h).
    model = Model(mech_of(twin_beam()))
    spec = _spec_cases([{"name": "kerb", "kind": "kerb_strike", "lateral_g": 0.8}], front_share=0.5)
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    Wf = 100.0 * G * 0.5
    F = 0.8 * Wf
    assert f.ok.all()
    assert f.wheel_load[0] == pytest.approx([Wf / 2, Wf / 2], rel=1e-9)
    assert f.tyre_side_force[0] == pytest.approx([F, 0.0], abs=1e-9 * F)
    assert f.lateral_force[0] == pytest.approx(0.0, abs=1e-9 * F)
    assert f.lean_moment[0] == pytest.approx(F * 600.0 / 1000.0, rel=1e-9)
    assert f.tyre_side_force[1] == pytest.approx([0.0, -F], abs=1e-9 * F)       # the mirror: right wheel, inward
