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
from hypothesis import given, settings, strategies as st

from conftest import mech_of, sprung_twin_beam, twin_beam, wishbone_rocker
from kinematics.mechanism import mechanism_to_toml, mirror, parse_mechanism
from kinematics.model import Model
from kinematics.sweep import sweep

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
    if sprung:
        return sprung_twin_beam(leg_drop=draw(length(0.0, 15.0)), **kw)
    return twin_beam(**kw)


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

