"""Batched 3-D clearance of wheels, tubes, body shell and ground over a sweep's envelope.

For every state of a :class:`tiltopt.kinematics.sweep.SweepResult` (lean x travel,
many candidates of one topology at once) and the steer range of each wheel (from
its steering linkage, or the steer envelope of a file without one), this computes:

* wheel-to-shell clearance of each wheel: the signed minimum distance
  between the tyre (a torus R, r) steered about its steering axis and the
  body shell (which leans with the chassis), positive = clear;
* wheel-to-link clearance: each wheel against every link and body segment
  that does not carry it (tubes as capsules of their ``tube_od_mm``);
* link-to-shell: how far tubes that must stay ``inside`` (``outside``) the
  shell cross its outline, and the slot each ``through`` tube sweeps on the
  outline over the whole envelope (arc length, mm; the cut-out is that plus
  the tube's diameter);
* ground clearance of the shell and of every tube; overall width
  (outermost tyre or shell extent) and track.

Geometry and frames (docs/domain.md): x forward, y right, z up; every link and
segment is checked as a tube in the linkage plane ``x = station_x_mm`` (a point
given off that plane, such as a ball joint set back for caster, is taken there:
the tubes' own x offsets are not modelled); the wheel centre and the steering
axis keep their own x.

Wheel and steer. The tyre is the crown circle (radius R - r, in the wheel
plane, about the wheel centre) swept by a ball of radius r, so its distance
to anything is the crown circle's distance minus r. The steering axis
(:func:`tiltopt.kinematics.steering.design_axis_dirs`: through two upright points,
or through ``steer_axis_point``, default the wheel centre, leaning inboard by
``kingpin_inclination_deg`` and rearward by ``caster_deg``) turns with the upright.
Steer delta > 0 turns the front of the wheel toward +y. With a steering linkage each
wheel is swept through the range its linkage reaches at the state (the input's lock,
tapered with lean by the steer envelope; :func:`tiltopt.kinematics.steering.steer_envelope`);
without one, both signs up to the envelope's ``max_steer_deg`` at the state's |lean|,
as a rigid rotation of the wheel about the axis in that state.

Search and its error estimate. For each (state, wheel) the crown circle x
steer range is sampled on a coarse grid (``crown_samples`` x
``steer_samples``), then the best sample is refined by a coordinate search
whose steps halve ``refine_iterations`` times. The reported value is always
a distance actually reached (never below the true minimum). Alongside it,
``*_error_mm`` is an estimated upper bound of how far the true minimum may lie
below it: it uses that the squared distance to any set is semiconcave
(Hess(d^2/2) <= I in space), applied to the coarse samples outside the
refined neighbourhood and to the final refinement steps; so a coarse grid
reports a large error rather than a falsely fine one. For shells whose
section changes along x, distances are measured in each point's own
section (see :mod:`tiltopt.kinematics.shell`), which the estimate does not cover.
Tubes against the shell are sampled at ``tube_samples`` points and refined
the same way along the tube; slot crossings are found by root finding on
the outline (to about 1e-6 mm).

The wheel searches run item by item in the compiled kernel of
:mod:`tiltopt.kinematics.clearance_kernel` (numba), and so does the slot root finding
on polygon shells; ``ClearanceSettings(kernel='numpy')`` runs the batched numpy
reference (:func:`_search`, :func:`_root`) instead, the same search with the
same results to rounding.

States that did not converge give NaN everywhere, and a candidate with any
such state gets NaN in every entry of :meth:`ClearanceResult.summary`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from . import clearance_kernel as _kernel
from . import wheel_solid as _solid
from .mechanism import body_tubes, split_ref
from .model import Geometry, Model
from .shell import (
    Shell,
    inside_level,
    outline_position,
    polygon_section_edges,
    section_distance,
    shell_signed_distance,
    signed_distance_yz,
    superellipse_params,
    support,
    to_chassis_frame,
)

_REACH = 6            # initial local-search step, in coarse half-spacings (covers +-3 cells)
_NEAREST_MEMBERS = 3   # members searched per (state, wheel); the rest only enter through their bound

__all__ = ["ClearanceSettings", "ClearanceResult", "Members", "members_of", "evaluate_clearance",
           "max_steer_deg", "shell_signed_distance"]


@dataclass
class ClearanceSettings:
    """Sampling density of the clearance search.

    crown_samples : coarse samples round the crown circle (default 24, every 15 deg).
    steer_samples : coarse steer samples across [-max, +max] (default 7; 1 when no steer).
    refine_iterations : halvings of the local coordinate search after the coarse grid.
    tube_samples : samples along a tube for its inside / outside check.
    root_iterations : iterations of the slot crossing root finder.
    kernel : {'compiled', 'numpy'}
        How the wheel searches (and, for polygon shells, the slot root
        finding) run: the compiled per-item loops of
        :mod:`tiltopt.kinematics.clearance_kernel` (default), or the numpy reference
        path (same search, same results to rounding; slower).
    """

    crown_samples: int = 24
    steer_samples: int = 7
    refine_iterations: int = 8
    tube_samples: int = 9
    root_iterations: int = 20
    kernel: str = "compiled"

    def __post_init__(self):
        for k in ("crown_samples", "steer_samples", "refine_iterations", "tube_samples", "root_iterations"):
            v = getattr(self, k)
            if not isinstance(v, (int, np.integer)) or v < (0 if k == "refine_iterations" else 1):
                raise ValueError(f"{k} must be a positive integer; got {v!r}")
        if self.crown_samples < 4:
            raise ValueError("crown_samples must be at least 4")
        if self.tube_samples < 2:
            raise ValueError("tube_samples must be at least 2")
        if self.kernel not in ("compiled", "numpy"):
            raise ValueError(f"kernel must be 'compiled' or 'numpy'; got {self.kernel!r}")


@dataclass(frozen=True)
class Members:
    """Links and body tubes as capsules.

    Attributes
    ----------
    names : list of str
    ia, ib : ndarray of shape (n_members,)
        Point indices (model.point_refs order) of the two ends.
    radius : ndarray of shape (n_members,)
        Tube radius, mm.
    role : ndarray of shape (n_members,) of str
        'inside', 'outside' or 'through'.
    own : ndarray of shape (2, n_members) of bool
        True where the member is a tube of the [left, right] wheel's upright: it turns with the
        wheel when it steers and holds the stub axle (the hub zone is left out of its check).
    carries : ndarray of shape (2, n_members) of bool
        True where the member carries the [left, right] wheel: a tube of its upright, or a member
        with an end on, or pinned to, the upright (the carrier margin applies to it).
    """

    names: list
    ia: np.ndarray
    ib: np.ndarray
    radius: np.ndarray
    role: np.ndarray
    own: np.ndarray
    carries: np.ndarray

    def __len__(self):
        return len(self.names)


def members_of(model: Model) -> Members:
    """The capsules of a model's links and body tubes (declared ``[[segments]]`` or defaults, see
    :func:`tiltopt.kinematics.mechanism.body_tubes`). Springs are not tubes here."""
    mech = model.mech
    pinned: dict[str, set[str]] = {}
    for p in mech.pins:
        pinned.setdefault(p.a, set()).add(split_ref(p.b)[0])
        pinned.setdefault(p.b, set()).add(split_ref(p.a)[0])
    for s in mech.sliders:
        pinned.setdefault(s.b, set()).add(split_ref(s.a_from)[0])
    names, ia, ib, rad, role, own, car = [], [], [], [], [], [], []
    items = [(l.name, l.a, l.b, l.tube_od_mm, l.shell, None) for l in mech.links]
    items += [(g.name, f"{g.body}.{g.a}", f"{g.body}.{g.b}", g.tube_od_mm, g.shell, g.body)
              for g in body_tubes(mech)]
    # bodies a slider joins to a wheel's upright (a telescopic leg's guide) carry that wheel too
    slid = {w.upright: {split_ref(s.a_from)[0] for s in mech.sliders if split_ref(s.b)[0] == w.upright}
            | {split_ref(s.b)[0] for s in mech.sliders if split_ref(s.a_from)[0] == w.upright} for w in mech.wheels}
    carrier_bodies = {w.upright: {w.upright} | slid[w.upright] for w in mech.wheels}
    for nm, a, b, od, sh, body in items:
        names.append(nm)
        ia.append(model.point_index[a])
        ib.append(model.point_index[b])
        rad.append(0.5 * od)
        role.append(sh)
        own.append([body == w.upright for w in mech.wheels])
        cb = [carrier_bodies[w.upright] for w in mech.wheels]
        car.append([body in c or any(split_ref(r)[0] in c or pinned.get(r, set()) & c for r in (a, b)) for c in cb])
    return Members(names, np.array(ia, int), np.array(ib, int), np.array(rad, float), np.array(role, dtype=object),
                   np.array(own, bool).reshape(-1, 2).T.copy(), np.array(car, bool).reshape(-1, 2).T.copy())


def max_steer_deg(mech, lean_deg) -> np.ndarray:
    """Largest steer angle (deg) at each lean from the steer envelope in force (``Mechanism.steer_rows``:
    the file's, the default where a wheel steers, or none: 0)."""
    lean = np.abs(np.asarray(lean_deg, float))
    rows = mech.steer_rows
    if not rows:
        return np.zeros_like(lean)
    rows = np.array(rows, float)
    return np.interp(lean, rows[:, 0], rows[:, 1])


# --------------------------------------------------------------------- result
@dataclass
class ClearanceResult:
    """Clearances of every state; arrays have shape (n_candidates, n_travel, n_lean[, 2]).

    ``[..., 0]`` is the left wheel, ``[..., 1]`` the right one; for
    ``ground_mm`` it is [shell, tubes]. NaN where the state did not converge;
    +inf where there is nothing to clear (no tube, or no shell in reach).
    """

    lean_deg: np.ndarray
    travel_mm: np.ndarray
    converged: np.ndarray
    wheel_shell_mm: np.ndarray
    wheel_shell_error_mm: np.ndarray
    wheel_shell_steer_deg: np.ndarray
    wheel_link_mm: np.ndarray
    wheel_link_error_mm: np.ndarray
    wheel_link_steer_deg: np.ndarray
    wheel_link_member: np.ndarray          # (C, T, L, 2) index into member_names, -1 = none
    wheel_carrier_mm: np.ndarray           # (C, T, L, 2) the wheel solid to the members that carry it
    wheel_carrier_error_mm: np.ndarray
    wheel_carrier_steer_deg: np.ndarray
    wheel_carrier_member: np.ndarray
    wheel_pair_mm: np.ndarray              # (C, T, L) the two wheel solids, straight ahead
    member_gap_mm: np.ndarray              # (C, T, L) smallest gap between two members' tubes
    max_steer_deg: np.ndarray              # (C, T, L)
    steer_deg: np.ndarray                  # (C, T, L) steer of the state's worst wheel clearance
    ground_mm: np.ndarray                  # (C, T, L, 2) [shell, tubes]
    overall_width_mm: np.ndarray           # (C, T, L) lateral extent, wheels straight ahead (the width at lean 0)
    extent_mm: np.ndarray                  # (C, T, L) lateral extent, wheels through their steer range
    track_mm: np.ndarray                   # (C, T, L)
    inside_violation_mm: np.ndarray        # (C, T, L)
    outside_violation_mm: np.ndarray       # (C, T, L)
    slot_length_mm: np.ndarray             # (C, n_through)
    slot_position_mm: np.ndarray           # (C, T, L, n_through) arc position of the crossing, NaN if none
    member_names: list = field(default_factory=list)
    through_names: list = field(default_factory=list)
    settings: ClearanceSettings = field(default_factory=ClearanceSettings)
    has_shell: bool = True

    SUMMARY_KEYS = ("min_wheel_shell_mm", "min_wheel_link_mm", "min_wheel_carrier_mm", "min_wheel_pair_mm",
                    "min_member_gap_mm", "min_clearance_mm", "min_ground_mm", "overall_width_mm", "lean_sweep_width_mm",
                    "total_slot_length_mm", "inside_violation_mm", "outside_violation_mm")
    #: searched clearances: each has an error bound and a conservative figure (value - bound)
    SEARCHED = ("min_wheel_shell_mm", "min_wheel_link_mm", "min_wheel_carrier_mm", "min_clearance_mm")

    def summary(self) -> dict:
        """Envelope extremes per candidate.

        Returns
        -------
        dict of str -> ndarray
            For each key of ``SUMMARY_KEYS`` an array of shape (n_candidates,),
            NaN for a candidate with any state that did not converge; and
            ``KEY + '_state'`` of shape (n_candidates, 2): the (travel index,
            lean index) where it occurs (-1 where NaN or not tied to a state).
            For the searched clearances (``SEARCHED``) also ``..._error_mm``
            (the error bound at the minimum's state) and ``..._lower_mm``: the
            smallest over the states of (clearance - its error bound), the
            conservative figure margins are met by. ``overall_width_mm`` is the
            width of the upright vehicle (lean 0, wheels straight ahead, the
            largest over the travels), ``lean_sweep_width_mm`` the lateral
            extent over the whole envelope (wheels through their steer range).
        """
        C = self.converged.shape[0]
        ok = self.converged.reshape(C, -1).all(axis=1)
        out = {}

        def extreme(key, arr, fn, err=None):
            flat = arr.reshape(C, self.converged.shape[1] * self.converged.shape[2], -1)
            per_state = fn(flat, axis=2)
            filled = np.where(np.isnan(per_state), np.inf if fn is np.min else -np.inf, per_state)
            idx = np.argmin(filled, axis=1) if fn is np.min else np.argmax(filled, axis=1)
            val = per_state[np.arange(C), idx]
            val = np.where(ok, val, np.nan)
            t, l = np.unravel_index(idx, self.converged.shape[1:])
            out[key] = val
            out[key + "_state"] = np.where((ok & np.isfinite(val))[:, None], np.stack([t, l], -1), -1)
            if err is not None:
                e = err.reshape(flat.shape)
                w = np.argmin(np.where(np.isnan(flat), np.inf, flat), axis=2)[np.arange(C), idx]
                out[key.replace("_mm", "_error_mm")] = np.where(ok, e[np.arange(C), idx, w], np.nan)
                low = np.min(np.where(np.isnan(flat), np.inf, flat - e).reshape(C, -1), axis=1)
                out[key.replace("_mm", "_lower_mm")] = np.where(ok, low, np.nan)

        extreme("min_wheel_shell_mm", self.wheel_shell_mm, np.min, self.wheel_shell_error_mm)
        extreme("min_wheel_link_mm", self.wheel_link_mm, np.min, self.wheel_link_error_mm)
        extreme("min_wheel_carrier_mm", self.wheel_carrier_mm, np.min, self.wheel_carrier_error_mm)
        extreme("min_wheel_pair_mm", self.wheel_pair_mm[..., None], np.min)
        extreme("min_member_gap_mm", self.member_gap_mm[..., None], np.min)
        both = np.minimum(out["min_wheel_shell_mm"], out["min_wheel_link_mm"])
        pick_link = out["min_wheel_link_mm"] < out["min_wheel_shell_mm"]
        out["min_clearance_mm"] = both
        out["min_clearance_mm_state"] = np.where(pick_link[:, None], out["min_wheel_link_mm_state"],
                                                 out["min_wheel_shell_mm_state"])
        out["min_clearance_error_mm"] = np.where(pick_link, out["min_wheel_link_error_mm"],
                                                 out["min_wheel_shell_error_mm"])
        out["min_clearance_lower_mm"] = np.minimum(out["min_wheel_shell_lower_mm"], out["min_wheel_link_lower_mm"])
        extreme("min_ground_mm", self.ground_mm, np.min)
        upright = int(np.argmin(np.abs(self.lean_deg)))
        w0 = np.full(self.overall_width_mm.shape, np.nan)
        w0[:, :, upright] = self.overall_width_mm[:, :, upright]
        extreme("overall_width_mm", w0[..., None], np.max)
        out["overall_width_mm"] = np.where(ok, out["overall_width_mm"], np.nan)
        extreme("lean_sweep_width_mm", self.extent_mm[..., None], np.max)
        extreme("inside_violation_mm", self.inside_violation_mm[..., None], np.max)
        extreme("outside_violation_mm", self.outside_violation_mm[..., None], np.max)
        out["total_slot_length_mm"] = np.where(ok, self.slot_length_mm.sum(axis=1), np.nan)
        out["total_slot_length_mm_state"] = np.full((C, 2), -1)
        return out

    def records(self, candidate: int = 0) -> list[dict]:
        """One JSON-ready dict per state of one candidate (nulls where not converged)."""
        rows = []
        c = candidate

        def num(v):
            v = float(v)
            return v if math.isfinite(v) else None

        for ti, s in enumerate(self.travel_mm):
            for li, phi in enumerate(self.lean_deg):
                ok = bool(self.converged[c, ti, li])

                def val(a):
                    return num(a[c, ti, li]) if ok else None

                def lr(a):
                    return {"left": num(a[c, ti, li, 0]) if ok else None,
                            "right": num(a[c, ti, li, 1]) if ok else None}

                g = self.ground_mm[c, ti, li]
                rows.append({
                    "lean_deg": float(phi),
                    "travel_mm": float(s),
                    "steer_deg": val(self.steer_deg),
                    "max_steer_deg": val(self.max_steer_deg),
                    "converged": ok,
                    "wheel_shell_clearance_mm": lr(self.wheel_shell_mm),
                    "wheel_link_clearance_mm": lr(self.wheel_link_mm),
                    "wheel_shell_error_mm": lr(self.wheel_shell_error_mm),
                    "wheel_link_error_mm": lr(self.wheel_link_error_mm),
                    "wheel_carrier_clearance_mm": lr(self.wheel_carrier_mm),
                    "wheel_carrier_error_mm": lr(self.wheel_carrier_error_mm),
                    "wheel_pair_clearance_mm": val(self.wheel_pair_mm),
                    "member_gap_mm": val(self.member_gap_mm),
                    "ground_clearance_mm": num(np.min(g)) if ok else None,
                    "ground_clearance_shell_mm": num(g[0]) if ok else None,
                    "ground_clearance_tubes_mm": num(g[1]) if ok else None,
                    "slot_length_mm": {n: (num(self.slot_length_mm[c, k]) if ok else None)
                                       for k, n in enumerate(self.through_names)},
                    "inside_violation_mm": val(self.inside_violation_mm),
                    "outside_violation_mm": val(self.outside_violation_mm),
                    "overall_width_mm": val(self.overall_width_mm),
                    "extent_mm": val(self.extent_mm),
                    "track_mm": val(self.track_mm),
                })
        return rows

    def summary_record(self, candidate: int = 0) -> dict:
        """The summary of one candidate as JSON-ready dicts with the state where each extreme occurs."""
        s = self.summary()
        out = {}
        for k in self.SUMMARY_KEYS:
            v = float(s[k][candidate])
            entry = {"value": v if math.isfinite(v) else None}
            t, l = (int(i) for i in s[k + "_state"][candidate])
            if t >= 0 and k != "total_slot_length_mm":
                entry["lean_deg"] = float(self.lean_deg[l])
                entry["travel_mm"] = float(self.travel_mm[t])
            for suffix, name in (("_error_mm", "error_mm"), ("_lower_mm", "lower_mm")):
                ek = k.replace("_mm", suffix)
                if ek in s:
                    e = float(s[ek][candidate])
                    entry[name] = e if math.isfinite(e) else None
            out[k] = entry
        out["slot_length_mm"] = {n: (float(self.slot_length_mm[candidate, k])
                                     if np.isfinite(self.slot_length_mm[candidate, k]) else None)
                                 for k, n in enumerate(self.through_names)}
        return out


# ------------------------------------------------------------------ helpers
def _rotate(vx, vy, vz, ex, ey, ez, c, s):
    """Rodrigues rotation of v about unit e by the angle with cosine c and sine s (broadcasting)."""
    dot = (ex * vx + ey * vy + ez * vz) * (1.0 - c)
    cx = ey * vz - ez * vy
    cy = ez * vx - ex * vz
    cz = ex * vy - ey * vx
    return (vx * c + cx * s + ex * dot, vy * c + cy * s + ey * dot, vz * c + cz * s + ez * dot)


class _Wheels:
    """Per-(state, wheel) item data of the converged states, flattened.

    ``steer``: a :class:`tiltopt.kinematics.steering.SteerResult` (the steer range of each item from
    the steering linkage), or None (the symmetric range of the steer envelope, :func:`max_steer_deg`).
    """

    def __init__(self, model: Model, geom: Geometry, sr, items: np.ndarray, shape, steer=None):
        from .steering import design_axis_dirs, steering_model

        mech = model.mech
        C, T, L = shape
        cand, t_i, l_i, w_i = np.unravel_index(items, (C, T, L, 2))
        self.cand, self.t, self.l, self.w = cand, t_i, l_i, w_i
        pts = sr.points
        sm = steering_model(model)
        centre_idx = sm.centre[w_i]
        c = pts[cand, t_i, l_i, centre_idx]
        self.cx = geom.x[cand, centre_idx]
        self.cy, self.cz = c[:, 0], c[:, 1]
        gam = sr.camber[cand, t_i, l_i, w_i]
        self.sg, self.cg = np.sin(gam), np.cos(gam)
        # the steering axis (tiltopt.kinematics.steering): through its point, turning with the upright
        axis_a = sm.axis_a[w_i]
        P = pts[cand, t_i, l_i, axis_a]
        self.px, self.py, self.pz = geom.x[cand, axis_a], P[:, 0], P[:, 1]
        beta = sr.body_angle[cand, t_i, l_i, sm.upright[w_i]]
        e0 = design_axis_dirs(sm, geom)[cand, w_i]
        cb, sb = np.cos(beta), np.sin(beta)
        self.ex, self.ey, self.ez = e0[:, 0], cb * e0[:, 1] + sb * e0[:, 2], -sb * e0[:, 1] + cb * e0[:, 2]
        R = geom.outer_radius[cand, w_i]
        self.R = R
        self.r = geom.crown_radius[cand, w_i]
        self.rho = R - self.r
        self.hub_half = np.array([0.5 * w.hub_width_mm for w in mech.wheels])[w_i]
        self.hub_zone = np.array([w.hub_radius_mm for w in mech.wheels])[w_i]
        self.lean = np.radians(sr.lean_deg)[l_i]
        steered = np.array([w.steered for w in mech.wheels])[w_i]
        if steer is None:            # the steer envelope's symmetric range
            self.delta_max = np.where(steered, np.radians(max_steer_deg(mech, sr.lean_deg))[l_i], 0.0)
            self.delta_mid = np.zeros(len(items))
        else:                        # the linkage's range at this state (its reached inputs)
            lo = np.nan_to_num(steer.lo[cand, t_i, l_i, w_i])
            hi = np.nan_to_num(steer.hi[cand, t_i, l_i, w_i])
            self.delta_max = np.where(steered, 0.5 * (hi - lo), 0.0)
            self.delta_mid = np.where(steered, 0.5 * (hi + lo), 0.0)
        off = np.sqrt((self.cy - self.py) ** 2 + (self.cz - self.pz) ** 2)
        self.arm = off + self.rho                    # largest distance of a crown point from the axis point
        self.reach = np.maximum(R, self.hub_half)        # largest distance of a solid point from its centre

    def solid_items(self) -> np.ndarray:
        """The item array of :func:`tiltopt.kinematics.wheel_solid.search`, shape (n, N_ITEM)."""
        S = _solid
        q = np.empty((len(self.r), S.N_ITEM))
        cols = {S.CX: self.cx, S.CY: self.cy, S.CZ: self.cz, S.NX: 0.0, S.NY: self.cg, S.NZ: -self.sg,
                S.PX: self.px, S.PY: self.py, S.PZ: self.pz, S.EX: self.ex, S.EY: self.ey, S.EZ: self.ez,
                S.RHOC: self.rho, S.RT: self.r, S.WH: self.hub_half, S.RHOH: self.hub_zone,
                S.DMAX: self.delta_max, S.REACH: self.reach, S.DMID: self.delta_mid}
        for k, v in cols.items():
            q[:, k] = v
        return q

    def crown(self, idx, delta, theta):
        """World crown-circle points, each of shape delta.shape == theta.shape == (n, m)."""
        sl = (idx, None)
        ct, st = np.cos(theta), np.sin(theta)
        rho = self.rho[sl]
        vx = self.cx[sl] - self.px[sl] + rho * ct
        vy = self.cy[sl] - self.py[sl] + rho * st * self.sg[sl]
        vz = self.cz[sl] - self.pz[sl] + rho * st * self.cg[sl]
        delta = delta + self.delta_mid[sl]
        x, y, z = _rotate(vx, vy, vz, self.ex[sl], self.ey[sl], self.ez[sl], np.cos(delta), np.sin(delta))
        return x + self.px[sl], y + self.py[sl], z + self.pz[sl]

    def crown_fixed_steer(self, idx, delta, theta):
        """World crown points at one steer per item: delta (n,), theta (n, m) -> three arrays (n, m)."""
        delta = delta + self.delta_mid[idx]
        cd, sd = np.cos(delta), np.sin(delta)
        e = (self.ex[idx], self.ey[idx], self.ez[idx])
        px, py, pz = self.px[idx], self.py[idx], self.pz[idx]
        c = _rotate(self.cx[idx] - px, self.cy[idx] - py, self.cz[idx] - pz, *e, cd, sd)
        f = _rotate(1.0, 0.0, 0.0, *e, cd, sd)
        u = _rotate(0.0, self.sg[idx], self.cg[idx], *e, cd, sd)
        rc = self.rho[idx][:, None] * np.cos(theta)
        rs = self.rho[idx][:, None] * np.sin(theta)
        base = (px, py, pz)
        return tuple((c[i] + base[i])[:, None] + f[i][:, None] * rc + u[i][:, None] * rs for i in range(3))

    def crown_grid(self, delta, theta):
        """World crown points on a grid: delta (n, S), theta (K,) -> three arrays (n, S, K)."""
        delta = delta + self.delta_mid[:, None]
        cd, sd = np.cos(delta), np.sin(delta)
        e = (self.ex[:, None], self.ey[:, None], self.ez[:, None])
        sl = (slice(None), None)
        c = _rotate((self.cx - self.px)[sl], (self.cy - self.py)[sl], (self.cz - self.pz)[sl], *e, cd, sd)
        f = _rotate(1.0, 0.0, 0.0, *e, cd, sd)
        u = _rotate(0.0, self.sg[sl], self.cg[sl], *e, cd, sd)
        rc = self.rho[:, None, None] * np.cos(theta)
        rs = self.rho[:, None, None] * np.sin(theta)
        base = (self.px, self.py, self.pz)
        return tuple((c[i] + base[i][:, None])[..., None] + f[i][..., None] * rc + u[i][..., None] * rs
                     for i in range(3))


def _coarse_grid(W: _Wheels, st: ClearanceSettings):
    """The coarse (steer x crown angle) grid of every item and its world points in single precision.

    The coarse grid only picks the basin and feeds the error estimate: single precision (about
    1e-4 mm here) suffices and halves its memory traffic.
    """
    n = len(W.rho)
    K = st.crown_samples
    S = st.steer_samples if (W.delta_max > 0).any() else 1
    theta = 2 * math.pi * np.arange(K) / K
    sg = np.linspace(-1.0, 1.0, S) if S > 1 else np.zeros(1)
    pts = tuple(g.reshape(n, -1).astype(np.float32) for g in W.crown_grid(W.delta_max[:, None] * sg[None, :], theta))
    return S, K, theta, sg, pts


def _search(W: _Wheels, pfun, coarse_pfun, st: ClearanceSettings, grid, early_pfun=None):
    """Minimise pfun(idx, x, y, z) over the crown circle x steer range of every item.

    ``pfun`` maps world crown points (arrays (n, m)) to clearances (distance minus
    the crown radius); ``coarse_pfun`` may return lower bounds of it (used on the
    coarse grid only); ``early_pfun`` (default ``pfun``) is used in all but the
    last three refinement rounds, which always use ``pfun``. Returns the reached
    minimum, its steer and crown angle (rad) and the error estimate (see module docs).
    """
    early_pfun = early_pfun or pfun
    n = len(W.rho)
    idx = np.arange(n)
    steer = W.delta_max > 0
    S, K, theta, sg, (gx, gy, gz) = grid
    F = coarse_pfun(idx, gx, gy, gz).reshape(n, S, K).astype(float)
    flat = np.where(np.isnan(F), np.inf, F).reshape(n, -1)
    k = np.argmin(flat, axis=1)
    si, ki = np.unravel_index(k, (S, K))
    hth0 = math.pi / K
    hd0 = np.where(steer, W.delta_max / max(S - 1, 1), 0.0)
    db = W.delta_max * sg[si]
    tb = theta[ki]
    n_exact = min(3, st.refine_iterations)
    use = early_pfun if st.refine_iterations > n_exact else pfun

    def fun(idx, delta, theta):
        return use(idx, *W.crown(idx, delta, theta))

    fb = fun(idx, db[:, None], tb[:, None])[:, 0]
    # the local search starts with steps of _REACH half-spacings, so it reaches about _REACH coarse
    # cells either way: the coarse cells within that neighbourhood are covered by the search
    hth, hd = _REACH * hth0, _REACH * hd0
    for it in range(st.refine_iterations):
        if it == st.refine_iterations - n_exact and use is not pfun:
            use = pfun                                   # the last rounds: exact distances
            fb = fun(idx, db[:, None], tb[:, None])[:, 0]
        # theta then steer: three-point moves, steps halving each round
        tc = tb[:, None] + np.array([-hth, hth])
        fc = use(idx, *W.crown_fixed_steer(idx, db, tc))
        j = np.argmin(fc, axis=1)
        better = fc[idx, j] < fb
        tb = np.where(better, tc[idx, j], tb)
        fb = np.where(better, fc[idx, j], fb)
        if steer.any():
            dc = np.clip(db[:, None] + hd[:, None] * np.array([-1.0, 1.0]), -W.delta_max[:, None],
                         W.delta_max[:, None])
            fc = fun(idx, dc, np.repeat(tb[:, None], 2, 1))
            j = np.argmin(fc, axis=1)
            better = fc[idx, j] < fb
            db = np.where(better, dc[idx, j], db)
            fb = np.where(better, fc[idx, j], fb)
        hth, hd = hth / 2, hd / 2

    # error estimate: lower bounds of the true minimum from the coarse samples outside the refined
    # neighbourhood and from the final steps (semiconcavity of the squared distance)
    with np.errstate(invalid="ignore"):
        fb, db, tb, err = _estimate(W, fb, db, tb, flat, si, ki, S, K, hth0, hd0, st)
    return fb, db + W.delta_mid, tb, err


def _lower(D, rho, arm, h_t, h_d):
    """Lower bound of the true minimum distance near a sample at crown distance D (cell half-sizes h_t, h_d).

    Semiconcavity of the squared distance to any set, Hess(d^2/2) <= I, along the crown path, whose
    displacement is at most rho h_t + arm h_d and curvature at most 1/rho (theta) and 1/(distance
    from the axis) (steer); the Lipschitz bound D - displacement always holds.
    """
    s_lip = rho * h_t + arm * h_d
    Dm = np.maximum(D + s_lip, 0.0)
    A = 2 * (rho * h_t) ** 2 + 2 * (arm * h_d) ** 2 + Dm * (rho * h_t ** 2 + arm * h_d ** 2)
    semi = np.where((D > 0) & (D * D > A), np.sqrt(np.maximum(D * D - A, 0.0)), -np.inf)
    return np.maximum(semi, D - s_lip)


def _estimate(W, fb, db, tb, flat, si, ki, S, K, hth0, hd0, st):
    n = len(fb)
    r = W.r
    Db = fb + r
    Dc = flat + r[:, None]
    cells = _REACH // 2
    near_k = (np.abs(((np.arange(K)[None, :] - ki[:, None]) + K // 2) % K - K // 2) <= cells)  # (n, K)
    near_s = np.abs(np.arange(S)[None, :] - si[:, None]) <= cells                                # (n, S)
    near = (near_s[:, :, None] & near_k[:, None, :]).reshape(n, -1)
    # only samples whose Lipschitz bound falls below the reached value can lower the bound
    s_lip = (W.rho * hth0 + W.arm * hd0)[:, None]
    cand = ~near & np.isfinite(Dc) & (Dc - s_lip < Db[:, None])
    ii, kk = np.nonzero(cand)
    lb_c = np.full(n, np.inf)
    if len(ii):
        vals = _lower(Dc[ii, kk], W.rho[ii], W.arm[ii], hth0, hd0[ii])
        np.minimum.at(lb_c, ii, vals)
    nfin = max(st.refine_iterations - 1, 0)
    lb_fine = _lower(Db, W.rho, W.arm, _REACH * hth0 / 2 ** nfin, _REACH * hd0 / 2 ** nfin)
    lb = np.minimum(lb_c, lb_fine)
    err = np.where(np.isfinite(fb), np.maximum(Db - lb, 0.0), np.nan)
    return fb, db, tb, err


def _shell_tables(shell: Shell):
    """The shell as the compiled kernel reads it: (mode, stations, outlines, thinned outlines, their bound)."""
    if shell.kind == "superellipse":
        tab = np.stack([shell.x, shell.half_width, shell.half_height, shell.centre_z, shell.exponent], 1)
        return _kernel.SHELL_SUPERELLIPSE, tab, _NO_OUTLINES, _NO_OUTLINES, 0.0
    tab = np.zeros((len(shell.x), 5))
    tab[:, 0] = shell.x
    coarse = shell.coarse_outlines
    err = shell.coarse_error_mm if coarse is not None else 0.0
    coarse = shell.outlines if coarse is None else coarse
    return (_kernel.SHELL_POLYGON, tab, np.ascontiguousarray(shell.outlines, float),
            np.ascontiguousarray(coarse, float), float(err))


_NO_OUTLINES = np.zeros((2, 3, 2))
_NO_MEMBERS = (np.zeros((1, 1, 6)), np.ones((1, 1), bool))


def _search_compiled(W: _Wheels, st: ClearanceSettings, it_trans, shell: Shell | None = None, members=None,
                     xs: float = 0.0):
    """:func:`_search` by the compiled kernel: the clearance to the shell, or (``members``) to capsules.

    members : (first ends (n, k, 2), second ends (n, k, 2), radius (n, k), left out (n, k) of bool), or None.
    Returns the reached minimum, its steer and crown angle (rad) and the error estimate, each (n,).
    """
    n = len(W.rho)
    q = np.empty((n, _kernel.N_COLUMNS))
    for col, v in ((_kernel.CX, W.cx), (_kernel.CY, W.cy), (_kernel.CZ, W.cz), (_kernel.PX, W.px),
                   (_kernel.PY, W.py), (_kernel.PZ, W.pz), (_kernel.EX, W.ex), (_kernel.EY, W.ey),
                   (_kernel.EZ, W.ez), (_kernel.SG, W.sg), (_kernel.CG, W.cg), (_kernel.RHO, W.rho),
                   (_kernel.R, W.r), (_kernel.DMAX, W.delta_max), (_kernel.ARM, W.arm),
                   (_kernel.TY, it_trans[:, 0]), (_kernel.TZ, it_trans[:, 1]), (_kernel.CL, np.cos(W.lean)),
                   (_kernel.SL, np.sin(W.lean)), (_kernel.DMID, W.delta_mid)):
        q[:, col] = v
    any_steer = bool((W.delta_max > 0).any())
    S = st.steer_samples if any_steer else 1
    sg = np.linspace(-1.0, 1.0, S) if S > 1 else np.zeros(1)
    if members is None:
        mode, tab, outlines, coarse, err = _shell_tables(shell)
        mem, mem_ex = _NO_MEMBERS
    else:
        mode, tab, outlines, coarse, err = _kernel.MEMBERS, np.zeros((2, 5)), _NO_OUTLINES, _NO_OUTLINES, 0.0
        a, b, rad, excluded = members
        e = b - a
        inv = 1.0 / np.maximum(e[..., 0] * e[..., 0] + e[..., 1] * e[..., 1], 1e-30)
        mem = np.ascontiguousarray(np.concatenate([a, e, inv[..., None], rad[..., None]], -1), float)
        mem_ex = np.ascontiguousarray(excluded, bool)
    out = np.empty((n, 4))
    if n:
        _kernel.search(mode, q, sg, st.crown_samples, st.refine_iterations, any_steer, _REACH, tab, outlines,
                       coarse, err, mem, mem_ex, float(xs), out)
    return out[:, 0], out[:, 1], out[:, 2], out[:, 3]


def _segment_distance(px, py, pz, ay, az, by, bz, x0):
    """Distance of points (n, m) to segments (n, M) in the plane x = x0; returns (n, m, M)."""
    ey, ez = (by - ay)[:, None, :], (bz - az)[:, None, :]
    inv = (1.0 / np.maximum(ey * ey + ez * ez, 1e-30))
    wy = py[..., None] - ay[:, None, :]
    wz = pz[..., None] - az[:, None, :]
    s = wy * ey
    s += wz * ez
    s *= inv
    np.clip(s, 0.0, 1.0, out=s)
    wy -= s * ey
    wz -= s * ez
    wy *= wy
    wz *= wz
    wy += wz
    dx = px - x0
    wy += (dx * dx)[..., None]
    return np.sqrt(wy, out=wy)


# ---------------------------------------------------------------------- main
def evaluate_clearance(model: Model, geom: Geometry | None, sweep_result, shell: Shell | None,
                       settings: ClearanceSettings | None = None, steer=None) -> ClearanceResult:
    """Clearances of many candidates over their envelope, in one batch.

    Parameters
    ----------
    model : Model
    geom : Geometry or None
        The candidates the sweep was run on (default: the mechanism itself).
    sweep_result : SweepResult
        ``sweep(model, geom, lean_deg, travel_mm)``; arrays (C, T, L, ...).
    shell : Shell or None
        The body shell, fixed to the chassis; None: no shell (the wheel solids, members, the two
        wheels, widths and the tubes' ground clearance are still checked).
    settings : ClearanceSettings, optional
    steer : tiltopt.kinematics.steering.SteerResult, optional
        The steering over the same sweep; a mechanism with a steering linkage gets its own
        (:func:`tiltopt.kinematics.steering.steer_envelope`) when not given. Each wheel is swept
        through the steer range its linkage reaches at each state; without a linkage, through the
        steer envelope's ``+-max_steer_deg``.

    Returns
    -------
    ClearanceResult
        Arrays of shape (n_candidates, n_travel, n_lean[, 2]).
    """
    st = settings or ClearanceSettings()
    geom = geom or model.default_geometry
    sr = sweep_result
    mech = model.mech
    C, T, L = sr.status.shape
    conv = sr.converged
    xs = mech.station_x_mm
    mem = members_of(model)
    M = len(mem)
    pts = sr.points                                                        # (C, T, L, P, 2)
    lean = np.broadcast_to(np.radians(sr.lean_deg), (C, T, L))
    cl, sl = np.cos(lean), np.sin(lean)
    # chassis datum position from one chassis point: world = t + R(lean) p_design
    ci = int(np.flatnonzero(model.point_body == model.chassis)[0])
    pd = geom.points[:, ci][:, None, None, :]
    trans = np.stack([pts[..., ci, 0] - (cl * pd[..., 0] + sl * pd[..., 1]),
                      pts[..., ci, 1] - (-sl * pd[..., 0] + cl * pd[..., 1])], -1)   # (C, T, L, 2)

    # ---------------------------------------------------------- wheels
    ok_items = np.flatnonzero(np.repeat(conv[..., None], 2, axis=-1).ravel())
    if steer is None and mech.steering is not None:
        from .steering import steer_envelope

        steer = steer_envelope(model, geom, sr)
    W = _Wheels(model, geom, sr, ok_items, (C, T, L), steer)
    it_trans = trans[W.cand, W.t, W.l]                                    # (n, 2)

    def shell_fun(lower_bound):
        cl_i, sl_i = np.cos(W.lean), np.sin(W.lean)

        def f(idx, x, y, z):
            dt = y.dtype
            dy = y - it_trans[idx, 0][:, None].astype(dt)
            dz = z - it_trans[idx, 1][:, None].astype(dt)
            c, s = cl_i[idx][:, None].astype(dt), sl_i[idx][:, None].astype(dt)
            return signed_distance_yz(shell, c * dy - s * dz, s * dy + c * dz, x,
                                      lower_bound=lower_bound) - W.r[idx][:, None].astype(dt)
        return f

    compiled = st.kernel == "compiled"
    if shell is None:                                   # nothing to clear the tyres of
        ws_val, ws_steer, ws_err = np.full(len(W.r), np.inf), np.zeros(len(W.r)), np.zeros(len(W.r))
    elif compiled:
        ws_val, ws_steer, _, ws_err = _search_compiled(W, st, it_trans, shell)
    else:
        grid = _coarse_grid(W, st)
        cheap = shell_fun(True)
        ws_val, ws_steer, _, ws_err = _search(W, shell_fun(False), cheap, st, grid, early_pfun=cheap)

    n = len(W.r)
    if M:
        # the wheel solid against every member: the other members over the steer range, the
        # upright's own tubes straight ahead with the hub zone left out (wheel_solid module docs)
        mem_arr = np.empty((n, M, _solid.N_MEM))
        P_it = pts[W.cand, W.t, W.l]
        mem_arr[..., _solid.AY], mem_arr[..., _solid.AZ] = P_it[:, mem.ia, 0], P_it[:, mem.ia, 1]
        mem_arr[..., _solid.BY], mem_arr[..., _solid.BZ] = P_it[:, mem.ib, 0], P_it[:, mem.ib, 1]
        mem_arr[..., _solid.RAD] = mem.radius[None, :]
        mem_arr[..., _solid.CLS] = np.where(mem.carries[W.w], _solid.CARRIER, _solid.OTHER)
        mem_arr[..., _solid.OWN] = mem.own[W.w]
        mem_arr[..., _solid.IDX] = np.arange(M)[None, :]
        sol = np.empty((n, _solid.N_CLASSES, 4))
        if n:
            _solid.search(W.solid_items(), mem_arr, float(xs), sol)
        wl_val, wl_err, wl_member, wl_steer = (sol[:, _solid.OTHER, k] for k in range(4))
        wc_val, wc_err, wc_member, wc_steer = (sol[:, _solid.CARRIER, k] for k in range(4))
        wl_member, wc_member = wl_member.astype(int), wc_member.astype(int)
    else:
        wl_val, wl_steer, wl_err, wl_member = np.full(n, np.inf), np.zeros(n), np.zeros(n), np.full(n, -1)
        wc_val, wc_steer, wc_err, wc_member = np.full(n, np.inf), np.zeros(n), np.zeros(n), np.full(n, -1)

    def scatter(v, fill=np.nan, dtype=float):
        out = np.full(C * T * L * 2, fill, dtype=dtype)
        out[ok_items] = v
        return out.reshape(C, T, L, 2)

    wheel_shell = scatter(ws_val)
    wheel_link = scatter(wl_val)
    ws_steer_deg = scatter(np.degrees(ws_steer))
    wl_steer_deg = scatter(np.degrees(wl_steer))
    worst = np.minimum(wheel_shell, wheel_link)                            # (C, T, L, 2)
    wsel = np.argmin(np.where(np.isnan(worst), np.inf, worst), axis=-1)
    use_link = np.take_along_axis(wheel_link < wheel_shell, wsel[..., None], -1)[..., 0]
    steer_deg = np.where(use_link, np.take_along_axis(wl_steer_deg, wsel[..., None], -1)[..., 0],
                         np.take_along_axis(ws_steer_deg, wsel[..., None], -1)[..., 0])
    steer_deg = np.where(conv, steer_deg, np.nan)

    # ------------------------------------------------- widths, the two wheels, ground
    S = st.steer_samples if (W.delta_max > 0).any() else 1
    sg = np.linspace(-1.0, 1.0, S) if S > 1 else np.zeros(1)
    delta = W.delta_mid[:, None] + W.delta_max[:, None] * sg              # (n, S)
    cd, sd = np.cos(delta), np.sin(delta)
    sl_ = (slice(None), None)
    ccy = _rotate((W.cx - W.px)[sl_], (W.cy - W.py)[sl_], (W.cz - W.pz)[sl_], W.ex[sl_], W.ey[sl_], W.ez[sl_],
                  cd, sd)[1] + W.py[:, None]
    fy = _rotate(1.0, 0.0, 0.0, W.ex[sl_], W.ey[sl_], W.ez[sl_], cd, sd)[1]
    uy = _rotate(0.0, W.sg[sl_], W.cg[sl_], W.ex[sl_], W.ey[sl_], W.ez[sl_], cd, sd)[1]
    ny = _rotate(0.0, W.cg[sl_], -W.sg[sl_], W.ex[sl_], W.ey[sl_], W.ez[sl_], cd, sd)[1]
    # lateral reach of the solid: the tyre (crown circle in the wheel plane, swept by r) or the hub
    half = np.maximum(W.rho[:, None] * np.sqrt(fy * fy + uy * uy) + W.r[:, None], W.hub_half[:, None] * np.abs(ny))
    right = scatter(np.max(ccy + half, axis=1))
    left = scatter(np.min(ccy - half, axis=1))
    reach0 = _solid.lateral_reach(W.R, W.r, W.hub_half, np.arcsin(np.clip(W.sg, -1, 1)))
    right0, left0 = scatter(W.cy + reach0), scatter(W.cy - reach0)        # straight ahead
    ty, tz = trans[..., 0], trans[..., 1]
    cl1, sl1 = np.cos(np.radians(sr.lean_deg)), np.sin(np.radians(sr.lean_deg))   # (L,): the shell's
    if shell is not None:                                                   # extents depend on the lean only
        sh_right = ty + support(shell, np.stack([cl1, sl1], -1))
        sh_left = ty - support(shell, np.stack([-cl1, -sl1], -1))
        ground_shell = tz - support(shell, np.stack([sl1, -cl1], -1))
    else:
        sh_right, sh_left, ground_shell = np.full((C, T, L), -np.inf), np.full((C, T, L), np.inf), np.full(
            (C, T, L), np.inf)
    extent = np.maximum(np.max(right, -1), sh_right) - np.minimum(np.min(left, -1), sh_left)
    extent = np.where(conv, extent, np.nan)
    extent0 = np.maximum(np.max(right0, -1), sh_right) - np.minimum(np.min(left0, -1), sh_left)
    extent0 = np.where(conv, extent0, np.nan)
    # the two wheels against each other (front view, straight ahead: exact at one station)
    hubs = pts[..., np.array(model.wheel_centre), :]                        # (C, T, L, 2, 2)
    pair = _solid.pair_gap(hubs[..., 0], hubs[..., 1], sr.camber, geom.outer_radius[:, None, None, :],
                           geom.crown_radius[:, None, None, :],
                           np.array([0.5 * w.hub_width_mm for w in mech.wheels])[None, None, None, :])
    pair = np.where(conv, pair, np.nan)
    if M:
        za, zb = pts[..., mem.ia, 1], pts[..., mem.ib, 1]
        ground_tubes = np.min(np.minimum(za, zb) - mem.radius, axis=-1)
    else:
        ground_tubes = np.full((C, T, L), np.inf)
    ground = np.where(conv[..., None], np.stack([ground_shell, ground_tubes], -1), np.nan)
    member_gap, member_pair = _member_gaps(model, mem, pts)
    member_gap = np.where(conv, member_gap, np.nan)

    # ------------------------------------------------- tubes and the shell
    inside_v = np.zeros((C, T, L))
    outside_v = np.zeros((C, T, L))
    through = [k for k in range(M) if mem.role[k] == "through"]
    slot_pos = np.full((C, T, L, len(through)), np.nan)
    slot_len = np.zeros((C, len(through)))
    if M and shell is not None:
        A = to_chassis_frame(pts[..., mem.ia, :], trans[..., None, :], lean[..., None])   # (C, T, L, M, 2)
        B = to_chassis_frame(pts[..., mem.ib, :], trans[..., None, :], lean[..., None])
        for role, sign in (("inside", +1.0), ("outside", -1.0)):
            ks = np.flatnonzero(mem.role == role)
            if not len(ks):
                continue
            a, b, rk = A[..., ks, :], B[..., ks, :], mem.radius[ks]
            v = _tube_extreme(shell, a, b, xs, sign, st)                   # max of sign * sd along the tube
            viol = np.maximum(v + rk, 0.0)
            val = np.max(viol, axis=-1)
            if role == "inside":
                inside_v = val
            else:
                outside_v = val
        if through:
            tk = np.array(through)
            a, b = A[..., tk, :], B[..., tk, :]
            # polygon levels are distances to many edges: the compiled loops are far quicker there; the
            # superellipse level is two powers, which numpy's vector loops do faster
            fast = st.kernel == "compiled" and shell.kind == "polygon"
            level = _level_compiled if fast else inside_level
            ha, hb = level(shell, a, xs), level(shell, b, xs)
            cross = (ha * hb < 0) & np.isfinite(ha) & np.isfinite(hb)
            s = (_root_compiled if fast else _root)(shell, a, b, ha, hb, xs, st.root_iterations)
            p = a + (b - a) * s[..., None]
            pos, perim = outline_position(shell, xs, p)
            slot_pos = np.where(cross, pos, np.nan)
            slot_len = _circular_range(slot_pos.reshape(C, T * L, -1), perim)
    inside_v = np.where(conv, inside_v, np.nan)
    outside_v = np.where(conv, outside_v, np.nan)
    all_ok = conv.reshape(C, -1).all(axis=1)
    slot_len = np.where(all_ok[:, None], slot_len, np.nan)

    return ClearanceResult(
        lean_deg=np.asarray(sr.lean_deg, float), travel_mm=np.asarray(sr.travel_mm, float), converged=conv,
        wheel_shell_mm=wheel_shell, wheel_shell_error_mm=scatter(ws_err), wheel_shell_steer_deg=ws_steer_deg,
        wheel_link_mm=wheel_link, wheel_link_error_mm=scatter(wl_err), wheel_link_steer_deg=wl_steer_deg,
        wheel_link_member=scatter(wl_member, -1, int),
        wheel_carrier_mm=scatter(wc_val), wheel_carrier_error_mm=scatter(wc_err),
        wheel_carrier_steer_deg=scatter(np.degrees(wc_steer)), wheel_carrier_member=scatter(wc_member, -1, int),
        wheel_pair_mm=pair, member_gap_mm=member_gap,
        max_steer_deg=np.where(conv, _max_steer_of(mech, sr.lean_deg, steer, (C, T, L)), np.nan),
        steer_deg=steer_deg, ground_mm=ground, overall_width_mm=extent0, extent_mm=extent,
        track_mm=np.where(conv, sr.track, np.nan), inside_violation_mm=inside_v, outside_violation_mm=outside_v,
        slot_length_mm=slot_len, slot_position_mm=slot_pos, member_names=list(mem.names),
        through_names=[mem.names[k] for k in through], settings=st, has_shell=shell is not None)


def _max_steer_of(mech, lean_deg, steer, shape) -> np.ndarray:
    """Largest |steer| (deg) of either wheel at each state: the linkage's reach, or the steer envelope's."""
    if steer is None:
        return np.broadcast_to(max_steer_deg(mech, lean_deg), shape)
    m = np.fmax(np.abs(steer.lo), np.abs(steer.hi))
    return np.degrees(np.fmax(m[..., 0], m[..., 1]))


def member_pairs(model: Model, mem: Members) -> np.ndarray:
    """Pairs (i, j) of members that must keep clear of each other. Left out: members that meet at a
    joint (an end of each at one pin), tubes of one body or of
    two bodies joined by a pin or slider (they meet at the joint; the two bodies of a slider count as
    one with each other's neighbours), a link and the tubes of the bodies it attaches to, two links
    on one body, and the chassis' tubes (the chassis is a frame the members pass beside).
    Shape (n_pairs, 2)."""
    mech = model.mech
    near: dict[str, set[str]] = {b: {b} for b in mech.bodies}
    for j in (*((p.a, p.b) for p in mech.pins), *((s.a_from, s.b) for s in mech.sliders)):
        ba, bb = split_ref(j[0])[0], split_ref(j[1])[0]
        near[ba].add(bb)
        near[bb].add(ba)
    # a telescopic assembly (two bodies joined by a slider) meets its neighbours as one body: the
    # inner tube runs inside the outer one, past the outer one's joints
    for s_ in mech.sliders:
        ba, bb = split_ref(s_.a_from)[0], split_ref(s_.b)[0]
        both = near[ba] | near[bb]
        near[ba], near[bb] = set(both), set(both)
    links = {l.name: (split_ref(l.a)[0], split_ref(l.b)[0]) for l in mech.links}
    is_link = [nm in links for nm in mem.names]
    touch = [set(links[nm]) if nm in links else {model.body_names[model.point_body[mem.ia[k]]]}
             for k, nm in enumerate(mem.names)]
    frame = [t == {mech.chassis} and not is_link[k] for k, t in enumerate(touch)]   # the chassis' own tubes

    parent = {r: r for r in model.point_refs}

    def find(a):
        while parent[a] != a:
            a = parent[a]
        return a

    for p_ in mech.pins:
        parent[find(p_.a)] = find(p_.b)
    refs = model.point_refs
    ends = [{find(refs[a]), find(refs[b])} for a, b in zip(mem.ia, mem.ib)]

    def joined(i, j):
        if ends[i] & ends[j]:
            return True                               # they meet at a joint
        if is_link[i] and is_link[j]:
            return bool(touch[i] & touch[j])          # two links on one body
        if is_link[i] or is_link[j]:
            return bool(touch[i] & touch[j])          # a link and the tubes of a body it attaches to
        (bi,), (bj,) = touch[i], touch[j]
        return bj in near[bi] or bi in near[bj]       # one body, or two joined by a pin or slider

    out = [(i, j) for i in range(len(mem)) for j in range(i + 1, len(mem))
           if not (frame[i] or frame[j]) and not joined(i, j)]
    return np.array(out, dtype=int).reshape(-1, 2)


def _segments_gap(a1, a2, b1, b2):
    """Distance between 2-D segments a1-a2 and b1-b2 (..., 2), 0 where they cross."""
    pseg = _solid.point_segment_distance

    def side(o, u, v):
        return (u[..., 0] - o[..., 0]) * (v[..., 1] - o[..., 1]) - (u[..., 1] - o[..., 1]) * (v[..., 0] - o[..., 0])

    d = np.minimum(np.minimum(pseg(a1, b1, b2), pseg(a2, b1, b2)), np.minimum(pseg(b1, a1, a2), pseg(b2, a1, a2)))
    cross = (side(a1, a2, b1) * side(a1, a2, b2) < 0) & (side(b1, b2, a1) * side(b1, b2, a2) < 0)
    return np.where(cross, 0.0, d)


def _member_gaps(model: Model, mem: Members, pts):
    """Smallest gap between the tubes of two members (:func:`member_pairs`) at every state.

    Returns (gap (C, T, L): distance between the tube surfaces, negative where they overlap; +inf
    without pairs, and the pair index of the smallest). NaN states give NaN (compiled per state).
    """
    pairs = member_pairs(model, mem)
    shape = pts.shape[:3]
    if not len(pairs):
        return np.full(shape, np.inf), np.full(shape, -1)
    flat = np.ascontiguousarray(pts.reshape(-1, pts.shape[-2], 2), float)
    gap, which = np.empty(len(flat)), np.empty(len(flat), np.int64)
    _solid.member_gaps(flat, mem.ia.astype(np.int64), mem.ib.astype(np.int64), mem.radius.astype(float),
                       pairs[:, 0].astype(np.int64), pairs[:, 1].astype(np.int64), gap, which)
    bad = ~np.isfinite(flat).all(axis=(1, 2))
    gap[bad] = np.nan
    return gap.reshape(shape), which.reshape(shape)


def _tube_extreme(shell: Shell, a, b, x0, sign, st: ClearanceSettings):
    """max over the tube axis of ``sign * section distance``: sampled, then refined by halving steps."""
    n = st.tube_samples
    s = np.linspace(0.0, 1.0, n)
    p = a[..., None, :] + (b - a)[..., None, :] * s[:, None]
    f = sign * section_distance(shell, p, x0)
    j = np.argmax(np.where(np.isnan(f), -np.inf, f), axis=-1)
    sb = s[j]
    fb = np.take_along_axis(f, j[..., None], -1)[..., 0]
    h = 0.5 / (n - 1)
    for _ in range(st.refine_iterations):
        sc = np.clip(sb[..., None] + np.array([-h, h]), 0.0, 1.0)
        pc = a[..., None, :] + (b - a)[..., None, :] * sc[..., None]
        fc = sign * section_distance(shell, pc, x0)
        k = np.argmax(np.where(np.isnan(fc), -np.inf, fc), axis=-1)
        fk = np.take_along_axis(fc, k[..., None], -1)[..., 0]
        better = fk > fb
        sb = np.where(better, np.take_along_axis(sc, k[..., None], -1)[..., 0], sb)
        fb = np.where(better, fk, fb)
        h /= 2
    return fb


def _root(shell: Shell, a, b, ha, hb, x0, iterations):
    """Where the tube a -> b crosses the outline (parameter in [0, 1]); Illinois regula falsi.

    Entries without a sign change get an arbitrary value (callers mask them).
    """
    level = _line_level(shell, a, b, x0)
    lo, hi = np.zeros(ha.shape), np.ones(ha.shape)
    bad = ~(ha * hb < 0)
    flo = np.where(bad, -1.0, ha)
    fhi = np.where(bad, 1.0, hb)
    side = np.zeros(ha.shape)
    for _ in range(iterations):
        den = fhi - flo
        m = hi - fhi * (hi - lo) / np.where(den == 0, 1.0, den)
        m = np.where((den == 0) | ~np.isfinite(m), 0.5 * (lo + hi), np.minimum(np.maximum(m, lo), hi))
        fm = level(m)
        fm = np.where(np.isfinite(fm), fm, 0.0)
        same = fm * fhi > 0                      # m replaces hi
        flo = np.where(same & (side > 0), 0.5 * flo, flo)
        fhi = np.where(~same & (side < 0), 0.5 * fhi, fhi)
        hi, fhi = np.where(same, m, hi), np.where(same, fm, fhi)
        lo, flo = np.where(same, lo, m), np.where(same, flo, fm)
        side = np.where(same, 1.0, -1.0)
    return np.where(np.abs(flo) < np.abs(fhi), lo, hi)


def _line_level(shell: Shell, a, b, x0):
    """m -> :func:`tiltopt.kinematics.shell.inside_level` at ``a + (b - a) m`` in the plane x0 (the same sums).

    a, b : ndarray of shape (..., 2); m of shape (...). For a superellipse shell the section is
    looked up once and y, z are kept apart (no stacking of points at every call).
    """
    ay, az = np.ascontiguousarray(a[..., 0]), np.ascontiguousarray(a[..., 1])
    dy, dz = b[..., 0] - ay, b[..., 1] - az
    if shell.kind != "superellipse":
        return lambda m: inside_level(shell, np.stack([ay + dy * m, az + dz * m], -1), x0)
    sa, sb, zc, n = superellipse_params(shell, np.asarray(x0, float))

    def level(m):
        y = dy * m
        y += ay
        y /= sa
        np.abs(y, out=y)
        np.power(y, n, out=y)
        z = dz * m
        z += az
        z -= zc
        z /= sb
        np.abs(z, out=z)
        np.power(z, n, out=z)
        y += z
        y -= 1.0
        return y
    return level


def _level_compiled(shell: Shell, p, x0):
    """:func:`tiltopt.kinematics.shell.inside_level` of points p (..., 2) on a polygon shell, by the compiled kernel."""
    out = np.empty(p.shape[:-1])
    _kernel.levels(polygon_section_edges(shell, x0), np.ascontiguousarray(p.reshape(-1, 2), float), out.reshape(-1))
    return out


def _root_compiled(shell: Shell, a, b, ha, hb, x0, iterations):
    """:func:`_root` on a polygon shell by the compiled kernel (the same iteration, entry by entry)."""
    out = np.empty(ha.size)
    _kernel.root(polygon_section_edges(shell, x0), np.ascontiguousarray(a.reshape(-1, 2), float),
                 np.ascontiguousarray(b.reshape(-1, 2), float), np.ascontiguousarray(ha.ravel(), float),
                 np.ascontiguousarray(hb.ravel(), float), iterations, out)
    return out.reshape(ha.shape)


def _circular_range(pos: np.ndarray, perimeter: float) -> np.ndarray:
    """Length of the shortest arc of a closed outline holding every finite position.

    pos : ndarray of shape (C, n_states, K) -> (C, K); 0 where no position is finite.
    """
    C, N, K = pos.shape
    fin = np.isfinite(pos)
    anyfin = fin.any(axis=1)
    first = np.take_along_axis(pos, np.argmax(fin, axis=1)[:, None, :], 1)       # a finite value, if any
    p = np.where(fin, pos, first)
    p = np.sort(p, axis=1)
    gaps = np.diff(p, axis=1)
    wrap = p[:, :1] + perimeter - p[:, -1:]
    big = np.max(np.concatenate([gaps, wrap], axis=1), axis=1)
    return np.where(anyfin, perimeter - big, 0.0)
