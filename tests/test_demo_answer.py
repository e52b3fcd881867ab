"""The demo's answer, judged as a builder would (the acceptance check of the main job).

`tiltopt demo` on the built-in config must recommend a design whose wheels lean with the body, with
little scrub and heave, nothing through a wheel, its margins met with steering, within the width
limit, and at least as good on scrub, heave and camber error as the plain parallelogram drawn by
hand in the same shell (configs/wishbone_rocker.toml, the template's base), which passes the same
physical checks. The figures come from an independent sweep of the exported candidate.toml
(tiltopt sweep's own path), not from the run's records. This runs the whole demo (about a minute).
"""
from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from tiltopt.cli import main
from tiltopt.optimizer.config import load_config
from tiltopt.problems.problem import TiltProblem

from tests.helpers import CONFIGS


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    r = CliRunner().invoke(main, ["demo", "--output", str(out), "--quiet"])
    assert r.exit_code == 0, r.output
    sheet = next(line.split(": ", 1)[1] for line in r.output.splitlines() if line.startswith("sheet: "))
    from pathlib import Path

    return out, Path(sheet).parent


def _sweep(mech):
    r = CliRunner().invoke(main, ["sweep", str(mech), "--lean", "0:30:5", "--travel", "-30,0,30", "--format", "json"])
    assert r.exit_code == 0, r.output
    states = json.loads(r.stdout)
    assert all(s["converged"] for s in states)
    cam = max(max(abs(s["camber_error_left_deg"]), abs(s["camber_error_right_deg"])) for s in states)
    return cam, max(abs(s["scrub_mm"]) for s in states), max(abs(s["heave_mm"]) for s in states)


def test_the_demo_recommends_a_design_a_builder_can_build(demo):
    out, sheet_dir = demo
    cam, scrub, heave = _sweep(sheet_dir / "candidate.toml")
    # the bar: wheels that lean with the body, little scrub and heave (parallel arms whose
    # outer pivots sit inboard of the tyre scrub about 2 cm at 35 deg: common practice, no source)
    assert cam <= 1.0 and scrub <= 20.0 and heave <= 12.0, (cam, scrub, heave)
    # nothing through a wheel and every margin met, with steering: the run's own checks of it
    from tiltopt.optimizer.results import load_run

    run = load_run(next(p for p in out.iterdir() if p.is_dir()))
    row = run.front.set_index("candidate_id").loc[sheet_dir.name]
    assert row["feasible"]
    assert row["min_wheel_carrier_lower_mm"] >= 3.0 and row["min_clearance_lower_mm"] >= 10.0
    assert row["min_member_gap_mm"] >= 5.0 and row["overall_width_mm"] <= 900.0
    # at least as good as the hand-drawn parallelogram on scrub, heave and camber error
    cfg = load_config(CONFIGS / "demo.toml")
    p = TiltProblem(cfg.spec)
    base = p.evaluate_designs(p.template.defaults[None])
    hand_cam, hand_scrub, hand_heave = _sweep(CONFIGS / "wishbone_rocker.toml")
    assert base.metrics["min_wheel_carrier_lower_mm"][0] >= 3.0          # the sketch passes the physical checks
    assert scrub <= hand_scrub and heave <= hand_heave and cam <= hand_cam + 1e-9
    assert np.isclose(hand_cam, 0.0, atol=1e-9)                           # a parallelogram: camber error 0
