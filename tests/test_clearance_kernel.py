"""The compiled clearance kernel against the numpy reference path and the shell's numpy distances.

Reference: the numpy implementation in kinematics/clearance.py (``ClearanceSettings(kernel='numpy')``)
and kinematics/shell.py, which tests/test_clearance.py and tests/test_shell.py check against closed
forms, scipy and shapely. The kernel runs the same search in double precision; the numpy path
evaluates its coarse grid in single precision (about 1e-4 mm here), so the error estimates, which
are built from the coarse samples, agree to 1e-3 mm, and the reached minima to rounding.
"""
from __future__ import annotations

import tomllib

import numpy as np
import pytest

from tests.helpers import CONFIGS
from tiltopt.kinematics import clearance_kernel as K
from tiltopt.kinematics.clearance import ClearanceSettings, _shell_tables, evaluate_clearance
from tiltopt.kinematics.mechanism import parse_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.shell import (
    load_shell,
    polygon_distance,
    polygon_sections,
    shell_signed_distance,
    superellipse_distance,
    superellipse_distance_lower_bound,
)
from tiltopt.kinematics.sweep import sweep

VALUE_TOL = 1e-9      # mm: reached minima (same arithmetic, rounding only)
ERROR_TOL = 1e-3      # mm: error estimates (numpy's coarse grid is single precision)


def _demo_model():
    """The benchmark's mechanism: wishbone-rocker demo, steer envelope, a 25 mm tube on each wishbone."""
    d = tomllib.loads((CONFIGS / "wishbone_rocker.toml").read_text())
    d["steer_envelope"] = {"lean_deg": [0.0, 20.0, 40.0], "max_steer_deg": [25.0, 10.0, 4.0]}
    d["segments"] = [{"name": f"{b}_tube", "body": b, "a": "inner", "b": "outer", "tube_od_mm": 25.0}
                     for b in ("upper_arm_left", "upper_arm_right", "lower_arm_left", "lower_arm_right")]
    return Model(parse_mechanism(d, "<test>"))


@pytest.fixture(scope="module")
def demo():
    model = _demo_model()
    rng = np.random.default_rng(1)
    pts = np.repeat(model.default_geometry.points, 6, 0).copy()
    pts[..., 0] *= rng.uniform(0.95, 1.05, size=(6, 1))          # lateral scale, as the benchmark
    geom = model.batch_geometry(pts)
    sr = sweep(model, geom, np.arange(-10.0, 40.1, 5.0), [-30.0, 0.0, 30.0])
    assert sr.converged.all()
    return model, geom, sr


def _polygon_demo_shell(vertices=(160, 200, 200, 160, 120)):
    """The demo shell's superellipse sections as CAD-like polygons, with different vertex counts."""
    return polygon_sections(load_shell(CONFIGS / "shell_demo.toml"), vertices)


def _compare(a, b, min_share=1.0):
    """Fast result a against the numpy reference b.

    The coordinate search stops where the steer direction is flat to rounding (a crown point on the
    steering axis); which path then steps on depends on its last bit. So at coarse samplings the two
    paths may stop in different places: each is still a reached distance, and the two differ by less
    than the larger of their error estimates. ``min_share`` of the items must agree to rounding.
    """
    # (the wheel solid against members runs in one compiled search for both settings: tests/test_wheel_solid.py
    # holds it to independent references)
    for k in ("wheel_shell",):
        va, vb = getattr(a, k + "_mm"), getattr(b, k + "_mm")
        ea, eb = getattr(a, k + "_error_mm"), getattr(b, k + "_error_mm")
        np.testing.assert_array_equal(np.isnan(va), np.isnan(vb), err_msg=k)     # states not converged
        same = (np.isclose(va, vb, rtol=0, atol=VALUE_TOL, equal_nan=True)
                & np.isclose(ea, eb, rtol=0, atol=ERROR_TOL, equal_nan=True))
        assert same.mean() >= min_share, (k, same.mean())
        fin = np.isfinite(va)
        assert np.all(np.abs(va - vb)[fin] <= np.maximum(ea, eb)[fin] + VALUE_TOL), k
    for k in ("ground_mm", "overall_width_mm", "inside_violation_mm", "outside_violation_mm"):
        np.testing.assert_array_equal(getattr(a, k), getattr(b, k), err_msg=k)
    # slots: the compiled root finder on polygon sections differs from numpy's by rounding only
    np.testing.assert_allclose(a.slot_length_mm, b.slot_length_mm, rtol=0, atol=VALUE_TOL, equal_nan=True)
    if min_share == 1.0:
        np.testing.assert_array_equal(a.wheel_link_member, b.wheel_link_member)
        # a steer may differ only where the clearance does not depend on it (a tie of the two paths)
        for k, v in (("wheel_shell_steer_deg", "wheel_shell_mm"),):
            assert np.all(np.isclose(getattr(a, k), getattr(b, k), atol=1e-6, equal_nan=True)
                          | np.isclose(getattr(a, v), getattr(b, v), rtol=0, atol=VALUE_TOL)), k


@pytest.mark.parametrize("shell_kind", ["superellipse", "polygon"])
def test_compiled_kernel_matches_the_numpy_path_on_the_demo(demo, shell_kind):
    model, geom, sr = demo
    shell = load_shell(CONFIGS / "shell_demo.toml") if shell_kind == "superellipse" else _polygon_demo_shell()
    fast = evaluate_clearance(model, geom, sr, shell, ClearanceSettings())
    ref = evaluate_clearance(model, geom, sr, shell, ClearanceSettings(kernel="numpy"))
    _compare(fast, ref)


@pytest.mark.parametrize("settings", [dict(crown_samples=6, steer_samples=2, refine_iterations=0),
                                      dict(crown_samples=8, steer_samples=1, refine_iterations=2),
                                      dict(crown_samples=36, steer_samples=5, refine_iterations=10)])
def test_compiled_kernel_matches_the_numpy_path_at_other_samplings(demo, settings):
    model, geom, sr = demo
    shell = load_shell(CONFIGS / "shell_demo.toml")
    fast = evaluate_clearance(model, geom, sr, shell, ClearanceSettings(**settings))
    ref = evaluate_clearance(model, geom, sr, shell, ClearanceSettings(kernel="numpy", **settings))
    _compare(fast, ref, min_share=0.9)


def test_kernel_point_distances_match_the_shell_module():
    rng = np.random.default_rng(5)
    for a, b, n in ((200.0, 340.0, 2.5), (150.0, 150.0, 2.0), (250.0, 180.0, 8.0), (110.0, 200.0, 2.2)):
        p = rng.uniform(-2.0, 2.0, (300, 2)) * [a, b]
        d = superellipse_distance(p[:, 0], p[:, 1], a, b, n)
        lb = superellipse_distance_lower_bound(p[:, 0], p[:, 1], a, b, n)
        for (y, z), di, li in zip(p, d, lb):
            assert K.superellipse_distance(y, z, a, b, n) == pytest.approx(di, abs=1e-9)
            assert K.superellipse_lower_bound(y, z, a, b, n) == pytest.approx(li, abs=1e-9)
        for j in range(len(p) - 1):       # two points side by side: each as alone
            y1, z1 = p[j]
            y2, z2 = p[j + 1]
            assert K.superellipse_distance_pair(y1, z1, a, b, n, y2, z2, a, b, n * 1.1) == (
                K.superellipse_distance(y1, z1, a, b, n), K.superellipse_distance(y2, z2, a, b, n * 1.1))
    # whole shells, end caps included: points in and beyond the station range
    for shell in (load_shell(CONFIGS / "shell_demo.toml"), _polygon_demo_shell()):
        p = rng.uniform([-2000.0, -500.0, -100.0], [800.0, 500.0, 1200.0], (400, 3))
        ref = shell_signed_distance(shell, p[:, 1:], p[:, 0])
        mode, tab, outlines, _, _ = _shell_tables(shell)
        for (x, y, z), r in zip(p, ref):
            if mode == K.SHELL_SUPERELLIPSE:
                got = K.superellipse_shell_distance(tab, y, z, x, False)
            else:
                got = K.polygon_shell_distance(tab[:, 0], outlines, y, z, x, 0.0)
            assert got == pytest.approx(r, abs=1e-9)
    # one polygon section against tiltopt.kinematics.shell.polygon_distance (itself checked against shapely)
    shell = _polygon_demo_shell((40, 40, 40, 40, 40))
    p = rng.uniform([-400.0, 0.0], [400.0, 1100.0], (200, 2))
    ref = polygon_distance(p[:, 0], p[:, 1], shell.outlines[1])
    one = np.ascontiguousarray(shell.outlines[[1, 1]])
    for (y, z), r in zip(p, ref):
        assert K.polygon_shell_distance(np.array([-1e4, 1e4]), one, y, z, 0.0, 0.0) == pytest.approx(r, abs=1e-9)


def test_kernel_setting_is_checked():
    with pytest.raises(ValueError, match="kernel"):
        ClearanceSettings(kernel="gpu")


def test_compiled_slot_root_and_levels_match_numpy_on_a_polygon_shell():
    from tiltopt.kinematics.clearance import _level_compiled, _root, _root_compiled
    from tiltopt.kinematics.shell import inside_level

    shell = _polygon_demo_shell()
    rng = np.random.default_rng(11)
    a = rng.uniform([-150.0, 300.0], [150.0, 700.0], (60, 4, 2))      # tube ends inside the section ...
    b = rng.uniform([-500.0, 0.0], [500.0, 1000.0], (60, 4, 2))       # ... and anywhere around it
    ha, hb = inside_level(shell, a, 0.0), inside_level(shell, b, 0.0)
    np.testing.assert_allclose(_level_compiled(shell, a, 0.0), ha, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(_level_compiled(shell, b, 0.0), hb, rtol=1e-12, atol=1e-12)
    cross = ha * hb < 0
    assert cross.mean() > 0.3
    ref = _root(shell, a, b, ha, hb, 0.0, 20)
    got = _root_compiled(shell, a, b, ha, hb, 0.0, 20)
    np.testing.assert_allclose(got[cross], ref[cross], rtol=0, atol=1e-12)
    # the crossing is on the outline (level zero to the root finder's accuracy)
    p = a + (b - a) * got[..., None]
    assert np.max(np.abs(inside_level(shell, p, 0.0)[cross])) < 1e-6


@pytest.mark.parametrize("steer,kpi,caster", [(None, 0.0, 0.0), (15.0, 8.0, 5.0)])
def test_compiled_kernel_matches_the_numpy_path_on_the_twin_beam(steer, kpi, caster):
    # the ideal parallelogram twin beam of tests/helpers.py with a post and tubes to clear; with no
    # steer the search has one steer sample, with kingpin inclination and caster the axis is tilted
    from tests.helpers import twin_beam

    d = twin_beam()
    for w in d["wheels"]:
        w.update(kingpin_inclination_deg=kpi, caster_deg=caster)
    if steer is not None:
        d["steer_envelope"] = {"lean_deg": [0.0, 30.0], "max_steer_deg": [steer, steer / 3]}
    d["bodies"]["chassis"].update({"post_lo": [150.0, 0.0], "post_hi": [150.0, 600.0]})
    d["segments"] = [{"name": "post", "body": "chassis", "a": "post_lo", "b": "post_hi", "tube_od_mm": 20.0},
                     {"name": "beam", "body": "upper_beam", "a": "centre", "b": "right_end", "tube_od_mm": 30.0}]
    model = Model(parse_mechanism(d, "<test>"))
    # the rigid parallelogram has no travel: the bump states do not converge (NaN in both paths)
    sr = sweep(model, None, np.arange(-20.0, 30.1, 10.0), [-20.0, 0.0, 20.0])
    assert sr.converged[:, 1].all() and not sr.converged[:, 0].any()
    shell = load_shell(CONFIGS / "shell_demo.toml")
    fast = evaluate_clearance(model, None, sr, shell, ClearanceSettings())
    ref = evaluate_clearance(model, None, sr, shell, ClearanceSettings(kernel="numpy"))
    assert np.all(np.isfinite(fast.wheel_link_mm[sr.converged]))
    _compare(fast, ref)
