"""Templates: batched geometry, symmetry, pin partners, hub heights, template_from_mechanism."""
from __future__ import annotations

import json
import tomllib

import numpy as np
import pytest

from tests.helpers import CONFIGS
from tiltopt.base.errors import InputError
from tiltopt.kinematics.mechanism import load_mechanism, mechanism_to_toml, parse_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sweep import sweep
from tiltopt.problems.templates import TEMPLATES, Template, _swap_lr, get_template, template_from_mechanism

ALL = list(TEMPLATES)


def _random_x(t: Template, n: int, seed: int = 0) -> np.ndarray:
    return np.random.default_rng(seed).uniform(t.xl, t.xu, (n, t.n_var))


@pytest.mark.parametrize("name", ALL)
def test_geometry_matches_mechanism_for(name):
    # Independent path: mechanism_for(x) -> the mechanism file's own validator (pins coincide,
    # tyres touch the ground: docs/domain.md z_c = (R - r) cos(gamma) + r) -> Model.geometry_from.
    t = get_template(name, variables=None)
    X = _random_x(t, 6)
    g = t.geometry(X)
    assert g.points.shape == (6, len(t.model.point_refs), 2)
    for i, x in enumerate(X):
        mech = t.mechanism_for(x)
        checked = parse_mechanism(tomllib.loads(mechanism_to_toml(mech)), "<roundtrip>")
        ref = Model(checked).default_geometry
        np.testing.assert_allclose(g.points[i], ref.points[0], atol=1e-9)
        np.testing.assert_allclose(g.outer_radius[i], ref.outer_radius[0], atol=1e-12)


@pytest.mark.parametrize("name", ALL)
def test_symmetric_point_sets(name):
    # Mirror symmetry about the centre plane (exact): each point's left/right partner sits at (-y, z).
    t = get_template(name)
    g = t.geometry(_random_x(t, 20, seed=3))
    idx = t.model.point_index
    for ref, i in idx.items():
        body, pt = ref.split(".")
        j = idx[f"{_swap_lr(body)}.{_swap_lr(pt)}"]
        np.testing.assert_allclose(g.points[:, j, 0], -g.points[:, i, 0], atol=1e-9)
        np.testing.assert_allclose(g.points[:, j, 1], g.points[:, i, 1], atol=1e-9)


def test_symmetric_design_leans_mirrored():
    # Closed form from mirror symmetry: a symmetric design leaned to -phi is the mirror image of the
    # design leaned to +phi, so heave and track change are even in phi and camber error is odd.
    t = get_template("wishbone_rocker")
    g = t.geometry(t.defaults[None])
    r = sweep(t.model, g, [-20.0, -10.0, 0.0, 10.0, 20.0], [0.0])
    assert r.converged.all()
    np.testing.assert_allclose(r.heave[0, 0, ::-1], r.heave[0, 0], atol=1e-7)
    np.testing.assert_allclose(r.track_change[0, 0, ::-1], r.track_change[0, 0], atol=1e-7)
    # left wheel at -phi mirrors the right wheel at +phi
    np.testing.assert_allclose(r.camber_error[0, 0, ::-1, 0], -r.camber_error[0, 0, :, 1], atol=1e-9)


@pytest.mark.parametrize("name", ALL)
def test_pin_partners_coincide(name):
    # docs/domain.md: the two points of a pin coincide in the design position, for every candidate.
    t = get_template(name)
    g = t.geometry(_random_x(t, 30, seed=5))
    idx = t.model.point_index
    for pin in t.mechanism.pins:
        np.testing.assert_allclose(g.points[:, idx[pin.a]], g.points[:, idx[pin.b]], atol=1e-9)


def test_twin_beam_variables_closed_form():
    # Exact by the variable definitions: outer pivots at +-outer_pivot_y, hubs at
    # +-(outer_pivot_y + wheel_offset); the design track is 2 (outer_pivot_y + wheel_offset) for
    # zero camber (docs/domain.md contact point under the hub).
    t = get_template("twin_beam")
    names = t.names
    x = t.defaults
    x[names.index("outer_pivot_y")] = 355.0
    x[names.index("wheel_offset")] = -12.5
    x[names.index("lower_pivot_z")] = 180.0
    x[names.index("beam_spacing")] = 260.0
    m = t.mechanism_for(x)
    assert m.point("upper_beam.right_end") == (355.0, 440.0)
    assert m.point("upper_beam.left_end") == (-355.0, 440.0)
    assert m.point("upright_left.bottom") == (-355.0, 180.0)
    assert m.point("chassis.upper_pivot") == (0.0, 440.0)
    assert m.point("upright_right.hub") == pytest.approx((342.5, 250.0))
    assert m.point("upright_left.hub") == pytest.approx((-342.5, 250.0))


def test_wheel_radius_keeps_tyre_on_ground():
    # docs/domain.md: a toroidal tyre touches flat ground with its centre at (R - r) cos(gamma) + r.
    t = get_template("twin_beam", variables=["outer_pivot_y", "wheel_radius"])
    x = np.array([[300.0, 203.0], [320.0, 330.0]])
    g = t.geometry(x)
    hub = g.points[:, t.model.wheel_centre, 1]
    need = (g.outer_radius - g.crown_radius) * np.cos(g.static_camber) + g.crown_radius
    np.testing.assert_allclose(hub, need, atol=1e-9)
    np.testing.assert_allclose(g.outer_radius[:, 0], [203.0, 330.0])
    held = get_template("twin_beam", fixed={"wheel_radius": 230.0})
    assert held.mechanism.wheels[0].outer_radius_mm == 230.0
    assert held.mechanism.point("upright_right.hub")[1] == pytest.approx(230.0)
    assert "wheel_radius" not in held.names


def test_roundtrip_to_dict():
    t = get_template("twin_beam_sprung", bounds={"outer_pivot_y": (250.0, 400.0)}, fixed={"wheel_radius": 240.0})
    d = json.loads(json.dumps(t.to_dict()))
    t2 = Template.from_dict(d)
    assert t2.names == t.names
    np.testing.assert_array_equal(t2.xl, t.xl)
    X = _random_x(t, 5)
    np.testing.assert_array_equal(t2.geometry(X).points, t.geometry(X).points)


def test_bounds_and_names_validated():
    with pytest.raises(InputError, match="lower < upper"):
        get_template("twin_beam", bounds={"outer_pivot_y": (400.0, 300.0)})
    with pytest.raises(InputError) as e:
        get_template("twin_beam", bounds={"nope": (1.0, 2.0)})
    assert e.value.key == "template.bounds.nope"
    with pytest.raises(InputError, match="unknown template"):
        get_template("bicycle")
    with pytest.raises(InputError, match="both active and fixed"):
        get_template("twin_beam", variables=["outer_pivot_y"], fixed={"outer_pivot_y": 300.0})


def _ideal_mech():
    return load_mechanism(CONFIGS / "twin_beam.toml")


def test_template_from_mechanism_moves_partners():
    # A variable naming one right-side point moves its pin partner and both mirror images.
    mech = _ideal_mech()
    t = template_from_mechanism(mech, [
        {"name": "upper_y", "points": ["upper_beam.right_end"], "axis": "y", "lower": 250.0, "upper": 400.0},
        {"name": "hub_y", "points": ["upright_right.hub"], "axis": "y", "lower": 250.0, "upper": 420.0},
        {"name": "pivot_z", "points": ["chassis.upper_pivot"], "axis": "z", "lower": 350.0, "upper": 500.0},
    ])
    assert t.defaults.tolist() == [300.0, 350.0, 420.0]
    m = t.mechanism_for([333.0, 380.0, 470.0])
    assert m.point("upright_right.top") == (333.0, 420.0)
    assert m.point("upright_left.top") == (-333.0, 420.0)
    assert m.point("upper_beam.left_end") == (-333.0, 420.0)
    assert m.point("upper_beam.centre") == (0.0, 470.0)      # pin partner of the chassis pivot
    assert m.point("lower_beam.right_end") == (300.0, 220.0)  # not named: unchanged
    assert m.point("upright_left.hub") == (-380.0, 250.0)


def test_template_from_mechanism_rejects_bad_rules():
    mech = _ideal_mech()
    base = {"lower": 0.0, "upper": 10.0}
    with pytest.raises(InputError, match="centre plane"):
        template_from_mechanism(mech, [{"name": "a", "points": ["chassis.upper_pivot"], "axis": "y", **base}])
    with pytest.raises(InputError, match="wheel centre"):
        template_from_mechanism(mech, [{"name": "a", "points": ["upright_right.hub"], "axis": "z", **base}])
    with pytest.raises(InputError) as e:
        template_from_mechanism(mech, [{"name": "a", "points": ["upright_right.hub"], "axis": "y", "step": 1,
                                        **base}], src="cfg.toml")
    assert e.value.key == "template.variables[0].step" and e.value.source == "cfg.toml"
    with pytest.raises(InputError, match="lower < upper"):
        template_from_mechanism(mech, [{"name": "a", "points": ["upright_right.hub"], "axis": "y",
                                        "lower": 5.0, "upper": 5.0}])
    asym = mech.with_points({"upright_right.hub": (351.0, 250.0)})
    with pytest.raises(InputError, match="symmetric"):
        template_from_mechanism(asym, [{"name": "a", "points": ["upright_right.hub"], "axis": "y", **base}])


def test_check_geometry_flags_broken_slider():
    # A rule that moves a slider's runner off its guide line is invalid geometry (a reason, no exception).
    mech = load_mechanism(CONFIGS / "twin_beam_sprung.toml")
    t = template_from_mechanism(mech, [
        {"name": "runner_y", "points": ["leg_right.runner"], "axis": "y", "lower": 280.0, "upper": 320.0}])
    ok, why = t.check_geometry(t.geometry(np.array([[300.0], [310.0]])))
    assert ok.tolist() == [True, False]
    assert why[0] == "" and "slider leg_right_guide" in why[1] and "10.00 mm off" in why[1]


def test_builtin_defaults_describe_the_base_mechanisms():
    # The variable files' defaults must be the base mechanisms' own figures (read off the files).
    for name in ("twin_beam", "twin_beam_sprung"):
        m = load_mechanism(CONFIGS / f"{name}.toml")
        t = get_template(name)
        d = dict(zip(t.names, t.defaults))
        hub = "leg_right.hub" if name.endswith("sprung") else "upright_right.hub"
        assert d["outer_pivot_y"] == m.point("upper_beam.right_end")[0]
        assert d["wheel_offset"] == m.point(hub)[0] - m.point("upper_beam.right_end")[0]
        assert d["lower_pivot_z"] == m.point("chassis.lower_pivot")[1]
        assert d["beam_spacing"] == m.point("chassis.upper_pivot")[1] - m.point("chassis.lower_pivot")[1]
    # the wishbone template is built round the parallelogram: its defaults are relative quantities,
    # read off the base mechanism here by hand
    t = get_template("wishbone_rocker")
    m = t.mechanism
    d = dict(zip(t.names, t.defaults))
    li, ui = m.point("chassis.lower_right_pivot"), m.point("chassis.upper_right_pivot")
    lo, uo = m.point("lower_arm_right.outer"), m.point("upper_arm_right.outer")
    assert (d["lower_inner_y"], d["lower_inner_z"]) == li
    assert (d["inner_split"], d["inner_spacing"]) == (ui[0] - li[0], ui[1] - li[1])
    assert (d["arm_span"], d["arm_rise"]) == (lo[0] - li[0], lo[1] - li[1])
    # the deviations from the parallelogram: the upper arm's vector minus the lower one's
    assert (d["outer_split_delta"], d["outer_spacing_delta"]) == (uo[0] - ui[0] - (lo[0] - li[0]),
                                                                  uo[1] - ui[1] - (lo[1] - li[1])) == (0.0, 0.0)
    assert d["wheel_offset"] == m.point("upright_right.hub")[0] - lo[0]
    mount = m.point("lower_arm_right.spring_mount")
    assert (d["spring_mount_y"], d["spring_mount_z"]) == (mount[0] - li[0], mount[1] - li[1])
    assert d["rocker_half_length"] == m.point("rocker.right_end")[0]
