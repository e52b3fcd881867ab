"""What the input limits still let through: a BOM, the limit values themselves, a confirmed big batch.

The limits are the project's own choices (tiltopt.base.limits, README "Limits"); these tests hold
each one to being a single fact that every reader applies the same way.
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from tests.helpers import CONFIGS
from tiltopt.base import limits
from tiltopt.base.errors import InputError
from tiltopt.cli import main

CSV = "x_mm,y_mm,z_mm\n" + "".join(f"{x},{y},{z}\n" for x in (-300.0, 300.0) for y, z in
                                   ((0.0, 900.0), (-250.0, 500.0), (0.0, 150.0), (250.0, 500.0)))


def test_csv_shell_with_a_byte_order_mark_reads_like_one_without(tmp_path):
    """Spreadsheet programs often save CSV as "UTF-8 with BOM" (U+FEFF first); the header must still match."""
    from tiltopt.kinematics.shell import load_shell

    plain, marked = tmp_path / "plain.csv", tmp_path / "marked.csv"
    plain.write_text(CSV, encoding="utf-8")
    marked.write_bytes(b"\xef\xbb\xbf" + CSV.encode("utf-8"))
    a, b = load_shell(plain), load_shell(marked)
    np.testing.assert_array_equal(a.outlines, b.outlines)
    np.testing.assert_array_equal(a.x, b.x)


def test_mechanism_with_a_byte_order_mark_is_read(tmp_path):
    from tiltopt.kinematics.mechanism import load_mechanism

    p = tmp_path / "m.toml"
    p.write_bytes(b"\xef\xbb\xbf" + (CONFIGS / "twin_beam.toml").read_bytes())
    assert load_mechanism(p).bodies == load_mechanism(CONFIGS / "twin_beam.toml").bodies


@pytest.mark.parametrize("value, ok", [(limits.MAX_LEAN_LIMIT_DEG, True), (limits.MAX_LEAN_LIMIT_DEG + 0.5, False)])
def test_one_design_lean_limit_for_configs_loads_and_the_sheet(tmp_path, value, ok):
    """The run config's envelope, the loads file's vehicle and the sheet's --lean-limit share one limit."""
    from tiltopt.kinematics.loads import parse_loads
    from tiltopt.problems.spec import parse_problem

    problem = {"objectives": ["max_scrub"], "template": {"name": "twin_beam"},
               "envelope": {"lean_limit_deg": value, "lean_step_deg": 10.0}}
    loads = {"vehicle": {"total_mass_kg": 150.0, "com_height_mm": 600.0, "front_share": 0.5,
                         "wheelbase_mm": 1400.0, "lean_limit_deg": value}}
    r = CliRunner().invoke(main, ["sheet", str(CONFIGS / "twin_beam.toml"), "-o", str(tmp_path / "s"),
                                  "--lean-limit", repr(value), "--travel", "0"])
    if ok:
        parse_problem(problem, "cfg")
        parse_loads(loads, "loads")
        assert r.exit_code == 0, r.output
    else:
        for parse, data in ((parse_problem, problem), (parse_loads, loads)):
            with pytest.raises(InputError, match="lean_limit_deg"):
                parse(data, "src")
        assert r.exit_code == 2 and "--lean-limit" in r.output


def test_leans_just_inside_90_deg_are_swept(tmp_path):
    """|lean| < 90 is the only lean rule of a sweep: 89.9 deg is accepted (and may be out of reach)."""
    r = CliRunner().invoke(main, ["sweep", str(CONFIGS / "twin_beam.toml"), "--lean", "-89.9,0,89.9",
                                  "--format", "json"])
    assert r.exit_code == 0, r.output
    assert "-89.9" in r.output


def _batch_file(tmp_path, n_seeds: int):
    """A batch of ``n_seeds`` runs of a small ZDT1 config (Zitzler, Deb and Thiele 2000): quick real runs."""
    (tmp_path / "z.toml").write_text('[run]\nname = "z"\nseed = 1\npopulation = 8\ngenerations = 2\n'
                                     '[benchmark]\nname = "zdt1"\nn_var = 4\n', encoding="utf-8")
    seeds = ", ".join(str(s) for s in range(n_seeds))
    p = tmp_path / "b.toml"
    p.write_text(f'[batch]\nname = "b"\noutput = "out"\n[[runs]]\nconfig = "z.toml"\nseeds = [{seeds}]\n',
                 encoding="utf-8")
    return p


def test_a_big_batch_starts_with_yes(tmp_path, monkeypatch):
    """Above the confirmation size `tiltopt batch` stops with a message and starts nothing; with --yes it
    runs them (the confirmation size lowered to 3 here, so four small runs stand for a big batch)."""
    from tiltopt.optimizer import batch

    monkeypatch.setattr("tiltopt.commands.runs.BATCH_CONFIRM_RUNS", 3)
    path = _batch_file(tmp_path, 4)
    r = CliRunner().invoke(main, ["batch", str(path)])
    assert r.exit_code == 2 and "4 runs" in r.output and "--yes" in r.output
    assert not (tmp_path / "out").exists()                 # nothing was set up
    r = CliRunner().invoke(main, ["batch", str(path), "--yes", "--workers", "2"])
    assert r.exit_code == 0, r.output
    assert "status: finished 4" in r.output
    summary = pd.read_parquet(tmp_path / "out" / "b" / "summary.parquet")
    assert sorted(summary["run_id"]) == [f"z-s{k}" for k in range(4)] and set(summary["status"]) == {"finished"}
    # the library call has no confirmation unless asked for one
    assert len(batch.load_batch(path).items) == 4
    with pytest.raises(InputError, match=re.escape("4 runs")):
        batch.load_batch(path, confirm_above=3)


def _demo_loads():
    import tomllib

    return tomllib.loads((CONFIGS / "loads_demo.toml").read_text(encoding="utf-8"))


@pytest.mark.parametrize("table, key, limit", [
    ("sizing", "safety_factor", limits.MAX_SAFETY_FACTOR),
    ("fatigue", "partial_factor", limits.MAX_SAFETY_FACTOR),
    ("fatigue", "cycles", limits.MAX_FATIGUE_CYCLES),
    ("tilt_lock", "faces", limits.MAX_FRICTION_FACES),
    ("tilt_lock", "effective_radius_mm", limits.MAX_COORD_MM),
    ("springs", "sag_mm", limits.MAX_TRAVEL_MM),
    ("cases", "vertical_g", limits.MAX_LOAD_FACTOR_G),
    ("cases", "travel_mm", limits.MAX_TRAVEL_MM),
])
def test_loads_limits_are_inclusive(table, key, limit):
    """A loads value at its limit is read; one step beyond is one message naming the key."""
    from tiltopt.kinematics.loads import parse_loads

    beyond = limit + 1 if isinstance(limit, int) else limit * (1 + 1e-6)
    for value, ok in ((limit, True), (beyond, False)):
        data = _demo_loads()
        where = data[table][1] if table == "cases" else data[table]     # the demo's "bump" case
        where[key] = value
        if ok:
            parse_loads(data, "loads", CONFIGS)
        else:
            with pytest.raises(InputError) as info:
                parse_loads(data, "loads", CONFIGS)
            assert info.value.key.endswith(key), str(info.value)


@pytest.mark.parametrize("value, ok", [(limits.MAX_FORCE_N, True), (limits.MAX_FORCE_N * 1.01, False)])
def test_one_force_limit_for_springs_the_sheet_and_the_constraints(tmp_path, value, ok):
    """A spring's preload and curve forces, the sheet's --corner-load-n and the max_spring_force_n constraint
    share one limit."""
    import tomllib

    from tiltopt.kinematics.mechanism import parse_mechanism
    from tiltopt.problems.spec import parse_problem

    mech = tomllib.loads((CONFIGS / "wishbone_rocker.toml").read_text(encoding="utf-8"))
    mech["springs"][0]["preload_n"] = value
    sprung = tomllib.loads((CONFIGS / "twin_beam_sprung.toml").read_text(encoding="utf-8"))
    sprung["springs"][0]["curve"][-1][1] = value
    problem = {"objectives": ["max_scrub"], "template": {"name": "wishbone_rocker"},
               "vehicle": _demo_loads()["vehicle"], "constraints": {"max_spring_force_n": value}}
    r = CliRunner().invoke(main, ["sheet", str(CONFIGS / "twin_beam.toml"), "-o", str(tmp_path / "s"), "--travel", "0",
                                  "--corner-load-n", repr(value)])
    checks = ((parse_mechanism, mech, "springs[0].preload_n"), (parse_mechanism, sprung, "springs[0].curve[7][1]"),
              (parse_problem, problem, "constraints.max_spring_force_n"))
    if ok:
        for parse, data, _ in checks:
            parse(data, "src")
        assert r.exit_code == 0, r.output
    else:
        for parse, data, key in checks:
            with pytest.raises(InputError) as info:
                parse(data, "src")
            assert info.value.key == key, str(info.value)
        assert r.exit_code == 2 and "--corner-load-n" in r.output
