"""Body shell files, signed distances and extents, against outside references.

References: scipy.optimize (direct minimisation of the point-to-outline distance), shapely (polygon
distance and containment), and closed forms derived here (circle, prism end caps, support of a
circle, arc length of a circle).
"""
from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest
from scipy.optimize import minimize_scalar

from tests.helpers import CONFIGS, twin_beam
from tiltopt.base.errors import InputError
from tiltopt.kinematics.mechanism import load_mechanism, mechanism_to_toml, mirror, parse_mechanism
from tiltopt.kinematics.shell import (
    load_shell,
    outline_position,
    parse_polygon_csv,
    polygon_distance,
    polygon_sections,
    shell_signed_distance,
    superellipse_distance,
    superellipse_distance_lower_bound,
    superellipse_params,
    superellipse_shell,
    support,
    to_chassis_frame,
)


# ----------------------------------------------------------- superellipse vs scipy
def _scipy_distance(y, z, a, b, n):
    """Direct minimisation (scipy) of |p - q(phi)| over the outline in polar form.

    q(phi) = rho(phi) (cos phi, sin phi), rho = (|cos phi / a|^n + |sin phi / b|^n)^(-1/n): a dense
    scan of phi, then scipy's bounded scalar minimiser around the best sample.
    """
    def q(phi):
        c, s = np.cos(phi), np.sin(phi)
        rho = (np.abs(c / a) ** n + np.abs(s / b) ** n) ** (-1.0 / n)
        return rho * c, rho * s

    def f(phi):
        qy, qz = q(phi)
        return (qy - y) ** 2 + (qz - z) ** 2

    phis = np.linspace(-math.pi, math.pi, 20001)
    k = int(np.argmin(f(phis)))
    step = phis[1] - phis[0]
    r = minimize_scalar(f, bounds=(phis[k] - step, phis[k] + step), method="bounded", options={"xatol": 1e-13})
    return math.sqrt(min(r.fun, f(phis[k])))


@pytest.mark.parametrize("a,b,n", [(200.0, 300.0, 2.0), (200.0, 340.0, 2.5), (150.0, 150.0, 4.0), (250.0, 180.0, 8.0)])
def test_superellipse_distance_matches_scipy_minimisation(a, b, n):
    rng = np.random.default_rng(7)
    pts = rng.uniform(-1.8, 1.8, (120, 2)) * [a, b]
    d = superellipse_distance(pts[:, 0], pts[:, 1], a, b, n)
    for (y, z), di in zip(pts, d):
        ref = _scipy_distance(y, z, a, b, n)                  # scipy.optimize direct minimisation
        inside = abs(y / a) ** n + abs(z / b) ** n < 1
        assert abs(abs(di) - ref) < 1e-3, (y, z, di, ref)
        assert (di < 0) == inside


def test_superellipse_lower_bound_never_exceeds_the_distance_outside():
    rng = np.random.default_rng(3)
    a, b, n = 200.0, 340.0, 2.5
    pts = rng.uniform(-3, 3, (4000, 2)) * [a, b]
    d = superellipse_distance(pts[:, 0], pts[:, 1], a, b, n)
    lb = superellipse_distance_lower_bound(pts[:, 0], pts[:, 1], a, b, n)
    out = d > 0
    assert np.all(lb[out] <= d[out] + 1e-6)
    # exact for a circle (closed form: |p| - R)
    lbc = superellipse_distance_lower_bound(pts[:, 0], pts[:, 1], 150.0, 150.0, 2.0)
    np.testing.assert_allclose(lbc, np.hypot(pts[:, 0], pts[:, 1]) - 150.0, atol=1e-9)


# ------------------------------------------------------------- polygons vs shapely
def _csv(sections):
    lines = ["x_mm,y_mm,z_mm"]
    for x, verts in sections:
        lines += [f"{x},{y},{z}" for y, z in verts]
    return "\n".join(lines) + "\n"


def _nose_polygon(scale=1.0):
    # an invented, non-convex section (a faired nose with a shallow foot-well dent), clockwise on purpose
    v = [(0, 700), (150, 650), (210, 450), (200, 300), (120, 260), (160, 180), (0, 150), (-160, 180),
         (-120, 260), (-200, 300), (-210, 450), (-150, 650)]
    return [(y * scale, z) for y, z in v]


def test_polygon_distance_matches_shapely():
    from shapely.geometry import Point, Polygon

    A, B = _nose_polygon(1.0), _nose_polygon(1.3)
    # stations beyond the checked ones keep the end caps out of reach of the test points
    shell = parse_polygon_csv(_csv([(-800.0, A), (-400.0, A), (400.0, B), (800.0, B)]))
    rng = np.random.default_rng(11)
    pts = rng.uniform([-400, 50], [400, 800], (300, 2))
    for x, verts in ((-400.0, A), (400.0, B), (0.0, [(y * 1.15, z) for y, z in A])):
        # at x = 0 the vertex-wise interpolation of A and B is A scaled by 1.15 in y
        d = shell_signed_distance(shell, pts, x)
        poly = Polygon(verts)
        ref = np.array([poly.exterior.distance(Point(p)) * (-1 if poly.contains(Point(p)) else 1) for p in pts])
        np.testing.assert_allclose(d, ref, atol=1e-9)      # shapely distance and containment


def test_polygon_sections_with_different_counts_are_resampled_and_said_so():
    A = _nose_polygon()
    B = [(0, 600), (200, 400), (0, 200), (-200, 400)]
    shell = parse_polygon_csv(_csv([(0.0, A), (500.0, B)]))
    assert "resampled" in shell.notes
    assert shell.outlines.shape == (2, 24, 2)


def test_polygon_sections_of_a_superellipse_shell_keep_its_distances_at_the_stations():
    # exact: at a station the polygon is inscribed in the convex section, so for a point outside the
    # distance to the polygon is at least the distance to the section and at most that plus the
    # Hausdorff distance h of the two outlines (h from a dense sampling of the section)
    se = load_shell(CONFIGS / "shell_demo.toml")
    poly = polygon_sections(se, 720)
    assert poly.kind == "polygon" and poly.outlines.shape == (5, 720, 2) and poly.notes == ""
    rng = np.random.default_rng(2)
    for k, x in enumerate(se.x):
        a, b, zc, n = (float(v) for v in superellipse_params(se, np.array(x)))
        psi = np.linspace(0.0, 2 * math.pi, 720 * 16, endpoint=False)
        c, s_ = np.cos(psi), np.sin(psi)
        dense = np.stack([a * np.sign(c) * np.abs(c) ** (2 / n), zc + b * np.sign(s_) * np.abs(s_) ** (2 / n)], -1)
        h = float(np.max(np.abs(polygon_distance(dense[:, 0], dense[:, 1], poly.outlines[k]))))
        # 720 vertices on sections up to 520 x 860 mm: chords of a few millimetres, whose sagitta is a few
        # thousandths of a millimetre (measured h: 2.0e-3 to 4.2e-3 mm)
        assert h < 0.01
        p = rng.uniform([-600.0, -100.0], [600.0, 1300.0], (300, 2))
        d_se = shell_signed_distance(se, p, x)
        d_po = shell_signed_distance(poly, p, x)
        out = d_se > 1.0
        assert np.all(d_po[out] >= d_se[out] - 1e-6) and np.all(d_po[out] <= d_se[out] + h * 1.01 + 1e-6)
    assert "resampled" in polygon_sections(se, (100, 120, 120, 100, 80)).notes


# -------------------------------------------------------------- closed forms
def test_prism_distance_and_end_caps_closed_form():
    R, zc = 150.0, 400.0
    shell = superellipse_shell([-500.0, 500.0], R, R, zc, 2.0)
    # inside the station range: radial distance minus R (circle, closed form)
    p = np.array([[90.0, 400.0 + 220.0], [0.0, 420.0], [300.0, 100.0]])
    np.testing.assert_allclose(shell_signed_distance(shell, p, 0.0), np.hypot(p[:, 0], p[:, 1] - zc) - R, atol=1e-9)
    # beyond the last station: distance to the capped prism, sqrt(dx^2 + (rho - R)^2) or dx over the cap
    d = shell_signed_distance(shell, np.array([[300.0, zc], [50.0, zc]]), 560.0)
    np.testing.assert_allclose(d, [math.hypot(60.0, 150.0), 60.0], atol=1e-9)
    # inside but near the end cap: the cap is nearer than the side
    assert shell_signed_distance(shell, np.array([0.0, zc]), 480.0) == pytest.approx(-20.0)


def test_leaning_frame_sign_and_support_closed_form():
    # docs/domain.md: R(a) = [[cos a, sin a], [-sin a, cos a]]; a chassis point (0, h) leaned by phi > 0 moves to +y
    phi, h = math.radians(30.0), 500.0
    world = np.array([h * math.sin(phi), h * math.cos(phi)])
    np.testing.assert_allclose(to_chassis_frame(world, np.zeros(2), phi), [0.0, h], atol=1e-9)
    # support of a circle section: the lowest world point of a leaned circle is zc*cos(phi) - R below nothing else
    shell = superellipse_shell([-500.0, 500.0], 150.0, 150.0, 400.0, 2.0)
    low = -support(shell, np.array([math.sin(phi), -math.cos(phi)]))
    assert low == pytest.approx(400.0 * math.cos(phi) - 150.0)
    # superellipse support formula vs a dense outline (numpy brute force)
    sh = superellipse_shell([-500.0, 500.0], 200.0, 340.0, 520.0, 2.5)
    t = np.linspace(-math.pi, math.pi, 200001)
    c, s = np.cos(t), np.sin(t)
    y = 200.0 * np.sign(c) * np.abs(c) ** 0.8
    z = 520.0 + 340.0 * np.sign(s) * np.abs(s) ** 0.8
    u = np.array([math.cos(0.4), math.sin(0.4)])
    # the dense outline (200,001 samples, 0.01 mm apart) misses the true maximum by far less than 1e-6 mm
    # (a smooth maximum: the error is quadratic in the spacing; measured 8e-9 mm)
    assert support(sh, u) == pytest.approx(np.max(u[0] * y + u[1] * z), abs=1e-6)


def test_outline_position_on_a_circle_is_radius_times_angle():
    R = 200.0
    shell = superellipse_shell([-500.0, 500.0], R, R, 520.0, 2.0)
    ang = np.radians([0.0, 17.0, 40.0, 100.0])
    p = np.stack([R * np.cos(ang), 520.0 + R * np.sin(ang)], -1)
    pos, perim = outline_position(shell, 0.0, p)
    assert perim == pytest.approx(2 * math.pi * R, rel=1e-6)          # circle circumference
    arc = np.mod(pos - pos[0], perim)
    # arc = R x angle; the outline's arc length is reached within 3.4e-5 mm here (measured): 2e-4 mm
    np.testing.assert_allclose(arc, R * (ang - ang[0]), atol=2e-4)


# ------------------------------------------------------------------ files
def test_demo_shell_is_380_mm_wide_at_the_linkage_station():
    shell = load_shell(CONFIGS / "shell_demo.toml")
    mech = load_mechanism(CONFIGS / "wishbone_rocker.toml")
    from tiltopt.kinematics.shell import superellipse_params
    a, b, zc, n = superellipse_params(shell, np.array(mech.station_x_mm))
    assert 2 * a == pytest.approx(380.0)
    # the inboard chassis pivots of the demo mechanism lie inside the shell
    piv = np.array([mech.point(f"chassis.{p}") for p in ("upper_left_pivot", "lower_right_pivot", "rocker_pivot")])
    assert np.all(shell_signed_distance(shell, piv, 0.0) < 0)


@pytest.mark.parametrize("text,key", [
    ("[[stations]]\nx_mm = 0.0\nhalf_width_mm = 200.0\nhalf_height_mm = 300.0\ncentre_z_mm = 500.0\n", "stations"),
    ("[[stations]]\nx_mm = 0.0\nhalf_width_mm = 200.0\nhalf_height_mm = 300.0\ncentre_z_mm = 500.0\nwidth = 1\n"
     "[[stations]]\nx_mm = 1.0\nhalf_width_mm = 200.0\nhalf_height_mm = 300.0\ncentre_z_mm = 500.0\n",
     "stations[0].width"),
    ("[[stations]]\nx_mm = 0.0\nhalf_width_mm = 200.0\nhalf_height_mm = 300.0\ncentre_z_mm = 500.0\nexponent = 1.5\n"
     "[[stations]]\nx_mm = 1.0\nhalf_width_mm = 200.0\nhalf_height_mm = 300.0\ncentre_z_mm = 500.0\n",
     "stations[0].exponent"),
    ("[[stations]]\nx_mm = 0.0\nhalf_width_mm = -2.0\nhalf_height_mm = 300.0\ncentre_z_mm = 500.0\n"
     "[[stations]]\nx_mm = 1.0\nhalf_width_mm = 200.0\nhalf_height_mm = 300.0\ncentre_z_mm = 500.0\n",
     "stations[0].half_width_mm"),
    ("colour = 'red'\n", "colour"),
])
def test_bad_shell_files_name_file_and_key(tmp_path, text, key):
    p = tmp_path / "bad_shell.toml"
    p.write_text(text)
    with pytest.raises(InputError) as e:
        load_shell(p)
    assert e.value.key == key and "bad_shell.toml" in str(e.value)


def test_bad_polygon_csv(tmp_path):
    p = tmp_path / "s.csv"
    p.write_text("x,y,z\n0,1,2\n")
    with pytest.raises(InputError, match="header"):
        load_shell(p)
    p.write_text("x_mm,y_mm,z_mm\n0,0,600\n0,200,400\n0,0,200\n")
    with pytest.raises(InputError, match="at least two sections"):
        load_shell(p)
    p.write_text("x_mm,y_mm,z_mm\n0,0,600\n0,200,400\n0,zz,200\n")
    with pytest.raises(InputError) as e:
        load_shell(p)
    assert e.value.key == "row 4"


# ------------------------------------------------- mechanism keys of this issue
def _with_clearance_keys():
    d = twin_beam()
    d["wheels"][1]["kingpin_inclination_deg"] = 8.0
    d["wheels"][1]["caster_deg"] = 12.0
    d["wheels"][1]["steer_axis_point"] = "upright_right.top"
    d["links"] = [{"a": "upper_beam.left_end", "b": "lower_beam.right_end", "tube_od_mm": 20.0, "shell": "inside"}]
    d["segments"] = [{"body": "upper_beam", "a": "centre", "b": "right_end", "tube_od_mm": 30.0, "shell": "through"},
                     {"body": "upright_left", "a": "top", "b": "bottom", "shell": "outside"}]
    d["steer_envelope"] = {"lean_deg": [0.0, 20.0, 40.0], "max_steer_deg": [30.0, 12.0, 5.0]}
    return d


def test_clearance_keys_round_trip_and_mirror():
    m = parse_mechanism(_with_clearance_keys(), "<test>")
    assert parse_mechanism(tomllib.loads(mechanism_to_toml(m))) == m
    mm = mirror(m)
    wl = mm.wheel("left")
    assert wl.steer_axis_point == f"{wl.upright}.top"        # follows the mirrored upright's name
    assert mm.point(wl.steer_axis_point) == (-330.0, 520.0)  # and its mirrored position
    assert wl.kingpin_inclination_deg == 8.0                 # inboard / rearward: unchanged by a mirror
    assert mm.segments[1].body == mm.wheel("right").upright and mm.segments[1].shell == "outside"
    assert parse_mechanism(tomllib.loads(mechanism_to_toml(mm))) == mm
    # defaults: no new key written for a file without them (its text is unchanged)
    plain = parse_mechanism(twin_beam(), "<test>")
    assert "tube_od_mm" not in mechanism_to_toml(plain) and "steer_envelope" not in mechanism_to_toml(plain)


@pytest.mark.parametrize("edit,key", [
    (lambda d: d["segments"][0].update(shell="across"), "segments[0].shell"),
    (lambda d: d["segments"][0].update(b="tip"), "segments[0].b"),
    (lambda d: d["segments"][0].update(colour=1), "segments[0].colour"),
    (lambda d: d["links"][0].update(tube_od_mm=-1.0), "links[0].tube_od_mm"),
    (lambda d: d["wheels"][1].update(steer_axis_point="upper_beam.centre"), "wheels[1].steer_axis_point"),
    (lambda d: d["steer_envelope"].update(lean_deg=[0.0, 40.0, 20.0]), "steer_envelope.lean_deg"),
    (lambda d: d["steer_envelope"].update(max_steer_deg=[30.0, 12.0]), "steer_envelope"),
])
def test_bad_clearance_keys(edit, key):
    d = _with_clearance_keys()
    edit(d)
    with pytest.raises(InputError) as e:
        parse_mechanism(d, "m.toml")
    assert e.value.key == key


def test_thinned_polygon_bound_is_below_the_shapely_distance():
    from shapely.geometry import Point, Polygon

    rng = np.random.default_rng(5)
    t = np.linspace(0.0, 2 * math.pi, 240, endpoint=False)
    r = 200.0 + 15.0 * np.sin(5 * t) + rng.uniform(-2.0, 2.0, t.size)     # a wavy CAD-like outline
    verts = list(zip(r * np.cos(t), 450.0 + r * np.sin(t)))
    shell = parse_polygon_csv(_csv([(-900.0, verts), (-300.0, verts), (300.0, verts), (900.0, verts)]))
    assert shell.coarse_outlines.shape[1] < 60 and shell.coarse_error_mm > 0
    pts = rng.uniform([-400, 50], [400, 850], (400, 2))
    lb = shell_signed_distance(shell, pts, 0.0, lower_bound=True)
    poly = Polygon(verts)
    ref = np.array([poly.exterior.distance(Point(p)) * (-1 if poly.contains(Point(p)) else 1) for p in pts])
    assert np.all(lb <= ref + 1e-9)                                    # a true lower bound (shapely reference)
    assert np.all(ref - lb <= 2 * shell.coarse_error_mm + 1e-9)        # and no looser than stated
