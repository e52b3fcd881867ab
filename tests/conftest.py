"""Shared helpers for the kinematics tests: small mechanisms built as dicts.

The builders return plain TOML-like dicts (the shape ``parse_mechanism``
reads), so a test can break one key on purpose and write the file with
:func:`toml_text` / the ``write_mech`` fixture.
"""
from __future__ import annotations

import math
from pathlib import Path

import pytest

from kinematics.mechanism import parse_mechanism

CONFIGS = Path(__file__).resolve().parents[1] / "configs"


# ------------------------------------------------------------------ TOML text
def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {v!r} as TOML here")


def toml_text(data: dict) -> str:
    """A small TOML writer for mechanism-shaped dicts (scalars, [bodies.X], [[arrays]])."""
    out = []
    for k, v in data.items():
        if not isinstance(v, (dict, list)) or (isinstance(v, list) and not any(isinstance(t, dict) for t in v)):
            out.append(f"{k} = {_value(v)}")
    for k, v in data.items():
        if isinstance(v, dict):
            for sub, table in v.items():
                out += ["", f"[{k}.{sub}]"]
                if isinstance(table, dict):
                    out += [f"{p} = {_value(x)}" for p, x in table.items()]
                else:  # a deliberately broken body (not a table)
                    out[-1] = f"[{k}]"
                    out.append(f"{sub} = {_value(table)}")
        elif isinstance(v, list) and any(isinstance(t, dict) for t in v):
            for t in v:
                out += ["", f"[[{k}]]"]
                out += [f"{p} = {_value(x)}" for p, x in t.items()]
    return "\n".join(out) + "\n"


@pytest.fixture
def write_mech(tmp_path):
    """``write_mech(data, name="mech.toml") -> Path``: write a mechanism dict as a TOML file."""

    def write(data: dict, name: str = "mech.toml") -> Path:
        path = tmp_path / name
        path.write_text(toml_text(data), encoding="utf-8")
        return path

    return write


def mech_of(data: dict):
    """Validate a builder dict into a Mechanism."""
    return parse_mechanism(data, "<test>")


# ------------------------------------------------------------------ builders
def _wheel(name, upright, R, r, camber_deg=0.0):
    return {"name": name, "upright": upright, "centre": f"{upright}.hub", "outer_radius_mm": float(R),
            "crown_radius_mm": float(r), "static_camber_deg": float(camber_deg)}


def hub_height(R: float, r: float, camber_deg: float = 0.0) -> float:
    """DOMAIN.md: a toroidal tyre touches the ground with its centre at (R - r) cos(gamma) + r."""
    return (R - r) * math.cos(math.radians(camber_deg)) + r


def twin_beam(*, w_left=330.0, w_right=330.0, w_left_lower=None, w_right_lower=None, z_upper=520.0,
              z_lower=320.0, e_left=0.0, e_right=0.0, pivot_y=0.0, R_left=250.0, r_left=23.0,
              R_right=250.0, r_right=23.0, name="twin_beam") -> dict:
    """Upper and lower beams pivoted on the chassis at ``pivot_y``, uprights at their ends.

    ``w_*`` are the beam half lengths (upper; lower defaults to the same, which
    makes a parallelogram), ``e_*`` the hub offset outboard of the upright
    line through the beam ends.
    """
    wll = w_left if w_left_lower is None else w_left_lower
    wrl = w_right if w_right_lower is None else w_right_lower
    yl_u, yr_u = pivot_y - w_left, pivot_y + w_right
    yl_l, yr_l = pivot_y - wll, pivot_y + wrl
    return {
        "name": name,
        "chassis": "chassis",
        "bodies": {
            "chassis": {"datum": [0.0, 0.0], "upper_pivot": [pivot_y, z_upper], "lower_pivot": [pivot_y, z_lower]},
            "upper_beam": {"centre": [pivot_y, z_upper], "left_end": [yl_u, z_upper], "right_end": [yr_u, z_upper]},
            "lower_beam": {"centre": [pivot_y, z_lower], "left_end": [yl_l, z_lower], "right_end": [yr_l, z_lower]},
            "upright_left": {"top": [yl_u, z_upper], "bottom": [yl_l, z_lower],
                             "hub": [yl_l - e_left, hub_height(R_left, r_left)]},
            "upright_right": {"top": [yr_u, z_upper], "bottom": [yr_l, z_lower],
                              "hub": [yr_l + e_right, hub_height(R_right, r_right)]},
        },
        "pins": [
            {"a": "chassis.upper_pivot", "b": "upper_beam.centre"},
            {"a": "chassis.lower_pivot", "b": "lower_beam.centre"},
            {"a": "upper_beam.left_end", "b": "upright_left.top"},
            {"a": "upper_beam.right_end", "b": "upright_right.top"},
            {"a": "lower_beam.left_end", "b": "upright_left.bottom"},
            {"a": "lower_beam.right_end", "b": "upright_right.bottom"},
        ],
        "wheels": [_wheel("left", "upright_left", R_left, r_left), _wheel("right", "upright_right", R_right, r_right)],
    }


def sprung_twin_beam(*, leg_drop=0.0, **kw) -> dict:
    """:func:`twin_beam` with a telescopic leg on each upright: a slider along the
    upright line and a spring from the upright top cap to a seat on the leg.

    The hubs move to the legs (same place). ``leg_drop`` lowers the spring seat.
    """
    d = twin_beam(**kw)
    d["name"] = kw.get("name", "sprung_twin_beam")
    b = d["bodies"]
    z_up = b["upright_left"]["top"][1]
    z_lo = b["upright_left"]["bottom"][1]
    for side in ("left", "right"):
        up = b[f"upright_{side}"]
        y = up["bottom"][0]
        hub = up.pop("hub")
        up["guide_top"] = [y, z_up + 20.0]
        up["guide_bottom"] = [y, z_lo - 40.0]
        up["spring_cap"] = [y, z_up + 30.0]
        b[f"leg_{side}"] = {"runner": [y, z_lo + 40.0], "seat": [y, z_lo + 60.0 - leg_drop], "hub": hub}
        d["sliders"] = d.get("sliders", []) + [
            {"name": f"leg_{side}_guide", "a_from": f"upright_{side}.guide_top",
             "a_to": f"upright_{side}.guide_bottom", "b": f"leg_{side}.runner"}]
        d["springs"] = d.get("springs", []) + [
            {"name": f"{side}_spring", "a": f"upright_{side}.spring_cap", "b": f"leg_{side}.seat",
             "rate_n_per_mm": 40.0}]
    for w in d["wheels"]:
        w["upright"] = f"leg_{w['name']}"
        w["centre"] = f"leg_{w['name']}.hub"
    return d


def wishbone_rocker(*, upper_inner=(60.0, 420.0), upper_outer=(300.0, 410.0), lower_inner=(50.0, 200.0),
                    lower_outer=(310.0, 170.0), hub_y=350.0, rocker_z=560.0, rocker_half=150.0,
                    mount_frac=0.6, R=250.0, r=23.0, name="wishbone_rocker") -> dict:
    """Symmetric double wishbones, a rocker on the chassis centre line and a
    spring from each rocker end to a mount on each lower wishbone (``mount_frac``
    of the way out). Points are given for the right side and mirrored."""
    def lr(p, side):
        return [-p[0], p[1]] if side == "left" else [p[0], p[1]]

    li, lo = lower_inner, lower_outer
    mount = (li[0] + mount_frac * (lo[0] - li[0]), li[1] + mount_frac * (lo[1] - li[1]))
    bodies = {"chassis": {"datum": [0.0, 0.0], "rocker_pivot": [0.0, rocker_z]},
              "rocker": {"pivot": [0.0, rocker_z], "left_end": [-rocker_half, rocker_z],
                         "right_end": [rocker_half, rocker_z]}}
    pins = [{"a": "chassis.rocker_pivot", "b": "rocker.pivot"}]
    springs = []
    for side in ("left", "right"):
        bodies["chassis"][f"upper_{side}"] = lr(upper_inner, side)
        bodies["chassis"][f"lower_{side}"] = lr(lower_inner, side)
        bodies[f"upper_arm_{side}"] = {"inner": lr(upper_inner, side), "outer": lr(upper_outer, side)}
        bodies[f"lower_arm_{side}"] = {"inner": lr(lower_inner, side), "outer": lr(lower_outer, side),
                                       "mount": lr(mount, side)}
        bodies[f"upright_{side}"] = {"upper_joint": lr(upper_outer, side), "lower_joint": lr(lower_outer, side),
                                     "hub": lr((hub_y, hub_height(R, r)), side)}
        pins += [{"a": f"chassis.upper_{side}", "b": f"upper_arm_{side}.inner"},
                 {"a": f"chassis.lower_{side}", "b": f"lower_arm_{side}.inner"},
                 {"a": f"upper_arm_{side}.outer", "b": f"upright_{side}.upper_joint"},
                 {"a": f"lower_arm_{side}.outer", "b": f"upright_{side}.lower_joint"}]
        springs.append({"name": f"{side}_spring", "a": f"rocker.{side}_end", "b": f"lower_arm_{side}.mount"})
    return {"name": name, "chassis": "chassis", "bodies": bodies, "pins": pins, "springs": springs,
            "wheels": [_wheel("left", "upright_left", R, r), _wheel("right", "upright_right", R, r)]}
