"""Targets, --where bounds, the best compromise and `tiltopt shortlist`.

The best compromise is compromise programming (Zeleny, "Multiple Criteria Decision Making", 1982,
ch. 6: the design nearest the ideal point in a weighted L2 distance of objectives scaled to [0, 1]);
the expected picks below are worked out by hand in each test from that rule, with the bound as the
scale's 1 where one limits an objective (our own choice, stated in optimizer/selection.py).
"""
from __future__ import annotations

import math
import tomllib

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from tiltopt.base.errors import InputError
from tiltopt.cli import main
from tiltopt.optimizer.selection import Bound, best_compromise, bounds_mask, parse_targets, parse_weight, parse_where


def _front(rows):
    """Designs (scrub mm, clearance mm, feasible): obj.min_clearance is the clearance negated, as a run writes it."""
    df = pd.DataFrame(rows, columns=["max_scrub_mm", "min_clearance_mm", "feasible"])
    df.insert(0, "candidate_id", [f"d{k}" for k in range(len(df))])
    df["obj.max_scrub"] = df["max_scrub_mm"]
    df["obj.min_clearance"] = -df["min_clearance_mm"]
    return df


def test_compromise_by_hand():
    # scrub 0..10 mm, clearance 20..60 mm (larger is better)
    f = _front([(0.0, 20.0, True), (10.0, 60.0, True), (4.0, 44.0, True), (1.0, 80.0, False)])
    ch = best_compromise(f)
    # d0: z = (0, 1) -> sqrt(1/2) = 0.707; d1: (1, 0) -> 0.707; d2: (0.4, (60-44)/40 = 0.4) -> 0.4
    assert ch.candidate_id == "d2" and ch.n_feasible == 3 and ch.n_meeting == 3
    assert ch.scores[:3] == pytest.approx([math.sqrt(0.5), math.sqrt(0.5), 0.4])
    assert math.isnan(ch.scores[3])                # infeasible: never chosen, however good
    rows = {r["objective"]: r for r in ch.rows}
    # clearance is read as clearance: 44 mm, 16 mm less than the best (60 mm, d1)
    assert rows["min_clearance"]["value"] == pytest.approx(44.0) and rows["min_clearance"]["better"] == "higher"
    assert rows["min_clearance"]["gives_up"] == pytest.approx(16.0) and rows["min_clearance"]["best_id"] == "d1"
    assert rows["max_scrub"]["gives_up"] == pytest.approx(4.0) and rows["max_scrub"]["best_id"] == "d0"
    assert "16 mm less than the best (60 mm, d1)" in " ".join(ch.gives_up_text())


def test_bounds_set_the_scale_and_weights_tilt_it():
    f = _front([(0.0, 20.0, True), (10.0, 60.0, True), (4.0, 44.0, True), (6.0, 58.0, True)])
    # clearance >= 40: d1, d2, d3 meet it; the scale of clearance runs from 60 (best) to the bound 40.
    # d1: scrub (10-4)/6 = 1, clearance 0 -> 0.707; d2: 0, (60-44)/20 = 0.8 -> 0.566; d3: 1/3, 0.1 -> 0.246
    ch = best_compromise(f, [parse_where("min_clearance>=40")])
    assert ch.n_meeting == 3 and ch.candidate_id == "d3"
    assert ch.scores[1:] == pytest.approx([math.sqrt(0.5), math.sqrt(0.32), math.sqrt((1 / 9 + 0.01) / 2)])
    assert next(r for r in ch.rows if r["objective"] == "min_clearance")["scale_to"] == pytest.approx(40.0)
    # scrub weighed 20 times: d2 (scrub z = 0): sqrt(0.64 / 21) = 0.175 beats d3: sqrt((20/9 + 0.01) / 21) = 0.326
    ch = best_compromise(f, [parse_where("40<=min_clearance_mm")], {"max_scrub": 20.0})
    assert ch.candidate_id == "d2" and ch.scores[2] == pytest.approx(math.sqrt(0.64 / 21))
    # nothing meets the bounds: no choice, and the reason says so
    ch = best_compromise(f, [Bound("max_scrub_mm", None, -1.0)])
    assert ch.candidate_id is None and "None of the 4 feasible" in ch.method


def test_where_expressions_and_masks():
    assert parse_where("max_scrub_mm<=15") == Bound("max_scrub_mm", None, 15.0)
    assert parse_where(" 40 <= min_clearance ") == Bound("min_clearance", 40.0, None)
    assert parse_where("2.5<=linkage_mass_kg<=3.5") == Bound("linkage_mass_kg", 2.5, 3.5)
    assert parse_where("var.arm>1e2") == Bound("var.arm", 100.0, None)
    for bad in ("max_scrub_mm=15", "<=15", "max_scrub_mm<=x", "5<=a<=1"):
        with pytest.raises(InputError):
            parse_where(bad)
    f = _front([(0.0, 20.0, True), (10.0, np.nan, True), (4.0, 44.0, True)])
    # an objective's name reads its metric (clearance positive); NaN meets no bound
    assert bounds_mask(f, [Bound("min_clearance", 30.0, None)]).tolist() == [False, False, True]
    assert bounds_mask(f, [Bound("max_scrub_mm", None, 5.0)]).tolist() == [True, False, True]
    with pytest.raises(InputError, match="no column 'nope'"):
        bounds_mask(f, [Bound("nope", 1.0, None)])
    assert parse_weight("max_scrub=2") == ("max_scrub", 2.0)
    with pytest.raises(InputError):
        parse_weight("max_scrub=-1")


def test_targets_table_errors_name_the_key():
    t = parse_targets({"max_scrub_mm": {"max": 18.0}, "weights": {"max_scrub": 2}}, "c.toml",
                      ["max_scrub_mm"], ["max_scrub"])
    assert t.bounds == (Bound("max_scrub_mm", None, 18.0),) and t.weights == {"max_scrub": 2.0}
    assert "max_scrub_mm = { max = 18.0 }" in t.toml()
    cases = [({"nope_mm": {"max": 1}}, "targets.nope_mm"), ({"max_scrub_mm": {"top": 1}}, "targets.max_scrub_mm.top"),
             ({"max_scrub_mm": {"min": 5, "max": 1}}, "above max"), ({"max_scrub_mm": {}}, "min, max or both"),
             ({"weights": {"max_scrub": 0}}, "every weight is 0"), ({"weights": {"nope": 1}}, "targets.weights.nope")]
    for table, text in cases:
        with pytest.raises(InputError) as e:
            parse_targets(table, "c.toml", ["max_scrub_mm"], ["max_scrub"])
        assert text in str(e.value) and "c.toml" in str(e.value)


def test_run_config_targets(tmp_path):
    from tests.helpers import TINY_CONFIG
    from tiltopt.optimizer.config import parse_config

    d = tomllib.loads(TINY_CONFIG + '[targets]\nmax_scrub_mm = { max = 20.0 }\n')
    assert parse_config(d, "t.toml", tmp_path).targets.bounds == (Bound("max_scrub_mm", None, 20.0),)
    with pytest.raises(InputError, match="targets.wobble_mm"):
        parse_config(tomllib.loads(TINY_CONFIG + '[targets]\nwobble_mm = { max = 20.0 }\n'), "t.toml", tmp_path)


def test_shortlist_command_writes_the_designs_that_meet_the_bounds(tiny_run, tmp_path):
    from tiltopt.optimizer.results import load_run, read_parquet

    front = load_run(tiny_run).front
    feas = front[front["feasible"].astype(bool)]
    hi = float(np.median(feas["max_scrub_mm"]))
    out = tmp_path / "short.parquet"
    r = CliRunner().invoke(main, ["shortlist", str(tiny_run), "--where", f"max_scrub_mm<={hi!r}",
                                  "--weight", "max_heave=2", "-o", str(out)])
    assert r.exit_code == 0, r.output
    df, meta = read_parquet(out)
    expect = feas[feas["max_scrub_mm"] <= hi]          # pandas filter, beside the module's own mask
    assert sorted(df["candidate_id"]) == sorted(expect["candidate_id"])
    assert df["compromise_score"].is_monotonic_increasing
    best = best_compromise(front, [Bound("max_scrub_mm", None, hi)], {"max_heave": 2.0})
    assert df["candidate_id"].iloc[0] == best.candidate_id and f"best compromise: {best.candidate_id}" in r.output
    assert meta["where"] == [f"max_scrub_mm<={hi:g}"] and meta["weights"]["max_heave"] == 2.0
    assert meta["caution"] and "Caution" in r.output and f"{len(expect)} of {len(front)}" in r.output
    # the page's "as targets" file gives the same shortlist
    tf = tmp_path / "t.toml"
    tf.write_text(f"[targets]\nmax_scrub_mm = {{ max = {hi!r} }}\n[targets.weights]\nmax_heave = 2.0\n")
    r = CliRunner().invoke(main, ["shortlist", str(tiny_run), "--targets", str(tf), "-o", str(tmp_path / "b.parquet")])
    assert r.exit_code == 0, r.output
    assert read_parquet(tmp_path / "b.parquet")[0]["candidate_id"].tolist() == df["candidate_id"].tolist()
    # user errors: one message, exit 2
    r = CliRunner().invoke(main, ["shortlist", str(tiny_run), "--where", "wobble<=1", "-o", str(out)])
    assert r.exit_code == 2 and "wobble" in r.output and "Traceback" not in r.output
    r = CliRunner().invoke(main, ["shortlist", str(tiny_run), "--where", "x", "-o", str(tiny_run / "front.parquet")])
    assert r.exit_code == 2


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    from tests.helpers import make_tiny_run

    return make_tiny_run(tmp_path_factory.mktemp("short_run"))
