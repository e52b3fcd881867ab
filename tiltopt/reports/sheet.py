"""The build sheet of one design: a folder with sheet.html, pivots.csv, candidate.toml and linkage.dxf.

:func:`write_sheet` works from a :class:`kinematics.Mechanism` and the
envelope alone (plus, when given, the run's row, shell and loads);
:func:`write_sheet_from_run` takes a results run and a candidate id.
Every file is written atomically and carries units, provenance and the
safety caution.
"""
from __future__ import annotations

import csv
import datetime as _dt
import html
import io
import math
import string
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Sequence

import numpy as np

from tiltopt.base.provenance import package_versions
from tiltopt.kinematics.cases import G
from tiltopt.kinematics.mechanism import Mechanism, mechanism_to_toml, split_ref
from tiltopt.kinematics.model import Model

from .analysis import Analysis, analyse, envelope_mask, lean_grid
from .common import SAFETY, atomic_write_text, column_label, column_unit
from .drawing import BODY_COLOURS, front_view_svg
from .dxf import write_dxf

SAFETY_POINTS = [
    "The figures on this sheet are geometric and quasi-static estimates from a planar model; "
    "they are not a structural analysis of the real parts.",
    "Build and test a prototype before anyone rides it: check the lean range, the travel, the clearances "
    "and the steering by hand first, then at walking pace.",
    "Structural sign-off of members, welds and joints, the brakes, the tilt lock and use on public roads "
    "follow local rules and need a qualified engineer.",
    "A tilting vehicle that fails can hurt its rider and others.",
]


@dataclass
class SheetInputs:
    """What a sheet is made from (everything but the mechanism is optional)."""

    mech: Mechanism
    candidate_id: str = "design"
    run_id: str = ""
    lean_limit_deg: float = 30.0
    travel_mm: Sequence[float] = (0.0,)
    lean_step_deg: float | None = None
    both_sides: bool = False              # the envelope also leans to -limit (an asymmetric shell)
    row: dict = field(default_factory=dict)
    units: dict = field(default_factory=dict)
    shell: object | None = None
    loads: object | None = None
    jig_datum: tuple[float, float] = (0.0, 0.0)
    sag_mm: float | None = None
    corner_load_n: float | None = None
    provenance: dict = field(default_factory=dict)
    scenario: dict = field(default_factory=dict)
    command: str = ""
    choice: object | None = None          # tiltopt.optimizer.selection.Choice that picked this design


# ----------------------------------------------------------------- helpers
def _num(v, d=1):
    if v is None:
        return "–"
    try:
        v = float(v)
    except (TypeError, ValueError):
        return html.escape(str(v))
    if v == float("inf"):
        return "∞"
    if not math.isfinite(v):
        return "–"
    s = f"{v:.{d}f}"
    return s[1:] if s.startswith("-") and float(s) == 0 else s


def _e(s) -> str:
    return html.escape("" if s is None else str(s))


def _table(headers: list[str], rows: list[list], cls: str = "", num_from: int = 1, text: tuple = ()) -> str:
    """An HTML table; columns from ``num_from`` on are numbers, except those in ``text``."""
    out = [f'<table class="{cls}"><thead><tr>' + "".join(f"<th>{_e(h)}</th>" for h in headers) + "</tr></thead><tbody>"]
    for r in rows:
        cells = []
        for k, v in enumerate(r):
            c = ' class="num"' if k >= num_from and k not in text else ""
            cells.append(f"<td{c}>{v}</td>")
        out.append("<tr>" + "".join(cells) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def line_chart(x, series, *, xlabel: str, ylabel: str, title: str = "", width: float = 330, height: float = 210) -> str:
    """A small SVG line chart.

    series : list of (label, y, colour, dashed); y may hold NaN (gaps).
    """
    x = np.asarray(x, float)
    ys = [np.asarray(s[1], float) for s in series]
    finite = np.concatenate([y[np.isfinite(y)] for y in ys]) if ys else np.zeros(0)
    lo, hi = (float(finite.min()), float(finite.max())) if len(finite) else (0.0, 1.0)
    if hi - lo < 1e-9:
        lo, hi = lo - 1.0, hi + 1.0
    pad = 0.08 * (hi - lo)
    lo, hi = lo - pad, hi + pad
    ml, mr, mt, mb = 46.0, 10.0, 24.0, 34.0
    W, H = width - ml - mr, height - mt - mb
    X = lambda v: ml + (v - x.min()) / max(x.max() - x.min(), 1e-9) * W
    Y = lambda v: mt + (hi - v) / (hi - lo) * H
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" class="chart" '
           f'font-family="Helvetica, Arial, sans-serif" font-size="10">']
    out.append(f'<text x="{ml}" y="14" font-size="11" font-weight="bold" fill="#1d2733">{_e(title)}</text>')
    ticks = _nice_ticks(lo, hi, 5)
    for t in ticks:
        out.append(f'<line x1="{ml}" x2="{ml + W}" y1="{Y(t):.1f}" y2="{Y(t):.1f}" stroke="#e3e7eb"/>')
        out.append(f'<text x="{ml - 4}" y="{Y(t) + 3:.1f}" text-anchor="end" fill="#444">{_tick(t)}</text>')
    for t in _nice_ticks(x.min(), x.max(), 6):
        out.append(f'<line x1="{X(t):.1f}" x2="{X(t):.1f}" y1="{mt}" y2="{mt + H}" stroke="#eef1f3"/>')
        out.append(f'<text x="{X(t):.1f}" y="{mt + H + 12}" text-anchor="middle" fill="#444">{_tick(t)}</text>')
    if lo < 0 < hi:
        out.append(f'<line x1="{ml}" x2="{ml + W}" y1="{Y(0):.1f}" y2="{Y(0):.1f}" stroke="#9aa5ae"/>')
    out.append(f'<rect x="{ml}" y="{mt}" width="{W}" height="{H}" fill="none" stroke="#9aa5ae"/>')
    for label, y, colour, dashed in series:
        y = np.asarray(y, float)
        segs, curp = [], []
        for xv, yv in zip(x, y):
            if np.isfinite(yv):
                curp.append(f"{X(xv):.1f},{Y(yv):.1f}")
            elif curp:
                segs.append(curp)
                curp = []
        if curp:
            segs.append(curp)
        for s in segs:
            out.append(f'<polyline points="{" ".join(s)}" fill="none" stroke="{colour}" stroke-width="1.6"'
                       + (' stroke-dasharray="5,3"' if dashed else "") + "/>")
    out.append(f'<text x="{ml + W / 2}" y="{height - 4}" text-anchor="middle" fill="#222">{_e(xlabel)}</text>')
    out.append(f'<text transform="translate(11,{mt + H / 2}) rotate(-90)" text-anchor="middle" fill="#222">'
               f'{_e(ylabel)}</text>')
    out.append("</svg>")
    return "".join(out)


def _nice_ticks(lo, hi, n):
    span = hi - lo
    if span <= 0:
        return [lo]
    raw = span / n
    mag = 10 ** math.floor(math.log10(raw))
    step = min((m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw), default=10 * mag)
    start = math.ceil(lo / step) * step
    out = []
    v = start
    while v <= hi + 1e-9 * step:
        out.append(round(v, 10))
        v += step
    return out


def _tick(v):
    return f"{v:g}" if abs(v) >= 1e-9 else "0"


# ----------------------------------------------------------------- sections
def _pivot_rows(model: Model, P: np.ndarray, spec: dict, jig) -> list[dict]:
    tag = {i: f"P{k + 1}" for k, (i, _) in enumerate(spec["pivots"])}
    mech = model.mech
    pin_partner = {}
    for p in mech.pins:
        pin_partner[model.point_index[p.b]] = tag.get(model.point_index[p.a], "")
    rows = []
    for i, ref in enumerate(model.point_refs):
        body, point = split_ref(ref)
        rows.append({"tag": tag.get(i, pin_partner.get(i, "")), "body": body, "point": point,
                     "y_mm": float(P[i, 0]), "z_mm": float(P[i, 1]),
                     "y_jig_mm": float(P[i, 0] - jig[0]), "z_jig_mm": float(P[i, 1] - jig[1])})
    return rows


def _members(model: Model, P: np.ndarray) -> list[dict]:
    """Centre-to-centre lengths: links, springs (installed), and each body between its joint points."""
    mech, pidx = model.mech, model.point_index
    out = []
    for l in mech.links:
        out.append({"name": l.name, "kind": "link", "from": l.a, "to": l.b,
                    "length_mm": float(np.linalg.norm(P[pidx[l.a]] - P[pidx[l.b]]))})
    joint_refs = {}
    for p in mech.pins:
        joint_refs.setdefault(split_ref(p.a)[0], []).append(p.a)
        joint_refs.setdefault(split_ref(p.b)[0], []).append(p.b)
    for j in list(mech.links) + list(mech.springs):
        for r in (j.a, j.b):
            joint_refs.setdefault(split_ref(r)[0], []).append(r)
    for w in mech.wheels:
        joint_refs.setdefault(w.upright, []).append(w.centre)
    for b in model.body_names:
        if b == mech.chassis:
            continue
        refs = list(dict.fromkeys(joint_refs.get(b, [])))
        for a_i in range(len(refs)):
            for b_i in range(a_i + 1, len(refs)):
                a, c = refs[a_i], refs[b_i]
                out.append({"name": b, "kind": "body", "from": split_ref(a)[1], "to": split_ref(c)[1],
                            "length_mm": float(np.linalg.norm(P[pidx[a]] - P[pidx[c]]))})
    return out


def _spring_data(model: Model, an: Analysis, inp: SheetInputs) -> tuple[list[list], list[str], str]:
    """(geometry rows, notes, setup table html): lengths, stroke and motion ratio of each spring and,
    with loads, its setup for the stated sag (:mod:`tiltopt.kinematics.springs`)."""
    r = an.sweep
    mech = model.mech
    if not mech.springs:
        return [], ["This mechanism has no springs."], ""
    travel = np.asarray(r.travel_mm)
    t0 = int(np.argmin(np.abs(travel)))
    lo, hi = int(np.argmin(travel)), int(np.argmax(travel))
    mr = r.motion_ratio[0, t0]
    sag = inp.sag_mm
    if sag is None and inp.loads is not None and getattr(inp.loads, "springs", None) is not None:
        sag = inp.loads.springs.sag_mm
    sag_note = ""
    if sag is None:
        sag = max(0.0, -float(travel.min()))
        sag_note = " (top-out at the envelope's full droop; set --sag-mm)"
    rows = []
    P = np.asarray(an.geom.points[0])
    for k, s in enumerate(mech.springs):
        inst = float(np.linalg.norm(P[model.point_index[s.a]] - P[model.point_index[s.b]]))
        l_lo, l_hi = r.spring_length[0, lo, 0, k], r.spring_length[0, hi, 0, k]
        stroke = abs(l_lo - l_hi) if np.isfinite(l_lo) and np.isfinite(l_hi) else float("nan")
        rows.append([_e(s.name), _e(s.kind), _num(inst, 1), _num(l_hi, 1), _num(l_lo, 1), _num(stroke, 1),
                     _num(mr[k], 3), _num(s.rate_n_per_mm, 1) if s.rate_n_per_mm else "–"])
    if an.sizing is not None:
        return rows, [], _spring_setup_html(model, an, sag, sag_note)
    corner = inp.corner_load_n
    notes = []
    sum_mr2 = float(np.nansum(mr ** 2))
    if corner is None:
        notes.append("No spring setup: give a loads file (the static spring forces come from it), or the static "
                     "vertical load per front wheel (--corner-load-n) for a suggested rate.")
    elif sag and sum_mr2 > 0:
        # equal springs: total energy 1/2 sum k MR_i^2 s^2 = work of 2 corner loads over the sag
        k_sugg = 2.0 * corner / (sag * sum_mr2)
        notes.append(f"Suggested rate {_num(k_sugg, 1)} N/mm: each spring alike, for a static sag of {_num(sag, 1)} "
                     f"mm{sag_note} under {_num(corner, 0)} N per front wheel: k = 2 F / (sag x sum of MR^2), MR at "
                     f"travel {_num(travel[t0], 0)} mm; no preload, geometric stiffness ignored.")
    return rows, notes, ""


def _spring_setup_html(model: Model, an: Analysis, sag: float, sag_note: str) -> str:
    from dataclasses import replace

    from tiltopt.kinematics.springs import analyse_springs

    sz = an.sizing
    setup = replace(sz.loads.springs, sag_mm=sag)
    sp = analyse_springs(model, an.geom, sz, setup, sweep_result=an.sweep)
    rows, notes = [], {}
    for k, s in enumerate(model.mech.springs):
        cv = sp.curves[k]
        mc = int(sz.spring_max_case[0, k])
        margin = sp.bottoming_margin_mm[0, k]
        rows.append([_e(s.name), _num(sp.static_force_n[0, k], 0), _num(sp.static_deflection_mm[0, k], 1),
                     _num(sp.preload_n[0, k], 0), _num(sp.suggested_rate_n_per_mm[0, k], 1),
                     _num(sz.spring_max_n[0, k], 0), _e(sz.states[mc].name).replace("_", "_<wbr>") if mc >= 0 else "–",
                     _num(sp.full_bump_deflection_mm[0, k], 1), _num(cv.max_deflection_mm if cv else None, 1),
                     f'<span class="bad">{_num(margin, 1)}</span>' if margin < 0 else _num(margin, 1),
                     _num(sp.bottoming_travel_mm[0, k], 1)])
        text = cv.source if cv else "no rate or curve in the mechanism file: no setup"
        if cv is not None and (s.curve is not None or s.kind == "elastomer"):
            text += "; points (mm, N): " + ", ".join(f"{x:g}/{f:g}" for x, f in zip(cv.x_mm, cv.f_n))
        notes.setdefault(text, []).append(s.name)
        if np.isfinite(sp.given_setup_force_n[0, k]):
            notes.setdefault(f"the setup in the mechanism file gives {_num(sp.given_setup_force_n[0, k], 0)} N at the "
                             f"design position, where the static load needs {_num(sp.static_force_n[0, k], 0)} N",
                             []).append(s.name)
        if sp.preload_deflection_mm[0, k] < 0:
            notes.setdefault("too stiff for this sag even with no preload (preload shown as 0)", []).append(s.name)
        if margin < 0:
            notes.setdefault(f"bottoms (is solid) at travel {_num(sp.bottoming_travel_mm[0, k], 1)} mm, inside the "
                             f"envelope", []).append(s.name)
    heads = ["spring", "static force [N]", "static defl. [mm]", "suggested preload [N]",
             "rate for no preload [N/mm]", "largest force [N]", "in case", "defl. at full bump [mm]",
             "solid at defl. [mm]", "bottoming margin [mm]", "solid at travel [mm]"]
    if not np.isfinite(sp.suggested_rate_n_per_mm[0]).any():     # no linear coil: no zero-preload rate
        heads.pop(4)
        rows = [r[:4] + r[5:] for r in rows]
    t = _table(heads, rows, text=(heads.index("in case"),))
    t += (f'<p class="note">Setup for a static sag of {_num(sag, 1)} mm{_e(sag_note)} (wheel travel from top-out to '
          f'the design position): the spring carries the static force at the design position; the suggested '
          f'preload is its force at top-out; full bump is the envelope\'s largest travel. Deflections are '
          f'compressions from the free length (defl.). Rate for no preload: the coil rate that gives this sag '
          f'with no preload. Bottoming margin: compression left at full bump; solid at travel: the wheel '
          f'travel at which the spring is solid.</p>')
    return t + "".join(f'<p class="note">{_e(", ".join(names))}: {_e(n)}</p>' for n, names in notes.items())


def _corner_load_from(loads) -> float | None:
    veh = getattr(loads, "vehicle", None)
    mass = None
    for name in ("total_mass_kg", "mass_kg"):
        mass = mass if mass is not None else getattr(veh if veh is not None else loads, name, None)
    share = getattr(veh, "front_share", None) if veh is not None else getattr(loads, "front_share", None)
    if mass is None or share is None:
        return None
    return float(mass) * float(share) * G / 2.0


def _corners(r) -> list[tuple[int, int, str]]:
    travel = np.asarray(r.travel_mm)
    L = len(r.lean_deg)
    picks = []
    for ti in sorted({int(np.argmin(travel)), int(np.argmin(np.abs(travel))), int(np.argmax(travel))}):
        for li in sorted({0, int(np.argmin(np.abs(r.lean_deg))), L - 1}):
            picks.append((ti, li, (float(r.lean_deg[li]), float(travel[ti]))))
    return picks


def _clearance_section(an: Analysis) -> str:
    r = an.sweep
    cr = an.clearance_result
    fm = an.marks
    rows = []

    def lo(a):
        return np.min(a) if np.all(np.isfinite(a)) or np.any(np.isinf(a)) else float("nan")

    for ti, li, label in _corners(r):
        ok = bool(r.converged[0, ti, li])
        row = [_num(label[0], 1), _num(label[1], 0),
               "yes" if ok else f'<span class="bad">{_e(r.status_text(0, ti, li))}</span>',
               _clr(lo(fm.other_mm[0, ti, li])), _clr(lo(fm.carrier_mm[0, ti, li])), _clr(fm.pair_mm[0, ti, li]),
               _clr(fm.tubes_mm[0, ti, li]), _clr(fm.ground_mm[0, ti, li])]
        if cr is not None:
            row += [_clr(np.min(cr.wheel_link_mm[0, ti, li])), _clr(np.min(cr.wheel_carrier_mm[0, ti, li])),
                    _clr(np.min(cr.wheel_shell_mm[0, ti, li])) if cr.has_shell else "-",
                    _clr(np.min(cr.ground_mm[0, ti, li])), _num(cr.max_steer_deg[0, ti, li], 0)]
        rows.append(row)
    heads = ["lean [deg]", "travel [mm]", "reached", "to other members, straight ahead [mm]",
             "to own upright and arms, straight ahead [mm]", "between the wheels [mm]", "between tubes [mm]",
             "lowest tube above ground [mm]"]
    if cr is not None:
        heads += ["to other members, 3-D over the steer range [mm]", "to own upright and arms, 3-D [mm]",
                  "to the shell, 3-D [mm]", "ground (shell and tubes), 3-D [mm]", "steer range ± [deg]"]
    s = _table(heads, rows, num_from=0)
    s += ('<p class="note">Straight ahead: the wheel solids (tyre, rim and hub) and member tubes in the front '
          'view, as the red marks of the drawings give them (with the wheels straight ahead, the 3-D clearance '
          'of a member in the linkage plane is this front-view distance). Smallest of the two wheels.'
          + (' The 3-D figures include every steer angle of the steer range given for that state, and the shell '
             'in 3-D (not only its section at the linkage station): they are the figures the run checks.'
             if cr is not None else '') + '</p>')
    if an.clearance:
        labels = {"min_wheel_shell_mm": "wheel to shell",
                  "min_wheel_link_mm": "wheel to the members that do not carry it",
                  "min_wheel_carrier_mm": "wheel to its own upright and arms (only the stub axle may enter the hub)",
                  "min_wheel_pair_mm": "between the two wheels", "min_member_gap_mm": "between member tubes",
                  "min_clearance_mm": "smallest clearance (shell, other members)", "min_ground_mm": "ground clearance",
                  "overall_width_mm": "width of the upright vehicle", "lean_sweep_width_mm": "lateral extent leaning",
                  "total_slot_length_mm": "total slot length in the shell",
                  "inside_violation_mm": "tubes outside the shell that must stay inside",
                  "outside_violation_mm": "tubes inside the shell that must stay outside"}
        rows = []
        for k, v in an.clearance.items():
            if k.endswith(("_error_mm", "_lower_mm")) or k not in labels:
                continue
            err = an.clearance.get(k.replace("_mm", "_error_mm"))
            low = an.clearance.get(k.replace("_mm", "_lower_mm"))
            rows.append([_e(labels[k]), _clr(v[0]),
                         _num(err[0], 1) if err is not None and np.isfinite(err[0]) else "-",
                         _clr(low[0]) if low is not None else "-", "mm"])
        s += "<h3>3-D clearance over the whole envelope (lean, travel and steer)</h3>"
        s += _table(["figure", "value", "error bound", "conservative (value - bound)", "unit"], rows)
        s += ('<p class="note">"nothing near": nothing within reach. Every clearance is a distance actually '
              'reached; the true minimum may lie up to the error bound below it, so margins are met by the '
              'conservative figure.</p>')
    return s


def _sizing_sections(an: Analysis, members: list[dict]) -> tuple[str, str, str]:
    """(member tables html, tilt-lock html, load-cases html)."""
    sz = an.sizing
    if sz is None:
        rows = [[_e(m["name"]), _e(m["kind"]), _e(f'{m["from"]} – {m["to"]}'), _num(m["length_mm"], 1)]
                for m in members]
        t = _table(["member", "kind", "between points", "centre-to-centre [mm]"], rows, num_from=3)
        t += ('<p class="note">Tube, material, mass, worst load case and utilisation need the sizing part and '
              'a loads description (see the notes); only the centre-to-centre lengths are given here.</p>')
        return t, "", ""
    from tiltopt.kinematics.sizing import CHECKS

    rows, srows = [], []
    for j, name in enumerate(sz.member_names):
        mb = sz.members[j]
        rows.append([_e(name), _e(mb.kind), _e(mb.material), _e(sz.worst_case_name(0, j)).replace("_", "_<wbr>"),
                     _num(sz.length_mm[0, j], 1), _e(sz.tube_label(0, j)), _num(sz.mass_kg[0, j], 3),
                     _util(sz.utilisation[0, j]) + f" {_e(sz.governing_check(0, j))}",
                     _util(sz.fatigue_utilisation[0, j])])
        f = sz.section_force[0, j]
        srows.append([_e(name), _e(sz.section_name(0, j)), _num(f[0], 0), _num(f[1], 0), _num(f[2], 1)]
                     + [_util(sz.check[k][0, j]) for k in CHECKS])
    t = _table(["member", "kind", "material", "worst case", "centre-to-centre [mm]", "tube OD x wall [mm]",
                "mass [kg]", "utilisation, check", "fatigue (screening)"], rows, num_from=4)
    t += (f'<p class="note">Linkage mass {_num(sz.linkage_mass_kg[0], 2)} kg, including {sz.n_pivots} pivots at '
          f'{_num(sz.pivot_mass_kg / max(sz.n_pivots, 1) * 1000, 0)} g each. Safety factor '
          f'{_num(getattr(sz, "safety_factor", float("nan")), 2)} on yield and buckling. '
          f'{"All members pass." if bool(sz.feasible[0]) else "Not all members pass: " + _e(sz.reason[0])}</p>')
    t += "<h3>Governing section of each member (worst case)</h3>" + _table(
        ["member", "section", "axial [N]", "shear [N]", "moment [N·m]", "axial", "bending", "combined", "shear",
         "buckling"], srows, num_from=2)
    t += ('<p class="note">Each member is checked at every point where a load enters and at both ends of every '
          'segment: axial, bending (in- and out-of-plane), combined, transverse shear (with the axial stress by '
          'von Mises) and, for two-force members in compression, buckling. Axial force tension positive.</p>')
    t += _fatigue_html(sz)
    t += "".join(f'<p class="note">{_e(n)}</p>' for n in getattr(sz, "notes", []) or [])
    return t, _lock_html(sz), _cases_html(sz)


def _fatigue_html(sz) -> str:
    fat = sz.loads.fatigue
    mats = sorted({m.material for m in sz.members})
    classes = "; ".join(
        f"{m}: FAT {sz.loads.materials[m].fatigue_fat_mpa:g} MPa, m = {sz.loads.materials[m].fatigue_slope:g} "
        f"({sz.loads.materials[m].fatigue_source})" if sz.loads.materials[m].fatigue_fat_mpa else
        f"{m}: no welded-joint class, not screened" for m in mats)
    return (f'<h3>Fatigue screening of the welded joints</h3><p class="note"><b>A screening, not a fatigue '
            f'design.</b> {fat.cycles:,.0f} cycles of the load change from 1 g to {fat.peak_g:g} g on the front '
            f'axle, at every section of the chosen tube; fatigue utilisation = {fat.partial_factor:g} x stress '
            f'range / the range the joint class survives that often, FAT (2e6 / n)^(1/m), no fatigue limit. '
            f'{_e(classes)}. A member above 100 % needs a fatigue design.</p>')


def _lock_html(sz) -> str:
    k = int(sz.tilt_lock_case[0])
    tl, T = sz.loads.tilt_lock, sz.tilt_lock_torque_nm[0]
    if k < 0 or not np.isfinite(T):
        return '<p class="note">No load case holds the tilt lock.</p>'
    return (f"<p>Tilt-lock torque (largest locked case, '{_e(sz.states[k].name)}'): <b>{_num(T, 1)} N·m</b></p>"
            f"<p>Disc-and-caliper lock: clamp force at least <b>{_num(sz.tilt_lock_clamp_n[0], 0)} N</b> at an "
            f"effective radius of {_num(tl.effective_radius_mm, 0)} mm with friction {tl.friction:g} "
            f"({_e(tl.friction_source)}) on {tl.faces} faces and the safety factor {sz.safety_factor:g}: "
            f"F = SF T / (faces x friction x radius).</p>")


def _cases_html(sz) -> str:
    fo = sz.forces
    rows, seen = [], set()
    for i, s in enumerate(sz.states):
        if s.role != "case":
            continue
        ok = bool(fo.ok[i])
        wl = fo.wheel_load[i] if ok else (float("nan"), float("nan"))
        rows.append([_e(s.name).replace("_", "_<wbr>"), _num(s.lean_deg, 1),
                     _num(s.slope_deg, 1) if s.slope_deg else "–", _num(s.front_load_n, 0), _num(wl[0], 0),
                     _num(wl[1], 0), _num(max(abs(v) for v in s.kerb_force_n), 0) if any(s.kerb_force_n) else "–",
                     _num(s.brake_g, 2), "yes" if s.locked else "no",
                     "as above" if s.case in seen else f"{_e(s.kind)}: {_e(s.source)}"])
        seen.add(s.case)
    return _table(["case", "lean [deg]", "slope [deg]", "front load [N]", "tyre L [N]", "tyre R [N]", "kerb [N]",
                   "brake [g]", "tilt locked", "kind and source"], rows, text=(8, 9))


def _short(text: str, n: int = 160) -> str:
    """A description without a template's generated variable list, cut to about n characters."""
    text = text.split(" [template ")[0].strip()
    return text if len(text) <= n else text[: n - 1].rsplit(" ", 1)[0] + " …"


def _split_tables(title: str, headers: list[str], rows: list[list]) -> str:
    """A full-width section with the rows in two side-by-side tables."""
    if not rows:
        return ""
    half = (len(rows) + 1) // 2
    return (f'<section class="avoid-break"><h3>{_e(title)}</h3><div class="grid2">'
            f'<div>{_table(headers, rows[:half])}</div><div>{_table(headers, rows[half:])}</div></div>'
            + ('<p class="note">∞: nothing within reach to clear.</p>' if any("∞" in str(c) for r in rows for c in r)
               else "") + '</section>')


def _clr(v) -> str:
    """A clearance figure: NaN = state not reached, +inf = nothing within reach."""
    try:
        v = float(v)
    except (TypeError, ValueError):
        return "–"
    if v == float("inf"):
        return "nothing near"
    return _num(v, 1)


def _same(a, b) -> bool:
    try:
        return abs(float(a) - float(b)) <= 1e-9 * max(1.0, abs(float(b)))
    except (TypeError, ValueError):
        return False


def _util(u):
    if u is None or not np.isfinite(u):
        return "–"
    cls = ' class="bad"' if u > 1.0 else ""
    return f"<span{cls}>{u * 100:.0f} %</span>"


def _curves(an: Analysis) -> str:
    r = an.sweep
    palette = BODY_COLOURS
    deg = 180.0 / math.pi
    x = r.lean_deg
    charts = []
    specs = [("scrub", "scrub [mm]", [r.scrub[0]]), ("heave", "heave [mm]", [r.heave[0]]),
             ("camber error (L solid, R dashed)", "camber error [deg]",
              [r.camber_error[0, ..., 0] * deg, r.camber_error[0, ..., 1] * deg]),
             ("track change", "track change [mm]", [r.track_change[0]])]
    from .analysis import state_clearance
    gap, gap_label = state_clearance(an)
    specs.append((gap_label, "clearance [mm]", [gap[0]]))
    for title, ylabel, arrays in specs:
        series = []
        for ti, tr in enumerate(r.travel_mm):
            for k, a in enumerate(arrays):
                series.append((f"{tr:g} mm", a[ti], palette[ti % len(palette)], k == 1))
        charts.append(line_chart(x, series, xlabel="lean [deg]", ylabel=ylabel, title=title))
    legend = " ".join(f'<span class="key"><span class="sw" style="background:{palette[ti % len(palette)]}"></span>'
                      f"travel {tr:g} mm</span>" for ti, tr in enumerate(r.travel_mm))
    return f'<div class="legend">{legend}</div><div class="charts">' + "".join(
        f'<div class="chartbox">{c}</div>' for c in charts) + "</div>"


def _choice_html(ch) -> str:
    """How the design was chosen (the best compromise) and what it gives up against the best on each objective."""
    rows = []
    for r in ch.rows:
        word = "more" if r["better"] == "lower" else "less"
        gives = "the best" if r["gives_up"] <= 1e-9 * max(1.0, abs(r["best"])) else \
            f"{_num(r['gives_up'], 3)} {_e(r['unit'])} {word}"
        rows.append([_e(r["objective"].replace("_", " ")), _e(f"{r['better']} is better"),
                     f"{_num(r['value'], 3)} {_e(r['unit'])}",
                     f"{_num(r['best'], 3)} {_e(r['unit'])} ({_e(r['best_id'])})", gives,
                     f"{_num(r['scale_to'], 3)} ({_e(r['scale_to_is'])})", _num(r["scaled"], 2), _num(r["weight"], 2)])
    t = _table(["objective", "", "this design", "best meeting the bounds (design)", "gives up", "scaled to 1 at",
                "scaled", "weight"], rows, num_from=2, text=(3, 4, 5))
    return (f'<section class="avoid-break"><h2>Why this design</h2><p>This is the best compromise of the run. '
            f'{_e(ch.method)}</p>{t}<p class="note">Gives up: how much worse than the best design meeting the bounds '
            f'on that objective, as the objective reads (clearance larger is better). Change the bounds and '
            f'weights in the run config\'s [targets] table, in the explorer page, or with tiltopt shortlist '
            f'--where ... --weight ...</p></section>')


def _joint_rows(model: Model, P) -> list[list]:
    mech, pidx = model.mech, model.point_index
    rows = []
    for p in mech.pins:
        y, z = P[pidx[p.a]]
        rows.append([_e(p.name), "pin", _e(f"{p.a} = {p.b}"), _num(y, 2), _num(z, 2)])
    for l in mech.links:
        y, z = P[pidx[l.a]]
        rows.append([_e(l.name), "link (two ball or pin ends)", _e(f"{l.a} – {l.b}"), _num(y, 2), _num(z, 2)])
    for s in mech.springs:
        y, z = P[pidx[s.a]]
        rows.append([_e(s.name), "spring (pin ends)", _e(f"{s.a} – {s.b}"), _num(y, 2), _num(z, 2)])
    for s in mech.sliders:
        y, z = P[pidx[s.b]]
        rows.append([_e(s.name), "slider", _e(f"{s.b} on {s.a_from} → {s.a_to}"), _num(y, 2), _num(z, 2)])
    return rows


# ----------------------------------------------------------------- writer
def _provenance_text(inp: SheetInputs) -> str:
    p = inp.provenance
    parts = [f"candidate {inp.candidate_id}"]
    if inp.run_id:
        parts.append(f"run {inp.run_id}")
    for k in ("config", "seed"):
        if p.get(k) is not None:
            parts.append(f"{k} {p[k]}")
    v = p.get("versions") or package_versions()
    parts.append("versions " + ", ".join(f"{k} {val}" for k, val in v.items() if val))
    return "; ".join(parts)


def write_sheet(out_dir: str | Path, inp: SheetInputs) -> dict[str, Path]:
    """Write the build-sheet folder; returns {"sheet", "pivots", "candidate", "dxf"} -> path."""
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    mech = inp.mech
    model = Model(mech)
    geom = model.default_geometry
    lean = lean_grid(inp.lean_limit_deg, inp.lean_step_deg, both_sides=inp.both_sides)
    an = analyse(model, geom, lean, inp.travel_mm, shell=inp.shell, loads=inp.loads)
    P = np.asarray(geom.points[0])
    spec = an.spec
    prov = _provenance_text(inp)
    stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    jig = tuple(float(v) for v in inp.jig_datum)
    paths: dict[str, Path] = {}

    # candidate.toml
    header = (f"tiltopt build sheet: mechanism of {prov}\nwritten {stamp}. Lengths mm, angles deg, "
              f"front view at the design position.\n{SAFETY}")
    paths["candidate"] = atomic_write_text(out_dir / "candidate.toml", mechanism_to_toml(mech, header=header))

    # pivots.csv
    prow = _pivot_rows(model, P, spec, jig)
    buf = io.StringIO()
    buf.write(f"# tiltopt pivots of {prov}\n# design position, mm, relative to the chassis datum O "
              f"(ground, centre plane); jig datum at y = {jig[0]:g} mm, z = {jig[1]:g} mm\n# {SAFETY}\n")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["body", "point", "y_mm", "z_mm"])
    for r in prow:
        w.writerow([r["body"], r["point"], repr(r["y_mm"]), repr(r["z_mm"])])
    paths["pivots"] = atomic_write_text(out_dir / "pivots.csv", buf.getvalue())

    # linkage.dxf
    from .side_view import side_view, steering_html
    ti_0 = int(np.argmin(np.abs(np.asarray(an.sweep.travel_mm))))
    li_0 = int(np.argmin(np.abs(an.sweep.lean_deg)))             # lean 0 (the envelope may lean both ways)
    side = side_view(model, geom, an.sweep, ti_0, li_0, 0) if model.mech.steering is not None else None
    paths["dxf"] = write_dxf(out_dir / "linkage.dxf", model, jig_datum=jig, provenance=f"tiltopt: {prov}",
                             side_view=side)
    steer_html = steering_html(model, geom, an.sweep, line_chart, _table, _e)

    # sheet.html
    paths["sheet"] = atomic_write_text(out_dir / "sheet.html", _sheet_html(inp, an, prow, prov, stamp, steer_html))
    return paths


def _sheet_html(inp: SheetInputs, an: Analysis, prow: list[dict], prov: str, stamp: str, steer_html: str) -> str:
    """sheet.html: the fragments of the page (each escaped HTML) put into templates/sheet.html."""
    model, geom, spec, r = an.model, an.geom, an.spec, an.sweep
    mech, P = inp.mech, np.asarray(an.geom.points[0])
    jig = tuple(float(v) for v in inp.jig_datum)
    labels = [f"P{k + 1}" for k in range(len(spec["pivots"]))]
    ti0 = int(np.argmin(np.abs(np.asarray(r.travel_mm))))
    drawing = front_view_svg(spec, P, geom.static_camber[0], (0.0, 0.0, 0.0), an.shell_poly, dimensions=True,
                             jig_datum=jig if any(abs(v) > 1e-9 for v in jig) else None,
                             labels=labels, title=f"{inp.candidate_id}: front view at the design position")
    lean_draw = front_view_svg(spec, r.points[0, ti0, -1], r.camber[0, ti0, -1], an.pose[0, ti0, -1],
                               an.shell_poly, marks=an.marks.state(0, ti0, len(r.lean_deg) - 1),
                               title="at the lean limit") if r.converged[0, ti0, -1] else \
        f'<p class="bad">The lean limit was not reached: {_e(r.status_text(0, ti0, len(r.lean_deg) - 1))}</p>'
    member_html, lock_html, cases_html = _sizing_sections(an, _members(model, P))
    spring_rows, spring_notes, spring_setup = _spring_data(model, an, inp)
    summary, variables, metrics, scenario = _summary_tables(inp, an, ti0)
    notes = "".join(f"<li>{_e(n)}</li>" for n in an.notes)
    piv_table = _table(["tag", "body", "point", "y [mm]", "z [mm]", "y from jig [mm]", "z from jig [mm]"],
                       [[_e(p["tag"]), _e(p["body"]), _e(p["point"]), _num(p["y_mm"], 2), _num(p["z_mm"], 2),
                         _num(p["y_jig_mm"], 2), _num(p["z_jig_mm"], 2)] for p in prow], num_from=3)
    springs = (_table(["spring", "kind", "installed length [mm]", "at full bump [mm]", "at full droop [mm]",
                       "stroke [mm]", "motion ratio", "rate in file [N/mm]"], spring_rows, text=(1,))
               if spring_rows else "") + "".join(f'<p class="note">{_e(n)}</p>' for n in spring_notes)
    fragments = dict(
        css=_template_text("sheet.css"), candidate=_e(inp.candidate_id), caution=_e(SAFETY),
        subtitle=_e(mech.name) + (" · run " + _e(inp.run_id) if inp.run_id else "") + " · " + _e(stamp),
        summary=summary, variables=variables, scenario=scenario, metrics=metrics,
        choice=_choice_html(inp.choice) if inp.choice is not None else "",
        recreate=('<p class="note">Re-create: <code>' + _e(inp.command) + "</code></p>") if inp.command else "",
        drawing=drawing, jig_y=f"{jig[0]:g}", jig_z=f"{jig[1]:g}", pivots=piv_table, members=member_html,
        joints=_table(["joint", "kind", "joins", "y [mm]", "z [mm]"], _joint_rows(model, P), num_from=3),
        springs=springs, spring_setup=("<h3>Spring setup</h3>" + spring_setup) if spring_setup else "",
        curves=_curves(an), clearance=_clearance_section(an),
        steering=('<section class="avoid-break"><h2>Steering and side view</h2>' + steer_html + "</section>")
        if steer_html else "", lean_drawing=lean_draw,
        lean_limit=f"{inp.lean_limit_deg:g}", lean_travel=f"{float(r.travel_mm[ti0]):g}",
        tilt_lock=lock_html or '<p class="note">Not available for this sheet (see the notes).</p>',
        load_cases=('<section class="avoid-break"><h2>Load cases</h2>' + cases_html + '<p class="note">Tyre loads '
                    'from the force analysis; cases with a lean, a slope or one wheel are also evaluated mirrored. '
                    'Sources as given in the loads description.</p></section>') if cases_html else "",
        safety="".join(f"<li>{_e(s)}</li>" for s in SAFETY_POINTS),
        notes=('<section class="avoid-break"><h2>Notes</h2><ul class="notes">' + notes + "</ul></section>")
        if notes else "",
        provenance=_e(prov), stamp=_e(stamp))
    return string.Template(_template_text("sheet.html")).substitute(fragments)


def _template_text(name: str) -> str:
    return resources.files("tiltopt.reports").joinpath("templates", name).read_text(encoding="utf-8")


def _summary_tables(inp: SheetInputs, an: Analysis, ti0: int) -> tuple[str, str, str, str]:
    """(summary, design variables, objectives and metrics, scenario) tables of the sheet, HTML."""
    r, mech = an.sweep, inp.mech
    li0 = int(np.argmin(np.abs(r.lean_deg)))                     # lean 0: the design position
    metric_rows = []
    metric_names = {c for c in inp.row if not c.startswith(("obj.", "var.", "__"))}
    for c, v in inp.row.items():
        if (c in ("candidate_id", "reason", "generation", "violation", "feasible")
                or c.startswith(("__", "var.", "con."))):
            continue
        if isinstance(v, (bool, np.bool_)) or isinstance(v, str):
            continue
        if c.startswith("obj."):
            name = c[4:]
            twin = [m for m in metric_names if m.startswith(name + "_") and _same(inp.row.get(m), v)]
            if twin:
                continue
            label = "objective: " + column_label(c)
        else:
            label = column_label(c)
        metric_rows.append([_e(label), _num(v, 3), _e(column_unit(c, inp.units))])
    var_rows = [[_e(column_label(c)), _num(v, 2), _e(column_unit(c, inp.units))]
                for c, v in inp.row.items() if c.startswith("var.")]
    conv_all = bool(r.converged[0].all())
    em = envelope_mask(r.lean_deg, inp.lean_limit_deg, inp.lean_step_deg, inp.both_sides)
    kin_rows = [
        ["track at the design position", _num(float(r.track[0, ti0, li0]), 1), "mm"],
        ["max |scrub| over the envelope", _num(np.nanmax(np.abs(r.scrub[0][:, em])), 2), "mm"],
        ["max |heave| over the envelope", _num(np.nanmax(np.abs(r.heave[0][:, em])), 2), "mm"],
        ["max |camber error| over the envelope", _num(np.degrees(np.nanmax(np.abs(r.camber_error[0][:, em]))), 2),
         "deg"],
        ["every envelope state reached", "yes" if conv_all else '<span class="bad">NO</span>', ""],
    ]
    scen = [[_e(k), _e(v)] for k, v in inp.scenario.items()]
    lim = inp.lean_limit_deg
    scen += [["lean envelope", _e(f"-{lim:g} to {lim:g} deg (both sides)" if inp.both_sides else
                                   f"0 to {lim:g} deg (the other side mirrors it)")],
             ["travel envelope", _e(", ".join(f"{t:g}" for t in inp.travel_mm) + " mm (bump positive)")],
             ["template / mechanism", _e(mech.name + (f" – {_short(mech.description)}" if mech.description else ""))],
             ["linkage station", _e(f"x = {mech.station_x_mm:g} mm")]]
    variables = ("<h3>Design variables</h3>" + _table(["variable", "value", "unit"], var_rows)) if var_rows else ""
    return (_table(["figure", "value", "unit"], kin_rows), variables,
            _split_tables("Objectives and metrics from the run", ["figure", "value", "unit"], metric_rows),
            _table(["", ""], scen, num_from=9))
