"""Loads input (tiltopt.kinematics.loads), the pin base_mm key and the ``tiltopt loads`` command."""
from __future__ import annotations

import json
import math
import tomllib

import pytest
from click.testing import CliRunner

from tests.helpers import CONFIGS, G, mech_of, twin_beam
from tiltopt.base.errors import InputError
from tiltopt.cli import main
from tiltopt.kinematics.loads import load_catalogue, load_loads, load_materials, parse_loads
from tiltopt.kinematics.mechanism import mechanism_to_toml, mirror, parse_mechanism

DEMO_LOADS = CONFIGS / "loads_demo.toml"
VEHICLE = dict(total_mass_kg=200.0, com_height_mm=600.0, front_share=0.5, wheelbase_mm=1500.0, lean_limit_deg=25.0)


def test_default_cases_and_front_load_transfer():
    # Defaults of kinematics/cases.py, each with its source: static 1 g; bump 3 g (De Lorenzo & Hull);
    # one-wheel bump 3 x one wheel's static load, tilt held; kerb strike 1 g of the front axle load
    # at one contact (common practice); balanced cornering at the lean limit with side force
    # = N tan(lean); braking 0.7 g (common practice, no source); parked on a 5.7 deg (10 %) cross
    # slope. Braking load transfer by hand: m a h / wheelbase (rigid-body pitch balance, closed form):
    # 200 * 9.80665 * 0.7 * 600 / 1500 = 549.17 N. W with the standard gravity of tests.helpers (CGPM 1901).
    spec = parse_loads({"vehicle": VEHICLE}, "<test>")
    names = [s.name for s in spec.states()]
    assert names == ["static", "bump", "one_wheel_bump", "one_wheel_bump_mirror", "kerb_strike", "kerb_strike_mirror",
                     "cornering", "cornering_mirror", "braking", "parked", "parked_mirror", "fatigue range"]
    st = {s.name: s for s in spec.states()}
    assert all(s.source for s in spec.states())
    W = 200.0 * G
    n_s = 0.5 * W / 2
    assert st["static"].front_load_n == pytest.approx(0.5 * W)
    assert st["bump"].front_load_n == pytest.approx(3.0 * 0.5 * W)
    assert st["one_wheel_bump"].wheel_load_n == pytest.approx((3 * n_s, n_s))
    assert st["one_wheel_bump_mirror"].wheel_load_n == pytest.approx((n_s, 3 * n_s))
    assert st["one_wheel_bump"].locked and st["one_wheel_bump"].front_load_n == pytest.approx(4 * n_s)
    assert st["kerb_strike"].kerb_force_n == pytest.approx((0.5 * W, 0.0))          # inward on the left wheel
    assert st["kerb_strike_mirror"].kerb_force_n == pytest.approx((0.0, -0.5 * W))
    assert st["braking"].front_load_n == pytest.approx(0.5 * W + 549.1724, abs=1e-3)
    assert st["braking"].rear_load_n == pytest.approx(0.5 * W - 549.1724, abs=1e-3)
    assert st["cornering"].side_ratio == pytest.approx(math.tan(math.radians(25.0)))
    assert st["cornering_mirror"].lean_deg == -25.0 and st["cornering_mirror"].side_ratio < 0
    # parked on the slope, leaning downhill: gravity W (sin b, -cos b); the tyres hold the part across
    b = math.radians(5.7)
    assert st["parked"].locked and st["parked"].lean_deg == 25.0
    assert st["parked"].side_ratio == pytest.approx(-math.tan(b)) and st["parked_mirror"].side_ratio == pytest.approx(
        math.tan(b))
    assert st["parked"].front_load_n + st["parked"].rear_load_n == pytest.approx(W * math.cos(b))
    assert st["fatigue range"].role == "fatigue" and st["fatigue range"].front_load_n == pytest.approx(0.5 * 0.5 * W)
    assert spec.safety_factor == 2.0


@pytest.mark.parametrize("vehicle, cases, key", [
    # front_share = 1: the linkage carries the whole vehicle, nothing is left on a rear wheel to
    # transfer: rear load m g (1 - 1 - 0.7 h / L) < 0 (the formula of kinematics/cases.py)
    (dict(VEHICLE, front_share=1.0), None, "vehicle.front_share"),
    (dict(VEHICLE, front_share=0.8), [{"name": "stop", "kind": "braking", "brake_g": 0.6}], "cases[0].brake_g"),
])
def test_braking_beyond_the_transfer_formula_is_refused(vehicle, cases, key):
    # By hand: with front share 0.8, h = 600, L = 1500 the rear wheel keeps a load while
    # 0.8 + a 600 / 1500 <= 1, i.e. up to a = 0.5 g; 0.6 g would lift it.
    data = {"vehicle": vehicle} if cases is None else {"vehicle": vehicle, "cases": cases}
    with pytest.raises(InputError) as e:
        parse_loads(data, "my_loads.toml")
    assert e.value.key == key and "rear wheel would lift" in str(e.value)
    ok = parse_loads({"vehicle": dict(VEHICLE, front_share=0.8),
                      "cases": [{"name": "stop", "kind": "braking", "brake_g": 0.5}]}, "<test>")
    assert ok.states()[0].rear_load_n == pytest.approx(0.0, abs=1e-9)


def test_materials_file_matches_sources():
    # Values and sources as listed in the loads issue: 6061-T6 (2.70 g/cm3, 68.9 GPa, 276 MPa;
    # welded about 138 MPa per MMPDS), 7075-T6 (2.81, 71.7, 503), 4130 normalized (7.85, 205, 435;
    # ASM), Ti-6Al-4V grade 5 (4.43, 114, 830).
    m = load_materials()
    want = {"6061-T6": (2.70, 68.9, 276.0), "7075-T6": (2.81, 71.7, 503.0), "4130": (7.85, 205.0, 435.0),
            "Ti-6Al-4V": (4.43, 114.0, 830.0)}
    for name, (rho, E, sy) in want.items():
        assert (m[name].density_g_cm3, m[name].elastic_modulus_gpa, m[name].yield_mpa) == (rho, E, sy)
        assert m[name].source
    assert m["6061-T6"].allowable_mpa == 138.0 and "MMPDS" in m["6061-T6"].source
    cat = load_catalogue()
    assert set(cat.material) == set(want)
    assert all(0 < t < d / 2 for d, t in zip(cat.outer_diameter_mm, cat.wall_mm))


def test_demo_loads_file_parses():
    spec = load_loads(DEMO_LOADS)
    assert spec.vehicle.total_mass_kg > 0 and 0 < spec.vehicle.front_share < 1
    assert {c.kind for c in spec.cases} == {"static", "bump", "one_wheel_bump", "kerb_strike", "cornering", "braking",
                                            "parked"}
    assert spec.tilt_lock.effective_radius_mm > 0 and spec.springs.sag_mm > 0 and spec.fatigue.cycles > 0


@pytest.mark.parametrize("patch, key", [
    ({"vehicle": {"front_share": 1.5}}, "vehicle.front_share"),
    ({"vehicle": {"total_mass_kg": "heavy"}}, "vehicle.total_mass_kg"),
    ({"vehicle": {"colour": "red"}}, "vehicle.colour"),
    ({"sizing": {"material": "unobtainium"}}, "sizing.material"),
    ({"sizing": {"safety_factor": 0.5}}, "sizing.safety_factor"),
    ({"cases": [{"name": "x", "kind": "jump"}]}, "cases[0].kind"),
    ({"cases": [{"name": "x", "kind": "bump", "vertical_g": -1.0}]}, "cases[0].vertical_g"),
    ({"cases": [{"name": "x", "kind": "static"}, {"name": "x", "kind": "bump"}]}, "cases[1].name"),
    ({"members": {"upper_beam": {"material": "balsa"}}}, "members.upper_beam.material"),
])
def test_parse_errors_name_key(patch, key):
    data = {"vehicle": dict(VEHICLE)}
    for k, v in patch.items():
        if isinstance(v, dict) and k in data:
            data[k].update(v)
        else:
            data[k] = v
    with pytest.raises(InputError) as e:
        parse_loads(data, "my_loads.toml")
    assert e.value.key == key and e.value.source == "my_loads.toml"


def test_missing_vehicle_key():
    v = dict(VEHICLE)
    del v["com_height_mm"]
    with pytest.raises(InputError) as e:
        parse_loads({"vehicle": v}, "f.toml")
    assert e.value.key == "vehicle.com_height_mm" and "required" in str(e.value)


def _write_loads(tmp_path, data) -> str:
    p = tmp_path / "loads.toml"
    lines = []
    for table, body in data.items():
        if isinstance(body, list):
            for t in body:
                lines += [f"[[{table}]]"] + [f"{k} = {json.dumps(v)}" for k, v in t.items()]
        else:
            lines += [f"[{table}]"]
            for k, v in body.items():
                if isinstance(v, dict):
                    lines += [f"[{table}.{k}]"] + [f"{kk} = {json.dumps(vv)}" for kk, vv in v.items()]
                else:
                    lines.append(f"{k} = {json.dumps(v)}")
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return str(p)


@pytest.mark.parametrize("extra, key", [
    ({"vehicle": dict(VEHICLE, front_share=0.0)}, "vehicle.front_share"),
    ({"vehicle": VEHICLE, "members": {"no_such_arm": {"material": "4130"}}}, "members.no_such_arm"),
    ({"vehicle": VEHICLE, "tilt_lock": {"body": "upright_left"}}, "tilt_lock.body"),
])
def test_cli_input_errors_exit_2_naming_file_and_key(tmp_path, extra, key):
    path = _write_loads(tmp_path, extra)
    r = CliRunner().invoke(main, ["loads", str(CONFIGS / "twin_beam.toml"), "--loads", path])
    assert r.exit_code == 2, r.output
    assert path in r.output and f"key '{key}'" in r.output
    assert "Traceback" not in r.output


def test_cli_missing_file_exit_2(tmp_path):
    r = CliRunner().invoke(main, ["loads", str(CONFIGS / "twin_beam.toml"), "--loads", str(tmp_path / "nope.toml")])
    assert r.exit_code == 2 and "nope.toml" in r.output


def test_cli_json_and_table_on_demo():
    r = CliRunner().invoke(main, ["loads", str(CONFIGS / "wishbone_rocker.toml"), "--loads", str(DEMO_LOADS),
                                  "--format", "json"])
    assert r.exit_code == 0, r.output
    rep = json.loads(r.output)
    assert "qualified engineers" in rep["caution"]
    assert rep["feasible"] and rep["linkage_mass_kg"] > 0
    assert {s["name"] for s in rep["states"]} >= {"static", "bump", "braking", "parked"}
    st = rep["states"][0]
    assert st["spring_force_n"]["left_spring"] > 0       # springs carry the static load in compression
    assert all(s["source"] for s in rep["states"])
    for m in rep["members"]:
        assert m["section"] and m["governing_check"] and set(m["checks"]) == {"axial", "bending", "combined", "shear",
                                                                               "buckling"}
        assert m["fatigue_utilisation"] is not None and m["fatigue_allowable_range_mpa"] > 0
    lk = rep["tilt_lock"]
    assert lk["clamp_force_n"] == pytest.approx(lk["safety_factor"] * lk["torque_nm"] * 1000.0
                                                / (lk["faces"] * lk["friction"] * lk["effective_radius_mm"]))
    assert "not a fatigue design" in rep["fatigue"]["screening"] and rep["fatigue"]["classes"]["4130"]["source"]
    assert [s["spring"] for s in rep["springs"]] == ["left_spring", "right_spring"]
    r = CliRunner().invoke(main, ["loads", str(CONFIGS / "twin_beam.toml"), "--loads", str(DEMO_LOADS)])
    assert r.exit_code == 0, r.output
    assert "linkage mass" in r.output and "indeterminate" in r.output and "qualified engineers" in r.output
    for text in ("governing sections", "fatigue screening", "clamp force", "load cases and their sources"):
        assert text in r.output


def test_pin_base_mm_round_trip_and_validation():
    d = twin_beam()
    d["pins"][0]["base_mm"] = 70.0
    mech = mech_of(d)
    assert mech.pins[0].base_mm == 70.0 and mech.pins[1].base_mm is None
    again = parse_mechanism(tomllib.loads(mechanism_to_toml(mech)), "<rt>")
    assert again == mech
    assert mirror(mech).pins[0].base_mm == 70.0
    d["pins"][0]["base_mm"] = -5.0
    with pytest.raises(InputError) as e:
        mech_of(d)
    assert e.value.key == "pins[0].base_mm"


def test_base_mm_changes_bearing_force():
    # The bearing couple force of the braking model is M / base (closed form): doubling the base
    # halves it, the moment stays.
    from tiltopt.kinematics.forces import analyse_forces
    from tiltopt.kinematics.model import Model

    spec = parse_loads({"vehicle": VEHICLE, "cases": [{"name": "b", "kind": "braking"}]}, "<test>")
    out = []
    for base in (40.0, 80.0):
        d = twin_beam()
        d["pins"][0]["base_mm"] = base
        model = Model(mech_of(d))
        out.append(analyse_forces(model, model.default_geometry, spec)[1])
    assert out[0].brake_pivot_moment[0, 0] == pytest.approx(out[1].brake_pivot_moment[0, 0], rel=1e-12)
    assert out[0].brake_bearing_force[0, 0] == pytest.approx(2 * out[1].brake_bearing_force[0, 0], rel=1e-12)
    assert out[0].brake_pivot_moment[0, 2] == 0.0       # an outer pin is not a chassis pivot
