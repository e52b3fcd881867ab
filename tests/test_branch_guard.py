"""The continuation's trapezoid test (kinematics.kernel.branch_test) on a closed-form fold.

Reference: the normal form of a fold of a one-parameter curve, derived here. Near a simple fold
the solution curve of F(q, phi) = 0 is, to leading order, the parabola q = sigma,
phi = phi_f - a sigma^2 (sigma < 0: the branch that reaches the fold; sigma > 0: the branch that
turns back). On the first branch dq/dphi = 1 / (2 a |sigma|) grows without bound at the fold, so a
good step that ends just before it has a secant far below the plain mean of its end tangents;
the test must accept it however near the fold it ends, and must still reject a step that lands
on the returning branch.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from tiltopt.kinematics import kernel
from tiltopt.kinematics.sweep import BRANCH_JUMP_RATIO

A, PHI_F, H = 1.0, 0.3, 0.01          # curvature 2a at the fold; the step starts H before it


def on_curve(sigma, lc=1.0):
    """State, tangent dq/dphi and lean at sigma, in a coordinate whose scaled value is sigma.

    lc = 1: a translation (mm). Otherwise an angle q = sigma / lc on a lean phi = phi_f -
    a sigma^2 / lc, the same curve in the scaled coordinates (angles times lc)."""
    q = sigma / lc
    phi = PHI_F - A * sigma ** 2 / lc
    t = -1.0 / (2.0 * A * sigma)        # dq/dphi = (dq/dsigma) / (dphi/dsigma), the same for any lc
    return np.array([[q]]), np.array([[t]]), np.array([phi])


def ratio_of(s0, s1, lc=1.0):
    q0, t0, p0 = on_curve(s0, lc)
    q1, t1, p1 = on_curve(s1, lc)
    col_scale = np.array([[1.0 if lc == 1.0 else 1.0 / lc]])
    r, turned = kernel.branch_test(q1, t1, q0, t0, p0, p1, col_scale, np.array([lc]), np.array([0]))
    return float(r[0]), bool(turned[0])


@pytest.mark.parametrize("rest", [1e-2, 1e-4, 1e-8, 1e-12])
def test_a_step_that_ends_just_before_the_fold_passes(rest):
    """From H before the fold to rest * H before it, on the branch that reaches the fold."""
    s0, s1 = -math.sqrt(H / A), -math.sqrt(rest * H / A)
    ratio, turned = ratio_of(s0, s1)
    # the trapezoid rule along the arclength l of the step errs by about (l kappa)^2 / 12 with
    # l ~ sqrt(H / a) = 0.1 and kappa ~ 2 a: 0.003, whatever rest is
    assert ratio < 0.01 and not turned
    # the plain mean of the end tangents would have failed it: secant / mean = 4x / (1 + x)^2
    # with x = sqrt(rest) (closed form of the parabola), far from 1
    x = math.sqrt(rest)
    assert 4 * x / (1 + x) ** 2 < 0.4


def test_a_step_onto_the_returning_branch_fails():
    """From H before the fold to the other branch at H / 4 before it (a larger lean)."""
    ratio, turned = ratio_of(-math.sqrt(H / A), math.sqrt(H / 4 / A))
    assert turned and ratio > BRANCH_JUMP_RATIO


@pytest.mark.parametrize("s0,s1", [(-0.1, -1e-5), (-0.1, 0.05), (-0.3, -0.2)])
def test_angles_are_compared_in_scaled_units(s0, s1):
    """The same curve as an angle coordinate (and a lean) scaled by a characteristic length gives
    the same ratio: the test works in scaled coordinates, the lean included."""
    a = ratio_of(s0, s1)
    b = ratio_of(s0, s1, lc=250.0)
    assert b[0] == pytest.approx(a[0], rel=1e-9, abs=1e-12) and b[1] == a[1]
