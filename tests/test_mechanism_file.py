"""Mechanism file validation: each error of the file contract is an InputError naming file and key.

Reference: the file contract of issue 2 (pins coincide within 0.01 mm, known
bodies and points, a chassis, exactly two wheels, radii positive and crown
smaller than outer, no unknown keys) and the project's CLI contract (user
errors exit with status 2, one message, no traceback).
"""
from __future__ import annotations

import copy
import tomllib

import pytest
from click.testing import CliRunner

from tests.helpers import CONFIGS, twin_beam
from tiltopt.base.errors import InputError
from tiltopt.cli import main
from tiltopt.kinematics.mechanism import load_mechanism


def _pin_gap(d, gap):
    d["bodies"]["chassis"]["upper_pivot"][0] += gap


def _set(path, value):
    def f(d):
        node = d
        for k in path[:-1]:
            node = node[k]
        node[path[-1]] = value
    return f


def _drop(path):
    def f(d):
        node = d
        for k in path[:-1]:
            node = node[k]
        del node[path[-1]]
    return f


def _third_wheel(d):
    d["wheels"].append(dict(d["wheels"][0]))


CASES = [
    # (id, change, expected key, words the message must hold)
    ("pin_gap", lambda d: _pin_gap(d, 0.02), "pins[0]", "coincide"),
    ("unknown_body", _set(["pins", 2, "a"], "upper_bem.left_end"), "pins[2].a", "unknown body"),
    ("unknown_point", _set(["pins", 3, "b"], "upright_right.tip"), "pins[3].b", "unknown point"),
    ("unknown_upright", _set(["wheels", 0, "upright"], "upright_middle"), "wheels[0].upright", "unknown body"),
    ("undefined_chassis", _set(["chassis"], "frame"), "chassis", "not defined"),
    ("missing_chassis", _drop(["chassis"]), "chassis", "required"),
    ("one_wheel", lambda d: d["wheels"].pop(), "wheels", "exactly two wheels"),
    ("three_wheels", _third_wheel, "wheels", "exactly two wheels"),
    ("negative_outer", _set(["wheels", 0, "outer_radius_mm"], -250.0), "wheels[0].outer_radius_mm", "positive"),
    ("negative_crown", _set(["wheels", 1, "crown_radius_mm"], -1.0), "wheels[1].crown_radius_mm", "negative"),
    ("crown_equal_outer", _set(["wheels", 0, "crown_radius_mm"], 250.0), "wheels[0].crown_radius_mm", "smaller"),
    ("crown_above_outer", _set(["wheels", 1, "crown_radius_mm"], 300.0), "wheels[1].crown_radius_mm", "smaller"),
    ("unknown_top_key", _set(["colour"], "red"), "colour", "unknown key"),
    ("unknown_pin_key", _set(["pins", 0, "stiffness"], 3.0), "pins[0].stiffness", "unknown key"),
    ("unknown_wheel_key", _set(["wheels", 1, "tyre"], "slick"), "wheels[1].tyre", "unknown key"),
]


@pytest.mark.parametrize("change, key, words", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_file_errors_name_file_and_key(write_mech, change, key, words):
    d = copy.deepcopy(twin_beam())
    change(d)
    path = write_mech(d, "broken.toml")
    with pytest.raises(InputError) as info:
        load_mechanism(path)
    exc = info.value
    assert exc.source == str(path)
    assert exc.key == key
    assert str(path) in str(exc) and f"'{key}'" in str(exc)
    assert words in str(exc)


@pytest.mark.parametrize("change, key, words", [c[1:] for c in CASES], ids=[c[0] for c in CASES])
@pytest.mark.parametrize("command", [["sweep"], ["check"]])
def test_cli_file_errors_exit_2_without_traceback(write_mech, command, change, key, words):
    d = copy.deepcopy(twin_beam())
    change(d)
    path = write_mech(d, "broken.toml")
    out = CliRunner().invoke(main, command + [str(path)])
    assert out.exit_code == 2, out.output
    assert "Traceback" not in out.output
    assert str(path) in out.output and key in out.output and words in out.output
    assert not isinstance(out.exception, InputError)   # handled, not escaped


def test_pin_gap_within_tolerance_is_accepted(write_mech):
    # issue 2 contract: pins coincide within 0.01 mm
    d = twin_beam()
    _pin_gap(d, 0.009)
    load_mechanism(write_mech(d))


def test_missing_and_malformed_files_exit_2(tmp_path):
    runner = CliRunner()
    out = runner.invoke(main, ["sweep", str(tmp_path / "none.toml")])
    assert out.exit_code == 2 and "Traceback" not in out.output and "none.toml" in out.output
    bad = tmp_path / "bad.toml"
    bad.write_text("name = \n[bodies", encoding="utf-8")
    out = runner.invoke(main, ["sweep", str(bad)])
    assert out.exit_code == 2 and "Traceback" not in out.output and "bad.toml" in out.output


@pytest.mark.parametrize("option, value", [("--lean", "10:0:5"), ("--lean", "0:10:0"), ("--lean", "abc"),
                                           ("--travel", "1,,x"), ("--lean", "0:10")])
def test_bad_ranges_exit_2(write_mech, option, value):
    out = CliRunner().invoke(main, ["sweep", str(write_mech(twin_beam())), option, value])
    assert out.exit_code == 2, out.output
    assert "Traceback" not in out.output and option in out.output


def test_builtin_configs_load():
    # mechanism files only (configs/ also holds loads files and run configs, which have no [bodies])
    names = sorted(p.stem for p in CONFIGS.glob("*.toml") if "bodies" in tomllib.loads(p.read_text("utf-8")))
    assert {"twin_beam", "twin_beam_sprung", "wishbone_rocker"} <= set(names)
    for name in names:
        mech = load_mechanism(CONFIGS / f"{name}.toml")
        assert [w.name for w in mech.wheels] == ["left", "right"]
        assert mech.chassis in mech.bodies
