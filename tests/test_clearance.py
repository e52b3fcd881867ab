"""Batched clearance checks against exact geometry derived here, and the ``tiltopt clearance`` command.

Mechanism: the ideal parallelogram twin beam of tests/helpers.py (beam half length w = 330 mm,
hubs at y = +-330 mm, z = 250 mm; R = 250 mm, r = 23 mm, so the crown circle radius is 227 mm).
In it the uprights keep the chassis' orientation, so in the chassis frame each wheel plane stays
vertical at a lateral offset w cos(phi) from the centre plane.
"""
from __future__ import annotations

import dataclasses
import json
import math
import tomllib

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.optimize import minimize_scalar

from tests.helpers import CONFIGS, twin_beam
from tiltopt.cli import main
from tiltopt.kinematics.clearance import ClearanceSettings, evaluate_clearance
from tiltopt.kinematics.mechanism import load_mechanism, mechanism_to_toml, parse_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.shell import load_shell, superellipse_shell
from tiltopt.kinematics.sweep import sweep
from tiltopt.kinematics.wheel_solid import TOLERANCE_MM

RHO = 227.0          # crown circle radius R - r
R_CROWN = 23.0
# The wheel-to-shell search (coarse grid, then a coordinate search with halving steps) reaches the exact
# clearances below to 6.9e-4 mm on the circular shells, 2.2e-6 mm steered (measured); 2e-3 mm leaves
# about three times that. A polygon inscribed in the circle adds its chord sag (1.4e-3 mm here).
SEARCH_TOL = 2e-3


def _run(data, shell, lean, travel=(0.0,), settings=None, geom_points=None):
    """Sweep and clearance of a mechanism dict; its wheels do not steer unless it gives a steer envelope."""
    data = {"steer_envelope": {}, **data}
    mech = parse_mechanism(data, "<test>")
    model = Model(mech)
    geom = model.batch_geometry(geom_points) if geom_points is not None else None
    sr = sweep(model, geom, lean_deg=lean, travel_mm=travel)
    return model, sr, evaluate_clearance(model, geom, sr, shell, settings)


def _circle(R, zc, length=1500.0):
    """A circular-section shell, constant along x (exponent 2, equal half-axes)."""
    return superellipse_shell([-length, length], R, R, zc, 2.0)


# ------------------------------------------------------------ exact cases
def test_unsteered_wheel_in_circular_shell_exact():
    # exact: clearance = wheel plane offset - crown radius - shell radius, the offset being w cos(phi)
    lean = np.array([0.0, 10.0, 20.0])
    _, sr, res = _run(twin_beam(), _circle(150.0, 300.0), lean)
    exact = 330.0 * np.cos(np.radians(lean)) - R_CROWN - 150.0
    assert np.all(res.converged)
    for w in (0, 1):
        np.testing.assert_allclose(res.wheel_shell_mm[0, 0, :, w], exact, atol=SEARCH_TOL)
        # the value is a reached distance (never below the exact minimum) and the estimate covers the gap
        assert np.all(res.wheel_shell_mm[0, 0, :, w] >= exact - 1e-6)
        assert np.all(res.wheel_shell_mm[0, 0, :, w] - exact <= res.wheel_shell_error_mm[0, 0, :, w] + 1e-6)
    # overall width at lean 0: the hubs (default 70 mm wide) reach past the tyres' outer faces, to
    # +-(330 + 35); shell ground clearance zc - R (closed forms)
    assert res.overall_width_mm[0, 0, 0] == pytest.approx(2 * (330.0 + 35.0), abs=1e-6)
    assert res.ground_mm[0, 0, 0, 0] == pytest.approx(150.0, abs=1e-6)
    np.testing.assert_allclose(res.track_mm, sr.track)


def _steered(max_steer=20.0):
    d = twin_beam()
    d["steer_envelope"] = {"lean_deg": [0.0], "max_steer_deg": [max_steer]}
    return d


def _ellipse_exact(zc, delta):
    """Distance from the shell axis to the steered crown circle: its projection on the (y, z) plane is
    the ellipse y = 330 - 227 |cos t| sin(delta), z = 250 + 227 sin t; minimised directly with scipy."""
    f = lambda t: math.hypot(330.0 - RHO * abs(math.cos(t)) * math.sin(delta), 250.0 + RHO * math.sin(t) - zc)
    ts = np.linspace(-math.pi, math.pi, 20001)
    k = int(np.argmin([f(t) for t in ts]))
    r = minimize_scalar(f, bounds=(ts[k] - 1e-3, ts[k] + 1e-3), method="bounded", options={"xatol": 1e-12})
    return r.fun


def test_wheel_steered_about_vertical_axis_through_centre_exact():
    delta = math.radians(20.0)
    # shell axis at hub height: the nearest point of the projected ellipse is its minor-axis vertex
    _, _, res = _run(_steered(), _circle(150.0, 250.0), [0.0])
    exact = 330.0 - RHO * math.sin(delta) - R_CROWN - 150.0
    np.testing.assert_allclose(res.wheel_shell_mm[0, 0, 0], exact, atol=SEARCH_TOL)
    assert abs(res.steer_deg[0, 0, 0]) == pytest.approx(20.0)          # worst steer is full lock
    # shell axis above the hub: exact value from the projection, minimised with scipy
    _, _, res = _run(_steered(), _circle(150.0, 380.0), [0.0])
    exact = _ellipse_exact(380.0, delta) - R_CROWN - 150.0
    np.testing.assert_allclose(res.wheel_shell_mm[0, 0, 0], exact, atol=SEARCH_TOL)
    assert np.all(res.wheel_shell_mm[0, 0, 0] >= exact - 1e-6)


def test_coarse_sampling_reports_a_larger_error_estimate_that_covers_the_error():
    shell = _circle(150.0, 380.0)
    exact = _ellipse_exact(380.0, math.radians(20.0)) - R_CROWN - 150.0
    coarse = ClearanceSettings(crown_samples=6, steer_samples=2, refine_iterations=0)
    _, _, rc = _run(_steered(), shell, [0.0], settings=coarse)
    _, _, rd = _run(_steered(), shell, [0.0])
    err_c = rc.wheel_shell_mm[0, 0, 0] - exact
    assert np.all(err_c > 0.5)                                          # really coarse ...
    assert np.all(err_c <= rc.wheel_shell_error_mm[0, 0, 0])            # ... and said so
    assert np.all(rc.wheel_shell_error_mm[0, 0, 0] > rd.wheel_shell_error_mm[0, 0, 0])


def test_through_link_rotating_about_the_shell_centre_slot_is_radius_times_angle():
    d = twin_beam()
    # the upper beam turns about the chassis pivot (0, 520) by -phi relative to the chassis
    d["segments"] = [{"name": "beam", "body": "upper_beam", "a": "centre", "b": "right_end", "tube_od_mm": 30.0},
                     {"name": "post", "body": "upright_right", "a": "top", "b": "bottom"}]
    shell = _circle(200.0, 520.0)
    _, _, res = _run(d, shell, np.arange(0.0, 40.1, 5.0))
    assert res.through_names[:2] == ["beam", "post"]      # then the default tubes of the other bodies
    slot = dict(zip(res.through_names, res.slot_length_mm[0]))
    # exact: slot = radius x swept angle (40 deg); the upright never crosses the outline. The crossings'
    # arc positions come out within 2.1e-5 mm of the closed form (measured): 1e-4 mm
    np.testing.assert_allclose([slot["beam"], slot["post"]], [200.0 * math.radians(40.0), 0.0], atol=1e-4)
    _, _, res = _run(d, shell, np.arange(-20.0, 40.1, 10.0))
    slot = dict(zip(res.through_names, res.slot_length_mm[0]))
    assert slot["beam"] == pytest.approx(200.0 * math.radians(60.0), abs=1e-4)
    assert res.summary()["total_slot_length_mm"][0] == pytest.approx(sum(slot.values()), abs=1e-9)


def test_inside_and_outside_tubes_closed_form():
    d = twin_beam()
    d["segments"] = [{"name": "beam", "body": "upper_beam", "a": "centre", "b": "right_end", "tube_od_mm": 30.0,
                      "shell": "inside"},
                     {"name": "post", "body": "upright_right", "a": "top", "b": "bottom", "tube_od_mm": 20.0,
                      "shell": "outside"}]
    _, _, res = _run(d, _circle(200.0, 520.0), [0.0])
    # the beam reaches 330 mm from the shell centre: it pokes out by 330 + 15 - 200 = 145 mm (exact to
    # rounding: a tube end against a circle)
    assert res.inside_violation_mm[0, 0, 0] == pytest.approx(145.0, abs=1e-9)
    # the upright tube (y = 330, z 320..520) stays 330 - 10 - 200 = 120 mm outside: no violation
    assert res.outside_violation_mm[0, 0, 0] == 0.0
    _, _, res = _run(d, _circle(335.0, 520.0), [0.0])
    assert res.outside_violation_mm[0, 0, 0] == pytest.approx(335.0 + 10.0 - 330.0, abs=1e-9)


def test_wheel_to_link_closed_form_and_carrying_members_apart():
    d = twin_beam()
    d["bodies"]["chassis"].update({"post_lo": [150.0, 0.0], "post_hi": [150.0, 600.0]})
    d["segments"] = [{"name": "post", "body": "chassis", "a": "post_lo", "b": "post_hi", "tube_od_mm": 20.0},
                     {"name": "leg", "body": "upright_right", "a": "top", "b": "bottom", "tube_od_mm": 20.0}]
    _, _, res = _run(d, _circle(100.0, 520.0), [0.0])
    # exact: the wheel solid's nearest part to a vertical line inboard of it is the hub's inner face
    # (y = 330 - 35, the default 70 mm hub; the tyre's inner face at 330 - 23 is farther), so the post
    # (axis y = 150, radius 10) is 330 - 35 - 150 - 10 mm clear of the right wheel
    exact = 330.0 - 35.0 - 150.0 - 10.0
    got, err = res.wheel_link_mm[0, 0, 0, 1], res.wheel_link_error_mm[0, 0, 0, 1]
    # a reached value (never below the exact one, to rounding), within the branch-and-bound's stop rule
    # (TOLERANCE_MM, 0.1 mm: it may stop anywhere within it; reached here 0.034 mm) and covered by its bound
    assert exact - 1e-9 <= got <= exact + TOLERANCE_MM and got - exact <= err + 1e-9
    assert res.member_names[res.wheel_link_member[0, 0, 0, 1]] == "post"
    # the left wheel's nearest non-carrying member is the chassis frame's default tube on the centre
    # line (y = 0, z 320..520, 25.4 mm; the post is farther). In the wheel's meridian plane the tube's
    # lowest point lies rho = 70 mm from the axle and 330 mm along it; the disc's edge there is the line
    # s = 35 - (35 - 23) rho / 227, whose distance from that point is (330 - 35 + k 70) / sqrt(1 + k^2)
    k = 12.0 / 227.0
    exact = (330.0 - 35.0 + k * 70.0) / math.sqrt(1.0 + k * k) - 12.7
    assert exact - 1e-9 <= res.wheel_link_mm[0, 0, 0, 0] <= exact + TOLERANCE_MM
    # both the chassis tube and the right half of the lower beam reach the point (0, 320)
    assert res.member_names[res.wheel_link_member[0, 0, 0, 0]] in ("chassis.upper_pivot~lower_pivot",
                                                                   "lower_beam.centre~right_end")
    # the leg and the beams carry the wheel: the ideal beams end on the wheel plane, so the upright leg
    # passes through the wheel (a known invalid design, reported as a negative carrier clearance)
    assert res.wheel_carrier_mm[0, 0, 0, 1] < 0
    # tube ground clearance: lowest tube point 0 - 10 mm
    assert res.ground_mm[0, 0, 0, 1] == pytest.approx(-10.0)


def test_many_candidates_in_one_batch_match_the_closed_form_each():
    base = parse_mechanism({**twin_beam(), "steer_envelope": {}}, "<t>")
    model = Model(base)
    pts = []
    for w in (300.0, 330.0, 360.0):
        pts.append(Model(parse_mechanism(twin_beam(w_left=w, w_right=w), "<t>")).default_geometry.points[0])
    lean = np.array([0.0, 15.0, 30.0])
    sr = sweep(model, model.batch_geometry(np.array(pts)), lean_deg=lean, travel_mm=[0.0])
    res = evaluate_clearance(model, model.batch_geometry(np.array(pts)), sr, _circle(120.0, 300.0))
    for c, w in enumerate((300.0, 330.0, 360.0)):
        exact = w * np.cos(np.radians(lean)) - R_CROWN - 120.0           # as in the unsteered case
        np.testing.assert_allclose(res.wheel_shell_mm[c, 0, :, 1], exact, atol=SEARCH_TOL)
    s = res.summary()
    np.testing.assert_allclose(s["min_wheel_shell_mm"], np.array([300.0, 330.0, 360.0]) * math.cos(math.radians(30))
                               - R_CROWN - 120.0, atol=SEARCH_TOL)
    assert np.all(s["min_wheel_shell_mm_state"][:, 1] == 2)


def test_non_converged_states_give_nan_never_numbers():
    model = Model(parse_mechanism(twin_beam(), "<t>"))
    geom = model.batch_geometry(np.repeat(model.default_geometry.points, 2, 0))
    sr = sweep(model, geom, lean_deg=[0.0, 20.0], travel_mm=[0.0])
    status = sr.status.copy()
    status[1, 0, 1] = 3                                  # pretend candidate 1 did not reach lean 20
    bad = dataclasses.replace(sr, status=status, _points=None)   # points recomputed: NaN where not converged
    assert np.all(np.isnan(bad.points[1, 0, 1]))
    res = evaluate_clearance(model, geom, bad, _circle(150.0, 300.0))
    assert np.all(np.isnan(res.wheel_shell_mm[1, 0, 1])) and np.isnan(res.overall_width_mm[1, 0, 1])
    s = res.summary()
    for k in res.SUMMARY_KEYS:
        assert np.isnan(s[k][1]), k
        assert not np.isnan(s[k][0]), k          # a number (+inf where there is nothing to clear)
    assert res.records(1)[1]["wheel_shell_clearance_mm"] == {"left": None, "right": None}


def test_rule_of_thumb_inner_wheel_clearance_trend_on_the_demo():
    # common practice, no source: on a 380 mm wide shell section with inboard pivots, the clearance
    # between the inner wheel and the shell shrinks as lean grows, and compressing the suspension
    # makes it worse. Demo geometry: configs/wishbone_rocker.toml in configs/shell_demo.toml.
    mech = dataclasses.replace(load_mechanism(CONFIGS / "wishbone_rocker.toml"), steer_envelope=())   # straight
    shell = load_shell(CONFIGS / "shell_demo.toml")
    model = Model(mech)
    lean = np.arange(0.0, 40.1, 10.0)
    sr = sweep(model, lean_deg=lean, travel_mm=[-30.0, 0.0, 30.0])
    res = evaluate_clearance(model, None, sr, shell)
    assert np.all(res.converged)
    inner = res.wheel_shell_mm[0, :, :, 1]               # leaning right (phi > 0): the right wheel is inside
    assert np.all(np.diff(inner[:, 1:], axis=1) < 0)     # shrinks as lean grows beyond 10 deg, at every travel
    assert np.all(inner[:, -1] < inner[:, 0] - 50.0)     # ... by far over the envelope
    assert np.all(np.diff(inner[:, 1:], axis=0) < 0)     # more bump (compression), less clearance when leaned


# ------------------------------------------------------------------- CLI
@pytest.fixture
def demo_files(tmp_path):
    d = tomllib.loads((CONFIGS / "wishbone_rocker.toml").read_text())
    d.pop("steering")          # the fixed steer envelope of a file without a steering linkage
    d["steer_envelope"] = {"lean_deg": [0.0, 20.0, 40.0], "max_steer_deg": [25.0, 10.0, 4.0]}
    d["segments"] = [{"name": f"{b}_tube", "body": b, "a": "inner", "b": "outer", "tube_od_mm": 25.0}
                     for b in ("upper_arm_left", "upper_arm_right", "lower_arm_left", "lower_arm_right")]
    mech = tmp_path / "mech.toml"
    mech.write_text(mechanism_to_toml(parse_mechanism(d, "<t>")))
    return mech, CONFIGS / "shell_demo.toml"


def test_cli_json(demo_files):
    mech, shell = demo_files
    r = CliRunner().invoke(main, ["clearance", str(mech), "--shell", str(shell), "--lean", "0:40:5",
                                  "--travel", "-30,0,30", "--format", "json"])
    assert r.exit_code == 0, r.output
    out = json.loads(r.output)
    assert len(out["states"]) == 27 and "Caution" in out["caution"]
    st = out["states"][0]
    for k in ("lean_deg", "travel_mm", "steer_deg", "converged", "wheel_shell_clearance_mm",
              "wheel_link_clearance_mm", "ground_clearance_mm", "slot_length_mm", "overall_width_mm", "track_mm"):
        assert k in st, k
    assert set(st["wheel_shell_clearance_mm"]) == {"left", "right"}
    # the declared wishbone tubes, then the default tubes of the other bodies (body_tubes)
    assert set(st["slot_length_mm"]) >= {"upper_arm_left_tube", "upper_arm_right_tube", "lower_arm_left_tube",
                                         "lower_arm_right_tube", "rocker.pivot~left_end",
                                         "upright_right.upper_joint~lower_joint"}
    # the worst steer of each state lies within the steer envelope (linear in lean between its rows); at
    # lean 0 it is full lock, 25 deg (the wheel's front swings toward the shell)
    lock = np.interp([s["lean_deg"] for s in out["states"]], [0.0, 20.0, 40.0], [25.0, 10.0, 4.0])
    assert np.all(np.abs([s["steer_deg"] for s in out["states"]]) <= lock + 1e-9)
    assert abs(st["steer_deg"]) == pytest.approx(25.0, abs=1e-9)
    summ = out["summary"]
    m = summ["min_wheel_shell_mm"]
    worst = min(min(s["wheel_shell_clearance_mm"].values()) for s in out["states"])
    assert m["value"] == pytest.approx(worst)
    assert {"lean_deg", "travel_mm", "error_mm"} <= set(m)
    assert summ["min_clearance_mm"]["value"] == pytest.approx(min(m["value"], summ["min_wheel_link_mm"]["value"]))


def test_cli_table_and_csv(demo_files):
    mech, shell = demo_files
    r = CliRunner().invoke(main, ["clearance", str(mech), "--shell", str(shell), "--lean", "0:20:10"])
    assert r.exit_code == 0, r.output
    assert "shell_R_mm" in r.output and "min_wheel_shell_mm" in r.output and "Caution" in r.output
    r = CliRunner().invoke(main, ["clearance", str(mech), "--shell", str(shell), "--lean", "0:20:10",
                                  "--travel", "0,30", "--format", "csv"])
    assert r.exit_code == 0, r.output
    lines = r.output.strip().splitlines()
    assert len(lines) == 1 + 6
    assert "wheel_shell_clearance_mm.left" in lines[0].split(",")


def test_cli_bad_inputs_exit_2_and_name_file_and_key(demo_files, tmp_path):
    mech, shell = demo_files
    bad_shell = tmp_path / "bad_shell.toml"
    bad_shell.write_text(shell.read_text().replace("exponent = 2.5", "exponent = 1.2"))
    r = CliRunner().invoke(main, ["clearance", str(mech), "--shell", str(bad_shell)])
    assert r.exit_code == 2 and "bad_shell.toml" in r.output and "stations[1].exponent" in r.output
    bad_mech = tmp_path / "bad_mech.toml"
    bad_mech.write_text(mech.read_text().replace('tube_od_mm = 25.0', 'tube_od_mm = 25.0\nshell = "around"', 1))
    r = CliRunner().invoke(main, ["clearance", str(bad_mech), "--shell", str(shell)])
    assert r.exit_code == 2 and "bad_mech.toml" in r.output and "segments[0].shell" in r.output
    r = CliRunner().invoke(main, ["clearance", str(mech), "--shell", str(tmp_path / "none.toml")])
    assert r.exit_code == 2 and "none.toml" in r.output
    r = CliRunner().invoke(main, ["clearance", str(mech), "--shell", str(shell), "--crown-samples", "2"])
    assert r.exit_code == 2 and "--crown-samples" in r.output


def test_polygon_shell_from_csv_gives_the_circle_result(tmp_path):
    # a 720-gon inscribed in a circle of radius 150 (chord sag 150 (1 - cos(0.25 deg)) < 0.002 mm) as a CAD
    # polygon CSV; exact as in the unsteered case: clearance = w cos(phi) - r - 150
    t = np.radians(np.arange(0.0, 360.0, 0.5))
    rows = ["x_mm,y_mm,z_mm"] + [f"{x},{150 * math.cos(a)!r},{300 + 150 * math.sin(a)!r}"
                                 for x in (-1500.0, 1500.0) for a in t]
    p = tmp_path / "round.csv"
    p.write_text("\n".join(rows) + "\n")
    lean = np.array([0.0, 20.0])
    _, _, res = _run(twin_beam(), load_shell(p), lean)
    exact = 330.0 * np.cos(np.radians(lean)) - R_CROWN - 150.0
    # reached within 1.2e-3 mm, the polygon's chord sag included (measured); a vertex lies at the bottom, so
    # the ground clearance is exact
    np.testing.assert_allclose(res.wheel_shell_mm[0, 0, :, 1], exact, atol=2 * SEARCH_TOL)
    assert res.ground_mm[0, 0, 0, 0] == pytest.approx(150.0, abs=1e-9)


@pytest.mark.parametrize("kpi,caster", [(10.0, 0.0), (0.0, 12.0), (8.0, 5.0)])
def test_steer_axis_rotation_closed_form(kpi, caster):
    # Exact rotation (Rodrigues) of the front crown point c + rho f about the steering axis through the
    # hub, for a quarter turn: f' = (e x f) + e (e . f), e the design axis of the right wheel
    # (top inboard by the kingpin inclination, rearward by the caster), unit.
    from tiltopt.kinematics.clearance import _Wheels

    d = twin_beam()
    d["wheels"][1].update(kingpin_inclination_deg=kpi, caster_deg=caster)
    model = Model(parse_mechanism(d, "<t>"))
    sr = sweep(model, lean_deg=[0.0])
    W = _Wheels(model, model.default_geometry, sr, np.array([1]), (1, 1, 1))   # item 1: the right wheel
    e = np.array([-math.tan(math.radians(caster)), -math.tan(math.radians(kpi)), 1.0])
    e /= np.linalg.norm(e)
    f = np.array([1.0, 0.0, 0.0])
    fq = np.cross(e, f) + e * e.dot(f)
    x, y, z = W.crown(np.array([0]), np.array([[math.pi / 2]]), np.array([[0.0]]))
    np.testing.assert_allclose([x[0, 0], y[0, 0], z[0, 0]], np.array([0.0, 330.0, 250.0]) + RHO * fq, atol=1e-9)
    # steer > 0 turns the front of the wheel toward +y (the sign stated in kinematics/clearance.py)
    x, y, z = W.crown(np.array([0]), np.array([[0.1]]), np.array([[0.0]]))
    assert y[0, 0] > 330.0
