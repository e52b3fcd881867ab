"""The detail of designs as the explorer page shows it: every state's drawing, the curves, the clearances.

One function, :func:`design_details`, for the designs a page embeds and for those ``tiltopt explore
--serve`` computes when the page asks (``/detail/<row>.json``): both are the same JSON, from the
same sweep, 3-D clearance and front-view marks as the build sheet (:func:`tiltopt.reports.analysis.analyse`).

Per design (JSON, lengths mm, angles as named):

* ``s``: travel x lean states, each ``{"p": points (0.1 mm integers, model.point_refs order), "c":
  camber [left, right] rad, "o": chassis pose [y_O, z_O, lean rad]}`` or null where not reached;
  ``status``: null, or why a state was not reached;
* ``wheels``: [R, r, half hub width] of each wheel;
* ``curves``: per travel x lean: ``scrub_mm``, ``heave_mm``, ``camber_error_left_deg`` / ``_right_deg``,
  ``track_change_mm``;
* ``clear``: per travel x lean x wheel, the 3-D clearances over the steer range (the run's figures):
  ``shell`` and its ``shell_error``, ``other`` (members that do not carry the wheel) with
  ``other_to`` (member index into the run's ``spec.tubes``), ``carrier`` and ``carrier_to``, and per
  state ``steer`` (the steer range, +- deg); null without the 3-D part;
* ``marks``: per travel x lean, the front-view marks (:meth:`tiltopt.reports.marks.FrontMarks.state`):
  what the drawing labels, wheels straight ahead; each as a list ``[kind index (into
  tiltopt.reports.marks.KINDS), wheel (-1: none), mm, p_y, p_z, q_y, q_z, member, second member]``
  (member indices into the run's ``spec.tubes``, -1 for none);
* ``worst``: over the envelope states (the run's, :func:`tiltopt.reports.analysis.envelope_mask`), the
  smallest of each 3-D figure with the state where it occurs: ``min_clearance_mm`` (shell and other
  members: the run's objective), ``min_wheel_shell_mm``, ``min_wheel_link_mm``, ``min_wheel_carrier_mm``,
  ``min_wheel_pair_mm``, ``min_member_gap_mm``; each ``{"value", "lean_deg", "travel_mm", "wheel"}``.
"""
from __future__ import annotations

import math

import numpy as np

from .analysis import analyse, envelope_mask, lean_grid
from .marks import KINDS

#: at most this many travels of the envelope are shown (droop, ride height, bump); the sheet has them all
MAX_TRAVELS = 5


def page_grid(lean_limit_deg: float, lean_step_deg: float | None, travel_mm,
              both_sides: bool = False) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(leans, travels, envelope mask of the leans) of the page's drawings and curves: the envelope's leans,
    each step split to at most 5 deg, and its travels (at most :data:`MAX_TRAVELS`: then the lowest, the one
    nearest 0 and the highest)."""
    lean = lean_grid(lean_limit_deg, lean_step_deg, finest_deg=5.0, both_sides=both_sides)
    t = np.unique(np.asarray(travel_mm, float))
    if len(t) > MAX_TRAVELS:
        t = np.unique([t.min(), t[np.argmin(np.abs(t))], t.max()])
    return lean, t, envelope_mask(lean, lean_limit_deg, lean_step_deg, both_sides)


def _num(v, digits):
    v = float(v)
    return round(v, digits) if math.isfinite(v) else None


def _grid(a, digits):
    """Nested lists of a (T, L[, k]) array, NaN as null, +inf as the string 'inf' (nothing near)."""
    a = np.asarray(a, float)
    if a.ndim == 2:
        return [[("inf" if a[t, l] == np.inf else _num(a[t, l], digits)) for l in range(a.shape[1])]
                for t in range(a.shape[0])]
    return [[[("inf" if v == np.inf else _num(v, digits)) for v in a[t, l]] for l in range(a.shape[1])]
            for t in range(a.shape[0])]


def _worst(cr, k, mask, lean, travel) -> dict:
    """The smallest of each 3-D figure over the envelope states of design k, with its state."""
    out = {}
    both = np.minimum(cr.wheel_shell_mm, cr.wheel_link_mm)
    for key, arr in (("min_clearance_mm", both), ("min_wheel_shell_mm", cr.wheel_shell_mm),
                     ("min_wheel_link_mm", cr.wheel_link_mm), ("min_wheel_carrier_mm", cr.wheel_carrier_mm),
                     ("min_wheel_pair_mm", cr.wheel_pair_mm[..., None]),
                     ("min_member_gap_mm", cr.member_gap_mm[..., None])):
        a = np.asarray(arr[k], float)[:, mask]                        # (T, Le, w)
        if not np.all(cr.converged[k][:, mask]):
            out[key] = {"value": None}
            continue
        flat = np.where(np.isnan(a), np.inf, a)
        t, l, w = np.unravel_index(int(np.argmin(flat)), flat.shape)
        v = float(flat[t, l, w])
        out[key] = {"value": "inf" if v == np.inf else v, "lean_deg": float(lean[mask][l]),
                    "travel_mm": float(travel[t]), "wheel": int(w) if a.shape[-1] == 2 else None}
    return out


def compact_mark(m: dict) -> list:
    """A mark of :meth:`tiltopt.reports.marks.FrontMarks.state` as the page's detail holds it (module docs)."""
    return [KINDS.index(m["kind"]), -1 if m["wheel"] is None else int(m["wheel"]), m["mm"], *m["p"], *m["q"],
            *m["members"]]


def design_details(model, geom, lean, travel, mask, *, shell=None, clearance: bool = True) -> list[dict]:
    """The detail JSON (module docs) of every candidate of ``geom`` (one batched analysis).

    Parameters
    ----------
    model : kinematics.Model
    geom : kinematics.Geometry
    lean, travel, mask : from :func:`page_grid`
    shell : kinematics.shell.Shell, optional
    clearance : bool
        Compute the 3-D clearance over the steer range (else ``clear`` and ``worst`` are null).
    """
    an = analyse(model, geom, lean, travel, shell=shell, want_sizing=False, want_clearance=clearance)
    r = an.sweep
    cr = an.clearance_result
    C, T, L = r.status.shape
    pts = np.round(r.points * 10.0)                                   # 0.1 mm
    deg = 180.0 / math.pi
    out = []
    for k in range(C):
        ok = r.converged[k]
        states, status, marks = [], [], []
        for t in range(T):
            row, srow, mrow = [], [], []
            for l in range(L):
                if not ok[t, l]:
                    row.append(None)
                    srow.append(r.status_text(k, t, l))
                    mrow.append([])
                    continue
                row.append({"p": [int(v) for v in pts[k, t, l].ravel()],
                            "c": [round(float(v), 6) for v in r.camber[k, t, l]],
                            "o": [round(float(an.pose[k, t, l, 0]), 2), round(float(an.pose[k, t, l, 1]), 2),
                                  round(float(an.pose[k, t, l, 2]), 7)]})
                srow.append(None)
                mrow.append([compact_mark(m) for m in an.marks.state(k, t, l)])
            states.append(row)
            status.append(srow)
            marks.append(mrow)
        d = {
            "s": states, "status": status, "marks": marks,
            "wheels": [[float(geom.outer_radius[k, i]), float(geom.crown_radius[k, i]),
                        0.5 * float(model.mech.wheels[i].hub_width_mm)] for i in range(2)],
            "curves": {"scrub_mm": _grid(r.scrub[k], 3), "heave_mm": _grid(r.heave[k], 3),
                       "camber_error_left_deg": _grid(r.camber_error[k, ..., 0] * deg, 4),
                       "camber_error_right_deg": _grid(r.camber_error[k, ..., 1] * deg, 4),
                       "track_change_mm": _grid(r.track_change[k], 3)},
            "clear": None, "worst": None,
        }
        if cr is not None:
            d["clear"] = {"shell": _grid(cr.wheel_shell_mm[k], 2) if cr.has_shell else None,
                          "shell_error": _grid(cr.wheel_shell_error_mm[k], 2) if cr.has_shell else None,
                          "other": _grid(cr.wheel_link_mm[k], 2), "other_to": cr.wheel_link_member[k].tolist(),
                          "carrier": _grid(cr.wheel_carrier_mm[k], 2),
                          "carrier_to": cr.wheel_carrier_member[k].tolist(),
                          "steer": _grid(cr.max_steer_deg[k], 1)}
            d["worst"] = _worst(cr, k, mask, lean, travel)
        out.append(d)
    return out
