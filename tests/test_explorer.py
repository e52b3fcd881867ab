"""The explorer page: data, offline plotly, non-dominated front; and the shared fixture run.

The fixture (``fixture_run``) builds a run in the docs/formats.md column layout from
perturbed copies of configs/wishbone_rocker.toml, with metrics computed by the
kinematics sweep, so the report writers can be tested without the optimiser; the explorer, demo
outputs and CLI commands are also driven by a real tiny run of it (``tests.helpers.make_tiny_run``).
"""
from __future__ import annotations

import csv
import json
import re

import numpy as np
import pandas as pd
import pytest

from tests.helpers import CONFIGS, fixture_run, make_tiny_run
from tiltopt.kinematics.sweep import sweep


# ----------------------------------------------------------------- tests
def test_non_dominated_matches_brute_force():
    from tiltopt.reports.explorer import non_dominated

    rng = np.random.default_rng(0)
    F = rng.normal(size=(300, 3))
    # brute force from the definition of Pareto dominance (textbook: a dominates b when a <= b in every
    # objective and a < b in one), one pair at a time
    expect = np.array([not any(np.all(F[j] <= F[i]) and np.any(F[j] < F[i]) for j in range(len(F)))
                       for i in range(len(F))])
    assert np.array_equal(non_dominated(F), expect)


def test_page_is_offline_and_embeds_data(tmp_path):
    from plotly.offline import get_plotlyjs

    from tiltopt.reports.explorer import write_explorer

    run, mechs, front, res = fixture_run()
    path = write_explorer(tmp_path / "explorer.html", [run])
    text = path.read_text(encoding="utf-8")
    # plotly.js is in the page (the package's own bundle), and nothing is loaded from a network address
    assert get_plotlyjs()[:2000] in text
    assert not re.search(r"<script[^>]+src=[\"']https?://", text)
    assert not re.search(r"<link[^>]+href=[\"']https?://", text)
    data = json.loads(re.search(r'<script type="application/json" id="tiltopt-data">(.*?)</script>', text,
                                re.S).group(1))
    assert data["n"] == len(front) + 3
    assert sum(data["feasible"]) == int(front["feasible"].sum())
    # every objective axis carries a unit
    for c in data["columns"]:
        if c["group"] == "objective":
            assert c["unit"] in ("mm", "deg")
    # the precomputed drawing of the first candidate is the sweep's point positions (0.1 mm grid)
    det = data["detail"]["0"]
    P = np.array(det["s"][1][4]["p"]).reshape(-1, 2) / 10.0
    assert np.allclose(P, res.points[0, 1, 4], atol=0.051)
    assert "Caution" in data["safety"]


def test_merged_front_of_two_runs():
    from dataclasses import replace

    from tiltopt.reports.explorer import build_data

    run, mechs, front, res = fixture_run()
    a = replace(run, front=front.iloc[:4].reset_index(drop=True), evaluations=None, run_id="a")
    b = replace(run, front=front.iloc[4:].reset_index(drop=True), evaluations=None, run_id="b")
    data = build_data([a, b], detail_limit=2)
    assert data["n"] == len(front)
    assert sorted(set(data["run"])) == [0, 1]
    F = front[["obj.max_scrub", "obj.max_heave", "obj.max_camber_error"]].to_numpy()
    expect = [not any(np.all(F[j] <= F[i]) and np.any(F[j] < F[i]) for j in range(len(F))) for i in range(len(F))]
    assert data["merged"] == [bool(e and f) for e, f in zip(expect, front["feasible"])]


def test_serve_binds_to_loopback_only(tmp_path):
    import threading
    import urllib.request

    from tiltopt.commands.reports import make_server

    page = tmp_path / "explorer.html"
    page.write_text("<html>ok</html>", encoding="utf-8")
    httpd = make_server(page, 0)
    try:
        host, port = httpd.server_address[:2]
        assert host == "127.0.0.1"
        t = threading.Thread(target=httpd.handle_request, daemon=True)
        t.start()
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/explorer.html", timeout=5) as resp:
            assert resp.read() == b"<html>ok</html>"
        t.join(5)
    finally:
        httpd.server_close()


def test_best_compromise_is_nearest_the_ideal_point():
    """Min-max scaled objectives, Euclidean distance to the ideal point (the textbook compromise
    programming choice, e.g. Deb, Multi-Objective Optimization using Evolutionary Algorithms, 2001, sec. 8.x,
    from memory); worked by hand: scaled rows (0,1), (0.5,0.4), (1,0) -> distances 1, 0.64, 1."""
    from tiltopt.reports.runs import best_compromise

    front = pd.DataFrame({"candidate_id": ["a", "b", "c", "d"], "feasible": [True, True, True, False],
                          "obj.max_scrub": [10.0, 15.0, 20.0, 0.0], "obj.max_heave": [5.0, 3.0, 0.0, 0.0]})
    assert best_compromise(front) == "b"


# ----------------------------------------------------------------- a real tiny run
@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    from tiltopt.optimizer.results import load_run

    run_dir = make_tiny_run(tmp_path_factory.mktemp("tiny"))
    return run_dir, load_run(run_dir)


def test_explorer_of_a_real_run(tiny, tmp_path):
    from tiltopt.reports.runs import explore_runs

    run_dir, run = tiny
    path = explore_runs([run_dir], tmp_path / "e.html")
    text = path.read_text(encoding="utf-8")
    data = json.loads(re.search(r'<script type="application/json" id="tiltopt-data">(.*?)</script>', text,
                                re.S).group(1))
    assert data["ids"][:len(run.front)] == run.front["candidate_id"].astype(str).tolist()
    assert data["runs"][0]["lean_deg"][-1] == 30.0 and data["runs"][0]["travel_mm"] == [-30.0, 0.0, 30.0]
    assert {c["key"]: c["unit"] for c in data["columns"]}["obj.max_scrub"] == "mm"
    # the precomputed drawing of the first front design is the template's geometry swept by the kinematics
    # (positions on the page's 0.1 mm grid: rounding moves them by at most 0.05 mm)
    x = run.candidate_x(data["ids"][0])
    res = sweep(run.template.model, run.template.geometry(x[None]), [0.0], [0.0])
    P = np.array(data["detail"]["0"]["s"][1][0]["p"]).reshape(-1, 2) / 10.0
    assert np.allclose(P, res.points[0, 0, 0], atol=0.051)


def test_demo_outputs_of_a_real_run(tiny):
    from tiltopt.base.errors import InputError
    from tiltopt.reports import demo_outputs
    from tiltopt.reports.runs import best_compromise, sheet_from_run

    run_dir, run = tiny
    out = demo_outputs(run_dir)
    best = best_compromise(run.front)
    assert out["explorer"] == run_dir / "explorer.html" and out["explorer"].exists()
    assert out["sheet"] == run_dir / "sheets" / best / "sheet.html"
    html = out["sheet"].read_text(encoding="utf-8")
    assert run.run_id in html and "Caution" in html
    # the sheet says how to make it again and where it comes from (the run's seed, tests.helpers.TINY_CONFIG)
    assert f"tiltopt sheet {run_dir} --candidate {best}" in html and "seed 2" in html
    with pytest.raises(InputError, match="no candidate 'nope'"):
        sheet_from_run(run_dir, "nope", run=run)


def test_cli_explore_and_sheet(tiny, tmp_path):
    import shutil

    from click.testing import CliRunner

    from tiltopt.cli import main

    run_dir = tmp_path / "run"
    shutil.copytree(tiny[0], run_dir)            # a run folder of its own: the sheet is written into it
    front = tiny[1].front
    r = CliRunner().invoke(main, ["explore", str(run_dir), "-o", str(tmp_path / "x.html"), "--plotly-beside"])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "x.html").exists() and (tmp_path / "plotly.min.js").exists()
    assert '<script src="plotly.min.js"></script>' in (tmp_path / "x.html").read_text(encoding="utf-8")
    # the front design farthest from the template's base design (the seeded first population holds the base)
    template = tiny[1].template
    X = front[[f"var.{v.name}" for v in template.variables]].to_numpy(float)
    k = int(np.argmax(np.abs((X - template.defaults) / (template.xu - template.xl)).max(axis=1)))
    cid, x = str(front["candidate_id"].iloc[k]), X[k:k + 1]
    r = CliRunner().invoke(main, ["sheet", str(run_dir), "--candidate", cid, "--jig-datum", "0,120"])
    assert r.exit_code == 0, r.output
    assert (run_dir / "sheets" / cid / "linkage.dxf").exists()
    # the sheet is of that design: its pivots are the template's batched geometry of the design variables
    # the front file holds for it (read here from the row, not through the run's own lookup)
    want = dict(zip(template.model.point_refs, template.geometry(x).points[0]))
    text = (run_dir / "sheets" / cid / "pivots.csv").read_text(encoding="utf-8")
    rows = list(csv.DictReader(ln for ln in text.splitlines() if not ln.startswith("#")))
    assert len(rows) == len(want)
    for row in rows:
        np.testing.assert_allclose([float(row["y_mm"]), float(row["z_mm"])], want[f"{row['body']}.{row['point']}"],
                                   atol=1e-9)
    r = CliRunner().invoke(main, ["sheet", str(run_dir)])
    assert r.exit_code == 2 and "--candidate" in r.output
    r = CliRunner().invoke(main, ["sheet", str(run_dir), "--candidate", cid, "--jig-datum", "abc"])
    assert r.exit_code == 2 and "Y,Z" in r.output
    # a mechanism file works as well
    r = CliRunner().invoke(main, ["sheet", str(CONFIGS / "twin_beam.toml"), "-o", str(tmp_path / "tb"),
                                  "--travel", "0"])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "tb" / "candidate.toml").exists()

