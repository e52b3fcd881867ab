"""The explorer page: data, offline plotly, non-dominated front; and the shared fixture run.

The fixture (``fixture_run``) builds a run in the docs/formats.md column layout from
perturbed copies of configs/wishbone_rocker.toml, with metrics computed by the
kinematics sweep, so the report writers can be tested without the optimiser.
"""
from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sweep import sweep

from tests.helpers import CONFIGS, LEAN_LIMIT, TRAVEL, fixture_run, make_tiny_run



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


class _FakeTemplate:
    """Stands in for tiltopt.problems.templates.Template (docs/formats.md) until the real one lands."""

    def __init__(self, model, mechs, ids, X):
        self.name, self.model = "wishbone_rocker", model
        self._by_x = {tuple(np.round(x, 9)): mechs[c] for c, x in zip(ids, X)}

        class V:
            def __init__(self, n):
                self.name, self.unit = n, "mm"
        self.variables = [V("upper_pivot_dz"), V("lower_pivot_dz"), V("outer_dy")]

    def mechanism_for(self, x):
        return self._by_x[tuple(np.round(np.asarray(x, float), 9))]

    def geometry(self, X):
        return self.model.batch_geometry(np.stack([self.model.geometry_from(self.mechanism_for(x)).points[0]
                                                   for x in X]))


class _FakeRun:
    """Stands in for tiltopt.optimizer.results.Run (docs/formats.md) until the real one lands."""

    def __init__(self):
        run, mechs, front, res = fixture_run()
        self._run = run
        self.run_id = "fixture-a"
        self.front = front
        self.evaluations = run.evaluations
        var = [c for c in front.columns if c.startswith("var.")]
        ev = run.evaluations
        self.template = _FakeTemplate(run.model, mechs, list(ev["candidate_id"]), ev[var].to_numpy(float))
        self.meta = {"seed": 3, "config": "configs/fixture.toml", "versions": {"tiltopt": "test"},
                     "units": run.units}

        class Env:
            lean_limit_deg, lean_step_deg, travel_mm = LEAN_LIMIT, 2.5, np.array(TRAVEL)

        class Spec:
            envelope, shell, loads = Env, None, None

        class Config:
            spec = Spec

        self.config = Config
        self._mechs = mechs

    def candidate_x(self, cid):
        row = self.evaluations[self.evaluations["candidate_id"] == cid].iloc[0]
        return np.array([row[f"var.{v.name}"] for v in self.template.variables])

    def candidate_mechanism(self, cid):
        return self.template.mechanism_for(self.candidate_x(cid))


def test_demo_outputs_from_a_run(tmp_path, monkeypatch):
    import tiltopt.reports.runs as runs_mod
    from tiltopt.reports import demo_outputs

    fake = _FakeRun()
    monkeypatch.setattr(runs_mod, "load", lambda d: fake)
    out = demo_outputs(tmp_path)
    assert out["explorer"].exists() and out["sheet"].exists()
    best = runs_mod.best_compromise(fake.front)
    assert out["sheet"].parent.name == best
    html = out["sheet"].read_text(encoding="utf-8")
    assert f"tiltopt sheet {tmp_path} --candidate {best}" in html
    assert "configs/fixture.toml" in html and "seed 3" in html
    with pytest.raises(Exception, match="no candidate 'nope'"):
        runs_mod.sheet_from_run(tmp_path, "nope", run=fake)


def test_cli_explore_and_sheet(tmp_path, monkeypatch):
    from click.testing import CliRunner

    import tiltopt.reports.runs as runs_mod
    from tiltopt.cli import main

    fake = _FakeRun()
    monkeypatch.setattr(runs_mod, "load", lambda d: fake)
    run_dir = tmp_path / "run"
    run_dir.mkdir()
    r = CliRunner().invoke(main, ["explore", str(run_dir), "-o", str(tmp_path / "x.html"), "--plotly-beside"])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "x.html").exists() and (tmp_path / "plotly.min.js").exists()
    assert '<script src="plotly.min.js"></script>' in (tmp_path / "x.html").read_text(encoding="utf-8")
    cid = str(fake.front["candidate_id"].iloc[0])
    r = CliRunner().invoke(main, ["sheet", str(run_dir), "--candidate", cid, "--jig-datum", "0,120"])
    assert r.exit_code == 0, r.output
    assert (run_dir / "sheets" / cid / "linkage.dxf").exists()
    r = CliRunner().invoke(main, ["sheet", str(run_dir)])
    assert r.exit_code == 2 and "--candidate" in r.output
    r = CliRunner().invoke(main, ["sheet", str(run_dir), "--candidate", cid, "--jig-datum", "abc"])
    assert r.exit_code == 2 and "Y,Z" in r.output
    # a mechanism file works as well
    r = CliRunner().invoke(main, ["sheet", str(CONFIGS / "twin_beam.toml"), "-o", str(tmp_path / "tb"),
                                  "--travel", "0"])
    assert r.exit_code == 0, r.output
    assert (tmp_path / "tb" / "candidate.toml").exists()


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
    from tiltopt.kinematics.sweep import sweep

    x = run.candidate_x(data["ids"][0])
    res = sweep(run.template.model, run.template.geometry(x[None]), [0.0], [0.0])
    P = np.array(data["detail"]["0"]["s"][1][0]["p"]).reshape(-1, 2) / 10.0
    assert np.allclose(P, res.points[0, 0, 0], atol=0.051)


def test_demo_outputs_of_a_real_run(tiny):
    from tiltopt.reports import demo_outputs
    from tiltopt.reports.runs import best_compromise

    run_dir, run = tiny
    out = demo_outputs(run_dir)
    assert out["explorer"] == run_dir / "explorer.html" and out["explorer"].exists()
    assert out["sheet"] == run_dir / "sheets" / best_compromise(run.front) / "sheet.html"
    html = out["sheet"].read_text(encoding="utf-8")
    assert run.run_id in html and "Caution" in html
