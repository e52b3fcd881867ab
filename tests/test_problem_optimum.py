"""Optimiser-level checks of the problem: front quality against a brute-force grid, the ideal
geometry as a known optimum, and the clearance and sizing objectives."""
from __future__ import annotations

import numpy as np
from pymoo.algorithms.moo.nsga2 import NSGA2
from pymoo.indicators.hv import HV
from pymoo.optimize import minimize

from tiltopt.problems.problem import TiltProblem
from tiltopt.problems.spec import parse_problem


def _non_dominated(F: np.ndarray) -> np.ndarray:
    """Plain numpy non-dominated filter for two minimised objectives.

    Sorted by (f1, f2), a point is non-dominated exactly when its f2 is below the smallest f2 of
    every point before it (duplicates are kept once).
    """
    F = np.unique(F, axis=0)                       # unique also sorts rows lexicographically
    prev_min = np.minimum.accumulate(np.r_[np.inf, F[:-1, 1]])
    return F[F[:, 1] < prev_min]


def test_nsga2_front_reaches_grid_hypervolume():
    # A two-variable sub-problem of the twin-beam template (beam half-length, stub axle), objectives
    # overall width and max scrub. Reference: the non-dominated set of a brute-force 81 x 81 grid;
    # hypervolume by pymoo.indicators.hv.HV at the grid front's nadir + 10 % of its range.
    spec = parse_problem({"template": {"name": "twin_beam", "variables": ["outer_pivot_y", "wheel_offset"]},
                          "objectives": ["overall_width", "max_scrub"], "envelope": {"lean_step_deg": 10.0}}, "c")
    p = TiltProblem(spec)
    g = np.linspace(0.0, 1.0, 81)
    A, B = np.meshgrid(p.xl[0] + g * (p.xu[0] - p.xl[0]), p.xl[1] + g * (p.xu[1] - p.xl[1]))
    ev = p.evaluate_designs(np.column_stack([A.ravel(), B.ravel()]))
    # small stub axles put the uprights through the wheels: those designs are infeasible
    assert 0.3 < ev.feasible.mean() < 1.0
    front = _non_dominated(ev.F[ev.feasible])
    ideal, nadir = front.min(0), front.max(0)
    hv = HV(ref_point=nadir + 0.1 * (nadir - ideal))
    res = minimize(p, NSGA2(pop_size=40), ("n_gen", 40), seed=1, verbose=False)
    assert res.G is not None and np.all(res.G <= 0)             # the final front is feasible
    assert hv(res.F) >= 0.98 * hv(front)


def test_ideal_parallelogram_is_found(tmp_path):
    # docs/domain.md: the ideal linkage (parallel, equal arms, outer pivots on the wheel planes above the
    # contacts) has zero scrub and zero heave at every lean. Built as tests.helpers.hub_centre_ideal it
    # clears its wheels; with the stub axle (hub y minus pivot y) as a variable whose bounds hold 0,
    # the NSGA-II front must hold a feasible design with max scrub and max heave under 1 mm, and that
    # design has its pivots on the wheel plane (the twin-beam closed form of test_problem: |scrub(30
    # deg)| ~ 0.27 |wheel_offset|, so |offset| < 4 mm).
    from tests.helpers import hub_centre_ideal
    from tiltopt.kinematics.mechanism import mechanism_to_toml, parse_mechanism

    (tmp_path / "ideal.toml").write_text(mechanism_to_toml(parse_mechanism(hub_centre_ideal(), "<t>")))
    spec = parse_problem({"template": {"mechanism": "ideal.toml", "variables": [
        {"name": "beam_y", "points": ["upper_beam.right_end", "lower_beam.right_end", "upright_right.hub"],
         "axis": "y", "lower": 280.0, "upper": 380.0},
        {"name": "wheel_offset", "points": ["upright_right.hub"], "axis": "y", "lower": -40.0, "upper": 40.0,
         "default": 0.0}]},
        "objectives": ["overall_width", "max_scrub", "max_heave"], "envelope": {"lean_step_deg": 10.0}},
        str(tmp_path / "c.toml"), tmp_path)
    p = TiltProblem(spec)
    ev = p.evaluate_designs(p.template.defaults[None])
    assert ev.feasible[0], ev.reason[0]
    assert ev.metrics["max_scrub_mm"][0] < 1e-9 and ev.metrics["max_heave_mm"][0] < 1e-9
    assert ev.metrics["max_camber_error_deg"][0] < 1e-9
    res = minimize(p, NSGA2(pop_size=40), ("n_gen", 40), seed=1, verbose=False)
    worst = res.F[:, 1:].max(1)
    i = int(np.argmin(worst))
    assert worst[i] < 1.0
    assert abs(res.X[i, spec.template.names.index("wheel_offset")]) < 4.0


# ------------------------------------------------------------------ clearance


def _shell_file(tmp_path, radius=300.0, centre_z=450.0):
    # A prism with a circular section (superellipse, exponent 2, a = b): its signed distance is
    # exactly hypot(y, z - zc) - radius inside the station range (closed form).
    text = "\n".join(f"[[stations]]\nx_mm = {x}\nhalf_width_mm = {radius}\nhalf_height_mm = {radius}\n"
                     f"centre_z_mm = {centre_z}\nexponent = 2.0\n" for x in (-1500.0, 1500.0))
    path = tmp_path / "shell.toml"
    path.write_text(text)
    return path


def test_clearance_objectives_and_pivot_constraint(tmp_path):
    from tiltopt.kinematics.clearance import evaluate_clearance
    from tiltopt.kinematics.sweep import sweep
    _shell_file(tmp_path)
    spec = parse_problem({"template": {"name": "twin_beam"}, "shell": "shell.toml",
                          "objectives": ["overall_width", "min_clearance", "slot_length"],
                          "envelope": {"lean_step_deg": 15.0},
                          "constraints": {"clearance_margin_mm": 5.0, "pivot_margin_mm": 20.0}},
                         str(tmp_path / "run.toml"), tmp_path)
    assert {"clearance", "pivots_inside_shell", "shell_roles"} <= set(spec.constraints)
    p = TiltProblem(spec)
    X = np.random.default_rng(4).uniform(p.xl, p.xu, (12, p.n_var))
    ev = p.evaluate_designs(X)
    assert np.isfinite(ev.F).all() and np.isfinite(ev.G).all()
    # the adapter passes the clearance part's figures through unchanged (min_clearance negated)
    g = spec.template.geometry(X)
    summ = evaluate_clearance(p.model, g, sweep(p.model, g, spec.envelope.lean_deg, spec.envelope.travel_mm),
                              spec.shell).summary()
    np.testing.assert_allclose(ev.F[:, 1], -np.asarray(summ["min_clearance_mm"]), rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(ev.F[:, 2], summ["total_slot_length_mm"], rtol=1e-9, atol=1e-9)
    assert np.all(ev.metrics["lean_sweep_width_mm"] >= ev.metrics["overall_width_mm"] - 1e-9)
    k = list(spec.constraints).index("clearance")
    # G: the margin minus the conservative clearance, over the constraint's scale (10 mm)
    np.testing.assert_allclose(ev.G[:, k], (5.0 - ev.metrics["min_clearance_lower_mm"]) / 10.0, atol=1e-9)
    # chassis pivots (0, lower_pivot_z) and (0, lower_pivot_z + beam_spacing): circle closed form
    zl = X[:, 2]
    zu = zl + X[:, 3]
    d = np.maximum(np.abs(zl - 450.0), np.abs(zu - 450.0)) - 300.0
    np.testing.assert_allclose(ev.metrics["pivot_shell_distance_mm"], d, atol=1e-6)
    k = list(spec.constraints).index("pivots_inside_shell")
    np.testing.assert_allclose(ev.G[:, k], (d + 20.0) / 10.0, atol=1e-6)


# ------------------------------------------------------------------ sizing
VEHICLE = {"total_mass_kg": 205.0, "com_height_mm": 620.0, "front_share": 0.45, "wheelbase_mm": 1650.0,
           "lean_limit_deg": 30.0}   # the invented Harbourline parcel trike of the demo loads


def test_linkage_mass_objective_and_stress_constraint():
    from tiltopt.kinematics.sizing import size_linkage
    spec = parse_problem({"template": {"name": "twin_beam"}, "vehicle": VEHICLE,
                          "objectives": ["linkage_mass", "max_scrub"], "envelope": {"lean_step_deg": 15.0}}, "c")
    # with loads: tyres loaded, members sized; the template steers: no lean steer
    assert spec.constraints[-3:] == ("wheel_loads", "stress", "max_lean_steer")
    np.testing.assert_array_equal(spec.envelope.lean_deg, [0.0, 15.0, 30.0])   # lean limit from [vehicle]
    p = TiltProblem(spec)
    X = np.random.default_rng(6).uniform(p.xl, p.xu, (8, p.n_var))
    ev = p.evaluate_designs(X)
    assert np.isfinite(ev.F).all() and np.isfinite(ev.G).all()
    sz = size_linkage(p.model, spec.template.geometry(X), spec.loads)
    ok = ~np.isnan(ev.metrics["linkage_mass_kg"])
    assert ok.any()
    np.testing.assert_allclose(ev.F[ok, 0], sz.linkage_mass_kg[ok], rtol=1e-9)
    assert np.all(ev.F[ok, 0] > 0.0)
    stress_ok = ev.G[:, list(spec.constraints).index("stress")] <= 0
    np.testing.assert_array_equal(stress_ok[ok], np.asarray(sz.feasible)[ok])


def test_steer_envelope_override_survives_the_template_record():
    from tiltopt.problems.templates import Template
    spec = parse_problem({"template": {"name": "twin_beam"}, "objectives": ["max_scrub"],
                          "envelope": {"steer": {"lean_deg": [0.0, 20.0], "max_steer_deg": [30.0, 8.0]}}}, "c")
    assert tuple(spec.template.mechanism.steer_envelope) == ((0.0, 30.0), (20.0, 8.0))
    again = Template.from_dict(spec.template.to_dict())
    assert tuple(again.mechanism.steer_envelope) == ((0.0, 30.0), (20.0, 8.0))
