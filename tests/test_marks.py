"""Front-view clearance marks (tiltopt/reports/marks.py) against shapely, the 3-D search and the drawings.

shapely (a general-purpose geometry library) is the outside reference for every front-view distance:
the wheel solid's section is built here from its definition (docs/domain.md, "Body shell and
clearance": the tyre torus and the rim-and-spoke disc, as wide as the hub at the axle and tapering
to the tyre's width at the crown circle; the section by the plane of the axle is two discs of the
tyre and the disc's trapezoids either side of the axle), each member is a line string, and shapely
measures the distances.
"""
from __future__ import annotations

import math
import re
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sweep import sweep

shapely = pytest.importorskip("shapely")
from shapely.geometry import LineString, Point, Polygon  # noqa: E402
from shapely.ops import unary_union  # noqa: E402

CONFIGS = Path(__file__).resolve().parents[1] / "configs"
NAMES = ["wishbone_rocker", "twin_beam_sprung", "twin_beam"]


def _section(c, camber, R, r, hub_half, rho_lo=0.0):
    """The wheel solid's section by the plane of its axle, unsteered, as a shapely geometry (docs/domain.md)."""
    uy, uz = math.sin(camber), math.cos(camber)          # up the wheel plane
    ny, nz = math.cos(camber), -math.sin(camber)         # along the axle
    rc = R - r

    def at(s, u):
        return (c[0] + s * ny + u * uy, c[1] + s * nz + u * uz)

    w = lambda rho: hub_half - (hub_half - r) * rho / rc   # noqa: E731  (half width of the disc at rho)
    parts = [Point(at(0.0, rc)).buffer(r, quad_segs=1024), Point(at(0.0, -rc)).buffer(r, quad_segs=1024)]
    for sgn in (1.0, -1.0):
        parts.append(Polygon([at(w(rho_lo), sgn * rho_lo), at(r, sgn * rc), at(-r, sgn * rc),
                              at(-w(rho_lo), sgn * rho_lo)]))
    return unary_union(parts)


def _swept(name, lean=(0.0, 15.0, 30.0)):
    mech = load_mechanism(CONFIGS / f"{name}.toml")
    model = Model(mech)
    travel = [-30.0, 0.0, 30.0] if mech.springs else [0.0]
    res = sweep(model, None, list(lean), travel)
    return mech, model, res


@pytest.mark.parametrize("name", NAMES)
def test_wheel_marks_are_the_front_view_distances(name):
    """Each wheel's mark (to the nearest other member, and to its own upright and arms with the hub zone left
    out) equals shapely's distance from the member's axis to the section less the tube radius, minimised over
    the members of its class; its two points are that far apart, one on the section's boundary, one on the tube."""
    from tiltopt.kinematics.clearance import members_of
    from tiltopt.reports.marks import front_marks

    mech, model, res = _swept(name)
    fm = front_marks(model, model.default_geometry, res)
    mem = members_of(model)
    geom = model.default_geometry
    checked = 0
    for t in range(res.points.shape[1]):
        for l in range(res.points.shape[2]):
            P = res.points[0, t, l]
            for w, wheel in enumerate(mech.wheels):
                c = P[model.wheel_centre[w]]
                for kind, lo, sel in (("other", 0.0, ~mem.carries[w]),
                                      ("carrier", wheel.hub_radius_mm, mem.carries[w])):
                    sec = _section(c, res.camber[0, t, l, w], geom.outer_radius[0, w], geom.crown_radius[0, w],
                                   0.5 * wheel.hub_width_mm, lo)
                    d = [LineString([P[mem.ia[k]], P[mem.ib[k]]]).distance(sec) - mem.radius[k]
                         for k in np.flatnonzero(sel)]
                    got = getattr(fm, f"{kind}_mm")[0, t, l, w]
                    assert got == pytest.approx(min(d), abs=2e-3), (kind, w, t, l)
                    k = getattr(fm, f"{kind}_member")[0, t, l, w]
                    assert d[list(np.flatnonzero(sel)).index(k)] == pytest.approx(min(d), abs=2e-3)
                    p, q = getattr(fm, f"{kind}_p")[0, t, l, w], getattr(fm, f"{kind}_q")[0, t, l, w]
                    assert math.dist(p, q) == pytest.approx(got, abs=2e-3)
                    assert sec.boundary.distance(Point(p)) < 2e-3
                    axis = LineString([P[mem.ia[k]], P[mem.ib[k]]])
                    assert axis.distance(Point(q)) == pytest.approx(mem.radius[k], abs=2e-3)
                    checked += 1
    assert checked >= 12


@pytest.mark.parametrize("name", NAMES)
def test_pair_tube_and_ground_marks(name):
    """Between the wheels: shapely's distance between the two sections, and the 3-D figure of the run
    (wheel_solid.pair_gap). Between tubes: shapely's line distance less both radii over the pairs that must
    keep clear (kinematics.clearance.member_pairs). Ground: the lowest tube surface, z - radius."""
    from tiltopt.kinematics.clearance import evaluate_clearance, member_pairs, members_of
    from tiltopt.reports.marks import front_marks

    mech, model, res = _swept(name)
    geom = model.default_geometry
    fm = front_marks(model, geom, res)
    cr = evaluate_clearance(model, geom, res, None)
    mem = members_of(model)
    pairs = member_pairs(model, mem)
    for t in range(res.points.shape[1]):
        for l in range(res.points.shape[2]):
            P = res.points[0, t, l]
            secs = [_section(P[model.wheel_centre[w]], res.camber[0, t, l, w], geom.outer_radius[0, w],
                             geom.crown_radius[0, w], 0.5 * mech.wheels[w].hub_width_mm) for w in (0, 1)]
            assert fm.pair_mm[0, t, l] == pytest.approx(secs[0].distance(secs[1]), abs=2e-3)
            assert fm.pair_mm[0, t, l] == pytest.approx(cr.wheel_pair_mm[0, t, l], abs=1e-6)
            if len(pairs):
                g = [LineString([P[mem.ia[i]], P[mem.ib[i]]]).distance(LineString([P[mem.ia[j]], P[mem.ib[j]]]))
                     - mem.radius[i] - mem.radius[j] for i, j in pairs]
                assert fm.tubes_mm[0, t, l] == pytest.approx(min(g), abs=1e-6)
                assert math.dist(fm.tubes_p[0, t, l], fm.tubes_q[0, t, l]) == pytest.approx(min(g), abs=1e-6)
            z = min(min(P[a, 1], P[b, 1]) - rad for a, b, rad in zip(mem.ia, mem.ib, mem.radius))
            assert fm.ground_mm[0, t, l] == pytest.approx(z, abs=1e-9) == pytest.approx(cr.ground_mm[0, t, l, 1])


@pytest.mark.parametrize("name", NAMES)
def test_marks_are_the_three_d_clearance_at_steer_zero(name):
    """With no steer the 3-D search of the wheel solid (kinematics/wheel_solid.py) measures the same members:
    it reports a clearance actually reached, within its 0.1 mm tolerance above the true minimum, so it lies
    between the marks' exact figure and 0.1 mm above it."""
    from tiltopt.kinematics.clearance import evaluate_clearance
    from tiltopt.kinematics.wheel_solid import TOLERANCE_MM
    from tiltopt.reports.marks import front_marks

    mech = load_mechanism(CONFIGS / f"{name}.toml")
    # no steer: neither the fixed steer envelope nor the steer range a steering linkage reaches
    model = Model(replace(mech, steer_envelope=(), steering=None))
    res = sweep(model, None, [0.0, 10.0, 20.0, 30.0], [-30.0, 0.0, 30.0] if mech.springs else [0.0])
    fm = front_marks(model, model.default_geometry, res)
    cr = evaluate_clearance(model, None, res, None)
    # the marks are front-view figures: exact in 3-D where the wheel centres lie in the linkage plane, and
    # never above the 3-D clearance where a hub sits behind it (the sprung twin beam's 20 mm of trail)
    planar = all(abs(mech.x_of(w.centre) - mech.station_x_mm) < 1e-9 for w in mech.wheels)
    for kind, ref in (("other", cr.wheel_link_mm), ("carrier", cr.wheel_carrier_mm)):
        got = getattr(fm, f"{kind}_mm")
        assert np.all(ref >= got - 1e-9), kind
        if planar:
            assert np.all(ref <= got + TOLERANCE_MM + 1e-9), kind


def test_a_member_through_the_wheel_is_an_overlap():
    """A tube moved through the tyre's disc: the mark is negative, deeper than the tube radius (its axis
    inside the section), and the drawing labels it as an overlap."""
    from tiltopt.reports.drawing import mark_label
    from tiltopt.reports.marks import _segment_to_section, section_pieces

    quads, discs = section_pieces(np.array(0.0), np.array(250.0), np.array(0.0), np.array(250.0), np.array(23.0),
                                  np.array(35.0))
    a, b = np.array([-100.0, 100.0]), np.array([100.0, 100.0])     # crosses the disc 150 mm below its centre
    v, q, p = _segment_to_section(a, b, quads, discs, np.array(23.0))
    # the disc at 150 mm from the axle is w = 35 - (35 - 23) 150 / 227 mm wide either side (docs/domain.md);
    # the deepest point, on the wheel plane, lies w cos(a) from the disc's slanted sides (a: their slope)
    w = 35.0 - 12.0 * 150.0 / 227.0
    assert float(v) == pytest.approx(-w * math.cos(math.atan2(12.0, 227.0)), abs=1e-6)
    assert mark_label({"mm": float(v) - 12.7}).startswith("overlap ")


def test_sheet_drawing_labels_are_the_marks(tmp_path):
    """The lean-limit drawing of the build sheet labels each mark with its value in mm (one decimal), the
    same figures as the sheet's clearance table; it has a scale bar and a legend."""
    from tiltopt.reports.analysis import analyse, lean_grid
    from tiltopt.reports.sheet import SheetInputs, write_sheet

    mech = load_mechanism(CONFIGS / "wishbone_rocker.toml")
    paths = write_sheet(tmp_path, SheetInputs(mech=mech, lean_limit_deg=30.0, travel_mm=[-30.0, 0.0, 30.0]))
    text = paths["sheet"].read_text(encoding="utf-8")
    model = Model(mech)
    an = analyse(model, model.default_geometry, lean_grid(30.0), [-30.0, 0.0, 30.0], want_sizing=False)
    from tiltopt.reports.marks import drawn

    expect = drawn(an.marks.state(0, 1, len(an.sweep.lean_deg) - 1))
    got = re.findall(r'<g class="mark" data-kind="(\w+)"(?: data-wheel="(\d)")? data-mm="([-\d.]+)">.*?'
                     r'paint-order="stroke">([^<]+)</text>', text, re.S)
    assert [(k, float(v)) for k, _, v, _ in got] == [(m["kind"], m["mm"]) for m in expect]
    assert all(lab == (f"{float(v):.1f} mm" if float(v) >= 0 else f"overlap {-float(v):.1f} mm")
               for _, _, v, lab in got)
    assert text.count('class="scalebar"') == 2 and text.count('<g class="legend"') == 2
    # the clearance table's straight-ahead columns hold the same figures at that state (smallest of the wheels)
    other = min(m["mm"] for m in expect if m["kind"] == "other")
    assert f"{other:.1f}" in text
