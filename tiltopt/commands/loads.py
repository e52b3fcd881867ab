"""``tiltopt loads``: forces per load case, member sizing and the linkage mass of one mechanism."""
from __future__ import annotations

import math

import click
import numpy as np

from tiltopt.kinematics.loads import SAFETY_CAUTION, check_loads_for, load_loads
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.kinematics.solver import STATUS_TEXT

from ..cli import main
from ..output import table, to_json


def _f(v):
    v = float(v)
    return v if math.isfinite(v) else None


def loads_report(mech_path: str, loads_path: str) -> dict:
    """Everything ``tiltopt loads`` prints, as a JSON-ready dict (nulls where a state was not reached)."""
    from tiltopt.kinematics.sizing import size_linkage
    from tiltopt.kinematics.springs import analyse_springs

    mech = load_mechanism(mech_path)
    spec = load_loads(loads_path)
    check_loads_for(spec, mech)
    model = Model(mech)
    res = size_linkage(model, None, spec)
    springs = analyse_springs(model, None, res, spec.springs)
    return {
        "mechanism": mech.name, "mechanism_file": mech_path, "loads_file": loads_path,
        "caution": SAFETY_CAUTION,
        "units": {"force": "N", "moment": "N*m", "length": "mm", "mass": "kg", "angle": "deg", "stress": "MPa"},
        "conventions": "spring force compression positive; link force tension positive; pin force = force on the "
                       "body of end 'a'; moments about x in the lean sense (top toward +y), on the chassis; section "
                       "axial force tension positive",
        "safety_factor": spec.safety_factor,
        "indeterminate": res.forces.indeterminate, "redundant_constraints": res.forces.redundant,
        "states": _state_rows(res, model), "members": _member_rows(res),
        "members_mass_kg": _f(res.mass_kg[0].sum()), "pivot_count": res.n_pivots,
        "pivot_allowance_kg": res.pivot_mass_kg, "linkage_mass_kg": _f(res.linkage_mass_kg[0]),
        "tilt_lock_torque_nm": _f(res.tilt_lock_torque_nm[0]), "tilt_lock": _lock_row(res, spec),
        "fatigue": {"screening": FATIGUE_SCREENING, "cycles": spec.fatigue.cycles, "peak_g": spec.fatigue.peak_g,
                    "partial_factor": spec.fatigue.partial_factor,
                    "classes": {m: {"fat_mpa": spec.materials[m].fatigue_fat_mpa,
                                    "slope": spec.materials[m].fatigue_slope,
                                    "source": spec.materials[m].fatigue_source}
                                for m in sorted({mb.material for mb in res.members})}},
        "springs": _spring_rows(springs, res, mech) if springs is not None else [],
        "feasible": bool(res.feasible[0]), "reason": res.reason[0], "notes": res.notes + _spring_notes(springs),
    }


FATIGUE_SCREENING = ("a screening of the welded joints, not a fatigue design: one S-N class per material at every "
                     "section, the stated cycles of one load change; a member above 1 needs a fatigue design "
                     "(or a larger tube, or a better joint)")


def _state_rows(res, model) -> list[dict]:
    fo, mech, out = res.forces, model.mech, []
    for i, s in enumerate(res.states):
        ok = bool(fo.ok[i])
        st = int(res.state_status[0, i])
        lean = _f(fo.lean_moment[i]) if ok else None
        wl = [(_f(v) if ok else None) for v in fo.wheel_load[i]]
        braking = ok and s.brake_g > 0
        hit = np.flatnonzero(fo.brake_pivot_moment[i] > 0) if braking else []
        out.append({
            "name": s.name, "case": s.case, "kind": s.kind, "role": s.role, "source": s.source,
            "lean_deg": s.lean_deg, "travel_mm": s.travel_mm, "slope_deg": s.slope_deg, "tilt_locked": s.locked,
            "reached": st == 0,
            "status": STATUS_TEXT[st] if st != 0 else ("in equilibrium" if ok else "no static equilibrium"),
            "front_load_n": s.front_load_n,
            "wheel_load_n": {"left": wl[0], "right": wl[1]},
            "prescribed_wheel_load_n": ({"left": s.wheel_load_n[0], "right": s.wheel_load_n[1]}
                                        if s.wheel_load_n else None),
            "kerb_force_n": {"left": s.kerb_force_n[0], "right": s.kerb_force_n[1]},
            "wheel_lifts": bool(ok and min(fo.wheel_load[i]) < 0),
            "tyre_side_force_n": {w: (_f(fo.tyre_side_force[i, k]) if ok else None)
                                  for k, w in enumerate(("left", "right"))},
            "lateral_reference_force_n": _f(fo.lateral_force[i]) if ok else None,
            "spring_force_n": {n: (_f(fo.spring_force[i, k]) if ok else None)
                               for k, n in enumerate(model.spring_names)},
            "link_tension_n": {l.name: (_f(fo.link_tension[i, k]) if ok else None) for k, l in enumerate(mech.links)},
            "pin_force_n": {p.name: ([_f(fo.pin_force[i, k, 0]), _f(fo.pin_force[i, k, 1])] if ok else None)
                            for k, p in enumerate(mech.pins)},
            "slider_force_n": {sl.name: (_f(fo.slider_force[i, k]) if ok else None)
                               for k, sl in enumerate(mech.sliders)},
            "tilt_lock_torque_nm": lean if s.locked else None,
            "balance_moment_nm": None if s.locked else lean,
            "roll_couple_nm": (_f(fo.roll_couple[i]) if ok else None) if s.wheel_load_n else None,
            "brake_pivot_moment_nm": {mech.pins[k].name: _f(fo.brake_pivot_moment[i, k] / 1000.0) for k in hit},
            "brake_bearing_force_n": {mech.pins[k].name: _f(fo.brake_bearing_force[i, k]) for k in hit},
        })
    return out


def _member_rows(res) -> list[dict]:
    from tiltopt.kinematics.sizing import CHECKS

    out = []
    for j, m in enumerate(res.members):
        sf = res.section_force[0, j]
        out.append({
            "member": m.name, "kind": m.kind, "length_mm": _f(res.length_mm[0, j]), "material": m.material,
            "tube_mm": res.tube_label(0, j), "passes": bool(res.member_passes[0, j]),
            "worst_case": res.worst_case_name(0, j), "section": res.section_name(0, j),
            "governing_check": res.governing_check(0, j), "utilisation": _f(res.utilisation[0, j]),
            "checks": {k: _f(res.check[k][0, j]) for k in CHECKS},
            "section_force": {"axial_n": _f(sf[0]), "shear_n": _f(sf[1]), "moment_nm": _f(sf[2])},
            "fatigue_utilisation": _f(res.fatigue_utilisation[0, j]),
            "fatigue_range_mpa": _f(res.fatigue_range_mpa[0, j]),
            "fatigue_allowable_range_mpa": _f(res.fatigue_allowable_mpa[j]),
            "fatigue_section": (res.section_name(0, j, fatigue=True)
                                if np.isfinite(res.fatigue_utilisation[0, j]) else None),
            "mass_kg": _f(res.mass_kg[0, j]),
        })
    return out


def _lock_row(res, spec) -> dict:
    tl, k = spec.tilt_lock, int(res.tilt_lock_case[0])
    return {"torque_nm": _f(res.tilt_lock_torque_nm[0]), "case": res.states[k].name if k >= 0 else None,
            "effective_radius_mm": tl.effective_radius_mm, "friction": tl.friction,
            "friction_source": tl.friction_source, "faces": tl.faces, "safety_factor": spec.safety_factor,
            "clamp_force_n": _f(res.tilt_lock_clamp_n[0]),
            "rule": "clamp force = safety factor x torque / (faces x friction x effective radius)"}


def _spring_rows(sp, res, mech) -> list[dict]:
    out = []
    for k, s in enumerate(mech.springs):
        cv = sp.curves[k]
        mc = int(res.spring_max_case[0, k])
        out.append({
            "spring": s.name, "kind": s.kind, "curve": cv.source if cv else "no rate or curve in the mechanism file",
            "curve_points": ([[float(x), float(f)] for x, f in zip(cv.x_mm, cv.f_n)] if cv else None),
            "max_deflection_mm": _f(cv.max_deflection_mm) if cv else None,
            "sag_mm": sp.sag_mm, "static_force_n": _f(sp.static_force_n[0, k]),
            "static_deflection_mm": _f(sp.static_deflection_mm[0, k]),
            "design_length_mm": _f(sp.design_length_mm[0, k]), "topout_length_mm": _f(sp.topout_length_mm[0, k]),
            "suggested_preload_n": _f(sp.preload_n[0, k]),
            "preload_deflection_mm": _f(sp.preload_deflection_mm[0, k]),
            "suggested_rate_n_per_mm": _f(sp.suggested_rate_n_per_mm[0, k]),
            "max_case_force_n": _f(res.spring_max_n[0, k]), "max_case": res.states[mc].name if mc >= 0 else None,
            "stroke_mm": _f(sp.stroke_mm[0, k]), "full_bump_deflection_mm": _f(sp.full_bump_deflection_mm[0, k]),
            "full_bump_force_n": _f(sp.full_bump_force_n[0, k]),
            "bottoming_margin_mm": _f(sp.bottoming_margin_mm[0, k]),
            "bottoms": bool(sp.bottoms[0, k]), "bottoming_travel_mm": _f(sp.bottoming_travel_mm[0, k]),
            "given_setup_force_n": _f(sp.given_setup_force_n[0, k]),
        })
    return out


def _spring_notes(sp) -> list[str]:
    if sp is None:
        return []
    notes = []
    for k, n in enumerate(sp.names):
        if sp.bottoms[0, k]:
            notes.append(f"spring {n} bottoms (is solid) at travel {sp.bottoming_travel_mm[0, k]:.1f} mm, inside the "
                         f"envelope's bump of {sp.travel_mm.max():g} mm")
        if sp.preload_deflection_mm[0, k] < 0:
            stroke = sp.topout_length_mm[0, k] - sp.design_length_mm[0, k]
            sag0 = sp.sag_mm * sp.static_deflection_mm[0, k] / stroke
            notes.append(f"spring {n} is too stiff for the {sp.sag_mm:g} mm sag: with no preload it sags only "
                         f"{sag0:.1f} mm (the preload is shown as 0)")
        if sp.max_length_mm[0, k] > sp.topout_length_mm[0, k] + 0.01:
            notes.append(f"spring {n}: the envelope droops past the top-out of the {sp.sag_mm:g} mm sag (the spring "
                         f"would have to extend {sp.max_length_mm[0, k] - sp.topout_length_mm[0, k]:.1f} mm further)")
    return notes


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
    _echo_forces(rep)
    _echo_members(rep)
    _echo_mass_lock_springs(rep)
    click.echo("\n" + rep["caution"])


def _echo_forces(rep: dict) -> None:
    """The forces table per load case, pin forces and the out-of-plane braking moments."""
    springs = list(rep["states"][0]["spring_force_n"]) if rep["states"] else []
    links = list(rep["states"][0]["link_tension_n"]) if rep["states"] else []
    rows = []
    for s in rep["states"]:
        r = {"case": s["name"], "lean_deg": s["lean_deg"], "travel_mm": s["travel_mm"],
             "wl": s["wheel_load_n"]["left"], "wr": s["wheel_load_n"]["right"],
             "sl": s["tyre_side_force_n"]["left"], "sr": s["tyre_side_force_n"]["right"],
             "lat": s["lateral_reference_force_n"], "lock": s["tilt_lock_torque_nm"],
             "bal": s["balance_moment_nm"], "roll": s["roll_couple_nm"],
             "status": s["status"] + (" (a wheel lifts)" if s["wheel_lifts"] else "")}
        for n in springs:
            r["s." + n] = s["spring_force_n"][n]
        for n in links:
            r["l." + n] = s["link_tension_n"][n]
        rows.append(r)
    cols = ([("case", "case"), ("lean_deg", "lean_deg"), ("travel_mm", "travel_mm"), ("wl", "wheel_L_N"),
             ("wr", "wheel_R_N"), ("sl", "side_L_N"), ("sr", "side_R_N"), ("lat", "lat_ref_N")]
            + [("s." + n, f"{n}_N(c+)") for n in springs] + [("l." + n, f"{n}_N(t+)") for n in links]
            + [("lock", "tilt_lock_Nm"), ("bal", "balance_Nm"), ("roll", "roll_Nm"), ("status", "status")])
    click.echo(f"{rep['mechanism']}: forces per load case (N, N*m; springs compression +, links tension +, "
               f"moments on the chassis in the lean sense; balance: the rider's or the chassis roll inertia's "
               f"moment with the tilt free; roll: the chassis roll-inertia couple that sets a one-wheel bump's "
               f"tyre loads)")
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


def _echo_members(rep: dict) -> None:
    """Member sizes, their governing sections and the fatigue screening."""
    click.echo(f"\nmembers (safety factor {rep['safety_factor']:g}; utilisation = stress or buckling demand / "
               f"capacity, must be <= 1; checked at every load point and segment end):")
    click.echo(table(rep["members"], [("member", "member"), ("kind", "kind"), ("length_mm", "length_mm"),
                                      ("material", "material"), ("tube_mm", "tube_DxT_mm"),
                                      ("worst_case", "worst_case"), ("governing_check", "check"),
                                      ("utilisation", "utilisation"), ("fatigue_utilisation", "fatigue"),
                                      ("mass_kg", "mass_kg")], digits=3))
    click.echo("\ngoverning sections (axial tension +):")
    click.echo(table([dict(m, **{"n": m["section_force"]["axial_n"], "v": m["section_force"]["shear_n"],
                                 "mom": m["section_force"]["moment_nm"], "ax": m["checks"]["axial"],
                                 "be": m["checks"]["bending"], "co": m["checks"]["combined"],
                                 "sh": m["checks"]["shear"], "bu": m["checks"]["buckling"]}) for m in rep["members"]],
                     [("member", "member"), ("section", "section"), ("n", "axial_N"), ("v", "shear_N"),
                      ("mom", "moment_Nm"), ("ax", "u_axial"), ("be", "u_bending"), ("co", "u_combined"),
                      ("sh", "u_shear"), ("bu", "u_buckling")], digits=3))
    fat = rep["fatigue"]
    click.echo(f"\nfatigue screening ({fat['cycles']:.3g} cycles of 1 g -> {fat['peak_g']:g} g, partial factor "
               f"{fat['partial_factor']:g}): {fat['screening']}")
    click.echo(table(rep["members"], [("member", "member"), ("material", "material"),
                                      ("fatigue_range_mpa", "range_MPa"),
                                      ("fatigue_allowable_range_mpa", "allowed_MPa"),
                                      ("fatigue_utilisation", "fatigue"), ("fatigue_section", "section")], digits=2))
    for m, c in fat["classes"].items():
        click.echo(f"  {m}: " + (f"FAT {c['fat_mpa']:g} MPa, m = {c['slope']:g}: {c['source']}" if c["fat_mpa"]
                                 else "no welded-joint class in the materials file: not screened"))


def _echo_mass_lock_springs(rep: dict) -> None:
    """Linkage mass, the tilt lock, the springs, the load cases with their sources, feasibility and notes."""
    click.echo(f"\nlinkage mass: {rep['linkage_mass_kg']:.3f} kg = members {rep['members_mass_kg']:.3f} kg + "
               f"{rep['pivot_count']} pivots x allowance ({rep['pivot_allowance_kg']:.3f} kg)")
    lk = rep["tilt_lock"]
    if lk["torque_nm"] is not None:
        click.echo(f"tilt lock must hold: {lk['torque_nm']:.1f} N*m (case '{lk['case']}'); a disc-and-caliper lock "
                   f"at {lk['effective_radius_mm']:g} mm, friction {lk['friction']:g} ({lk['friction_source']}), "
                   f"{lk['faces']} faces, safety factor {lk['safety_factor']:g} needs a clamp force of "
                   f"{lk['clamp_force_n']:.0f} N")
    if rep["springs"]:
        click.echo(f"\nsprings (sag {rep['springs'][0]['sag_mm']:g} mm from top-out; forces N, lengths mm):")
        click.echo(table(rep["springs"], [
            ("spring", "spring"), ("kind", "kind"), ("static_force_n", "static_N"),
            ("static_deflection_mm", "static_defl"), ("suggested_preload_n", "preload_N"),
            ("suggested_rate_n_per_mm", "zero-preload_rate"), ("max_case_force_n", "max_case_N"),
            ("max_case", "max_case"), ("stroke_mm", "stroke"), ("full_bump_deflection_mm", "full_bump_defl"),
            ("max_deflection_mm", "solid_at"), ("bottoming_margin_mm", "margin"),
            ("bottoming_travel_mm", "solid_at_travel")], digits=1))
        for sp in rep["springs"]:
            click.echo(f"  {sp['spring']}: {sp['curve']}")
    click.echo("\nload cases and their sources:")
    seen = set()
    for s in rep["states"]:
        if s["case"] not in seen:
            seen.add(s["case"])
            click.echo(f"  {s['case']} ({s['kind']}{', ' + s['role'] if s['role'] != 'case' else ''}): {s['source']}")
    click.echo("feasible: yes" if rep["feasible"] else f"feasible: NO: {rep['reason']}")
    for n in rep["notes"]:
        click.echo(f"note: {n}")
    if any(s["wheel_lifts"] for s in rep["states"]):
        click.echo("note: a negative wheel load means that wheel lifts: the vehicle would tip over in that case")

