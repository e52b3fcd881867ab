"""Toroidal tyre contact: the docs/domain.md formula against a direct minimisation over the torus.

Outside reference: scipy.optimize minimising the height of a point moving over
the torus surface (R, r) of a cambered wheel, i.e. the lowest point of the
tyre, which is where it touches flat ground.
"""
from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import minimize

from tests.helpers import hub_height, mech_of, twin_beam
from tiltopt.base.errors import InputError
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sweep import sweep


def torus_point(u, v, R, r, gamma):
    """A point of the torus of a wheel centred at the origin (x forward, y right, z up).

    The wheel plane holds x and the wheel's up direction n = (0, sin g, cos g)
    (camber g > 0: top toward +y); the axle is a = (0, cos g, -sin g).
    u runs round the wheel, v round the tyre section.
    """
    n = np.array([0.0, math.sin(gamma), math.cos(gamma)])
    a = np.array([0.0, math.cos(gamma), -math.sin(gamma)])
    ring = R - r + r * math.cos(v)
    return ring * (math.cos(u) * np.array([1.0, 0.0, 0.0]) + math.sin(u) * n) + r * math.sin(v) * a


def lowest_point(R, r, gamma):
    """Numerical minimum of z over the torus surface, from several starts."""
    best = None
    for u0 in (-math.pi / 2 - 0.3, -math.pi / 2, -math.pi / 2 + 0.3):
        for v0 in (-1.0, 0.0, 1.0):
            sol = minimize(lambda p: torus_point(p[0], p[1], R, r, gamma)[2], [u0, v0], method="BFGS",
                           options={"gtol": 1e-12})
            if best is None or sol.fun < best.fun:
                best = sol
    return torus_point(best.x[0], best.x[1], R, r, gamma)


@pytest.mark.parametrize("camber_deg", [-35.0, -12.0, 0.0, 3.0, 20.0, 44.0])
@pytest.mark.parametrize("R, r", [(250.0, 23.0), (305.0, 40.0), (250.0, 0.0)])
def test_contact_formula_matches_torus_minimum(camber_deg, R, r):
    g = math.radians(camber_deg)
    p = lowest_point(R, r, g)
    # scipy.optimize direct minimisation over the torus vs docs/domain.md:
    # centre height (R - r) cos(gamma) + r, contact (R - r) sin(gamma) toward -y
    assert -p[2] == pytest.approx((R - r) * math.cos(g) + r, abs=1e-7)
    assert p[1] == pytest.approx(-(R - r) * math.sin(g), abs=1e-5)
    assert p[0] == pytest.approx(0.0, abs=1e-5)
    if camber_deg > 0:  # a wheel leaning right has its contact left of its hub
        assert p[1] < 0


@pytest.mark.parametrize("lean", [10.0, 30.0])
def test_engine_contacts_are_the_torus_lowest_points(lean):
    """The contacts the sweep reports sit under each wheel where the torus touches the ground."""
    mech = mech_of(twin_beam(e_left=40.0, e_right=40.0, w_left=300.0, w_right=300.0))
    model = Model(mech)
    res = sweep(model, lean_deg=[0.0, lean], travel_mm=[0.0])
    assert res.converged.all()
    refs = list(model.point_refs)
    for k, side in enumerate(("left", "right")):
        hub = res.points[0, 0, 1, refs.index(f"upright_{side}.hub")]
        gamma = res.camber[0, 0, 1, k]
        p = lowest_point(250.0, 23.0, gamma)      # torus lowest point relative to the hub
        # scipy.optimize torus minimisation: the tyre touches z = 0 ...
        assert hub[1] + p[2] == pytest.approx(0.0, abs=1e-6)
        # ... at the reported contact point
        assert res.contact[0, 0, 1, k, 0] == pytest.approx(hub[0] + p[1], abs=1e-5)
        assert res.contact[0, 0, 1, k, 1] == pytest.approx(0.0, abs=1e-9)


def test_static_camber_design_height_is_the_torus_height(tmp_path):
    """A cambered wheel placed at the numerically found contact height is accepted, 1 mm off is not."""
    camber = 8.0
    p = lowest_point(250.0, 23.0, math.radians(camber))
    d = twin_beam()
    d["bodies"]["upright_left"]["hub"][1] = -p[2]
    d["bodies"]["upright_right"]["hub"][1] = -p[2]
    for w in d["wheels"]:
        w["static_camber_deg"] = camber
    assert -p[2] == pytest.approx(hub_height(250.0, 23.0, camber), abs=1e-7)  # scipy torus minimum
    mech_of(d)
    d["bodies"]["upright_left"]["hub"][1] = -p[2] + 1.0
    with pytest.raises(InputError, match="touch the ground"):
        mech_of(d)
