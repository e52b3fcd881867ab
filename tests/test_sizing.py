"""Member sizing (tiltopt.kinematics.sizing) against textbook values and hand checks."""
from __future__ import annotations

import math

import numpy as np
import pytest

from tests.helpers import CONFIGS, mech_of, tie_link_beam, twin_beam
from tiltopt.kinematics.loads import load_catalogue, load_loads, parse_loads
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sizing import critical_stress, euler_load, size_linkage, tube_section

DEMO_LOADS = CONFIGS / "loads_demo.toml"
VEHICLE = dict(total_mass_kg=120.0, com_height_mm=600.0, front_share=1.0, wheelbase_mm=1400.0, lean_limit_deg=20.0)


def test_euler_buckling_gere_11_4_2():
    # Gere, Mechanics of Materials, problem 11.4-2: steel pipe L = 1.2 m, D = 40 mm, d = 36 mm,
    # E = 210 GPa: P_cr = 62.2 kN pinned-pinned and 15.6 kN fixed-free (K = 2).
    A, I, S, r = tube_section(40.0, 2.0)
    assert euler_load(210e3, I, 1200.0, k=1.0) / 1000 == pytest.approx(62.2, abs=0.05)
    assert euler_load(210e3, I, 1200.0, k=2.0) / 1000 == pytest.approx(15.6, abs=0.05)


def test_tube_section_hand_values():
    # Hand computation: D = 40, d = 36: D^4 - d^4 = 2 560 000 - 1 679 616 = 880 384 mm^4;
    # I = pi * 880 384 / 64 = pi * 13 756 = 43 215.7 mm^4; S = 2 I / D = 2 160.8 mm^3;
    # A = pi (1600 - 1296) / 4 = 76 pi = 238.76 mm^2.
    A, I, S, r = tube_section(40.0, 2.0)
    assert I == pytest.approx(43215.7, abs=0.1)
    assert S == pytest.approx(2160.8, abs=0.1)
    assert A == pytest.approx(238.76, abs=0.01)
    assert r == pytest.approx(math.sqrt(43215.7 / 238.76), rel=1e-5)
    # 1 in x 1/16 in tube: D = 25.4, d = 22.2: 416 231.4 - 242 891.3 = 173 340.2; x pi / 64 = 8 508.8 mm^4
    assert tube_section(25.4, 1.6)[1] == pytest.approx(8508.8, abs=0.1)


def test_johnson_parabola_meets_euler_at_transition():
    # Closed form (Johnson's parabola, e.g. Shigley's Mechanical Engineering Design, column
    # formulas; from memory): at the transition slenderness lambda_c = pi sqrt(2 E / S_y) both
    # give S_y / 2 and have the same slope; at lambda = 0 Johnson gives S_y.
    E, sy = 205e3, 435.0
    lam_c = math.pi * math.sqrt(2 * E / sy)
    assert critical_stress(E, sy, lam_c) == pytest.approx(sy / 2, rel=1e-12)
    assert critical_stress(E, sy, lam_c * (1 - 1e-9)) == pytest.approx(sy / 2, rel=1e-7)
    assert critical_stress(E, sy, 0.0) == pytest.approx(sy)
    assert critical_stress(E, sy, 2 * lam_c) == pytest.approx(math.pi ** 2 * E / (2 * lam_c) ** 2)
    h = 1e-4 * lam_c
    slope_j = (critical_stress(E, sy, lam_c - h) - critical_stress(E, sy, lam_c - 2 * h)) / h
    slope_e = (critical_stress(E, sy, lam_c + 2 * h) - critical_stress(E, sy, lam_c + h)) / h
    assert slope_j == pytest.approx(slope_e, rel=1e-3)


def _tie_spec(cases, **over):
    v = dict(VEHICLE)
    v.update(over)
    return parse_loads({"vehicle": v, "sizing": {"material": "6061-T6", "pivot_allowance_g": 50.0},
                        "cases": cases}, "<test>")


def test_link_gets_lightest_passing_tube_by_hand():
    # The tie links of the tie-link beam carry T = N e / 200 (hand statics, test_forces). Hand
    # sizing: a tube passes if SF T / A <= allowable (tension; no buckling); the lightest of the
    # catalogue's 6061-T6 tubes that passes must be the one chosen, mass = rho A L.
    model = Model(mech_of(tie_link_beam(e=50.0)))
    spec = _tie_spec([{"name": "bump", "kind": "bump", "vertical_g": 3.0}])
    res = size_linkage(model, None, spec)
    j = res.member_names.index("tie_left")
    N = 3.0 * 120.0 * 9.80665 / 2
    T = N * 50.0 / 200.0
    cat = load_catalogue()
    mat = spec.materials["6061-T6"]
    rows = [i for i, m in enumerate(cat.material) if m == "6061-T6"]
    A = tube_section(cat.outer_diameter_mm[rows], cat.wall_mm[rows])[0]
    ok = [(a, i) for a, i in zip(A, rows) if spec.safety_factor * T / a <= mat.allowable_mpa]
    a_min, i_min = min(ok)
    assert res.tube_index[0, j] == i_min
    assert res.utilisation[0, j] == pytest.approx(spec.safety_factor * T / a_min / mat.allowable_mpa, rel=1e-9)
    L = 330.0   # chassis lower pivot (0, 320) to upright bottom (-330, 320)
    assert res.length_mm[0, j] == pytest.approx(L)
    assert res.mass_kg[0, j] == pytest.approx(mat.density_g_cm3 * 1e-6 * a_min * L, rel=1e-12)
    # linkage mass = members + allowance per pivot (3 pins + 2 links x 2 ends = 7 pivots)
    assert res.n_pivots == 7
    assert res.linkage_mass_kg[0] == pytest.approx(res.mass_kg[0].sum() + 7 * 0.050, rel=1e-12)
    assert res.feasible[0] and res.reason[0] == ""


def test_compressed_link_checked_for_buckling():
    # Hub inboard of the upright (e < 0) puts the ties in compression: the chosen tube must
    # satisfy the Euler/Johnson column check, SF P <= sigma_cr A with lambda = L / r (hand check).
    model = Model(mech_of(tie_link_beam(e=-60.0)))
    spec = _tie_spec([{"name": "bump", "kind": "bump", "vertical_g": 3.0}])
    res = size_linkage(model, None, spec)
    j = res.member_names.index("tie_left")
    assert res.forces.link_tension[0, 0] < 0
    P = -res.forces.link_tension[0, 0]
    cat, mat = load_catalogue(), spec.materials["6061-T6"]
    i = res.tube_index[0, j]
    A, I, S, r = tube_section(cat.outer_diameter_mm[i], cat.wall_mm[i])
    scr = critical_stress(mat.elastic_modulus_gpa * 1e3, mat.allowable_mpa, 330.0 / r)
    u = spec.safety_factor * max(P / A / mat.allowable_mpa, P / (scr * A))
    assert res.utilisation[0, j] == pytest.approx(u, rel=1e-9) and u <= 1.0


def test_beam_bending_hand_check():
    # Lower beam of the ideal parallelogram, static case (hand statics): each beam end carries the
    # upright's pin force (minimum-norm split: N/2 vertical per pin), so the bending moment at the
    # centre is
    # M = (N/2) * 330 mm per half beam; with zero axial force the utilisation of the chosen
    # tube is SF M / (S sigma_a).
    model = Model(mech_of(twin_beam()))
    spec = parse_loads({"vehicle": VEHICLE, "cases": [{"name": "s", "kind": "static"}]}, "<test>")
    res = size_linkage(model, None, spec)
    j = res.member_names.index("lower_beam")
    N = 120.0 * 9.80665 / 2
    M = N / 2 * 330.0
    cat, mat = load_catalogue(), spec.materials["4130"]
    i = res.tube_index[0, j]
    S = tube_section(cat.outer_diameter_mm[i], cat.wall_mm[i])[2]
    assert res.utilisation[0, j] == pytest.approx(spec.safety_factor * M / S / mat.allowable_mpa, rel=1e-9)


def test_infeasible_names_member_and_case(tmp_path):
    # A catalogue of one thin tube cannot carry a 3 g bump: the candidate is infeasible and the
    # reason names the member and the case.
    csv = tmp_path / "tubes.csv"
    csv.write_text("material,outer_diameter_mm,wall_mm\n4130,10.0,0.5\n", encoding="utf-8")
    model = Model(mech_of(twin_beam()))
    spec = parse_loads({"vehicle": dict(VEHICLE, front_share=0.6), "sizing": {"catalogue": str(csv)}}, "<test>")
    res = size_linkage(model, None, spec)
    assert not res.feasible[0]
    assert "member 'upper_beam'" in res.reason[0] and "case '" in res.reason[0]
    assert np.all(res.tube_index[0] == -1)


def test_unreached_state_makes_candidate_infeasible():
    model = Model(mech_of(twin_beam()))
    spec = parse_loads({"vehicle": VEHICLE, "cases": [{"name": "bump", "kind": "bump", "travel_mm": 25.0}]},
                       "<test>")
    res = size_linkage(model, None, spec)
    assert not res.feasible[0] and "state 'bump'" in res.reason[0]
    assert np.isnan(res.max_utilisation[0])


def test_batched_matches_one_by_one_and_reuses_sweep():
    # Batch consistency: sizing three candidates at once equals sizing each alone; a given sweep
    # holding the states gives the same answer as the internal sweep.
    from tiltopt.kinematics.sweep import sweep

    mech = load_mechanism(CONFIGS / "wishbone_rocker.toml")
    model = Model(mech)
    spec = load_loads(DEMO_LOADS)
    base = model.default_geometry.points[0]
    pts = np.stack([base, base * 1.03, base * np.array([1.05, 1.0])])
    # keep the hubs at their ground height (scaled z would lift the tyres off the ground)
    for c in range(3):
        pts[c, model.wheel_centre, 1] = base[model.wheel_centre, 1]
    geom = model.batch_geometry(pts)
    allr = size_linkage(model, geom, spec)
    for c in range(3):
        one = size_linkage(model, geom.take([c]), spec)
        assert np.allclose(one.mass_kg[0], allr.mass_kg[c], rtol=1e-9)
        assert np.array_equal(one.tube_index[0], allr.tube_index[c])
        assert one.tilt_lock_torque_nm[0] == pytest.approx(allr.tilt_lock_torque_nm[c], rel=1e-9)
    leans = sorted({s.lean_deg for s in spec.states()} | {5.0})
    sw = sweep(model, geom, lean_deg=leans, travel_mm=[0.0])
    again = size_linkage(model, geom, spec, sweep_result=sw)
    assert np.allclose(again.linkage_mass_kg, allr.linkage_mass_kg, rtol=1e-9)
    assert allr.feasible.all()


def test_wheel_lift_reported():
    # Hand statics of the tilt-locked ideal parallelogram with the whole vehicle on it: the wheel
    # loads are W/2 -+ T / track with T = W (h - r) sin phi, so the inner wheel lifts once
    # (h - r) sin phi > track / 2. Track 660 mm, h = 900 mm: sin phi > 330 / 877, phi > 22.1 deg.
    model = Model(mech_of(twin_beam()))
    for phi, lifts in ((20.0, False), (25.0, True)):
        spec = parse_loads({"vehicle": dict(VEHICLE, com_height_mm=900.0),
                            "cases": [{"name": "p", "kind": "parked", "lean_deg": phi, "slope_deg": 0.0}]},
                           "<test>")
        res = size_linkage(model, None, spec)
        W = 120.0 * 9.80665
        T = W * (900.0 - 23.0) * math.sin(math.radians(phi))
        assert res.min_wheel_load_n[0] == pytest.approx(W / 2 - T / 660.0, rel=1e-6)
        assert (res.min_wheel_load_n[0] < 0) == lifts


def test_fatigue_strength_sn_curve():
    # The S-N form of the IIW recommendations and EN 1993-1-9: range^m x n = FAT^m x 2e6. At 2e6
    # cycles the range is the class itself; with m = 3, halving the cycles raises it by 2^(1/3).
    from tiltopt.kinematics.sizing import fatigue_strength

    assert fatigue_strength(36.0, 3.0, 2e6) == pytest.approx(36.0)
    assert fatigue_strength(36.0, 3.0, 1e6) == pytest.approx(36.0 * 2 ** (1 / 3))
    assert fatigue_strength(12.0, 3.0, 2e5) ** 3 * 2e5 == pytest.approx(12.0 ** 3 * 2e6)


def test_fatigue_screening_is_the_load_change():
    # At a fixed pose the force analysis is linear in the loads, so the section loads of one cycle
    # (1 g -> peak g on the front axle) are (peak - 1) / (k - 1) x (bump - static) for a bump of k g.
    # The screening's range at the chosen tube: |dN| / A + |dM| / S at the worst section; its
    # utilisation: partial factor x range / FAT (2e6 / n)^(1/3) (4130: FAT 36, materials.toml).
    from tiltopt.kinematics.forces import analyse_forces
    from tiltopt.kinematics.sections import build_members, section_loads

    model = Model(load_mechanism(CONFIGS / "wishbone_rocker.toml"))
    spec = parse_loads({"vehicle": dict(VEHICLE, front_share=0.5),
                        "cases": [{"name": "s", "kind": "static"}, {"name": "b", "kind": "bump", "vertical_g": 3.0}],
                        "fatigue": {"cycles": 5e5, "peak_g": 1.8, "partial_factor": 1.2}}, "<test>")
    res = size_linkage(model, None, spec)
    states, f, status, fm = analyse_forces(model, model.default_geometry, spec)
    assert [s.role for s in states] == ["case", "case", "fatigue"]
    cat = load_catalogue()
    for j, mb in enumerate(build_members(fm)):
        sec = section_loads(mb, fm, f)
        dN = (sec.axial[1] - sec.axial[0]) * 0.8 / 2.0
        dM = (sec.moment[1] - sec.moment[0]) * 0.8 / 2.0
        assert sec.axial[2] == pytest.approx(dN, abs=1e-9 * np.abs(sec.axial).max() + 1e-9)
        assert sec.moment[2] == pytest.approx(dM, abs=1e-9 * np.abs(sec.moment).max() + 1e-9)
        i = res.tube_index[0, j]
        A, I, S, r = tube_section(cat.outer_diameter_mm[i], cat.wall_mm[i])
        rng = (np.abs(dN) / A + np.abs(dM) / S).max()
        assert res.fatigue_range_mpa[0, j] == pytest.approx(rng, rel=1e-9)
        assert res.fatigue_utilisation[0, j] == pytest.approx(1.2 * rng / (36.0 * (2e6 / 5e5) ** (1 / 3)), rel=1e-9)


def test_tilt_lock_clamp_force_closed_form():
    # A disc-and-caliper lock holds faces x mu x F x r: the clamp force for the torque T with the
    # safety factor SF is SF T / (faces mu r). T is the largest |lock torque| of the locked cases
    # (here parked both ways and the one-wheel bump both ways).
    model = Model(mech_of(twin_beam()))
    spec = parse_loads({"vehicle": dict(VEHICLE, front_share=0.5),
                        "tilt_lock": {"effective_radius_mm": 70.0, "friction": 0.35, "faces": 2},
                        "cases": [{"name": "p", "kind": "parked", "lean_deg": 10.0, "slope_deg": 0.0},
                                  {"name": "o", "kind": "one_wheel_bump", "vertical_g": 3.0},
                                  {"name": "s", "kind": "static"}]}, "<test>")
    res = size_linkage(model, None, spec)
    locked = [i for i, s in enumerate(res.states) if s.locked]
    T = np.abs(res.forces.lean_moment[locked]).max()
    assert [res.states[i].name for i in locked] == ["p", "p_mirror", "o", "o_mirror"]
    assert res.tilt_lock_torque_nm[0] == pytest.approx(T)
    assert res.states[res.tilt_lock_case[0]].case == "o"          # the one-wheel bump governs here
    assert res.tilt_lock_clamp_n[0] == pytest.approx(2.0 * T * 1000.0 / (2 * 0.35 * 70.0))


def test_governing_check_and_section_are_named():
    # Every member names its governing section and check; the checks at that section are the
    # closed forms of kinematics/sections.py (combined = axial + bending for a round tube).
    model = Model(load_mechanism(CONFIGS / "wishbone_rocker.toml"))
    res = size_linkage(model, None, load_loads(DEMO_LOADS))
    for j, mb in enumerate(res.members):
        assert res.section_name(0, j).startswith(("at ", "along "))
        assert res.governing_check(0, j) in ("combined", "shear", "buckling")
        c = {k: res.check[k][0, j] for k in ("axial", "bending", "combined", "shear")}
        assert c["combined"] == pytest.approx(c["axial"] + c["bending"], rel=1e-12)
        top = max(c["combined"], c["shear"], np.nan_to_num(res.check["buckling"][0, j], nan=0.0))
        assert res.utilisation[0, j] == pytest.approx(top, rel=1e-12)
