"""``tiltopt loads``: forces per load case, member sizing and the linkage mass of one mechanism."""
from __future__ import annotations

import math

import click
import numpy as np

from tiltopt.kinematics.loads import SAFETY_CAUTION, check_loads_for, load_loads
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model

from ..cli import main
from ..output import table, to_json


def _f(v):
    v = float(v)
    return v if math.isfinite(v) else None


def loads_report(mech_path: str, loads_path: str) -> dict:
    """Everything ``tiltopt loads`` prints, as a JSON-ready dict (nulls where a state was not reached)."""
    from tiltopt.kinematics.sizing import size_linkage
    from tiltopt.kinematics.solver import STATUS_TEXT

    mech = load_mechanism(mech_path)
    spec = load_loads(loads_path)
    check_loads_for(spec, mech)
    model = Model(mech)
    res = size_linkage(model, None, spec)
    fo = res.forces
    states = []
    for i, s in enumerate(res.states):
        ok = bool(fo.ok[i])
        st = int(res.state_status[0, i])
        lean = _f(fo.lean_moment[i]) if ok else None
        wl = [(_f(v) if ok else None) for v in fo.wheel_load[i]]
        states.append({
            "name": s.name, "case": s.case, "kind": s.kind, "lean_deg": s.lean_deg, "travel_mm": s.travel_mm,
            "reached": st == 0,
            "status": STATUS_TEXT[st] if st != 0 else ("in equilibrium" if ok else "no static equilibrium"),
            "front_load_n": s.front_load_n,
            "wheel_load_n": {"left": wl[0], "right": wl[1]},
            "wheel_lifts": bool(ok and min(fo.wheel_load[i]) < 0),
            "tyre_side_force_n": {w: (_f(fo.tyre_side_force[i, k]) if ok else None)
                                  for k, w in enumerate(("left", "right"))},
            "lateral_reference_force_n": _f(fo.lateral_force[i]) if ok else None,
            "spring_force_n": {n: (_f(fo.spring_force[i, k]) if ok else None)
                               for k, n in enumerate(model.spring_names)},
            "link_tension_n": {l.name: (_f(fo.link_tension[i, k]) if ok else None)
                               for k, l in enumerate(mech.links)},
            "pin_force_n": {p.name: ([_f(fo.pin_force[i, k, 0]), _f(fo.pin_force[i, k, 1])] if ok else None)
                            for k, p in enumerate(mech.pins)},
            "slider_force_n": {sl.name: (_f(fo.slider_force[i, k]) if ok else None)
                               for k, sl in enumerate(mech.sliders)},
            "tilt_lock_torque_nm": lean if s.locked else None,
            "balance_moment_nm": None if s.locked else lean,
            "brake_pivot_moment_nm": ({mech.pins[k].name: _f(fo.brake_pivot_moment[i, k] / 1000.0)
                                       for k in np.flatnonzero(fo.brake_pivot_moment[i] > 0)}
                                      if ok and s.brake_g > 0 else {}),
            "brake_bearing_force_n": ({mech.pins[k].name: _f(fo.brake_bearing_force[i, k])
                                       for k in np.flatnonzero(fo.brake_pivot_moment[i] > 0)}
                                      if ok and s.brake_g > 0 else {}),
        })
    members = []
    for j, m in enumerate(res.members):
        members.append({
            "member": m.name, "kind": m.kind, "length_mm": _f(res.length_mm[0, j]), "material": m.material,
            "tube_mm": res.tube_label(0, j), "passes": bool(res.member_passes[0, j]),
            "worst_case": res.worst_case_name(0, j), "utilisation": _f(res.utilisation[0, j]),
            "mass_kg": _f(res.mass_kg[0, j]),
        })
    return {
        "mechanism": mech.name, "mechanism_file": mech_path, "loads_file": loads_path,
        "caution": SAFETY_CAUTION,
        "units": {"force": "N", "moment": "N*m", "length": "mm", "mass": "kg", "angle": "deg"},
        "conventions": "spring force compression positive; link force tension positive; pin force = force on the "
                       "body of end 'a'; moments about x in the lean sense (top toward +y), on the chassis",
        "safety_factor": spec.safety_factor,
        "indeterminate": fo.indeterminate, "redundant_constraints": fo.redundant,
        "states": states, "members": members,
        "members_mass_kg": _f(res.mass_kg[0].sum()), "pivot_count": res.n_pivots,
        "pivot_allowance_kg": res.pivot_mass_kg, "linkage_mass_kg": _f(res.linkage_mass_kg[0]),
        "tilt_lock_torque_nm": _f(res.tilt_lock_torque_nm[0]),
        "feasible": bool(res.feasible[0]), "reason": res.reason[0], "notes": res.notes,
    }


@main.command("loads")
@click.argument("mech", type=click.Path(dir_okay=False))
@click.option("--loads", "loads_path", required=True, type=click.Path(dir_okay=False),
              help="Loads file (vehicle, load cases, materials), TOML.")
@click.option("--format", "fmt", type=click.Choice(["table", "json"]), default="table", show_default=True)
def loads_cmd(mech, loads_path, fmt):
    """Forces per load case, the member sizes that carry them, and the linkage mass."""
    rep = loads_report(mech, loads_path)
    if fmt == "json":
        click.echo(to_json(rep))
        return
    springs = list(rep["states"][0]["spring_force_n"]) if rep["states"] else []
    links = list(rep["states"][0]["link_tension_n"]) if rep["states"] else []
    rows = []
    for s in rep["states"]:
        r = {"case": s["name"], "lean_deg": s["lean_deg"], "travel_mm": s["travel_mm"],
             "wl": s["wheel_load_n"]["left"], "wr": s["wheel_load_n"]["right"],
             "sl": s["tyre_side_force_n"]["left"], "sr": s["tyre_side_force_n"]["right"],
             "lat": s["lateral_reference_force_n"], "lock": s["tilt_lock_torque_nm"],
             "bal": s["balance_moment_nm"], "status": s["status"] + (" (a wheel lifts)" if s["wheel_lifts"] else "")}
        for n in springs:
            r["s." + n] = s["spring_force_n"][n]
        for n in links:
            r["l." + n] = s["link_tension_n"][n]
        rows.append(r)
    cols = ([("case", "case"), ("lean_deg", "lean_deg"), ("travel_mm", "travel_mm"), ("wl", "wheel_L_N"),
             ("wr", "wheel_R_N"), ("sl", "side_L_N"), ("sr", "side_R_N"), ("lat", "lat_ref_N")]
            + [("s." + n, f"{n}_N(c+)") for n in springs] + [("l." + n, f"{n}_N(t+)") for n in links]
            + [("lock", "tilt_lock_Nm"), ("bal", "balance_Nm"), ("status", "status")])
    click.echo(f"{rep['mechanism']}: forces per load case (N, N*m; springs compression +, links tension +, "
               f"moments on the chassis in the lean sense)")
    click.echo(table(rows, cols, digits=1))
    pins = list(rep["states"][0]["pin_force_n"]) if rep["states"] else []
    if pins:
        prow = []
        for s in rep["states"]:
            r = {"case": s["name"]}
            for n in pins:
                v = s["pin_force_n"][n]
                r[n] = None if v is None else math.hypot(*v)
            prow.append(r)
        click.echo("\npin forces, magnitude (N)" + (": minimum-norm solution, the linkage is over-constrained so "
                                                "these are statically indeterminate" if rep["indeterminate"] else ":"))
        click.echo(table(prow, [("case", "case")] + [(n, n) for n in pins], digits=1))
    for s in rep["states"]:
        if s["brake_pivot_moment_nm"]:
            click.echo(f"\nout-of-plane braking ({s['name']}): moment at each chassis pivot and the bearing couple "
                       f"force over its base")
            click.echo(table([{"pivot": k, "moment": v, "bearing": s["brake_bearing_force_n"][k]}
                              for k, v in s["brake_pivot_moment_nm"].items()],
                             [("pivot", "pivot"), ("moment", "moment_Nm"), ("bearing", "bearing_N")], digits=1))
    click.echo(f"\nmembers (safety factor {rep['safety_factor']:g}; utilisation = stress or buckling demand / "
               f"capacity, must be <= 1):")
    click.echo(table(rep["members"], [("member", "member"), ("kind", "kind"), ("length_mm", "length_mm"),
                                      ("material", "material"), ("tube_mm", "tube_DxT_mm"),
                                      ("worst_case", "worst_case"), ("utilisation", "utilisation"),
                                      ("mass_kg", "mass_kg")], digits=3))
    click.echo(f"\nlinkage mass: {rep['linkage_mass_kg']:.3f} kg = members {rep['members_mass_kg']:.3f} kg + "
               f"{rep['pivot_count']} pivots x allowance ({rep['pivot_allowance_kg']:.3f} kg)")
    if rep["tilt_lock_torque_nm"] is not None:
        click.echo(f"tilt lock must hold: {rep['tilt_lock_torque_nm']:.1f} N*m (parked)")
    click.echo("feasible: yes" if rep["feasible"] else f"feasible: NO: {rep['reason']}")
    for n in rep["notes"]:
        click.echo(f"note: {n}")
    if any(s["wheel_lifts"] for s in rep["states"]):
        click.echo("note: a negative wheel load means that wheel lifts: the vehicle would tip over in that case")
    click.echo("\n" + rep["caution"])
