"""``tiltopt sweep`` / ``tiltopt check`` output formats.

References: the JSON contract of issue 2 (keys per state, null metrics where a
state did not converge), Python's json and csv modules as the parsers, and the
independent reference solver (tests.reference_solver) for the numbers.
"""
from __future__ import annotations

import csv
import io
import json

import pytest
from click.testing import CliRunner

from tests.helpers import CONFIGS, twin_beam
from tiltopt.kinematics.mechanism import load_mechanism
from tests.reference_solver import reference_sweep
from tiltopt.cli import main

ISSUE_KEYS = {"lean_deg", "travel_mm", "converged", "residual_mm", "track_mm", "track_change_mm", "scrub_mm",
              "heave_mm", "camber_error_left_deg", "camber_error_right_deg", "lean_point_offset_mm",
              "contact_left_mm", "contact_right_mm", "spring_lengths_mm"}
METRICS = ["track_mm", "track_change_mm", "scrub_mm", "heave_mm", "camber_error_left_deg",
           "camber_error_right_deg", "lean_point_offset_mm", "contact_left_mm", "contact_right_mm"]


def run(*args):
    """stdout of a command (JSON and CSV go there; the caution goes to stderr)."""
    out = CliRunner().invoke(main, list(args))
    assert out.exit_code == 0, out.output
    if "--format" in args:
        assert "Caution" in out.stderr and "Caution" not in out.stdout
    return out.stdout


def test_json_has_issue_keys_and_nulls_where_not_converged():
    # the rigid twin beam has no suspension: travel -25 and +25 cannot be reached
    rows = json.loads(run("sweep", str(CONFIGS / "twin_beam.toml"), "--lean", "0:35:5", "--travel", "-25,0,25",
                          "--format", "json"))
    assert len(rows) == 8 * 3
    assert sorted({r["lean_deg"] for r in rows}) == [0, 5, 10, 15, 20, 25, 30, 35]   # stop included
    for r in rows:
        assert ISSUE_KEYS <= set(r), ISSUE_KEYS - set(r)
        assert r["converged"] is (r["travel_mm"] == 0.0)
        if r["converged"]:
            assert all(r[k] is not None for k in METRICS)
            assert len(r["contact_left_mm"]) == 2 and len(r["contact_right_mm"]) == 2
        else:
            assert all(r[k] is None for k in METRICS), r


def test_json_numbers_match_reference_solver():
    """The CLI's numbers against the independent scalar solver on the sprung demo linkage."""
    mech_path = CONFIGS / "wishbone_rocker.toml"
    rows = json.loads(run("sweep", str(mech_path), "--lean", "0:30:10", "--travel", "-20:20:20", "--format", "json"))
    ref = reference_sweep(load_mechanism(mech_path), [0, 10, 20, 30], [-20, 0, 20])
    assert [(r["travel_mm"], r["lean_deg"]) for r in rows] == [(r["travel_mm"], r["lean_deg"]) for r in ref]
    for a, b in zip(rows, ref):
        assert a["converged"] and b["converged"]
        for k in METRICS[:7]:
            assert a[k] == pytest.approx(b[k], abs=1e-6), k       # tests.reference_solver
        for n, v in b["spring_lengths_mm"].items():
            assert a["spring_lengths_mm"][n] == pytest.approx(v, abs=1e-6)


def test_csv_parses_with_one_row_per_state():
    text = run("sweep", str(CONFIGS / "twin_beam_sprung.toml"), "--lean", "0:0.3:0.1", "--travel", "-10,10",
               "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(text)))       # Python's csv module as the reader
    assert len(rows) == 4 * 2
    assert [float(r["lean_deg"]) for r in rows[:4]] == pytest.approx([0.0, 0.1, 0.2, 0.3])
    for key in ("track_mm", "scrub_mm", "heave_mm", "contact_left_mm.y", "contact_right_mm.z",
                "spring_lengths_mm.left_spring", "spring_lengths_mm.right_spring"):
        assert key in rows[0]
        float(rows[-1][key])


def test_csv_leaves_metrics_empty_where_not_converged():
    text = run("sweep", str(CONFIGS / "twin_beam.toml"), "--lean", "0,5", "--travel", "20", "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(text)))
    assert len(rows) == 2
    for r in rows:
        assert r["converged"] == "False"
        assert r["track_mm"] == "" and r["scrub_mm"] == "" and r["contact_left_mm.y"] == ""


def test_table_lists_every_state(write_mech):
    text = run("sweep", str(write_mech(twin_beam())), "--lean", "-10:10:5")
    lines = [l for l in text.splitlines() if l.strip() and l.strip()[0] in "-0123456789"
             and not set(l.strip()) <= {"-", " "}]
    assert len(lines) == 5
    assert [float(l.split()[0]) for l in lines] == [-10.0, -5.0, 0.0, 5.0, 10.0]     # stop included
    assert "track_mm" in text and "scrub_mm" in text and "heave_mm" in text


def test_table_marks_states_not_reached(write_mech):
    locked = twin_beam(w_left_lower=300.0, w_right_lower=300.0)
    text = run("sweep", str(write_mech(locked)), "--lean", "0:10:5")
    assert "2 of 3 states not reached" in text
    assert " NO " in text


def test_check_reports_demo_mechanisms():
    for name, travel in (("twin_beam", "none"), ("twin_beam_sprung", "yes"), ("wishbone_rocker", "yes")):
        text = run("check", str(CONFIGS / f"{name}.toml"))
        assert "leans: yes" in text
        assert f"suspension travel: {travel}" in text
