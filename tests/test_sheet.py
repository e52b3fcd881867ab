"""The build-sheet folder: DXF, CSV and candidate.toml against the design, sheet.html content, drawing geometry."""
from __future__ import annotations

import csv
import math
from html import escape
from pathlib import Path

import numpy as np
import pytest

from tests.helpers import LEAN_LIMIT, TRAVEL, fixture_run
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sweep import sweep


@pytest.fixture(scope="module")
def sheet_dir(tmp_path_factory):
    from tiltopt.reports.sheet import SheetInputs, write_sheet

    run, mechs, front, res = fixture_run()
    cid = str(front["candidate_id"].iloc[2])
    out = tmp_path_factory.mktemp("sheet")
    paths = write_sheet(out, SheetInputs(
        mech=mechs[cid], candidate_id=cid, run_id=run.run_id, lean_limit_deg=LEAN_LIMIT, travel_mm=TRAVEL,
        row=front.iloc[2].to_dict(), units=run.units, jig_datum=(10.0, 150.0), corner_load_n=400.0, sag_mm=20.0,
        provenance={"config": "tests/fixture", "seed": 3}))
    return paths, mechs[cid], front.iloc[2].to_dict()


def test_dxf_reread_gives_the_pivot_coordinates(sheet_dir):
    import ezdxf

    from tiltopt.reports.dxf import body_layer

    paths, mech, _ = sheet_dir
    # read back with ezdxf itself (a general-purpose DXF library, independent of our writer's logic)
    doc = ezdxf.readfile(str(paths["dxf"]))
    msp = doc.modelspace()
    assert doc.units == ezdxf.units.MM
    pts = {}
    for e in msp.query("POINT"):
        pts.setdefault(e.dxf.layer, []).append((e.dxf.location.x, e.dxf.location.y))
    for body, points in mech.bodies.items():
        got = np.array(pts[body_layer(body)])
        want = np.array(list(points.values()))
        assert got.shape == want.shape
        assert np.max(np.abs(got - want)) < 1e-6
    circles = np.array([(c.dxf.center.x, c.dxf.center.y) for c in msp.query("CIRCLE") if c.dxf.layer == "PIVOTS"])
    for pin in mech.pins:
        y, z = mech.point(pin.a)
        assert np.min(np.hypot(circles[:, 0] - y, circles[:, 1] - z)) < 1e-6
    assert any("Caution" in t.text for t in msp.query("MTEXT"))


def test_pivots_csv_matches(sheet_dir):
    paths, mech, _ = sheet_dir
    text = paths["pivots"].read_text(encoding="utf-8")
    assert "Caution" in text and "mm" in text
    rows = list(csv.DictReader(line for line in text.splitlines() if not line.startswith("#")))
    assert [(r["body"], r["point"]) for r in rows] == [tuple(ref.split(".")) for ref in mech.point_refs]
    for r in rows:
        y, z = mech.bodies[r["body"]][r["point"]]
        assert float(r["y_mm"]) == y and float(r["z_mm"]) == z


def test_candidate_toml_round_trips_to_the_front_metrics(sheet_dir):
    paths, mech, row = sheet_dir
    again = load_mechanism(paths["candidate"])
    assert again.bodies == mech.bodies
    model = Model(again)
    res = sweep(model, None, np.linspace(0.0, LEAN_LIMIT, 11), TRAVEL)
    # the stored front metrics were computed by the fixture from the in-memory mechanism
    assert np.nanmax(np.abs(res.scrub)) == pytest.approx(row["max_scrub_mm"], abs=1e-6)
    assert np.nanmax(np.abs(res.heave)) == pytest.approx(row["max_heave_mm"], abs=1e-6)
    assert np.degrees(np.nanmax(np.abs(res.camber_error))) == pytest.approx(row["max_camber_error_deg"], abs=1e-6)


def test_cli_sweep_rereads_candidate_toml(sheet_dir):
    from click.testing import CliRunner

    from tiltopt.cli import main

    paths, mech, row = sheet_dir
    out = CliRunner().invoke(main, ["sweep", str(paths["candidate"]), "--lean", "0:25:2.5", "--travel", "-30,0,30",
                                    "--format", "json"])
    assert out.exit_code == 0, out.output
    import json

    recs = json.loads(out.stdout)
    assert max(abs(r["scrub_mm"]) for r in recs) == pytest.approx(row["max_scrub_mm"], abs=1e-6)


def test_sheet_html_sections(sheet_dir):
    paths, mech, _ = sheet_dir
    html = paths["sheet"].read_text(encoding="utf-8")
    for heading in ("Summary", "Scenario", "Front view at the design position", "Pivot coordinates", "Members",
                    "Joints", "Springs", "Kinematic curves against lean", "Clearance at the envelope corners",
                    "Loads and tilt lock", "Safety"):
        assert f">{heading}" in html, heading
    assert "@media print" in html and "@page" in html
    assert "Caution" in html
    # jig datum (10, 150): the upper-left chassis pivot row gives y - 10 and z - 150
    y, z = mech.point("chassis.upper_left_pivot")
    assert f"{y - 10:.2f}" in html and f"{z - 150:.2f}" in html
    # degraded parts are said so, visibly
    assert "No loads given" in html


def test_suggested_spring_rate_closed_form(sheet_dir):
    """Rate for a stated sag: 1/2 (k MR_L^2 + k MR_R^2) s^2 = 2 F s / 2 -> k = 2 F / (s (MR_L^2 + MR_R^2)).

    Closed form of the virtual work of two equal springs against the two corner loads (derived here).
    """

    paths, mech, _ = sheet_dir
    model = Model(mech)
    res = sweep(model, None, [0.0], [0.0])
    mr = res.motion_ratio[0, 0]
    k = 2 * 400.0 / (20.0 * np.sum(mr ** 2))
    html = paths["sheet"].read_text(encoding="utf-8")
    assert f"Suggested rate {k:.1f} N/mm" in html


def test_tyre_outline_is_the_torus_silhouette():
    """Front view of a torus (R, r) upright: height 2R, width 2r; tilted by camber g, the lowest point
    lies (R - r) sin g from the centre toward -y and at z_c - (R - r) cos g - r (docs/domain.md contact formula)."""
    from tiltopt.reports.drawing import tyre_outline

    R, r, g = 250.0, 23.0, math.radians(12.0)
    up = tyre_outline(np.array([0.0, 0.0]), 0.0, R, r, 401)
    # the samples of each crown half-circle include its ends and (odd count) its top: exact extremes
    assert up[:, 1].max() == pytest.approx(R, abs=1e-9) and up[:, 1].min() == pytest.approx(-R, abs=1e-9)
    assert up[:, 0].max() == pytest.approx(r, abs=1e-9) and up[:, 0].min() == pytest.approx(-r, abs=1e-9)
    n = 2001
    c = np.array([100.0, (R - r) * math.cos(g) + r])
    t = tyre_outline(c, g, R, r, n)
    low = t[np.argmin(t[:, 1])]
    # cambered, the lowest sample is the one nearest the true lowest point along the crown arc: at most half
    # a sample spacing h = pi r / (n - 1) away, so off by at most h / 2 across and its sagitta r (1 - cos(h / 2r))
    # above the ground (measured: 0.012 mm and 3e-6 mm)
    h = math.pi * r / (n - 1)
    assert -1e-9 <= low[1] <= r * (1.0 - math.cos(h / (2 * r))) + 1e-9
    assert low[0] == pytest.approx(c[0] - (R - r) * math.sin(g), abs=h / 2)


def test_sizing_section_with_a_loads_file(tmp_path):
    """With a loads file the sheet shows the member sizes and tilt-lock torque of the sizing part."""
    from tiltopt.kinematics import loads as loads_mod
    from tiltopt.kinematics import sizing as sizing_mod
    from tiltopt.reports.sheet import SheetInputs, write_sheet

    root = Path(__file__).resolve().parents[1]
    mech = load_mechanism(root / "configs" / "wishbone_rocker.toml")
    loads = loads_mod.load_loads(root / "configs" / "loads_demo.toml")
    paths = write_sheet(tmp_path, SheetInputs(mech=mech, lean_limit_deg=30.0, travel_mm=(-30.0, 0.0, 30.0),
                                              loads=loads))
    html = paths["sheet"].read_text(encoding="utf-8")
    sz = sizing_mod.size_linkage(Model(mech), None, loads)
    assert f"{sz.tilt_lock_torque_nm[0]:.1f} N·m" in html
    assert f"{sz.linkage_mass_kg[0]:.2f} kg" in html
    assert sz.tube_label(0, 0) in html
    assert "No loads given" not in html
    # the spring setup comes from the force analysis: its static spring force and the stated sag
    assert f">{sz.spring_static_n[0, 0]:.0f}<" in html and "Spring setup" in html
    assert f"static sag of {loads.springs.sag_mm:.1f} mm" in html
    # the new sections: governing sections, fatigue screening, tilt-lock clamp force, case sources
    assert sz.section_name(0, 0) in html and "A screening, not a fatigue design." in html
    assert f"<b>{sz.tilt_lock_clamp_n[0]:.0f} N</b>" in html
    assert all(escape(s.source) in html for s in sz.states if s.role == "case")


def test_clearance_section_with_a_shell(tmp_path):
    """With a shell the sheet shows the 3-D clearance figures of the clearance part."""
    from tiltopt.kinematics import shell as shell_mod
    from tiltopt.reports.sheet import SheetInputs, write_sheet

    root = Path(__file__).resolve().parents[1]
    mech = load_mechanism(root / "configs" / "wishbone_rocker.toml")
    shell = shell_mod.superellipse_shell([-400.0, 400.0], 290.0, 430.0, 540.0, 2.6)
    paths = write_sheet(tmp_path, SheetInputs(mech=mech, lean_limit_deg=30.0, travel_mm=(-30.0, 0.0, 30.0),
                                              shell=shell))
    html = paths["sheet"].read_text(encoding="utf-8")
    assert "to the shell, 3-D [mm]" in html and "to own upright and arms, 3-D [mm]" in html
    # the searched clearances with their error bounds and the conservative figures margins are met by
    assert "conservative (value - bound)" in html and "error bound" in html
    assert "No body shell given" not in html
    assert "<polygon" in html and 'stroke-dasharray' in html   # the shell section is drawn


# ----------------------------------------------------------------- from a real tiny run
@pytest.fixture(scope="module")
def real_sheet(tmp_path_factory):
    from tests.helpers import make_tiny_run
    from tiltopt.optimizer.results import load_run
    from tiltopt.reports.runs import sheet_from_run

    run_dir = make_tiny_run(tmp_path_factory.mktemp("tiny"))
    run = load_run(run_dir)
    feas = run.front[run.front["feasible"].astype(bool)]
    cid = str(feas["candidate_id"].iloc[len(feas) // 2])
    paths = sheet_from_run(run_dir, cid, run_dir / "sheet", jig_datum=(0.0, 100.0))
    return run, cid, paths


def test_real_candidate_toml_round_trips_to_the_stored_metrics(real_sheet):
    """candidate.toml, swept over the run's envelope, gives the metrics the optimiser stored in the front."""
    from click.testing import CliRunner

    from tiltopt.cli import main

    run, cid, paths = real_sheet
    row = run.front[run.front["candidate_id"] == cid].iloc[0]
    out = CliRunner().invoke(main, ["sweep", str(paths["candidate"]), "--lean", "0:30:5", "--travel", "-30,0,30",
                                    "--format", "json"])
    assert out.exit_code == 0, out.output
    import json

    recs = json.loads(out.stdout)
    assert all(r["converged"] for r in recs)
    assert max(abs(r["scrub_mm"]) for r in recs) == pytest.approx(row["max_scrub_mm"], abs=1e-6)
    assert max(abs(r["heave_mm"]) for r in recs) == pytest.approx(row["max_heave_mm"], abs=1e-6)
    cam = max(max(abs(r["camber_error_left_deg"]), abs(r["camber_error_right_deg"])) for r in recs)
    assert cam == pytest.approx(row["max_camber_error_deg"], abs=1e-6)


def test_real_pivots_and_dxf_match_the_candidate(real_sheet):
    import ezdxf

    from tiltopt.reports.dxf import body_layer

    run, cid, paths = real_sheet
    mech = run.candidate_mechanism(cid)
    rows = list(csv.DictReader(l for l in paths["pivots"].read_text(encoding="utf-8").splitlines()
                               if not l.startswith("#")))
    for r in rows:
        assert (float(r["y_mm"]), float(r["z_mm"])) == mech.bodies[r["body"]][r["point"]]
    doc = ezdxf.readfile(str(paths["dxf"]))
    for body, pts in mech.bodies.items():
        got = np.array([(e.dxf.location.x, e.dxf.location.y) for e in doc.modelspace().query("POINT")
                        if e.dxf.layer == body_layer(body)])
        assert np.max(np.abs(got - np.array(list(pts.values())))) < 1e-6
    html = paths["sheet"].read_text(encoding="utf-8")
    assert "tiltopt sheet" in html and f"--candidate {cid}" in html and run.run_id in html


def test_sheet_envelope_figures_cover_both_sides(tmp_path):
    """With ``both_sides`` the sheet's "over the envelope" figures include the negative leans (one source of the
    envelope's leans, tiltopt.problems.spec.envelope_leans): on a linkage made asymmetric (the right upper ball
    joint 15 mm lower), max |heave| is the sweep's own maximum over leans -30, 0, 30, which differs from 0..30's."""
    import re
    import tomllib

    from tiltopt.kinematics.mechanism import parse_mechanism
    from tiltopt.problems.spec import envelope_leans
    from tiltopt.reports.sheet import SheetInputs, write_sheet

    text = (Path(__file__).resolve().parents[1] / "configs" / "wishbone_rocker.toml").read_text(encoding="utf-8")
    for old in ("outer = [-15.0, 320.0, 400.0]", "upper_joint = [-15.0, 320.0, 400.0]"):
        assert old in text, old                   # the right upper ball joint of the built-in file
        text = text.replace(old, old.replace("400.0]", "385.0]"))
    mech = parse_mechanism(tomllib.loads(text), "asymmetric.toml")
    res = sweep(Model(mech), None, envelope_leans(30.0, None, True), [0.0])
    assert bool(res.converged.all())
    both = float(np.max(np.abs(res.heave)))
    one = float(np.max(np.abs(res.heave[..., res.lean_deg >= 0])))
    assert abs(both - one) > 1.0                      # the two sides differ, so the test can tell them apart

    def sheet_heave(both_sides):
        paths = write_sheet(tmp_path / str(both_sides), SheetInputs(mech=mech, lean_limit_deg=30.0, travel_mm=(0.0,),
                                                                    both_sides=both_sides))
        html = paths["sheet"].read_text(encoding="utf-8")
        m = re.search(r"max \|heave\| over the envelope</td>\s*<td[^>]*>([-0-9.]+)</td>", html)
        assert m, "the sheet has no max |heave| row"
        return float(m.group(1)), html

    got, html = sheet_heave(True)
    assert got == pytest.approx(both, abs=0.006)      # the sheet rounds to 2 decimals
    assert "-30 to 30 deg (both sides)" in html
    got, html = sheet_heave(False)
    assert got == pytest.approx(one, abs=0.006)
    assert "0 to 30 deg (the other side mirrors it)" in html
