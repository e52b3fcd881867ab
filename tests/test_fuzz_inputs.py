"""Malformed and extreme inputs: every file reader and every option gives one message and exit 2.

Three parts:

- a table of bad files and option values run through the CLI (exit status 2, exactly one ``error:``
  line naming what is wrong, no traceback, no hang: each case is stopped after 30 s);
- every value of the built-in files (mechanisms, shell, loads, run configs, a batch, a template
  variable file, a run's run.json) replaced in turn by a set of wrong and extreme values, read by its
  parser: the only exception allowed is ``InputError``;
- hypothesis over typed ranges: any text either gives values within the limits of
  :mod:`tiltopt.base.limits` or an ``InputError``;
- run folders: bad run.json records and input lists for ``run --resume`` (with and without
  ``--allow-changed-inputs``), foreign and damaged run folders for ``batch --rerun-changed``, a table
  of hostile ``checkpoint.npz`` files through the CLI, and every value and array of a real
  checkpoint replaced in turn and decoded.

Each limit is a design choice of the project (README "Limits"), not a number from a source.
"""
from __future__ import annotations

import copy
import json
import math
import os
import re
import shutil
import signal
import tomllib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.helpers import CONFIGS, toml_text
from tiltopt.base import limits
from tiltopt.base.errors import InputError
from tiltopt.cli import main

ERROR_LINE = re.compile(r"^(error|Error): ", re.M)


# ------------------------------------------------------------------ helpers
@pytest.fixture(autouse=True)
def no_hang():
    """A case that hangs (reading /dev/zero, a pipe, a huge range) fails after 30 s instead of blocking."""
    def stop(signum, frame):
        raise TimeoutError("the command did not return within 30 s")

    old = signal.signal(signal.SIGALRM, stop)
    signal.alarm(30)
    yield
    signal.alarm(0)
    signal.signal(signal.SIGALRM, old)


def run_cli(args, cwd=None):
    r = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=True)
    return r


def assert_one_error(r, *fragments):
    """Exit 2, exactly one error line, no traceback; the message holds each fragment."""
    out = r.output
    assert isinstance(r.exception, SystemExit) or r.exception is None, \
        f"uncaught {type(r.exception).__name__}: {r.exception}\n{out}"
    assert r.exit_code == 2, out
    assert "Traceback" not in out, out
    lines = ERROR_LINE.findall(out)
    assert len(lines) == 1, out
    for f in fragments:
        assert f in out, (f, out)


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def _mech_text(**replace) -> str:
    """The built-in wishbone-rocker mechanism with some lines replaced (``old line -> new line``)."""
    return _edited((CONFIGS / "wishbone_rocker.toml").read_text(encoding="utf-8"), *replace.items())


def _edited(text: str, *edits: tuple[str, str]) -> str:
    for old, new in edits:
        assert old in text, old
        text = text.replace(old, new, 1)
    return text


def _loads_text(tmp_path: Path, *edits: tuple[str, str]) -> Path:
    """The demo loads file with lines edited (``(old, new)``, first occurrence)."""
    return _write(tmp_path / "l.toml", _edited(LOADS.read_text(encoding="utf-8"), *edits))


def _materials_loads(tmp_path: Path, *edits: tuple[str, str]) -> Path:
    """The demo loads file naming an edited copy of the built-in materials file."""
    from tiltopt.base.resources import data_path

    _write(tmp_path / "materials.toml", _edited(data_path("materials.toml").read_text(encoding="utf-8"), *edits))
    return _loads_text(tmp_path, ("[sizing]", '[sizing]\nmaterials = "materials.toml"'))


def _sprung_text(*edits: tuple[str, str]) -> str:
    """The built-in twin-beam sprung mechanism (elastomer springs with curves) with lines edited."""
    return _edited((CONFIGS / "twin_beam_sprung.toml").read_text(encoding="utf-8"), *edits)


def _fifo(tmp_path: Path) -> Path:
    p = tmp_path / "pipe.toml"
    os.mkfifo(p)
    return p


def _huge(tmp_path: Path, name: str = "huge.toml") -> Path:
    p = tmp_path / name
    with open(p, "wb") as fh:   # sparse: no disk space used
        fh.truncate(limits.MAX_FILE_BYTES + 1)
    return p


# ------------------------------------------------------------------ files for the CLI table
MECH = CONFIGS / "wishbone_rocker.toml"
SHELL = CONFIGS / "shell_demo.toml"
LOADS = CONFIGS / "loads_demo.toml"


def _config(tmp_path, *edits, text=None) -> Path:
    """The demo config (its shell and loads copied beside it) with lines edited."""
    for f in ("shell_demo.toml", "loads_demo.toml"):
        shutil.copy(CONFIGS / f, tmp_path / f)
    text = text if text is not None else (CONFIGS / "demo.toml").read_text(encoding="utf-8")
    return _write(tmp_path / "cfg.toml", _edited(text, *edits))


CSV_OK = "x_mm,y_mm,z_mm\n" + "".join(f"{x},{y},{z}\n" for x in (-300.0, 300.0) for y, z in
                                      ((0.0, 900.0), (-250.0, 500.0), (0.0, 150.0), (250.0, 500.0)))

# (case id, a function of tmp_path giving the CLI arguments, fragments the message must hold)
FILE_CASES = [
    # mechanism files
    ("mech-not-toml", lambda t: ["check", _write(t / "m.toml", "name = \n[[")], ["not valid TOML"]),
    ("mech-not-utf8", lambda t: ["sweep", _bytes(t / "m.toml", b"name = \"\xff\xfe\"\n")], ["not UTF-8"]),
    ("mech-dev-zero", lambda t: ["check", "/dev/zero"], ["not a regular file"]),
    ("mech-fifo", lambda t: ["check", _fifo(t)], ["not a regular file"]),
    ("mech-too-big", lambda t: ["sweep", _huge(t)], ["larger than the limit"]),
    ("mech-folder", lambda t: ["sweep", t], ["is a directory"]),
    ("mech-missing", lambda t: ["sweep", t / "none.toml"], ["file not found"]),
    ("mech-datum-1e308", lambda t: ["check", _write(t / "m.toml", _mech_text(
        **{"datum = [0.0, 0.0]": "datum = [1e308, -1e308]"}))], ["datum[0]", "100000"]),
    ("mech-point-nan", lambda t: ["check", _write(t / "m.toml", _mech_text(
        **{"datum = [0.0, 0.0]": "datum = [nan, 0.0]"}))], ["datum[0]", "finite"]),
    ("mech-radius-negative", lambda t: ["check", _write(t / "m.toml", _mech_text(
        **{"outer_radius_mm = 250.0": "outer_radius_mm = -10.0"}))], ["outer_radius_mm", "positive"]),
    ("mech-steer-lean-huge", lambda t: ["check", _write(t / "m.toml", _mech_text() +
                                                        "\n[steer_envelope]\nlean_deg = [0.0, 1e308]\n"
                                                        "max_steer_deg = [20.0, 5.0]\n")], ["steer_envelope.lean_deg"]),
    ("mech-empty", lambda t: ["sweep", _write(t / "m.toml", "")], ["this key is required"]),
    ("mech-nested-too-deep", lambda t: ["check", _write(t / "m.toml", "a = " + "[" * 50000 + "]" * 50000)],
     ["nested too deeply"]),
    ("shell-nested-too-deep", lambda t: ["clearance", MECH, "--shell", _write(t / "s.toml", "a = " + "[" * 50000 +
                                                                              "]" * 50000)], ["nested too deeply"]),
    # shell files
    ("shell-toml-huge-width", lambda t: ["clearance", MECH, "--shell", _write(t / "s.toml", re.sub(
        r"half_width_mm = [0-9.]+", "half_width_mm = 1e308", SHELL.read_text(), count=1))],
     ["half_width_mm", "100000"]),
    ("shell-csv-header", lambda t: ["clearance", MECH, "--shell", _write(t / "s.csv", "x,y,z\n1,2,3\n")],
     ["header"]),
    ("shell-csv-two-columns", lambda t: ["clearance", MECH, "--shell", _write(t / "s.csv", "x_mm,y_mm,z_mm\n1,2\n")],
     ["row 2"]),
    ("shell-csv-text", lambda t: ["clearance", MECH, "--shell", _write(t / "s.csv", "x_mm,y_mm,z_mm\na,b,c\n")],
     ["row 2"]),
    ("shell-csv-inf", lambda t: ["clearance", MECH, "--shell", _write(t / "s.csv", CSV_OK.replace("900.0", "inf", 1))],
     ["row 2", "finite"]),
    ("shell-csv-1e308", lambda t: ["clearance", MECH, "--shell", _write(t / "s.csv",
        CSV_OK.replace("900.0", "1e308", 1))],
     ["row 2", "100000"]),
    ("shell-csv-one-section", lambda t: ["clearance", MECH, "--shell", _write(t / "s.csv", CSV_OK.split("\n300.0")[0])],
     ["at least two sections"]),
    ("shell-dev-zero", lambda t: ["clearance", MECH, "--shell", "/dev/zero"], ["not a regular file"]),
    ("shell-csv-too-big", lambda t: ["clearance", MECH, "--shell", _huge(t, "s.csv")], ["larger than the limit"]),
    # loads files
    ("loads-mass-negative", lambda t: ["loads", MECH, "--loads", _write(t / "l.toml", LOADS.read_text().replace(
        "total_mass_kg = ", "total_mass_kg = -", 1))], ["total_mass_kg"]),
    ("loads-lean-400", lambda t: ["loads", MECH, "--loads", _write(t / "l.toml", re.sub(
        r"lean_limit_deg = [0-9.]+", "lean_limit_deg = 400.0", LOADS.read_text(), count=1))], ["lean_limit_deg"]),
    ("loads-case-travel-huge", lambda t: ["loads", MECH, "--loads", _write(t / "l.toml", LOADS.read_text() +
                                          '\n[[cases]]\nname = "far"\nkind = "bump"\ntravel_mm = 1e9\n')],
     ["travel_mm"]),
    ("loads-catalogue-device", lambda t: ["loads", MECH, "--loads", _write(t / "l.toml", LOADS.read_text().replace(
        "[sizing]", '[sizing]\ncatalogue = "/dev/zero"', 1))], ["not a regular file"]),
    ("loads-lock-faces-1e18", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "faces = 2", "faces = 1000000000000000000"))],
     ["tilt_lock.faces", "1 to 100"]),
    ("loads-lock-radius-1e308", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "effective_radius_mm = 80.0", "effective_radius_mm = 1e308"))], ["tilt_lock.effective_radius_mm", "at most"]),
    ("loads-lock-friction-nan", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "friction = 0.4", "friction = nan"))],
     ["tilt_lock.friction", "finite"]),
    ("loads-springs-sag-1e9", lambda t: ["loads", MECH, "--loads", _loads_text(t, ("sag_mm = 30.0", "sag_mm = 1e9"))],
     ["springs.sag_mm", "at most 200"]),
    ("loads-springs-travel-huge", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "travel_mm = [-30.0, 30.0]", "travel_mm = [-1e308, 30.0]"))], ["springs.travel_mm[0]", "at least -200"]),
    ("loads-springs-travel-text", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "travel_mm = [-30.0, 30.0]", 'travel_mm = "all"'))], ["springs.travel_mm", "[droop, bump]"]),
    ("loads-fatigue-cycles-1e308", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "cycles = 1000000", "cycles = 1e308"))], ["fatigue.cycles", "at most"]),
    ("loads-fatigue-partial-inf", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "partial_factor = 1.35", "partial_factor = inf"))], ["fatigue.partial_factor", "finite"]),
    ("loads-fatigue-peak-below-1", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "peak_g = 1.5", "peak_g = 0.5"))],
     ["fatigue.peak_g", "greater than 1"]),
    ("loads-case-slope-1e308", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "slope_deg = 5.7", "slope_deg = 1e308"))],
     ["slope_deg", "at most 45"]),
    ("loads-case-vertical-g-1e9", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "vertical_g = 3.0          # both", "vertical_g = 1e9          # both"))],
     ["cases[1].vertical_g", "at most 100"]),
    ("loads-case-lateral-g-huge", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "lateral_g = 1.0", "lateral_g = 1e300"))],
     ["cases[3].lateral_g", "at most 5"]),
    ("loads-case-lean-1e308", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        'kind = "cornering"', 'kind = "cornering"\nlean_deg = -1e308'))], ["cases[4].lean_deg", "at least -60"]),
    ("loads-case-wheel-middle", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        'kind = "kerb_strike"', 'kind = "kerb_strike"\nwheel = "middle"'))], ["cases[3].wheel", "'left' or 'right'"]),
    ("loads-case-unlocked-one-wheel", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        'kind = "one_wheel_bump"', 'kind = "one_wheel_bump"\ntilt_locked = false'))], ["cases[2].tilt_locked"]),
    ("loads-case-brake-lifts-rear", lambda t: ["loads", MECH, "--loads", _loads_text(t, (
        "brake_g = 0.7", "brake_g = 2.0"))],
     ["cases[5].brake_g", "rear wheel would lift"]),
    ("loads-materials-fat-1e308", lambda t: ["loads", MECH, "--loads", _materials_loads(t, (
        "fatigue_fat_mpa = 36.0", "fatigue_fat_mpa = 1e308"))], ["fatigue_fat_mpa", "at most 870"]),
    ("loads-materials-slope-1e9", lambda t: ["loads", MECH, "--loads", _materials_loads(t, (
        "fatigue_slope = 3.0", "fatigue_slope = 1e9"))], ["fatigue_slope", "at most 25"]),
    # springs in mechanism files
    ("mech-spring-curve-force-1e308", lambda t: ["check", _write(t / "m.toml", _sprung_text(
        ("[70.0, 1700.0]]", "[70.0, 1e308]]")))], ["springs[0].curve[7][1]", "1e+06 N"]),
    ("mech-spring-curve-deflection-1e308", lambda t: ["check", _write(t / "m.toml", _sprung_text(
        ("[70.0, 1700.0]]", "[1e308, 1700.0]]")))], ["springs[0].curve[7][0]", "100000"]),
    ("mech-spring-curve-not-pairs", lambda t: ["check", _write(t / "m.toml", _sprung_text(
        ("[70.0, 1700.0]]", "[70.0]]")))], ["springs[0].curve", "[deflection_mm, force_n]"]),
    ("mech-spring-curve-falls", lambda t: ["check", _write(t / "m.toml", _sprung_text(
        ("[70.0, 1700.0]]", "[70.0, 1000.0]]")))], ["springs[0].curve", "must both rise"]),
    ("mech-spring-kind-unknown", lambda t: ["check", _write(t / "m.toml", _sprung_text(
        ('kind = "elastomer"', 'kind = "air"')))], ["springs[0].kind", "coil, elastomer"]),
    ("mech-spring-preload-1e308", lambda t: ["check", _write(t / "m.toml", _mech_text(
        **{"max_deflection_mm = 45.0": "max_deflection_mm = 45.0\npreload_n = 1e308"}))],
     ["springs[0].preload_n", "1e+06 N"]),
    ("mech-spring-max-deflection-1e308", lambda t: ["check", _write(t / "m.toml", _mech_text(
        **{"max_deflection_mm = 45.0": "max_deflection_mm = 1e308"}))], ["springs[0].max_deflection_mm", "100000"]),
    # run configs
    ("config-population-1e8", lambda t: ["check", _config(t, ("population = 100", "population = 100000000"))],
     ["run.population", "at most"]),
    ("config-lean-step-1e-9", lambda t: ["check", _config(t, ("lean_step_deg = 5.0", "lean_step_deg = 1e-9"))],
     ["envelope.lean_step_deg", "more than the limit"]),
    ("config-nsga3-partitions-200", lambda t: ["check", _config(t, ('algorithm = "nsga2"', 'algorithm = "nsga3"'),
                                                                 ("checkpoint_every = 25",
                                                                  "checkpoint_every = 25\nnsga3_partitions = 200"))],
     ["run.nsga3_partitions", "reference directions"]),
    ("config-states-per-generation", lambda t: ["check", _config(t, ("population = 100", "population = 90000"))],
     ["states per generation"]),
    ("config-fixed-wheel-radius-negative", lambda t: ["check", _config(t, ('fixed = { outer_spacing_delta = 0.0, '
                                                                          'outer_split_delta = 0.0 }',
                                                                          'fixed = { wheel_radius = -10.0 }'))],
     ["template.fixed", "no valid mechanism"]),
    ("config-bounds-huge", lambda t: ["check", _config(t, ('name = "wishbone_rocker"',
                                                          'name = "wishbone_rocker"\n'
                                                          'bounds = { wheel_offset = [-1e308, 1e308] }'))],
     ["template.bounds.wheel_offset"]),
    ("config-travel-huge", lambda t: ["check", _config(t, ("travel_mm = [-30.0, 0.0, 30.0]", "travel_mm = [1e9]"))],
     ["envelope.travel_mm[0]"]),
    ("config-spring-force-1e308", lambda t: ["check", _config(t, ("max_width_mm = 900.0",
                                                                 "max_width_mm = 900.0\nmax_spring_force_n = 1e308"))],
     ["constraints.max_spring_force_n", "at most"]),
    ("config-spring-stroke-inf", lambda t: ["check", _config(t, ("max_width_mm = 900.0",
                                                                "max_width_mm = 900.0\nmax_spring_stroke_mm = inf"))],
     ["constraints.max_spring_stroke_mm", "finite"]),
    ("config-spring-bottoming-number", lambda t: ["check", _config(t, ("max_width_mm = 900.0",
                                                                      "max_width_mm = 900.0\nspring_bottoming = 1"))],
     ["constraints.spring_bottoming", "true or false"]),
    ("config-benchmark-n-var", lambda t: ["check", _config(t, text='[run]\nname = "b"\nseed = 1\npopulation = 8\n'
                                                                   'generations = 1\n[benchmark]\nname = "zdt1"\n'
                                                                   'n_var = 1000000000000\n')], ["benchmark.n_var"]),
    ("config-benchmark-delay-nan", lambda t: ["check", _config(t, text='[run]\nname = "b"\nseed = 1\npopulation = 8\n'
                                                                       'generations = 1\n[benchmark]\nname = "zdt1"\n'
                                                                       'eval_delay_s = nan\n')],
     ["benchmark.eval_delay_s"]),
    ("config-run-fifo", lambda t: ["run", _fifo(t)], ["not a regular file"]),
    # batch files
    ("batch-90000-runs", lambda t: ["batch", _batch(t, 300, 300)], ["90,000 runs", "--yes"]),
    ("batch-too-many-runs", lambda t: ["batch", "--yes", _batch(t, 1001, 1000)], ["more than the limit"]),
    ("batch-not-toml", lambda t: ["batch", _write(t / "b.toml", "[batch")], ["not valid TOML"]),
    ("batch-dev-zero", lambda t: ["batch", "/dev/zero"], ["not a regular file"]),
]


def _bytes(path: Path, data: bytes) -> Path:
    path.write_bytes(data)
    return path


def _batch(tmp_path: Path, n_lean: int, n_width: int) -> Path:
    _config(tmp_path)
    lean = ", ".join(repr(20.0 + i * 1e-4) for i in range(n_lean))
    width = ", ".join(repr(800.0 + i) for i in range(n_width))
    return _write(tmp_path / "b.toml", f'[batch]\nname = "big"\noutput = "out"\n[[grid]]\nconfig = "cfg.toml"\n'
                                       f'seeds = [1]\n[grid.values]\n"envelope.lean_limit_deg" = [{lean}]\n'
                                       f'"constraints.max_width_mm" = [{width}]\n')


@pytest.mark.parametrize("case, make, fragments", FILE_CASES, ids=[c[0] for c in FILE_CASES])
def test_bad_file_gives_one_message(tmp_path, case, make, fragments):
    assert_one_error(run_cli(make(tmp_path)), *fragments)


def test_shell_with_too_many_vertices(tmp_path, monkeypatch):
    """The vertex count of a polygon shell is checked before its sections are resampled (the limit is lowered
    here so the file stays small)."""
    monkeypatch.setattr("tiltopt.kinematics.shell.MAX_SHELL_VERTICES", 6)
    r = run_cli(["clearance", MECH, "--shell", _write(tmp_path / "s.csv", CSV_OK)])
    assert_one_error(r, "section vertices", "more than the limit of 6")


# ------------------------------------------------------------------ options
OPTION_CASES = [
    (["sweep", MECH, "--lean", "0:inf:1"], ["--lean", "finite"]),
    (["sweep", MECH, "--lean", "0:1e300:1e-300"], ["--lean", "more than the limit"]),
    (["sweep", MECH, "--lean", "0:5:inf"], ["--lean", "finite"]),
    (["sweep", MECH, "--lean", "1e308"], ["--lean", "between -90 and 90"]),
    (["sweep", MECH, "--lean", "0:1e10:1"], ["--lean", "1e+10 values"]),
    (["sweep", MECH, "--lean", "90"], ["--lean", "between -90 and 90"]),
    (["sweep", MECH, "--lean", "nan"], ["--lean"]),
    (["sweep", MECH, "--lean", "1:2"], ["--lean"]),
    (["sweep", MECH, "--lean", ""], ["--lean"]),
    (["sweep", MECH, "--lean", "a,b"], ["--lean"]),
    (["sweep", MECH, "--travel", "1,,2"], ["--travel", "'1,,2'"]),
    (["sweep", MECH, "--travel", "1,2,"], ["--travel"]),
    (["sweep", MECH, "--travel", "1e9"], ["--travel", "200"]),
    (["sweep", MECH, "--lean", "0:89:0.01", "--travel", "-100:100:1"], ["lean x travel states", "8901 x 201"]),
    (["clearance", MECH, "--shell", SHELL, "--lean", "0:89:0.01", "--travel", "-100:100:1"], ["lean x travel states"]),
    (["clearance", MECH, "--shell", SHELL, "--crown-samples", "100000000"], ["--crown-samples"]),
    (["clearance", MECH, "--shell", SHELL, "--crown-samples", "2"], ["--crown-samples"]),
    (["clearance", MECH, "--shell", SHELL, "--steer-samples", "0"], ["--steer-samples"]),
    (["clearance", MECH, "--shell", SHELL, "--lean", "0:80:0.001", "--crown-samples", "3600"], ["tyre samples"]),
    (["explore", ".", "--serve", "--port", "99999"], ["--port"]),
    (["explore", ".", "--serve", "--port", "-1"], ["--port"]),
    (["explore", ".", "--detail-limit", "-1"], ["--detail-limit"]),
    (["explore", ".", "--detail-limit", "5001"], ["--detail-limit"]),
    (["sheet", MECH, "--sag-mm", "-5"], ["--sag-mm", "> 0"]),
    (["sheet", MECH, "--sag-mm", "nan"], ["--sag-mm"]),
    (["sheet", MECH, "--corner-load-n", "inf"], ["--corner-load-n"]),
    (["sheet", MECH, "--corner-load-n", "-500"], ["--corner-load-n"]),
    (["sheet", MECH, "--jig-datum", "nan,inf"], ["--jig-datum"]),
    (["sheet", MECH, "--jig-datum", "1e308,0"], ["--jig-datum"]),
    (["sheet", MECH, "--jig-datum", "1"], ["--jig-datum"]),
    (["sheet", MECH, "--lean-limit", "0"], ["--lean-limit"]),
    (["sheet", MECH, "--lean-limit", "nan"], ["--lean-limit"]),
    (["sheet", MECH, "--lean-limit", "400"], ["--lean-limit"]),
    (["sheet", MECH, "--travel", "1,,2"], ["--travel"]),
    (["sheet", "/dev/zero"], ["not a regular file"]),
    (["batch", CONFIGS / "demo.toml", "--workers", "0"], ["--workers"]),
    (["run"], ["expected a run config"]),
    (["merge"], ["RUN_DIRS"]),
    (["check"], ["FILE"]),
    (["sweep", MECH, "--format", "xml"], ["--format"]),
    (["nonsense"], ["No such command"]),
]


@pytest.mark.parametrize("args, fragments", OPTION_CASES, ids=[" ".join(map(str, a[:1] + a[2:]))[:60]
                                                              for a, _ in OPTION_CASES])
def test_bad_option_gives_one_message(args, fragments):
    assert_one_error(run_cli(args), *fragments)


@pytest.mark.parametrize("option", ["-o", "--output"])
def test_output_below_a_file_gives_one_message(tmp_path, option):
    blocker = _write(tmp_path / "afile", "")
    cases = [["explore", tmp_path, option, blocker / "page.html"], ["examples", blocker / "sub"],
             ["sheet", MECH, option, blocker / "sheet"]]
    for args in cases:
        assert_one_error(run_cli(args), "is a file, not a folder")


# ------------------------------------------------------------------ damaged results
@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    from tests.helpers import make_tiny_run

    return make_tiny_run(tmp_path_factory.mktemp("tiny"))


def _truncate(name):
    def damage(d: Path):
        data = (d / name).read_bytes()
        (d / name).write_bytes(data[: len(data) // 3])
    return damage


def _meta(edit):
    def damage(d: Path):
        m = json.loads((d / "run.json").read_text())
        (d / "run.json").write_text(json.dumps(edit(m)))
    return damage


def _front_without_objective(d: Path):
    import pyarrow.parquet as pq

    t = pq.read_table(d / "front.parquet")
    pq.write_table(t.drop([c for c in t.column_names if c.startswith("obj.")][:1]), d / "front.parquet")


def _front_bad_metadata(d: Path):
    import pyarrow.parquet as pq

    t = pq.read_table(d / "front.parquet")
    md = dict(t.schema.metadata)
    md[b"tiltopt"] = b"{not json"
    pq.write_table(t.replace_schema_metadata(md), d / "front.parquet")


DAMAGE = [
    ("front-truncated", _truncate("front.parquet"), "front.parquet", ["damaged"]),
    ("generations-truncated", _truncate("generations.parquet"), "generations.parquet", ["damaged"]),
    ("run-json-list", lambda d: (d / "run.json").write_text("[]"), "run.json", ["JSON object"]),
    ("run-json-broken", lambda d: (d / "run.json").write_text('{"run_id": '), "run.json", ["not valid JSON"]),
    ("run-json-nested-too-deep", lambda d: (d / "run.json").write_text("[" * 50000 + "]" * 50000), "run.json",
     ["not valid JSON"]),
    ("run-json-problem-number", _meta(lambda m: {**m, "problem": 5}), "run.json", ["problem"]),
    ("run-json-objectives", _meta(lambda m: {**m, "problem": {**m["problem"], "objectives": [1, 2]}}), "run.json",
     ["problem.objectives"]),
    ("run-json-template", _meta(lambda m: {**m, "template": {"format": m["template"]["format"]}}), "run.json",
     ["template"]),
    ("run-json-too-big", lambda d: _huge(d, "run.json"), "run.json", ["larger than the limit"]),
    ("front-without-objective", _front_without_objective, "front.parquet", ["obj."]),
    ("front-bad-metadata", _front_bad_metadata, "front.parquet", ["metadata"]),
]


@pytest.mark.parametrize("command", ["explore", "sheet", "merge"])
@pytest.mark.parametrize("case, damage, where, fragments", DAMAGE, ids=[c[0] for c in DAMAGE])
def test_damaged_run_folder_gives_one_message(tiny_run, tmp_path, command, case, damage, where, fragments):
    from tiltopt.optimizer.results import load_run

    cid = load_run(tiny_run).front["candidate_id"].iloc[0]
    d = tmp_path / "run"
    shutil.copytree(tiny_run, d)
    damage(d)
    args = {"explore": ["explore", d, "-o", tmp_path / "page.html"],
            "sheet": ["sheet", d, "--candidate", cid, "-o", tmp_path / "sheet"],
            "merge": ["merge", d, "-o", tmp_path / "merged"]}[command]
    if command == "merge" and case == "run-json-template":
        # merge copies the template record without reading it: the front merges, with no traceback
        r = run_cli(args)
        assert r.exit_code == 0 and r.exception is None, r.output
        assert (tmp_path / "merged" / "front.parquet").is_file()
        return
    assert_one_error(run_cli(args), str(d / where), *fragments)


def test_damaged_evaluations_name_the_file(tiny_run, tmp_path):
    d = tmp_path / "run"
    shutil.copytree(tiny_run, d)
    _truncate("evaluations.parquet")(d)
    assert_one_error(run_cli(["explore", d, "-o", tmp_path / "page.html"]), str(d / "evaluations.parquet"))


# ------------------------------------------------------------------ every value of every reader
WRONG = ["x", "", -1, 0, 1e308, -1e308, math.nan, math.inf, [], {}, True, 10 ** 18, [1.0, 2.0], {"a": 1}]
DELETE = object()


def _paths(d, path=()):
    if path:
        yield path
    if isinstance(d, dict):
        for k, v in d.items():
            yield from _paths(v, path + (k,))
    elif isinstance(d, list):
        for i, v in enumerate(d):
            yield from _paths(v, path + (i,))


def _mutated(data: dict, values, every: int = 1):
    """Copies of ``data`` with one value replaced (or deleted); every ``every``-th case only."""
    k = 0
    for path in list(_paths(data)):
        for v in list(values) + [DELETE]:
            k += 1
            if k % every:
                continue
            d = copy.deepcopy(data)
            cur = d
            for p in path[:-1]:
                cur = cur[p]
            if v is DELETE:
                del cur[path[-1]]
            else:
                cur[path[-1]] = copy.deepcopy(v)
            yield path, v, d


def _only_input_errors(data: dict, read, values=WRONG, every: int = 1) -> int:
    n = 0
    for path, v, d in _mutated(data, values, every):
        n += 1
        try:
            read(d)
        except InputError:
            pass
        except Exception as exc:  # noqa: BLE001 (any other exception is the failure this test looks for)
            raise AssertionError(f"{'.'.join(map(str, path))} = {v!r}: {type(exc).__name__}: {exc}") from exc
    return n


def _toml(name: str) -> dict:
    return tomllib.loads((CONFIGS / name).read_text(encoding="utf-8"))


@pytest.mark.parametrize("name", ["wishbone_rocker.toml", "twin_beam_sprung.toml"])
def test_mechanism_reader_raises_only_input_errors(name):
    from tiltopt.kinematics.mechanism import parse_mechanism

    assert _only_input_errors(_toml(name), lambda d: parse_mechanism(d, name)) > 1000


def test_shell_reader_raises_only_input_errors():
    from tiltopt.kinematics.shell import parse_polygon_csv, parse_shell

    assert _only_input_errors(_toml("shell_demo.toml"), lambda d: parse_shell(d, "shell")) > 300
    # CSV: every cell replaced in turn
    rows = [r.split(",") for r in CSV_OK.strip().split("\n")]
    for i in range(len(rows)):
        for j in range(3):
            for v in ("", "x", "nan", "-inf", "1e308", "1e-320", "0x10", " 1 "):
                cells = copy.deepcopy(rows)
                cells[i][j] = v
                try:
                    parse_polygon_csv("\n".join(",".join(r) for r in cells), "shell.csv")
                except InputError:
                    pass


def test_loads_reader_raises_only_input_errors():
    from tiltopt.kinematics.loads import parse_loads

    assert _only_input_errors(_toml("loads_demo.toml"), lambda d: parse_loads(d, "loads", CONFIGS)) > 300


def test_materials_reader_raises_only_input_errors():
    from tiltopt.base.resources import data_path
    from tiltopt.kinematics.loads import parse_materials

    data = tomllib.loads(data_path("materials.toml").read_text(encoding="utf-8"))
    assert _only_input_errors(data, lambda d: parse_materials(d, "materials")) > 300


def test_run_config_reader_raises_only_input_errors():
    from tiltopt.optimizer.config import parse_config

    data = _toml("demo.toml")
    assert _only_input_errors(data, lambda d: parse_config(d, "demo.toml", CONFIGS), every=2) > 150
    custom = {"objectives": ["overall_width", "max_scrub"],
              "run": {"name": "t", "seed": 1, "algorithm": "nsga3", "population": 20, "generations": 2,
                      "nsga3_partitions": 3},
              "template": {"mechanism": "twin_beam.toml", "variables": [
                  {"name": "oy", "points": ["upper_beam.right_end", "lower_beam.right_end"], "axis": "y",
                   "lower": 250.0, "upper": 400.0, "factors": [1.0, 1.0]},
                  {"name": "wr", "kind": "outer_radius", "lower": 200.0, "upper": 300.0, "default": 250.0}],
                  "bounds": {"oy": [260.0, 390.0]}, "fixed": {"wr": 240.0}},
              "envelope": {"lean_limit_deg": 30.0, "lean_step_deg": 5.0, "travel_mm": [0.0], "both_sides": True,
                           "steer": {"lean_deg": [0.0, 20.0], "max_steer_deg": [20.0, 5.0]}},
              "constraints": {"max_width_mm": 900.0}}
    parse_config(custom, "custom.toml", CONFIGS)      # valid as written
    assert _only_input_errors(custom, lambda d: parse_config(d, "custom.toml", CONFIGS), every=3) > 150
    bench = {"run": {"name": "b", "seed": 1, "population": 8, "generations": 1},
             "benchmark": {"name": "zdt1", "n_var": 5, "eval_delay_s": 0.0}}
    assert _only_input_errors(bench, lambda d: parse_config(d, "bench.toml", CONFIGS)) > 100


def test_batch_reader_raises_only_input_errors(tmp_path):
    from tiltopt.optimizer.batch import parse_batch

    _config(tmp_path)
    data = {"batch": {"name": "b", "output": "out", "retries": 1},
            "runs": [{"config": "cfg.toml", "seeds": [1, 2], "set": {"run.generations": 2}}],
            "grid": [{"config": "cfg.toml", "seeds": [1], "values": {"envelope.lean_limit_deg": [25.0, 30.0]}}]}
    parse_batch(data, "b.toml", tmp_path)
    assert _only_input_errors(data, lambda d: parse_batch(d, "b.toml", tmp_path, limits.BATCH_CONFIRM_RUNS),
                              every=2) > 50


def test_template_variable_file_reader_raises_only_input_errors(tmp_path):
    from tiltopt.problems.templates import load_template_entry, template_from_entry

    data = _toml("twin_beam_template.toml")
    shutil.copy(CONFIGS / "twin_beam.toml", tmp_path / "twin_beam.toml")
    path = tmp_path / "t.toml"

    def read(d):
        try:
            text = toml_text(d)
        except (TypeError, AttributeError):   # a value the tests' small TOML writer cannot write
            return
        path.write_text(text, encoding="utf-8")
        template_from_entry(load_template_entry(path))

    read(data)
    assert _only_input_errors(data, read, values=["x", -1, 1e308, math.nan, [], True, [1.0, 2.0]], every=2) > 100


def test_run_json_reader_raises_only_input_errors(tiny_run, tmp_path):
    from tiltopt.optimizer.results import load_run

    d = tmp_path / "run"
    shutil.copytree(tiny_run, d)
    meta = json.loads((d / "run.json").read_text())
    cid = load_run(d).front["candidate_id"].iloc[0]
    top = {k: v for k, v in meta.items() if k not in ("config", "template")}

    def read(full):
        (d / "run.json").write_text(json.dumps(full, default=str))
        run = load_run(d)
        run.candidate_mechanism(cid)
        if full.get("config_base_dir") != meta.get("config_base_dir"):   # the config itself is not changed here
            _ = run.config          # parsing the config copy may raise only InputError

    values = ["x", 5, [], {}, None, [1, 2]]
    keep = {"config": meta["config"], "template": meta["template"]}
    assert _only_input_errors(top, lambda m: read({**keep, **m}), values=values, every=2) > 40
    assert _only_input_errors({"template": meta["template"]}, lambda m: read({**top, "config": meta["config"], **m}),
                              values=values, every=5) > 20


# ------------------------------------------------------------------ typed ranges
NUMBER = st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.integers(-10 ** 12, 10 ** 12),
                   st.sampled_from([0.0, -0.0, 1e-300, 1e300, 89.99, 90.0, 200.0, 1e10]))
TEXT = st.one_of(
    st.lists(NUMBER.map(repr), min_size=1, max_size=4).map(":".join),
    st.lists(st.one_of(NUMBER.map(repr), st.just("")), min_size=1, max_size=5).map(",".join),
    st.text(alphabet="0123456789.:,-+einaf ", max_size=12),
)


@settings(max_examples=300, deadline=None)
@given(lean=TEXT, travel=TEXT)
def test_typed_ranges_are_within_limits_or_refused(lean, travel):
    from tiltopt.base.units import parse_states

    try:
        leans, travels = parse_states(lean, travel)
    except InputError as exc:
        assert "--lean" in str(exc) or "--travel" in str(exc)
        return
    assert 1 <= len(leans) <= limits.MAX_RANGE_VALUES and 1 <= len(travels) <= limits.MAX_RANGE_VALUES
    assert len(leans) * len(travels) <= limits.MAX_STATES
    assert np.all(np.abs(leans) < limits.MAX_ABS_LEAN_DEG) and np.all(np.abs(travels) <= limits.MAX_TRAVEL_MM)
    if ":" in lean:   # start:stop:step with the stop included (README): the count is floor(span / step) + 1
        start, stop, step = (float(p) for p in lean.split(":"))
        assert len(leans) == math.floor((stop - start) / step + 1e-9) + 1
        assert leans[0] == start and leans[-1] <= stop + 1e-9 * step


def test_range_size_is_found_before_allocating(monkeypatch):
    """``0:1e10:1`` is refused from its start, stop and step: numpy is never asked for 1e10 values."""
    from tiltopt.base import units

    asked = []
    real = np.arange
    monkeypatch.setattr(units.np, "arange", lambda n, *a, **k: asked.append(n) or real(n, *a, **k))
    with pytest.raises(InputError, match="more than the limit"):
        units.parse_leans("0:1e10:1")
    assert asked == []
    assert len(units.parse_leans("0:40:0.5")) == 81 and asked == [81]


# ------------------------------------------------------------------ run folders: resume, batches, checkpoints
ZDT_STOPPED = """
[run]
name = "fz"
seed = 7
population = 10
generations = 6
output = "out"
checkpoint_every = 2

[benchmark]
name = "zdt1"
n_var = 5
"""


@pytest.fixture(scope="module")
def stopped_run(tmp_path_factory):
    """A benchmark run stopped after 3 generations (interrupted, with a checkpoint of generation 3)."""
    from tiltopt.optimizer.config import load_config
    from tiltopt.optimizer.runner import start_run

    t = tmp_path_factory.mktemp("stopped")
    cfg = _write(t / "fz.toml", ZDT_STOPPED)
    o = start_run(load_config(cfg), progress=False, stop_after=3)
    assert o.status == "interrupted" and (o.run_dir / "checkpoint.npz").is_file()
    return o.run_dir


@pytest.fixture
def stopped(stopped_run, tmp_path):
    """A copy of the stopped run to damage (its config file stays where it was)."""
    d = tmp_path / "run"
    shutil.copytree(stopped_run, d)
    return d


def _resume(d, *extra):
    return run_cli(["run", "--resume", d, "--quiet", *extra])


def _edit_meta(d: Path, edit) -> None:
    m = json.loads((d / "run.json").read_text())
    edit(m)
    (d / "run.json").write_text(json.dumps(m))


def _input_record(role: str, path, copy=None) -> dict:
    return {"role": role, "path": str(path), "sha256": "0" * 64, "bytes": 10, "builtin": False, "copy": copy}


RESUME_CASES = [
    # (case id, damage of the run folder copy d (gets d and tmp_path), extra options, fragments)
    ("run-json-list", lambda d, t: (d / "run.json").write_text("[]"), [], ["run.json", "JSON object"]),
    ("run-json-huge", lambda d, t: _huge(d, "run.json"), [], ["run.json", "larger than the limit"]),
    ("run-json-fifo", lambda d, t: ((d / "run.json").unlink(), os.mkfifo(d / "run.json")), [],
     ["run.json", "not a regular file"]),
    ("config-sha256-number", lambda d, t: _edit_meta(d, lambda m: m.__setitem__("config_sha256", 5)), [],
     ["config_sha256"]),
    ("inputs-not-a-list", lambda d, t: _edit_meta(d, lambda m: m.__setitem__("inputs", "x")), [], ["inputs"]),
    ("inputs-record-not-a-table", lambda d, t: _edit_meta(d, lambda m: m.__setitem__("inputs", [5])), [],
     ["inputs", "damaged"]),
    ("inputs-copy-outside", lambda d, t: _edit_meta(d, lambda m: m["inputs"].append(
        _input_record("shell", t / "s.toml", "../../etc/passwd"))), ["--allow-changed-inputs"], ["inputs", "damaged"]),
    ("inputs-unknown-role", lambda d, t: _edit_meta(d, lambda m: m["inputs"].append(
        _input_record("secrets", t / "s.toml"))), [], ["inputs", "damaged"]),
    # an input named by someone's run.json that is a device or a pipe is never read (no hang), and without its
    # copy the run cannot go on, with or without --allow-changed-inputs
    ("inputs-device-no-copy", lambda d, t: _edit_meta(d, lambda m: m["inputs"].append(
        _input_record("shell", "/dev/zero", "inputs/shell.toml"))), [], ["shell", "/dev/zero", "cannot go on"]),
    ("inputs-fifo-no-copy", lambda d, t: (os.mkfifo(t / "pipe.toml"), _edit_meta(d, lambda m: m["inputs"].append(
        _input_record("loads", t / "pipe.toml", "inputs/loads.toml")))), ["--allow-changed-inputs"],
     ["loads", "cannot go on"]),
    ("config-changed", lambda d, t: _edit_meta(d, lambda m: m["inputs"][0].__setitem__("sha256", "1" * 64)), [],
     ["changed since the run started", "--allow-changed-inputs"]),
    ("old-pickle-only", lambda d, t: ((d / "checkpoint.npz").unlink(), (d / "checkpoint.pkl").write_bytes(b"x")), [],
     ["checkpoint.pkl", "never loads pickles"]),
]


@pytest.mark.parametrize("case, damage, extra, fragments", RESUME_CASES, ids=[c[0] for c in RESUME_CASES])
def test_bad_run_folder_for_resume_gives_one_message(stopped, tmp_path, case, damage, extra, fragments):
    damage(stopped, tmp_path)
    assert_one_error(_resume(stopped, *extra), *fragments)


@pytest.mark.parametrize("args, fragments", [
    (["--allow-changed-inputs"], ["--allow-changed-inputs", "--resume"]),
    (["--resume", "{d}", "--run-id", "x"], ["--resume takes only the run folder"]),
    (["--resume", "{d}", "--overwrite"], ["--resume takes only the run folder"]),
    (["--resume", "{d}/run.json"], ["--resume"]),
    (["--resume", "{t}/none"], ["does not exist"]),
], ids=["allow-without-resume", "resume-run-id", "resume-overwrite", "resume-a-file", "resume-missing"])
def test_run_folder_options_give_one_message(stopped, tmp_path, args, fragments):
    cfg = _write(tmp_path / "fz.toml", ZDT_STOPPED)
    args = [a.format(d=stopped, t=tmp_path) for a in args]
    assert_one_error(run_cli(["run", *([cfg] if args[0] == "--allow-changed-inputs" else []), *args]), *fragments)


# hostile checkpoints: each is refused with one message naming checkpoint.npz, runs no code, does not hang
def _npz_members(ck: Path) -> dict:
    with np.load(ck, allow_pickle=False) as z:
        return {k: z[k] for k in z.files}


def _npz_write(ck: Path, members: dict, compressed: bool = False) -> None:
    import io

    buf = io.BytesIO()
    (np.savez_compressed if compressed else np.savez)(buf, **members)
    ck.write_bytes(buf.getvalue())


def _npz_json(ck: Path, raw: bytes) -> None:
    m = _npz_members(ck)
    m["checkpoint.json"] = np.frombuffer(raw, np.uint8)
    _npz_write(ck, m)


def _npz_doc(ck: Path, edit) -> None:
    m = _npz_members(ck)
    doc = json.loads(m["checkpoint.json"].tobytes())
    edit(doc, m)
    m["checkpoint.json"] = np.frombuffer(json.dumps(doc).encode(), np.uint8)
    _npz_write(ck, m)


def _npz_raw_member(ck: Path, name: str, data: bytes) -> None:
    import zipfile

    with zipfile.ZipFile(ck, "a", compression=zipfile.ZIP_STORED) as z:
        z.writestr(name, data)


def _npy_header(shape, descr="<f8", version=(1, 0)) -> bytes:
    import io

    h = io.BytesIO()
    (np.lib.format.write_array_header_1_0 if version == (1, 0) else np.lib.format.write_array_header_2_0)(
        h, {"descr": descr, "fortran_order": False, "shape": shape})
    return h.getvalue()


def _x_key(doc) -> str:
    return doc["algorithm"]["pop"]["X"]["key"]


CHECKPOINT_CASES = [
    ("empty", lambda ck: ck.write_bytes(b""), ["not an .npz archive"]),
    ("truncated", lambda ck: ck.write_bytes(ck.read_bytes()[:500]), ["not an .npz archive"]),
    ("text", lambda ck: ck.write_text("checkpoint"), ["not an .npz archive"]),
    ("pickle", lambda ck: ck.write_bytes(__import__("pickle").dumps({"a": 1})), ["not an .npz archive"]),
    ("folder", lambda ck: (ck.unlink(), ck.mkdir()), ["checkpoint.npz"]),
    ("fifo", lambda ck: (ck.unlink(), os.mkfifo(ck)), ["not a regular file"]),
    ("link-to-dev-zero", lambda ck: (ck.unlink(), ck.symlink_to("/dev/zero")), ["not a regular file"]),
    ("dangling-link", lambda ck: (ck.unlink(), ck.symlink_to(ck.parent / "nowhere")), ["checkpoint.npz"]),
    ("compressed", lambda ck: _npz_write(ck, _npz_members(ck), compressed=True), ["is compressed"]),
    ("zip-bomb", lambda ck: _npz_raw_member(ck, "a9999.npy", b""), []),   # replaced below
    ("object-member", lambda ck: _npz_doc(ck, lambda d, m: m.__setitem__(_x_key(d), np.array([{"a": 1}] * 10,
                                                                                               dtype=object))),
     ["holds Python objects"]),
    ("string-member", lambda ck: _npz_doc(ck, lambda d, m: m.__setitem__(_x_key(d), np.array(["x"] * 10))),
     ["expected numbers"]),
    ("huge-shape", lambda ck: _npz_raw_member(ck, "a9999.npy", _npy_header((10 ** 12,)) + b"\0" * 8),
     ["claims shape"]),
    ("negative-shape", lambda ck: _npz_raw_member(ck, "a9999.npy", _npy_header((2,)).replace(b"(2,)", b"(-2,)")),
     ["a9999.npy"]),
    ("npy-version-3", lambda ck: _npz_raw_member(ck, "a9999.npy", b"\x93NUMPY\x03\x00" + b"\0" * 16),
     ["a9999.npy"]),
    ("not-npy-member", lambda ck: _npz_raw_member(ck, "notes.txt", b"hello"), ["is not an array"]),
    ("bad-magic", lambda ck: _npz_raw_member(ck, "a9999.npy", b"hello world, not an array"), ["a9999.npy"]),
    ("json-missing", lambda ck: _npz_write(ck, {k: v for k, v in _npz_members(ck).items()
                                                if k != "checkpoint.json"}), ["checkpoint.json is missing"]),
    ("json-floats", lambda ck: _npz_write(ck, {**_npz_members(ck), "checkpoint.json": np.zeros(4)}),
     ["expected bytes"]),
    ("json-not-utf8", lambda ck: _npz_json(ck, b"\xff\xfe{}"), ["is not JSON"]),
    ("json-broken", lambda ck: _npz_json(ck, b'{"format": '), ["is not JSON"]),
    ("json-nested-too-deep", lambda ck: _npz_json(ck, b"[" * 100000 + b"]" * 100000), ["checkpoint.json"]),
    ("json-list", lambda ck: _npz_json(ck, b"[]"), ["expected a table"]),
    ("json-nan-timing", lambda ck: _npz_doc(ck, lambda d, m: d["state"].__setitem__("elapsed_s", math.nan)),
     ["finite"]),
    ("json-format", lambda ck: _npz_doc(ck, lambda d, m: d.__setitem__("format", "tiltopt-checkpoint-1")),
     ["format"]),
    ("json-other-problem", lambda ck: _npz_doc(ck, lambda d, m: d["problem"].__setitem__("objectives", ["f9"])),
     ["different problem"]),
    ("json-algorithm-class", lambda ck: _npz_doc(ck, lambda d, m: d["algorithm"].__setitem__("class", "Evil")),
     ["Evil"]),
    ("json-random-state", lambda ck: _npz_doc(ck, lambda d, m: d["algorithm"].__setitem__(
        "random_state", {"bit_generator": "os.system", "state": "rm -rf /"})), ["random_state"]),
    ("json-key-of-json", lambda ck: _npz_doc(ck, lambda d, m: d["algorithm"]["pop"]["X"].__setitem__(
        "key", "checkpoint.json")), ["is missing"]),
    ("json-population-count", lambda ck: _npz_doc(ck, lambda d, m: d["algorithm"]["pop"].__setitem__("n", 10 ** 15)),
     ["rows"]),
]


def _zip_bomb(ck: Path) -> None:
    import zipfile

    with zipfile.ZipFile(ck, "w", compression=zipfile.ZIP_DEFLATED) as z:
        z.writestr("checkpoint.json.npy", b"\0" * (1 << 24))       # 16 MiB of zeros in a few kB


CHECKPOINT_CASES = [c if c[0] != "zip-bomb" else ("zip-bomb", _zip_bomb, ["is compressed"]) for c in CHECKPOINT_CASES]


@pytest.mark.parametrize("case, damage, fragments", CHECKPOINT_CASES, ids=[c[0] for c in CHECKPOINT_CASES])
def test_hostile_checkpoint_gives_one_message(stopped, case, damage, fragments):
    ck = stopped / "checkpoint.npz"
    damage(ck)
    assert_one_error(_resume(stopped), str(ck), *fragments)


def test_too_many_checkpoint_members_are_refused(stopped, monkeypatch):
    monkeypatch.setattr("tiltopt.optimizer.checkpoint.MAX_MEMBERS", 5)
    assert_one_error(_resume(stopped), str(stopped / "checkpoint.npz"), "members")


def test_checkpoint_reader_raises_only_input_errors(stopped_run, tmp_path):
    """Every value of a real checkpoint's JSON document, and every array, replaced in turn: decode raises
    InputError or restores a state; nothing else."""
    from tiltopt.optimizer import checkpoint as CK
    from tiltopt.optimizer.config import parse_config
    from tiltopt.optimizer.runner import Runner

    meta = json.loads((stopped_run / "run.json").read_text())
    cfg = parse_config(meta["config"], "run.json", meta["config_base_dir"])
    problem = cfg.make_problem()
    runner = Runner(problem, cfg.run, tmp_path / "scratch", "fz", progress=False)
    members = _npz_members(stopped_run / "checkpoint.npz")
    doc = json.loads(members.pop("checkpoint.json").tobytes())
    ck = tmp_path / "checkpoint.npz"

    def read(d, arrays=members):
        _npz_write(ck, {"checkpoint.json": np.frombuffer(json.dumps(d, allow_nan=True).encode(), np.uint8), **arrays})
        CK.decode(ck, runner._new_algorithm(), runner.info.to_dict(), problem.n_var, problem.n_obj,
                  problem.n_ieq_constr)

    read(doc)                                                 # the real one restores
    assert _only_input_errors(doc, read, every=7) > 300
    bad_arrays = [np.zeros(0), np.zeros((2, 2, 2)), np.array([math.nan, math.inf]), np.array([1, 2], np.int8),
                  np.array([True]), np.float64(1.0), np.zeros((10 ** 5,))]
    n = 0
    for key in members:
        for a in bad_arrays:
            n += 1
            try:
                read(doc, {**members, key: a})
            except InputError:
                pass
    assert n > 50


def test_batch_options_on_foreign_and_damaged_run_folders(tmp_path):
    """--rerun-changed never deletes a folder tiltopt did not write (one message instead), and a changed run
    without it is one message naming the run and the option."""
    _write(tmp_path / "fz.toml", ZDT_STOPPED)
    batch = _write(tmp_path / "b.toml", '[batch]\nname = "fb"\noutput = "res"\n[[runs]]\nconfig = "fz.toml"\n'
                                        'seeds = [7]\n')
    run_dir = tmp_path / "res" / "fb" / "fz-s7"
    run_dir.mkdir(parents=True)
    keep = _write(run_dir / "notes.txt", "mine")
    assert_one_error(run_cli(["batch", batch, "--rerun-changed"]), str(run_dir), "not a tiltopt run folder")
    assert keep.read_text() == "mine"
    (run_dir / "run.json").write_text("[]")                # a damaged run.json is not tiltopt's either
    assert_one_error(run_cli(["batch", batch, "--rerun-changed"]), str(run_dir), "not a tiltopt run folder")
    assert keep.read_text() == "mine"
    keep.unlink()
    (run_dir / "run.json").write_text(json.dumps({"format": "tiltopt-run-1", "run_id": "fz-s7", "status": "finished",
                                                  "config": {"run": {"name": "fz", "generations": 99}}}))
    assert_one_error(run_cli(["batch", batch]), "fz-s7", "config differs", "--rerun-changed")
    assert (run_dir / "run.json").is_file()
    # a run folder that is a link, a name that is not plain, a batch too big: each is refused before anything
    # is written or cleared, --rerun-changed or not
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    _write(elsewhere / "notes.txt", "mine")
    shutil.rmtree(run_dir)
    run_dir.symlink_to(elsewhere)
    assert_one_error(run_cli(["batch", batch, "--rerun-changed"]), str(run_dir), "symbolic link")
    assert [p.name for p in elsewhere.iterdir()] == ["notes.txt"]
    named = _write(tmp_path / "b2.toml", '[batch]\nname = ".."\noutput = "res"\n[[runs]]\nconfig = "fz.toml"\n')
    assert_one_error(run_cli(["batch", named, "--rerun-changed"]), "batch.name", "plain name")
    assert_one_error(run_cli(["batch", "--rerun-changed", "--yes", _batch(tmp_path, 1001, 1000)]),
                     "more than the limit")
