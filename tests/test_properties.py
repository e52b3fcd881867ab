"""Property tests (hypothesis) on random valid mechanisms.

References: Python's tomllib as the independent TOML reader for the round trip,
and the mirror symmetry of plane kinematics (reflecting y -> -y maps a state
at lean phi onto a state of the mirrored linkage at lean -phi; exact, derived
in the test docstring).
"""
from __future__ import annotations

import dataclasses
import tomllib

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.helpers import hub_height, mech_of, sprung_twin_beam, twin_beam, wishbone_rocker
from tiltopt.kinematics.mechanism import mechanism_to_toml, mirror, parse_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sweep import sweep

FAST = settings(max_examples=25, deadline=None)


def length(lo, hi):
    return st.floats(min_value=lo, max_value=hi, allow_nan=False, allow_infinity=False)


@st.composite
def twin_beams(draw, sprung=False):
    kw = dict(
        w_left=draw(length(200.0, 380.0)), w_right=draw(length(200.0, 380.0)),
        e_left=draw(length(0.0, 80.0)), e_right=draw(length(0.0, 80.0)),
        pivot_y=draw(length(-30.0, 30.0)),
        z_lower=draw(length(280.0, 340.0)),
        R_left=draw(length(200.0, 300.0)), R_right=draw(length(200.0, 300.0)),
        r_left=draw(length(0.0, 40.0)), r_right=draw(length(0.0, 40.0)),
    )
    kw["z_upper"] = kw["z_lower"] + draw(length(120.0, 260.0))
    d = sprung_twin_beam(leg_drop=draw(length(0.0, 15.0)), **kw) if sprung else twin_beam(**kw)
    for w in d["wheels"]:                      # a static camber of its own on each wheel
        c = draw(st.one_of(st.just(0.0), length(-6.0, 6.0)))
        w["static_camber_deg"] = c
        body, pt = w["centre"].split(".")
        d["bodies"][body][pt][1] = hub_height(w["outer_radius_mm"], w["crown_radius_mm"], c)
    return d


@st.composite
def wishbones(draw):
    ui = (draw(length(40.0, 100.0)), draw(length(400.0, 460.0)))
    uo = (draw(length(260.0, 320.0)), draw(length(380.0, 430.0)))
    li = (draw(length(30.0, 90.0)), draw(length(180.0, 230.0)))
    lo = (draw(length(280.0, 330.0)), draw(length(150.0, 190.0)))
    return wishbone_rocker(upper_inner=ui, upper_outer=uo, lower_inner=li, lower_outer=lo,
                           hub_y=draw(length(330.0, 380.0)), rocker_z=draw(length(520.0, 600.0)),
                           rocker_half=draw(length(90.0, 180.0)), mount_frac=draw(length(0.3, 0.8)),
                           R=draw(length(200.0, 300.0)), r=draw(length(5.0, 40.0)))


any_mechanism = st.one_of(twin_beams(), twin_beams(sprung=True), wishbones())


@FAST
@given(any_mechanism, st.text(alphabet="abc xyz-_\"\\", max_size=20), length(-500.0, 500.0))
def test_file_round_trip_is_exact(data, description, station):
    data = dict(data, description=description, station_x_mm=station)
    mech = mech_of(data)
    text = mechanism_to_toml(mech, header="written by a test\nsecond line")
    back = parse_mechanism(tomllib.loads(text), "<round trip>")    # tomllib: Python's own TOML reader
    assert back == mech
    # the file holds every coordinate bit for bit
    for b, pts in mech.bodies.items():
        for p, yz in pts.items():
            assert back.bodies[b][p] == yz
    # writing again gives the same text
    assert mechanism_to_toml(back, header="written by a test\nsecond line") == text


@FAST
@given(any_mechanism)
def test_mirror_twice_is_identity(data):
    mech = mech_of(data)
    twice = mirror(mirror(mech))
    assert dataclasses.replace(twice, name=mech.name) == mech
    # the mirror is itself a valid mechanism file
    assert parse_mechanism(tomllib.loads(mechanism_to_toml(mirror(mech)))) == mirror(mech)


def _check_mirrored(mech, leans, travels):
    """Mirror symmetry (exact): reflect y -> -y. A state of the linkage at lean phi is a state of the
    mirror at lean -phi with left and right swapped; so track, track change, scrub and heave are
    equal; camber errors swap and change sign (gamma'_L = -gamma_R, phi' = -phi); the lean-point
    offset and contact y change sign, contact z is kept."""
    mir = mirror(mech)
    a = sweep(Model(mech), lean_deg=leans, travel_mm=travels)
    b = sweep(Model(mir), lean_deg=[-v for v in leans], travel_mm=travels)
    np.testing.assert_array_equal(a.converged, b.converged)
    assert a.converged[0, travels.index(0.0), leans.index(0.0)]
    tol = dict(atol=1e-8, rtol=0)
    np.testing.assert_allclose(b.track, a.track, **tol)
    np.testing.assert_allclose(b.track_change, a.track_change, **tol)
    np.testing.assert_allclose(b.scrub, a.scrub, **tol)
    np.testing.assert_allclose(b.heave, a.heave, **tol)
    np.testing.assert_allclose(b.camber_error[..., 0], -a.camber_error[..., 1], **tol)
    np.testing.assert_allclose(b.camber_error[..., 1], -a.camber_error[..., 0], **tol)
    np.testing.assert_allclose(b.lean_point_offset, -a.lean_point_offset, **tol)
    np.testing.assert_allclose(b.contact[..., 0, 0], -a.contact[..., 1, 0], **tol)
    np.testing.assert_allclose(b.contact[..., 1, 0], -a.contact[..., 0, 0], **tol)
    names_a, names_b = a.model.spring_names, b.model.spring_names
    for k, n in enumerate(names_a):
        swapped = n.replace("left", "\0").replace("right", "left").replace("\0", "right")
        np.testing.assert_allclose(b.spring_length[..., names_b.index(swapped)], a.spring_length[..., k], **tol)
    return a


LEANS = [-25.0, -10.0, 0.0, 10.0, 25.0]


@FAST
@given(twin_beams())
def test_mirrored_rigid_twin_beam_gives_mirrored_metrics(data):
    res = _check_mirrored(mech_of(data), LEANS, [0.0])
    assert res.converged.all()


@FAST
@given(twin_beams(sprung=True))
def test_mirrored_sprung_twin_beam_gives_mirrored_metrics(data):
    _check_mirrored(mech_of(data), LEANS, [-15.0, 0.0, 15.0])


@FAST
@given(wishbones())
def test_mirrored_wishbone_gives_mirrored_metrics(data):
    _check_mirrored(mech_of(data), LEANS, [-15.0, 0.0, 15.0])



def _shuffled(data: dict, rng) -> dict:
    """The same linkage written in another order: bodies, points, joints permuted, pin ends swapped."""
    out = dict(data)
    names = list(data["bodies"])
    rng.shuffle(names)
    bodies = {}
    for b in names:
        pts = list(data["bodies"][b].items())
        rng.shuffle(pts)
        bodies[b] = dict(pts)
    out["bodies"] = bodies
    for key in ("pins", "links", "springs", "sliders"):
        if key in data:
            items = [dict(t) for t in data[key]]
            rng.shuffle(items)
            if key in ("pins", "links"):
                for t in items:
                    if rng.random() < 0.5:
                        t["a"], t["b"] = t["b"], t["a"]
            out[key] = items
    return out


def _same_metrics(a, b, tol=1e-8):
    np.testing.assert_array_equal(a.converged, b.converged)
    for name in ("track", "track_change", "scrub", "heave", "lean_point_offset", "camber_error", "contact"):
        np.testing.assert_allclose(getattr(b, name), getattr(a, name), atol=tol, rtol=0, err_msg=name)
    for k, n in enumerate(a.model.spring_names):           # by name: the file order may differ
        np.testing.assert_allclose(b.spring_length[..., b.model.spring_names.index(n)], a.spring_length[..., k],
                                   atol=tol, rtol=0, err_msg=n)
    for k, n in enumerate(a.model.body_names):
        np.testing.assert_allclose(b.body_angle[..., b.model.body_names.index(n)], a.body_angle[..., k],
                                   atol=1e-10, rtol=0, err_msg=n)


@FAST
@given(any_mechanism, st.integers(0, 2**32 - 1))
def test_file_order_does_not_change_metrics(data, seed):
    """Writing the same linkage in another order is the same linkage (exact: the equations are the
    same set)."""
    rng = np.random.default_rng(seed)
    shuffled = _shuffled(data, rng)
    a = sweep(Model(mech_of(data)), lean_deg=LEANS, travel_mm=[-10.0, 0.0, 10.0])
    b = sweep(Model(mech_of(shuffled)), lean_deg=LEANS, travel_mm=[-10.0, 0.0, 10.0])
    _same_metrics(a, b)


@pytest.mark.parametrize("description", ["first line\nsecond line", "bell\x07", "del\x7f"],
                         ids=["newline", "bell", "del"])
def test_round_trip_of_descriptions_with_control_characters(description):
    mech = mech_of(dict(twin_beam(), description=description))
    # TOML 1.0 (toml.io, "Basic strings"): control characters other than tab must be escaped
    back = parse_mechanism(tomllib.loads(mechanism_to_toml(mech)), "<round trip>")
    assert back == mech


@FAST
@given(st.one_of(twin_beams(), twin_beams(sprung=True)))
def test_random_twin_beams_match_reference_solver(data):
    """Random (asymmetric) twin beams at ride height against the independent scalar solver."""
    from tests.test_kinematics_reference import compare
    assert compare(mech_of(data), [-20.0, 0.0, 15.0, 30.0], [0.0], tolerate_fold_jumps=True) >= 1


@FAST
@given(wishbones())
def test_random_wishbones_match_reference_solver(data):
    """Random symmetric wishbone-rocker linkages with travel against the independent scalar solver."""
    from tests.test_kinematics_reference import compare
    assert compare(mech_of(data), [-15.0, 0.0, 10.0, 25.0], [-10.0, 0.0, 10.0], tolerate_fold_jumps=True) >= 1
