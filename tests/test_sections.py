"""Section loads of members (tiltopt.kinematics.sections): equilibrium, beams against closed forms, hand cases.

Sources: the shear-force and bending-moment relations of a straight beam (Gere & Goodno, Mechanics
of Materials, ch. 4, shear forces and bending moments: a couple changes the moment by its value, a
point load changes the shear by its value, the moment is linear where no load acts; the closed
forms below are derived in each test by statics), and the free-body diagrams of the two hand cases
worked in the sizing issue, derived again here.
"""
from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.helpers import CONFIGS, mech_of, tie_link_beam
from tests.test_properties import any_mechanism
from tiltopt.kinematics.forces import BodyLoad, analyse_forces
from tiltopt.kinematics.loads import Catalogue, load_loads, parse_loads
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sections import Member, _sides, _tree, build_members, section_loads, shear_factor, tube_checks
from tiltopt.kinematics.sizing import size_linkage, tube_section

DEMO_LOADS = CONFIGS / "loads_demo.toml"
BUILT_IN = ["twin_beam", "twin_beam_sprung", "wishbone_rocker"]


# ------------------------------------------------------------------ equilibrium of every section
def assert_sections_balance(model, geom, spec, rtol=1e-9):
    """Every station of every member in every reached state: the loads on the two sides of the cut
    cancel, forces and moments (couples included), to ``rtol`` of the loads' own size."""
    states, f, status, fm = analyse_forces(model, geom, spec)
    ok = f.ok
    checked = 0
    for mb in build_members(fm):
        sec = section_loads(mb, fm, f, both=True)
        if mb.link >= 0:
            scale_f = np.abs(f.link_tension[:, mb.link])[:, None, None]
            scale_m = scale_f * 1.0
        else:
            loads = f.body_loads[mb.body]
            frc = np.stack([l.force for l in loads], 1)                       # (N, L, 2)
            pos = np.stack([l.position for l in loads], 1)
            cpl = np.abs(np.stack([l.couple for l in loads], 1))
            arm = np.linalg.norm(pos[:, None, None] - sec.position[:, :, :, None], axis=-1)   # (N, E, K, L)
            fn = np.linalg.norm(frc, axis=-1)
            scale_f = fn.sum(1)[:, None, None]
            scale_m = np.einsum("nl,nekl->nek", fn, arm) + cpl.sum(1)[:, None, None]
        dF = np.linalg.norm(sec.force_first + sec.force_second, axis=-1)
        dM = np.abs(sec.moment_first + sec.moment_second)
        good = ok[:, None, None] & np.ones_like(dM, bool)
        assert np.all((dF <= rtol * np.maximum(scale_f, 1e-9))[good]), (mb.name, dF[good].max())
        assert np.all((dM <= rtol * np.maximum(scale_m, 1e-9))[good]), (mb.name, dM[good].max())
        checked += int(good.sum())
    return checked, int(ok.sum())


@pytest.mark.parametrize("name", BUILT_IN)
def test_every_section_of_built_in_mechanisms_balances(name):
    # Equilibrium of each member (Newton's laws, closed form): at every cut the loads on one side
    # balance those on the other. With a slider or tilt-lock couple entered with the wrong sign this
    # fails by twice the couple (the defect of the sizing issue).
    model = Model(load_mechanism(CONFIGS / f"{name}.toml"))
    d = load_loads(DEMO_LOADS)
    checked, reached = assert_sections_balance(model, model.default_geometry, d)
    assert reached == len(d.states()) and checked > 0


def test_tie_link_sections_balance():
    model = Model(mech_of(tie_link_beam(e=50.0)))
    spec = parse_loads({"vehicle": dict(total_mass_kg=120.0, com_height_mm=600.0, front_share=0.6,
                                        wheelbase_mm=1400.0, lean_limit_deg=20.0, parked_lean_deg=8.0)}, "<test>")
    assert_sections_balance(model, model.default_geometry, spec)


@settings(max_examples=20, deadline=None)
@given(any_mechanism, st.floats(80.0, 300.0), st.floats(400.0, 800.0), st.floats(0.3, 0.55), st.floats(0.0, 12.0))
def test_every_section_of_random_mechanisms_balances(data, mass, h, share, parked):
    # The same on random valid mechanisms (tests/test_properties.py) and random vehicles, all default
    # cases (one-wheel bump, kerb strike, cornering, braking, parked on the slope); states the
    # linkage cannot reach are skipped (they carry no forces).
    model = Model(mech_of(data))
    spec = parse_loads({"vehicle": dict(total_mass_kg=mass, com_height_mm=h, front_share=share, wheelbase_mm=1500.0,
                                        lean_limit_deg=15.0, parked_lean_deg=parked)}, "<test>")
    checked, reached = assert_sections_balance(model, model.default_geometry, spec)
    assert reached > 0 and checked > 0


# ------------------------------------------------------------------ beams against closed forms
def _beam(points_y, loads):
    """A straight beam along y (z = 0) through ``points_y``, with loads (index, (Fy, Fz), couple N*mm)."""
    P = np.array([[y, 0.0] for y in points_y])
    edges = _tree(P, [(i, i + 1) for i in range(len(P) - 1)])
    mb = Member("beam", "beam", 0, -1, list(range(len(P))), edges, _sides(edges, len(P)))
    bl = [BodyLoad(i, P[i][None], np.array([f], float), np.array([c], float), f"load {i}") for i, f, c in loads]
    forces = SimpleNamespace(positions=P[None], body_loads={0: bl})
    fm = SimpleNamespace(chassis_pins=[], pins=[])
    return mb, section_loads(mb, fm, forces, both=True), P


def test_simply_supported_beam_with_point_load_and_couple():
    # Simply supported beam, span L = 1000 mm, a point load P = 800 N down at a = 300 mm and a
    # clockwise couple M0 = 150 N*m at b = 700 mm. Statics: moments about A give
    # R_B = (P a + M0) / L, R_A = P - R_B. Bending moment (sagging +; Gere & Goodno ch. 4):
    # M(x) = R_A x - P <x - a> + M0 <x - b>^0, so M jumps by +M0 at b (a clockwise couple raises it);
    # shear V = R_A left of a, R_A - P beyond. The largest |M| is at a, or on either side of b.
    L, P, a, b, M0 = 1000.0, 800.0, 300.0, 700.0, 150e3
    RB = (P * a + M0) / L
    RA = P - RB
    mb, sec, pts = _beam([0.0, a, b, L], [(0, (0.0, RA), 0.0), (1, (0.0, -P), 0.0), (2, (0.0, 0.0), M0),
                                          (3, (0.0, RB), 0.0)])

    def M(x, right_of_b):
        return RA * x - P * max(x - a, 0.0) * (x >= a) + (M0 if (x > b or (x == b and right_of_b)) else 0.0)

    for e, (i, j) in enumerate(mb.edges):
        y0, y1 = pts[i, 0], pts[j, 0]
        # the cut just after the segment's first end and just before its second end
        assert sec.moment[0, e, 0] == pytest.approx(M(y0, True), abs=1e-6)
        assert sec.moment[0, e, 1] == pytest.approx(M(y1, False), abs=1e-6)
        V = RA - (P if y0 >= a else 0.0)
        assert sec.shear[0, e, 0] == pytest.approx(V, abs=1e-9) and sec.shear[0, e, 1] == pytest.approx(V, abs=1e-9)
        assert sec.axial[0, e, 0] == pytest.approx(0.0, abs=1e-9)
    peak = np.abs(sec.moment[0]).max()
    assert peak == pytest.approx(max(abs(RA * a), abs(M(b, False)), abs(M(b, True))), rel=1e-12)
    # here: R_A = 410 N, M(a) = 123 N*m, M(b-) = 410*700 - 800*400 = -33 N*m, M(b+) = 117 N*m
    assert (RA, peak / 1000) == pytest.approx((410.0, 123.0))


def test_cantilever_with_end_load_and_couple():
    # Cantilever fixed at x = 0, length L = 600 mm, end load P = 500 N down, clockwise couple
    # M0 = 60 N*m at b = 250 mm. Wall reactions by statics: R = P up and a counterclockwise wall
    # couple P L + M0. Closed form (Gere & Goodno ch. 4): M(x) = -P (L - x) - M0 for x < b,
    # -P (L - x) beyond; shear P throughout; the peak |M| = P L + M0 at the wall.
    L, P, b, M0 = 600.0, 500.0, 250.0, 60e3
    mb, sec, pts = _beam([0.0, b, L], [(0, (0.0, P), -(P * L + M0)), (1, (0.0, 0.0), M0), (2, (0.0, -P), 0.0)])
    for e, (i, j) in enumerate(mb.edges):
        for k, y in ((0, pts[i, 0]), (1, pts[j, 0])):
            want = -P * (L - y) - (M0 if (y < b or (y == b and k == 1)) else 0.0)
            assert sec.moment[0, e, k] == pytest.approx(want, abs=1e-6)
            assert sec.shear[0, e, k] == pytest.approx(P, abs=1e-9)
    k = np.unravel_index(np.argmax(np.abs(sec.moment[0])), sec.moment[0].shape)
    assert np.abs(sec.moment[0][k]) == pytest.approx(P * L + M0, rel=1e-12)
    assert sec.position[0][k][0] == 0.0                        # at the wall


def test_shear_factor_of_hollow_circle():
    # Gere & Goodno (shear stresses in circular beams): tau_max = 4 V / (3 A) (r2^2 + r2 r1 + r1^2)
    # / (r2^2 + r1^2): 4/3 for a solid bar (r1 = 0) and 2 in the thin-wall limit (r1 -> r2).
    assert shear_factor(40.0, 20.0) == pytest.approx(4.0 / 3.0)
    assert shear_factor(40.0, 1e-6) == pytest.approx(2.0, rel=1e-6)
    r2, r1 = 20.0, 18.0
    assert shear_factor(40.0, 2.0) == pytest.approx(4 / 3 * (r2 ** 2 + r2 * r1 + r1 ** 2) / (r2 ** 2 + r1 ** 2))


# ------------------------------------------------------------------ the issue's two hand cases
ISSUE_CASES = [{"name": "static", "kind": "static"}, {"name": "bump", "kind": "bump", "vertical_g": 3.0},
               {"name": "cornering", "kind": "cornering"}, {"name": "braking", "kind": "braking", "brake_g": 0.7},
               {"name": "parked", "kind": "parked", "lean_deg": 12.0, "slope_deg": 0.0}]
ISSUE_VEHICLE = dict(total_mass_kg=205.0, com_height_mm=620.0, front_share=0.45, wheelbase_mm=1650.0,
                     lean_limit_deg=30.0)


def _issue_spec(**sizing):
    return parse_loads({"vehicle": ISSUE_VEHICLE, "sizing": dict(dict(material="4130", default_pivot_base_mm=60.0),
                                                                 **sizing), "cases": ISSUE_CASES}, "<test>")


def _one_tube(D, t):
    return Catalogue(["4130"], np.array([D]), np.array([t]), "<one tube>")


def test_twin_beam_sprung_upright_in_bump_hand_case():
    # Free-body diagrams (the sizing issue's first case, derived again):
    # - tyre: bump 3 x the front load W_f = 205 g 0.45 = 904.66 N, per wheel N_t = 1357.0 N;
    # - leg: the tyre load acts e = 50 mm outboard of the guide line, the spring along it, so the
    #   slider couple is C = N_t e = 67.85 N*m, its normal force 0, the spring force N_t;
    # - upright: the spring cap force N_t lies on the upright's axis; the couple C at the runner
    #   (40 mm above the bottom pin) is balanced by horizontal pin forces H = C / 200 mm at the top
    #   and bottom pins; the pins share the vertical N_t (the parallelogram is indeterminate: the
    #   minimum-norm rule gives half each), so the span between the pins carries N = N_t / 2 in
    #   tension. M = H z' below the runner (z' above the bottom pin) and H z' - C above it: the peak
    #   |M| = C - 40 H = 0.8 C = 54.28 N*m, at the runner; zero at both pins; no section carries C.
    # The issue's corrected figure 0.4895 is the 28.6 x 1.2 tube (4130, allowable 435 MPa, safety
    # factor 2) under N and the whole couple C at the bottom pin, where the old code put the
    # couple: SF (N / A + C / S) / 435. The old 0.979 was its 20 mm stub above the top pin under
    # N_t and twice the couple. At the runner the tube carries 0.8 C: less than 0.4895.
    model = Model(load_mechanism(CONFIGS / "twin_beam_sprung.toml"))
    spec = _issue_spec()
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    i = [s.name for s in states].index("bump")
    Nt = 3 * 205.0 * 9.80665 * 0.45 / 2
    C = Nt * 50.0                                                          # N*mm
    assert f.wheel_load[i] == pytest.approx([Nt, Nt], rel=1e-9)
    assert abs(f.slider_moment[i, 0]) * 1000 == pytest.approx(C, rel=1e-9)
    up = next(m for m in build_members(fm) if m.name == "upright_left")
    sec = section_loads(up, fm, f)
    M = np.abs(sec.moment[i])
    assert M.max() == pytest.approx(0.8 * C, rel=1e-6) and M.max() <= C
    e, k = np.unravel_index(np.argmax(M), M.shape)
    runner = model.default_geometry.points[0, model.point_index["leg_left.runner"]]
    assert sec.position[i, e, k] == pytest.approx(runner)
    assert sec.axial[i, e, k] == pytest.approx(Nt / 2, rel=1e-6)
    assert np.abs(sec.shear[i, e, k]) == pytest.approx(C / 200.0, rel=1e-6)
    A, I, S, r = tube_section(28.6, 1.2)
    corrected = 2.0 * (Nt / 2 / A + C / S) / 435.0
    assert corrected == pytest.approx(0.4895, abs=5e-5)
    assert 2.0 * (Nt / A + 2 * C / S) / 435.0 == pytest.approx(0.979, abs=5e-4)         # the old figure
    chk = tube_checks(sec, A, S, shear_factor(28.6, 1.2), 435.0, 2.0)
    assert chk.combined[i].max() == pytest.approx(2.0 * (Nt / 2 / A + 0.8 * C / S) / 435.0, rel=1e-6)
    assert chk.governing[i].max() <= corrected
    # sized from the catalogue, the upright now takes a lighter tube than the 28.6 x 1.2 of the old code
    res = size_linkage(model, None, spec)
    j = res.member_names.index("upright_left")
    assert res.catalogue.outer_diameter_mm[res.tube_index[0, j]] < 28.6
    assert res.worst_case_name(0, j) == "bump" and "runner" in res.section_name(0, j)
    assert res.section_force[0, j] == pytest.approx([Nt / 2, C / 200.0, 0.8 * C / 1000], rel=1e-6)


def _rocker_moments(model, f, i):
    """Moments of the two spring forces about the rocker pivot (lean sense, N*mm), by hand."""
    x = f.positions[i]
    piv = x[model.point_index["rocker.pivot"]]
    out = []
    for k, s in enumerate(model.mech.springs):
        a, b = x[model.point_index[s.a]], x[model.point_index[s.b]]
        u = (a - b) / np.linalg.norm(a - b)
        F = f.spring_force[i, k] * u                      # compression pushes the rocker end away from b
        w = a - piv
        out.append(F[0] * w[1] - F[1] * w[0])
    return out


def test_wishbone_rocker_hand_case():
    # The sizing issue's second case: the rocker carries the two spring forces at its ends, the pivot
    # pin and, when parked, the tilt-lock couple T. About the pivot (lean sense) the spring moments
    # and T sum to zero (parked at 12 deg: -25.82 + 201.78 - 175.95 = 0 N*m, from the issue), so the
    # peak bending moment is the larger arm's, 201.8 N*m: not the 377.7 N*m (their sum) of the old
    # code. In the bump each arm carries 345.5 N*m: bump is the rocker's worst case, where a 38.1 x
    # 1.6 tube passes at 0.997 (axial: the spring force along the rocker, from the same diagram).
    # the geometry the figures were worked on: the first demo mechanism (tests/data)
    model = Model(load_mechanism(Path(__file__).resolve().parent / "data" / "wishbone_rocker_first_demo.toml"))
    spec = _issue_spec()
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    names = [s.name for s in states]
    rocker = next(m for m in build_members(fm) if m.name == "rocker")
    sec = section_loads(rocker, fm, f)
    ip, ib = names.index("parked"), names.index("bump")
    ml, mr = _rocker_moments(model, f, ip)
    T = f.lean_moment[ip] * 1000.0                         # on the chassis; the rocker gets -T... and the sum
    assert ml + mr - T == pytest.approx(0.0, abs=1e-6 * abs(ml))
    assert sorted(np.abs([ml, mr, T]) / 1000) == pytest.approx([25.82, 175.95, 201.78], abs=0.01)
    assert np.abs(sec.moment[ip]).max() == pytest.approx(max(abs(ml), abs(mr)), rel=1e-9)
    bl, br = _rocker_moments(model, f, ib)
    assert abs(bl) / 1000 == pytest.approx(345.5, abs=0.05) and abs(br) == pytest.approx(abs(bl), rel=1e-9)
    assert np.abs(sec.moment[ib]).max() == pytest.approx(abs(bl), rel=1e-9)
    # the 38.1 x 1.6 tube by hand at the pivot: SF (|N| / A + M / S) / 435, N = the spring force along the rocker
    A, I, S, r = tube_section(38.1, 1.6)
    x = f.positions[ib]
    s0 = model.mech.springs[1]
    u = x[model.point_index[s0.a]] - x[model.point_index[s0.b]]
    axial = f.spring_force[ib, 1] * abs(u[0]) / np.linalg.norm(u)
    u_hand = 2.0 * (axial / A + abs(bl) / S) / 435.0
    assert u_hand == pytest.approx(0.997, abs=5e-4)
    res = size_linkage(model, None, spec)
    j = res.member_names.index("rocker")
    assert res.tube_label(0, j) == "38.1 x 1.6" and res.worst_case_name(0, j) == "bump"
    assert res.utilisation[0, j] == pytest.approx(u_hand, rel=1e-6)
    one = size_linkage(model, None, spec, catalogue=_one_tube(38.1, 1.6))
    assert one.utilisation[0, j] == pytest.approx(u_hand, rel=1e-6)
