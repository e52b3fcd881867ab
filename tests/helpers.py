"""Shared helpers of the tests: small mechanisms built as dicts, and a fixture run for the report tests.

The builders return plain TOML-like dicts (the shape ``parse_mechanism``
reads), so a test can break one key on purpose and write the file with
:func:`toml_text` / the ``write_mech`` fixture.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from tiltopt.kinematics.mechanism import load_mechanism, parse_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.sweep import sweep

CONFIGS = Path(__file__).resolve().parents[1] / "configs"

# standard acceleration of gravity, m/s^2: CGPM 1901 / ISO 80000-3, exact by definition. Tests compute
# weights with this value, never with the code's own constant, so a wrong constant there fails them.
G = 9.80665


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


def mech_of(data: dict):
    """Validate a builder dict into a Mechanism."""
    return parse_mechanism(data, "<test>")


# ------------------------------------------------------------------ builders
def _wheel(name, upright, R, r, camber_deg=0.0):
    return {"name": name, "upright": upright, "centre": f"{upright}.hub", "outer_radius_mm": float(R),
            "crown_radius_mm": float(r), "static_camber_deg": float(camber_deg)}


def hub_height(R: float, r: float, camber_deg: float = 0.0) -> float:
    """docs/domain.md: a toroidal tyre touches the ground with its centre at (R - r) cos(gamma) + r."""
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


def hub_centre_ideal(w=330.0, spacing=60.0, hub_radius=120.0, hub_width=46.0) -> dict:
    """The ideal linkage of docs/domain.md built so that it clears its wheels: a twin-beam
    parallelogram whose outer pivots lie on the wheel planes (zero scrub, heave and camber error),
    the beams ``spacing`` apart about hub height so that the short uprights and the beam ends sit in
    the hub zone of a hub-centre wheel: a large hub (``hub_radius``) in a disc no wider than the tyre
    (``hub_width``), as a hub-centre steered wheel has, so that the beams, which turn against the
    wheel by the lean, stay in the hub zone until they are clear of the disc. The members that carry
    a wheel may meet it only there. The wheels steer about a vertical axis through their centres.
    """
    zc = hub_height(250.0, 23.0)
    d = twin_beam(w_left=w, w_right=w, z_upper=zc + spacing / 2, z_lower=zc - spacing / 2, name="hub_centre_ideal")
    for wh in d["wheels"]:
        wh.update(hub_radius_mm=hub_radius, hub_width_mm=hub_width)
    return d


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


def tie_link_beam(e=50.0) -> dict:
    """twin_beam with the lower beam replaced by two links from one chassis pivot (a determinate linkage)."""
    d = twin_beam(e_left=e, e_right=e, name="tie_link")
    del d["bodies"]["lower_beam"]
    d["pins"] = [p for p in d["pins"] if "lower_beam" not in p["a"] + p["b"]]
    d["links"] = [{"name": "tie_left", "a": "chassis.lower_pivot", "b": "upright_left.bottom"},
                  {"name": "tie_right", "a": "chassis.lower_pivot", "b": "upright_right.bottom"}]
    return d


# fixture run of the report tests (explorer, sheet, browser)
LEAN_LIMIT = 25.0
TRAVEL = (-30.0, 0.0, 30.0)


def _moved(mech, dz_upper: float, dz_lower: float, dy_outer: float):
    """A symmetric variant: inner pivots raised, outer joints (and hubs) moved out."""
    pts = {}
    for side, sgn in (("left", -1.0), ("right", 1.0)):
        for ref in (f"chassis.upper_{side}_pivot", f"upper_arm_{side}.inner"):
            y, z = mech.point(ref)
            pts[ref] = (y, z + dz_upper)
        for ref in (f"chassis.lower_{side}_pivot", f"lower_arm_{side}.inner"):
            y, z = mech.point(ref)
            pts[ref] = (y, z + dz_lower)
        for ref in (f"upper_arm_{side}.outer", f"upright_{side}.upper_joint", f"lower_arm_{side}.outer",
                    f"upright_{side}.lower_joint", f"upright_{side}.hub"):
            y, z = mech.point(ref)
            pts[ref] = (y + sgn * dy_outer, z)
    return mech.with_points(pts)


def fixture_run(n: int = 8, n_bad: int = 3, seed: int = 3):
    """(ExplorerRun, dict of candidate_id -> Mechanism, front DataFrame) from a seeded set of variants."""
    from tiltopt.reports.explorer import ExplorerRun

    base = load_mechanism(CONFIGS / "wishbone_rocker.toml")
    model = Model(base)
    rng = np.random.default_rng(seed)
    X = np.column_stack([rng.uniform(-40, 40, n + n_bad), rng.uniform(-30, 30, n + n_bad),
                         rng.uniform(-20, 40, n + n_bad)])
    mechs = {}
    ids = [f"g{1 + k // 4:03d}-{k:04d}" for k in range(n + n_bad)]
    for cid, x in zip(ids, X):
        mechs[cid] = _moved(base, *x)
    geom = model.batch_geometry(np.stack([model.geometry_from(mechs[c]).points[0] for c in ids]))
    lean = np.linspace(0.0, LEAN_LIMIT, 11)
    res = sweep(model, geom, lean, TRAVEL)
    ok = res.converged.all(axis=(1, 2))
    max_scrub = np.nanmax(np.abs(res.scrub), axis=(1, 2))
    max_heave = np.nanmax(np.abs(res.heave), axis=(1, 2))
    cam = np.degrees(np.nanmax(np.abs(res.camber_error), axis=(1, 2, 3)))
    width = np.nanmax(res.contact[:, 1, :, 1, 0] - res.contact[:, 1, :, 0, 0], axis=1) + 2 * 23.0
    df = pd.DataFrame({
        "candidate_id": ids, "generation": [1 + k // 4 for k in range(n + n_bad)],
        "feasible": [bool(o) for o in ok[:n]] + [False] * n_bad,
        "violation": [0.0] * n + [5.0 + k for k in range(n_bad)],
        "reason": [""] * n + ["min_ground_mm below margin"] * n_bad,
        "var.upper_pivot_dz": X[:, 0], "var.lower_pivot_dz": X[:, 1], "var.outer_dy": X[:, 2],
        "obj.max_scrub": max_scrub, "obj.max_heave": max_heave, "obj.max_camber_error": cam,
        "max_scrub_mm": max_scrub, "max_heave_mm": max_heave, "max_camber_error_deg": cam,
        "overall_width_mm": width,
    })
    units = {"var.upper_pivot_dz": "mm", "var.lower_pivot_dz": "mm", "var.outer_dy": "mm",
             "obj.max_scrub": "mm", "obj.max_heave": "mm", "obj.max_camber_error": "deg"}
    front = df.iloc[:n].reset_index(drop=True)

    def geometry_for(rows):
        return model.batch_geometry(np.stack([model.geometry_from(mechs[c]).points[0] for c in rows["candidate_id"]]))

    run = ExplorerRun(run_id="fixture-a", front=front, model=model, geometry_for=geometry_for,
                      lean_limit_deg=LEAN_LIMIT, travel_mm=TRAVEL, lean_step_deg=2.5, evaluations=df,
                      template="wishbone_rocker", units=units, run_dir="results/fixture-a",
                      meta={"seed": seed, "config": "tests/fixture"})
    return run, mechs, front, res


# a real tiny run of the optimiser (explorer, sheet and browser tests)
TINY_CONFIG = """
objectives = ["overall_width", "max_scrub", "max_heave"]
[run]
name = "tiny"
seed = 2
algorithm = "nsga2"
population = 16
generations = 3
output = "out"
checkpoint_every = 1
[template]
name = "wishbone_rocker"
[envelope]
lean_limit_deg = 30.0
lean_step_deg = 5.0
travel_mm = [-30.0, 0.0, 30.0]
[constraints]
max_width_mm = 900.0
"""


def make_tiny_run(folder: Path) -> Path:
    """A real run of the optimiser (16 x 3 evaluations of the wishbone-rocker template, seeded)."""
    from tiltopt.optimizer.config import load_config
    from tiltopt.optimizer.runner import start_run

    cfg = folder / "tiny.toml"
    cfg.write_text(TINY_CONFIG, encoding="utf-8")
    out = start_run(load_config(cfg), overwrite=True, progress=False)
    return Path(out.run_dir)


# a constrained NSGA-III run config: many random wishbone designs fail to assemble (ties on violation)
NSGA3_TILT = """
objectives = ["overall_width", "max_scrub", "max_heave"]

[run]
name = "n3"
seed = 4
algorithm = "nsga3"
population = 20
generations = 8
output = "out"
checkpoint_every = 3

[template]
name = "wishbone_rocker"

[envelope]
lean_limit_deg = 30.0
lean_step_deg = 10.0
travel_mm = [0.0]

[constraints]
max_width_mm = 900.0
"""


# ------------------------------------------------------------------ the command line
def cli_command(*args) -> list[str]:
    """``tiltopt ARGS`` as a subprocess command line (this interpreter, this checkout)."""
    import sys

    return [sys.executable, "-c", "from tiltopt.cli import main; main()", *map(str, args)]


def one_error(result, *needles) -> str:
    """A click result that ended as a user error: exit 2, one line 'error: ...' holding every needle."""
    assert result.exit_code == 2, result.output
    assert "Traceback" not in result.output
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("error: "), result.output
    for n in needles:
        assert n in lines[0], result.output
    return lines[0]


# a large front for the explorer's browser tests and benchmarks/explorer.py
BIG_CONFIG = """
objectives = ["overall_width", "max_scrub", "max_heave", "min_clearance", "linkage_mass"]
shell = "{configs}/shell_demo.toml"
loads = "{configs}/loads_demo.toml"
[run]
name = "big"
seed = 3
algorithm = "nsga3"
population = 12
generations = 2
output = "out"
checkpoint_every = 1
[template]
name = "wishbone_rocker"
fixed = {{ outer_spacing_delta = 0.0, outer_split_delta = 0.0 }}
[envelope]
lean_limit_deg = 30.0
lean_step_deg = 5.0
travel_mm = [-30.0, 0.0, 30.0]
[constraints]
max_width_mm = 900.0
[targets]
max_scrub_mm = {{ max = 40.0 }}
"""


def make_big_front(folder: Path, n: int = 10_000, n_infeasible: int = 20_000, seed: int = 0) -> Path:
    """A run folder with an ``n``-design front and ``n_infeasible`` infeasible evaluations.

    A real short run of a demo-like problem (five objectives, the demo shell and loads) gives the folder,
    its inputs and its column layout; its front is then replaced by ``n`` designs: the template's base
    design with each variable moved by up to 2 % of its range (so every design assembles and its detail
    can be computed), with the objective and metric values of a feasible evaluated design each scaled by
    up to +-3 % (seeded noise: a synthetic front for the page, not an optimisation result). The infeasible
    rows are such designs marked infeasible with a reason.
    """
    import pandas as pd

    from tiltopt.optimizer import results as R
    from tiltopt.optimizer.config import load_config
    from tiltopt.optimizer.runner import start_run
    from tiltopt.problems.registry import OBJECTIVES

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    cfg = folder / "big.toml"
    cfg.write_text(BIG_CONFIG.format(configs=CONFIGS), encoding="utf-8")
    run_dir = Path(start_run(load_config(cfg), overwrite=True, progress=False).run_dir)
    run = R.load_run(run_dir)
    ev = run.evaluations
    feas = ev[ev["feasible"].astype(bool)]
    assert len(feas), "the short run found no feasible design"
    tpl = run.template
    rng = np.random.default_rng(seed)
    total = n + n_infeasible
    x0 = tpl.defaults
    span = tpl.xu - tpl.xl
    X = np.clip(x0 + rng.uniform(-0.02, 0.02, (total, len(x0))) * span, tpl.xl, tpl.xu)
    base = feas.iloc[rng.integers(0, len(feas), total)].reset_index(drop=True)
    rows = base.copy()
    num = [c for c in rows.columns
           if pd.api.types.is_float_dtype(rows[c]) and not c.startswith(("obj.", "var.", "con."))
           and c != "violation"]
    rows[num] = rows[num].to_numpy() * (1.0 + rng.uniform(-0.03, 0.03, (total, len(num))))
    for o in run.objective_names:            # objectives from their metrics, as the problem writes them
        spec = OBJECTIVES[o]
        rows[f"obj.{o}"] = spec.sign * rows[spec.metric]
    for j, v in enumerate(tpl.variables):
        rows[f"var.{v.name}"] = X[:, j]
    rows["candidate_id"] = [f"g{1 + k // 1000:03d}-{k % 1000:04d}" for k in range(total)]
    rows["generation"] = np.array([1 + k // 1000 for k in range(total)], dtype=np.int64)
    bad = np.arange(total) >= n
    rows["feasible"] = ~bad
    rows["violation"] = np.where(bad, rng.uniform(0.1, 5.0, total), 0.0)
    rows["reason"] = np.where(bad, [f"max scrub {v:.1f} mm over the limit" for v in rng.uniform(0.1, 9.0, total)], "")
    meta = {"run_id": run.run_id, "seed": run.meta.get("seed"), "config": run.meta.get("config"),
            "versions": run.meta.get("versions"), "caution": R.CAUTION,
            "note": "synthetic front for tests and benchmarks (tests/helpers.py make_big_front)"}
    R.write_parquet(run_dir / R.FRONT, rows[~bad].reset_index(drop=True), run.units, meta)
    R.write_parquet(run_dir / R.EVALUATIONS, rows, run.units, meta)
    meta_json = dict(run.meta)
    meta_json["front_size"] = int(n)
    R.write_json(run_dir / R.RUN_JSON, meta_json)
    return run_dir
