"""The side view of a steered wheel (tiltopt.reports.side_view) and its place on the build sheet and DXF."""
from __future__ import annotations

import math

import pytest

from tests.helpers import CONFIGS
from tiltopt.kinematics import steering as S
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sweep import sweep
from tiltopt.reports.side_view import side_view, side_view_svg, steering_points


@pytest.fixture(scope="module")
def hand():
    model = Model(load_mechanism(CONFIGS / "wishbone_rocker.toml"))
    geom = model.default_geometry
    return model, geom, sweep(model, geom, lean_deg=[0.0, 30.0], travel_mm=[0.0])


def test_trail_at_lean_0_matches_the_closed_form(hand):
    model, geom, r = hand
    d = side_view(model, geom, r, 0, 0, 0)
    sm = S.steering_model(model)
    X = geom.points3[0]
    A, B, C = X[sm.axis_a[0]], X[sm.axis_b[0]], X[sm.centre[0]]
    # Closed form (Cossalter, Motorcycle Dynamics, 2nd ed., sec. 1.1: trail a = (R sin(eps) - d) / cos(eps),
    # eps the caster, d the offset of the wheel centre ahead of the axis; the same as below for a
    # wheel upright on flat ground): the axis' ground point ahead of the point under the centre.
    eps = math.atan2(A[0] - B[0], A[2] - B[2]) * -1.0                      # top rearward positive
    x_ground = A[0] + (B[0] - A[0]) * (0.0 - A[2]) / (B[2] - A[2])
    R = float(geom.outer_radius[0, 0])
    off = ((C[0] - A[0]) * math.cos(eps) + (C[2] - A[2]) * math.sin(eps))   # centre ahead of the axis, square to it
    assert d["trail_mm"] == pytest.approx(x_ground - C[0], abs=1e-9)
    assert d["trail_mm"] == pytest.approx((R * math.sin(eps) - off) / math.cos(eps), abs=1e-6)
    assert d["caster_deg"] == pytest.approx(math.degrees(eps), abs=1e-9)
    assert d["axis_ground"][1] == 0.0 and d["contact"] == pytest.approx((C[0], 0.0))
    # the file's own comment: about 7.8 deg of caster and some 39 mm of trail
    assert 7.0 < d["caster_deg"] < 8.5 and 35.0 < d["trail_mm"] < 43.0


def test_side_view_at_lean_draws_the_tilted_wheel_and_its_linkage(hand):
    model, geom, r = hand
    d = side_view(model, geom, r, 0, 1, 0)
    # the leaning wheel seen from the side: an ellipse of height ratio cos(inclination) (here the
    # parallelogram keeps the wheel parallel to the body: inclination = lean)
    assert d["ratio"] == pytest.approx(math.cos(math.radians(30.0)), abs=1e-6)
    assert d["arm"] is not None and d["rod_end"] is not None
    svg = side_view_svg(d, title="t")
    assert svg.startswith("<svg") and "<ellipse" in svg and f"trail {d['trail_mm']:.1f} mm" in svg
    refs = [p for p, *_ in steering_points(model, geom)]
    assert "upright_left.steer_arm" in refs and len(refs) == len(set(refs))


def test_a_state_not_reached_draws_nothing(hand):
    model, geom, r = hand
    import dataclasses
    status = r.status.copy()
    status[0, 0, 1] = 99                                                   # any code but CONVERGED
    assert side_view(model, geom, dataclasses.replace(r, status=status), 0, 1, 0) is None


def test_sheet_and_dxf_carry_the_side_view(tmp_path):
    import ezdxf
    from click.testing import CliRunner

    from tiltopt.cli import main

    res = CliRunner().invoke(main, ["sheet", str(CONFIGS / "wishbone_rocker.toml"), "-o", str(tmp_path)])
    assert res.exit_code == 0, res.output
    html = (tmp_path / "sheet.html").read_text()
    assert "Steering and side view" in html and "Steering points at the design position" in html
    kinds = sorted(e.dxftype() for e in ezdxf.readfile(tmp_path / "linkage.dxf").modelspace()
                   if e.dxf.layer == "SIDE_VIEW")
    assert kinds.count("ELLIPSE") == 1 and kinds.count("LINE") == 5 and "TEXT" in kinds
