"""Physical validity on by default: designs known to be invalid are reported with their reason, the
built-in base designs pass every default requirement in the demo shell, and every run gets the
tilting requirements (docs/domain.md, "Optimisation"; the registry's defaults)."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from tests.helpers import CONFIGS, twin_beam
from tiltopt.base.errors import InputError
from tiltopt.cli import main
from tiltopt.kinematics.mechanism import mechanism_to_toml, parse_mechanism
from tiltopt.problems.problem import TiltProblem
from tiltopt.problems.spec import parse_problem


def _problem(tmp_path, mech_dict, variables, **extra):
    (tmp_path / "m.toml").write_text(mechanism_to_toml(parse_mechanism(mech_dict, "<t>")))
    data = {"template": {"mechanism": "m.toml", "variables": variables}, "objectives": ["overall_width", "max_scrub"],
            "envelope": {"lean_step_deg": 10.0}, **extra}
    return TiltProblem(parse_problem(data, str(tmp_path / "c.toml"), tmp_path))


HUB = {"name": "hub_y", "points": ["upright_right.hub"], "axis": "y", "lower": -100.0, "upper": 100.0, "default": 0.0}


def test_upright_through_the_tyre_is_infeasible_with_the_reason(tmp_path):
    # the ideal twin beam with its uprights on the wheel planes (tests.helpers.twin_beam): the upright
    # tube runs through the spokes, which only the stub axle may enter
    p = _problem(tmp_path, twin_beam(), [HUB])
    ev = p.evaluate_designs(np.array([[0.0], [60.0]]))
    assert not ev.feasible[0]
    assert "carrier_clearance: a member that carries the wheel" in ev.reason[0]
    assert ev.metrics["min_wheel_carrier_mm"][0] < 0
    # 60 mm of stub axle puts the upright clear of hub and spokes (carrier margin 3 mm)
    assert ev.metrics["min_wheel_carrier_lower_mm"][1] >= 3.0 and "carrier" not in ev.reason[1]


def test_wheels_overlapping_are_invalid_geometry_with_the_reason(tmp_path):
    # beams 30 mm long: the two hubs 60 mm apart, less than their 70 mm hubs need
    d = twin_beam(w_left=30.0, w_right=30.0)
    p = _problem(tmp_path, d, [HUB])
    ev = p.evaluate_designs(np.array([[0.0]]))
    assert not ev.feasible[0] and "invalid geometry: the wheels overlap" in ev.reason[0]
    assert ev.G[0, 0] > 0                                     # the "converged" column: invalid designs
    assert np.isnan(ev.metrics["max_scrub_mm"][0])           # never scored


def test_variable_default_outside_its_bounds_is_an_error_naming_it(tmp_path):
    # a variable without `default` takes its first point's coordinate (the hub's y, 330) as its value;
    # with bounds 0..100 (an offset was meant) check and run say so, naming the variable
    var = {"name": "wheel_offset", "points": ["upright_right.hub"], "axis": "y", "lower": 0.0, "upper": 100.0}
    with pytest.raises(InputError) as e:
        _problem(tmp_path, twin_beam(), [var])
    assert e.value.key == "template.variables.wheel_offset" and "330" in str(e.value)
    (tmp_path / "run.toml").write_text(
        'objectives = ["max_scrub"]\n[run]\nname = "x"\nseed = 1\npopulation = 8\ngenerations = 1\n'
        '[template]\nmechanism = "m.toml"\n'
        '[[template.variables]]\nname = "wheel_offset"\npoints = ["upright_right.hub"]\naxis = "y"\n'
        'lower = 0.0\nupper = 100.0\n')
    for cmd in (["check", str(tmp_path / "run.toml")], ["run", str(tmp_path / "run.toml")]):
        r = CliRunner().invoke(main, cmd)
        assert r.exit_code == 2 and "wheel_offset" in r.output and "outside its bounds" in r.output, r.output


def test_crossed_members_are_invalid_unless_allowed(tmp_path):
    # a tie from the chassis top to the left upright's foot crosses the right upright's tube in the
    # front view (a member through another where the template does not allow it)
    d = twin_beam()
    d["bodies"]["chassis"]["tie_right"] = [400.0, 700.0]
    d["bodies"]["chassis"]["tie_left"] = [-400.0, 700.0]
    d["bodies"]["upright_left"]["foot"] = [-330.0, 320.0]
    d["bodies"]["upright_right"]["foot"] = [330.0, 320.0]
    d["links"] = [{"a": "chassis.tie_right", "b": "upright_left.foot", "name": "tie_left"},
                  {"a": "chassis.tie_left", "b": "upright_right.foot", "name": "tie_right"}]
    var = [{"name": "pivot_z", "points": ["chassis.tie_right"], "axis": "z", "lower": 600.0, "upper": 800.0}]
    p = _problem(tmp_path, d, var)
    ok, why = p.template.check_geometry(p.template.geometry(np.array([[700.0]])))
    assert not ok[0] and "member tubes overlap or cross" in why[0] and "tie_left" in why[0], why[0]
    allowed = parse_problem({"template": {"mechanism": "m.toml", "variables": var, "allow_crossing": True},
                             "objectives": ["max_scrub"]}, str(tmp_path / "c.toml"), tmp_path)
    ok, why = allowed.template.check_geometry(allowed.template.geometry(np.array([[700.0]])))
    assert "cross" not in why[0]


@pytest.mark.parametrize("name", ["twin_beam", "twin_beam_sprung", "wishbone_rocker"])
def test_builtin_base_designs_pass_every_default_requirement_in_the_demo_shell(name):
    spec = parse_problem({"template": {"name": name}, "objectives": ["overall_width", "max_scrub"],
                          "shell": "shell_demo.toml", "loads": "loads_demo.toml"}, "c", CONFIGS)
    assert {"max_camber_error", "clearance", "carrier_clearance", "wheel_gap", "member_gap", "wheel_loads",
            "stress"} <= set(spec.constraints)
    p = TiltProblem(spec)
    ev = p.evaluate_designs(p.template.defaults[None])
    assert ev.feasible[0], ev.reason[0]
    m = ev.metrics
    assert m["max_camber_error_deg"][0] < 1e-6                # all three are parallelograms
    assert m["min_wheel_carrier_lower_mm"][0] >= 3.0 and m["min_clearance_lower_mm"][0] >= 10.0


def test_demo_hand_parallelogram_figures_match_the_readme():
    # the README quotes the figures of the hand-drawn parallelogram (configs/wishbone_rocker.toml, the
    # template's base) in the demo problem; they are computed, so the README must follow them
    from tiltopt.optimizer.config import load_config

    cfg = load_config(CONFIGS / "demo.toml")
    p = TiltProblem(cfg.spec)
    ev = p.evaluate_designs(p.template.defaults[None])
    m = {k: float(v[0]) for k, v in ev.metrics.items()}
    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    assert f"max scrub {m['max_scrub_mm']:.1f} mm" in readme
    assert f"max heave {m['max_heave_mm']:.1f} mm" in readme
