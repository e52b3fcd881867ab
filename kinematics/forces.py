"""Quasi-static force analysis at solved poses (virtual work, absolute body coordinates).

The solver works in reduced coordinates; forces are recovered here by one
linear solve per state in absolute body coordinates. Every body ``b``
(chassis included) gets the coordinates ``(y_b, z_b, theta_b)``: the position
of its reference point (its first point in the mechanism file) and its angle
in the lean sense. A point ``p`` of ``b`` at the current position ``x_p`` moves
by ``dx_p = dt_b + dtheta_b (w_z, -w_y)`` with ``w = x_p - x_ref(b)``, so the
constraint Jacobian ``J`` (n_rows, 3 n_bodies) is built from the solved point
positions and body angles alone.

Rows (multiplier, sign convention of the result):

- pin ``a ~ b``: ``x_a - x_b`` (2 rows); the multiplier is the force on the
  body of ``a`` from the body of ``b``, N.
- link, spring: ``u . (dx_a - dx_b)`` with ``u`` the unit vector b -> a; the
  multiplier is the compression (spring force, compression positive; link
  tension = -multiplier).
- slider: offset of the runner from the guide line (force along the guide
  normal on the runner, N) and 1000 mm x relative angle (couple, N*m).
- ground, per wheel: the contact point of the tyre as a point of its upright,
  along ``(side_ratio, 1)``: the multiplier is the tyre's vertical load N_i and
  its side force is ``side_ratio * N_i`` (balanced cornering: tan lean).
- lateral reference: 0.5 (dy_cL + dy_cR): the lateral force that holds the
  vehicle's lateral position, shared by the two contacts, N.
- lean: riding states ``1000 mm x dtheta_chassis``: the balance moment the
  rider must supply, N*m (zero for a symmetric state); parked states
  ``1000 mm x (dtheta_lock - dtheta_chassis)``: the tilt lock between the
  chassis and the lock body, N*m.

Equilibrium is ``J^T lambda + Q = 0`` with ``Q`` the generalized applied
forces (the front and rear loads on the chassis, see :mod:`tiltopt.kinematics.loads`).
With ``m`` rows and ``n = 3 n_bodies`` columns, a properly constrained
mechanism has ``rank J = n``. If ``m > n`` (over-constrained, e.g. the rigid
parallelogram: one redundant pin) the internal forces are statically
indeterminate; the rule used is the **minimum-norm solution**
``lambda = J (J^T J)^-1 (-Q)`` (on angle-scaled columns), which adds no
self-stress state to the forces. It is flagged ``indeterminate``: a
parallelogram that is built with misalignment or loaded thermally carries
more. A state whose ``J^T lambda + Q`` does not vanish (a mechanism with
unwanted freedom) is flagged as not in equilibrium.

Applied loads beyond the front and rear loads (see :mod:`tiltopt.kinematics.cases`):

- a kerb strike: a lateral force at one contact patch, on its upright, and the
  opposite d'Alembert force of the vehicle's lateral inertia at the centre of
  mass;
- prescribed tyre loads (one-wheel bump): the chassis gets a roll couple (the
  d'Alembert couple of its roll inertia) of the size that makes the left tyre
  load come out as prescribed; by linearity it is one more right-hand side of
  the same solve, ``lambda = lambda_Q + M lambda_1`` with ``lambda_1`` the
  response to a unit couple. The vertical balance then gives the right tyre
  its load.

Out-of-plane braking (a simple, conservative model): each front tyre gets a
longitudinal force ``brake_g * N_i`` at its contact. It is shared equally by
the chassis pivots (pins to the chassis) reached from that wheel's upright
through pins and sliders of the linkage (links and springs have rod ends and
carry no out-of-plane load). A pivot k taking ``F`` from the contact ``c_i``
carries the moment ``F |c_i - p_k|`` (the front-view lever from the contact to
the pivot), summed over the wheels by magnitude. The pivot is a pair of
bearings ``base_mm`` apart along x: the bearing couple is ``M / base``, and the
member pinned there carries ``M`` as out-of-plane bending, and the shared
longitudinal force as out-of-plane shear, at that pivot.
Members are modelled as single round tubes; an A-arm carries brake loads as
a triangle and is lighter than this estimate says.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .mechanism import split_ref
from .model import Geometry, Model

ANGLE_ROW_MM = 1000.0      # angle rows are scaled by 1 m so their multipliers are N*m
EQUILIBRIUM_RTOL = 1e-8


@dataclass
class StateLoads:
    """Applied loads per item (state of a candidate).

    All arrays have shape (N,).
    front_load_n, rear_load_n : N (see tiltopt.kinematics.loads.LoadState)
    side_ratio : tyre side force / vertical load
    brake_g : longitudinal deceleration, g
    locked : bool, tilt lock engaged
    com_height_mm : centre of mass height in the design position, mm
    wheel_target_n : ndarray of shape (N, 2)
        Prescribed tyre vertical loads [left, right], N; NaN where they follow from equilibrium.
    kerb_force_n : ndarray of shape (N, 2)
        Lateral force applied at each contact patch, +y, N.
    """

    front_load_n: np.ndarray
    rear_load_n: np.ndarray
    side_ratio: np.ndarray
    brake_g: np.ndarray
    locked: np.ndarray
    com_height_mm: np.ndarray
    wheel_target_n: np.ndarray | None = None
    kerb_force_n: np.ndarray | None = None

    def __post_init__(self):
        n = len(self.front_load_n)
        if self.wheel_target_n is None:
            self.wheel_target_n = np.full((n, 2), np.nan)
        if self.kerb_force_n is None:
            self.kerb_force_n = np.zeros((n, 2))


class BodyLoad(NamedTuple):
    """One load on a body, for the section cuts of :mod:`tiltopt.kinematics.sections`.

    point : the loaded body point it is assigned to (a tyre force to its wheel centre, a guide's
        slider force to the guide point nearest the runner); position : (N, 2) where it acts, mm;
    force : (N, 2) N; couple : (N,) lean sense, N*mm; label : what it is ("pin upper_left");
    slider : index of the slider whose guide this is (the load runs along the guide), else -1.
    """

    point: int
    position: np.ndarray
    force: np.ndarray
    couple: np.ndarray
    label: str
    slider: int = -1


@dataclass
class ForceResult:
    """Forces at solved states; arrays have shape (N, ...) for N items.

    Attributes
    ----------
    pin_force : ndarray of shape (N, n_pins, 2)
        Force on the body of pin end ``a`` from the body of ``b``, (y, z), N.
    link_tension : ndarray of shape (N, n_links)
        Tension positive, N.
    spring_force : ndarray of shape (N, n_springs)
        Compression positive, N.
    slider_force : ndarray of shape (N, n_sliders)
        Force on the runner along the guide normal, N.
    slider_moment : ndarray of shape (N, n_sliders)
        Couple on the runner from the guide, lean sense, N*m.
    wheel_load : ndarray of shape (N, 2)
        Tyre vertical load [left, right], N (positive = ground pushes up).
    tyre_side_force : ndarray of shape (N, 2)
        Tyre lateral force, +y positive, N (side ratio share + lateral reference share + a kerb
        strike's force).
    lateral_force : ndarray of shape (N,)
        Force at the lateral reference (contact midpoint), +y, N.
    lean_moment : ndarray of shape (N,)
        Moment on the chassis about x, lean sense, N*m: the rider's balance
        moment in riding states, the tilt-lock torque in locked states.
    roll_couple : ndarray of shape (N,)
        The d'Alembert roll couple on the chassis that makes prescribed tyre loads
        come out (one-wheel bump), lean sense, N*m; 0 elsewhere.
    brake_pivot_moment : ndarray of shape (N, n_pins)
        Out-of-plane braking moment at chassis pivots (0 for other pins), N*mm.
    brake_pivot_shear : ndarray of shape (N, n_pins)
        The longitudinal braking force each chassis pivot takes, N.
    brake_bearing_force : ndarray of shape (N, n_pins)
        The bearing couple force ``moment / base``, N.
    applied_force : ndarray of shape (N, 2)
        Sum of the applied loads away from the contact patches (at the centre of mass and the
        datum O, a kerb strike's lateral inertia included), (y, z), N; ``tyre_side_force`` holds
        the kerb force itself, so tyre forces + applied force = 0.
    equilibrium_residual : ndarray of shape (N,)
        ``|J^T lambda + Q| / |Q|``.
    ok : ndarray of shape (N,), bool
        Solved pose available and equilibrium met.
    lam : ndarray of shape (N, n_rows)
        Raw multipliers (row order of ``row_names``).
    positions : ndarray of shape (N, n_points, 2)
        The poses used (design position stand-ins where ``ok`` is False), mm.
    contact : ndarray of shape (N, 2, 2)
    body_loads : dict of body index -> list of BodyLoad
        Every load on each body (see ``ForceModel._body_loads``).
    """

    row_names: list[str]
    n_coords: int
    redundant: int
    free: int
    pin_force: np.ndarray
    link_tension: np.ndarray
    spring_force: np.ndarray
    slider_force: np.ndarray
    slider_moment: np.ndarray
    wheel_load: np.ndarray
    tyre_side_force: np.ndarray
    lateral_force: np.ndarray
    lean_moment: np.ndarray
    roll_couple: np.ndarray
    brake_pivot_moment: np.ndarray
    brake_pivot_shear: np.ndarray
    brake_bearing_force: np.ndarray
    applied_force: np.ndarray
    equilibrium_residual: np.ndarray
    ok: np.ndarray
    lam: np.ndarray
    positions: np.ndarray
    contact: np.ndarray
    body_loads: dict

    @property
    def indeterminate(self) -> bool:
        return self.redundant > 0


class ForceModel:
    """Constant tables of the force analysis for one topology."""

    def __init__(self, model: Model, lock_body: str | None = None, default_base_mm: float = 50.0):
        self.model = model
        mech = model.mech
        self.nb = len(model.body_names)
        self.n = 3 * self.nb
        pidx, bi = model.point_index, {b: i for i, b in enumerate(model.body_names)}
        self.ref_point = np.array([model.point_index[f"{b}.{next(iter(mech.bodies[b]))}"]
                                   for b in model.body_names])
        self.pins = [(pidx[p.a], bi[split_ref(p.a)[0]], pidx[p.b], bi[split_ref(p.b)[0]]) for p in mech.pins]
        self.links = [(pidx[l.a], bi[split_ref(l.a)[0]], pidx[l.b], bi[split_ref(l.b)[0]]) for l in mech.links]
        self.springs = [(pidx[s.a], bi[split_ref(s.a)[0]], pidx[s.b], bi[split_ref(s.b)[0]]) for s in mech.springs]
        self.sliders = [(pidx[s.a_from], pidx[s.a_to], bi[split_ref(s.a_from)[0]], pidx[s.b], bi[split_ref(s.b)[0]])
                        for s in mech.sliders]
        self.upright = list(model.wheel_upright)
        self.chassis = model.chassis
        self.lock_body = self._lock_body(lock_body)
        # loaded points of every body (joint ends and wheel centres), file order
        used = {i for p in self.pins for i in (p[0], p[2])} | {i for t in (self.links, self.springs)
                                                               for p in t for i in (p[0], p[2])}
        used |= {i for s in self.sliders for i in (s[0], s[1], s[3])} | set(model.wheel_centre)
        self.loaded_points = {b: [i for i in sorted(used) if model.point_body[i] == b] for b in range(self.nb)}
        P0 = model.default_geometry.points[0]
        # a guide's slider load is cut at the guide point nearest the runner (design position)
        self.slider_attach = []
        for pf, pt, ga, pb, rb in self.sliders:
            cand = self.loaded_points[ga]
            self.slider_attach.append(cand[int(np.argmin(np.linalg.norm(P0[cand] - P0[pb], axis=-1)))])
        self.lock_attach = -1
        for pa, ba, pb, bb in self.pins:
            if self.lock_body >= 0 and {ba, bb} == {self.lock_body, self.chassis}:
                self.lock_attach = pa if ba == self.lock_body else pb
                break
        if self.lock_body >= 0 and self.lock_attach < 0:
            self.lock_attach = self.loaded_points[self.lock_body][0]
        names = ([f"pin {p.name} ({ax})" for p in mech.pins for ax in ("y", "z")]
                 + [f"link {l.name}" for l in mech.links] + [f"spring {s.name}" for s in mech.springs]
                 + [f"slider {s.name} ({k})" for s in mech.sliders for k in ("offset", "angle")]
                 + ["ground left", "ground right", "lateral reference", "lean"])
        self.row_names = names
        self.m = len(names)
        self.r_pin = 0
        self.r_link = 2 * len(self.pins)
        self.r_spring = self.r_link + len(self.links)
        self.r_slider = self.r_spring + len(self.springs)
        self.r_ground = self.r_slider + 2 * len(self.sliders)
        self.r_lat = self.r_ground + 2
        self.r_lean = self.r_lat + 1
        # chassis pivots and the wheels whose brake load reaches them
        self.chassis_pins = [k for k, p in enumerate(self.pins) if self.chassis in (p[1], p[3])]
        self.base_mm = np.array([p.base_mm if p.base_mm is not None else default_base_mm for p in mech.pins])
        self.base_given = [p.base_mm is not None for p in mech.pins]
        adj = {i: set() for i in range(self.nb)}
        for p in self.pins:
            adj[p[1]].add(p[3])
            adj[p[3]].add(p[1])
        for s in self.sliders:
            adj[s[2]].add(s[4])
            adj[s[4]].add(s[2])
        self.brake_share = np.zeros((2, len(self.pins)))
        for w, up in enumerate(self.upright):
            seen, stack = {up}, [up]
            while stack:
                a = stack.pop()
                for b in adj[a]:
                    if b != self.chassis and b not in seen:
                        seen.add(b)
                        stack.append(b)
            reach = [k for k in self.chassis_pins if (self.pins[k][1] in seen or self.pins[k][3] in seen)]
            for k in reach:
                self.brake_share[w, k] = 1.0 / len(reach)

    def _lock_body(self, name: str | None) -> int:
        m = self.model
        if name is not None:
            if name not in m.body_names or name == m.mech.chassis:
                from tiltopt.base.errors import InputError
                raise InputError(f"the tilt lock body {name!r} is not a body of mechanism '{m.mech.name}' other "
                                 f"than the chassis. Bodies: {', '.join(m.body_names)}.", key="tilt_lock.body")
            return m.body_names.index(name)
        for p in self.pins:
            if p[1] == self.chassis and p[3] != self.chassis:
                return p[3]
            if p[3] == self.chassis:
                return p[1]
        return -1

    # ------------------------------------------------------------------ pieces
    def _add(self, J, row, body, d, w, sign=1.0):
        """Add ``sign * d . dx`` of a point at arm ``w`` from the reference of ``body`` to row ``row``.

        J : (N, m, n); d, w : (N, 2)
        """
        c = 3 * body
        J[:, row, c] += sign * d[:, 0]
        J[:, row, c + 1] += sign * d[:, 1]
        J[:, row, c + 2] += sign * (d[:, 0] * w[:, 1] - d[:, 1] * w[:, 0])

    def assemble(self, x, contact, side_ratio):
        """Constraint Jacobian at solved poses.

        Parameters
        ----------
        x : ndarray of shape (N, n_points, 2)
        contact : ndarray of shape (N, 2, 2)
        side_ratio : ndarray of shape (N,)

        Returns
        -------
        J : ndarray of shape (N, m, n)
            Every row except the lean row, which :meth:`solve` fills per item.
        """
        N = x.shape[0]
        J = np.zeros((N, self.m, self.n))
        xr = x[:, self.ref_point]            # (N, nb, 2)
        ey = np.broadcast_to(np.array([1.0, 0.0]), (N, 2))
        ez = np.broadcast_to(np.array([0.0, 1.0]), (N, 2))
        for k, (pa, ba, pb, bb) in enumerate(self.pins):
            for ax, e in enumerate((ey, ez)):
                r = self.r_pin + 2 * k + ax
                self._add(J, r, ba, e, x[:, pa] - xr[:, ba])
                self._add(J, r, bb, e, x[:, pb] - xr[:, bb], -1.0)
        for r0, table in ((self.r_link, self.links), (self.r_spring, self.springs)):
            for k, (pa, ba, pb, bb) in enumerate(table):
                d = x[:, pa] - x[:, pb]
                u = d / np.linalg.norm(d, axis=-1, keepdims=True)
                self._add(J, r0 + k, ba, u, x[:, pa] - xr[:, ba])
                self._add(J, r0 + k, bb, u, x[:, pb] - xr[:, bb], -1.0)
        for k, (pf, pt, ga, pb, rb) in enumerate(self.sliders):
            g = x[:, pt] - x[:, pf]
            g = g / np.linalg.norm(g, axis=-1, keepdims=True)
            nrm = np.stack([-g[:, 1], g[:, 0]], -1)
            r = self.r_slider + 2 * k
            self._add(J, r, rb, nrm, x[:, pb] - xr[:, rb])
            self._add(J, r, ga, nrm, x[:, pb] - xr[:, ga], -1.0)
            J[:, r + 1, 3 * rb + 2] += ANGLE_ROW_MM
            J[:, r + 1, 3 * ga + 2] -= ANGLE_ROW_MM
        dn = np.stack([side_ratio, np.ones_like(side_ratio)], -1)
        for w, up in enumerate(self.upright):
            arm = contact[:, w] - xr[:, up]
            self._add(J, self.r_ground + w, up, dn, arm)
            self._add(J, self.r_lat, up, 0.5 * ey, arm)
        return J

    def applied(self, x, ang, design_points, loads: StateLoads, contact):
        """Generalized applied forces Q (N, n) and the applied resultant (N, 2).

        design_points : ndarray of shape (N, n_points, 2), design position of each item's candidate.
        contact : ndarray of shape (N, 2, 2), where a kerb strike acts.
        """
        N = x.shape[0]
        c = self.chassis
        th = ang[:, c]
        cs, sn = np.cos(th), np.sin(th)
        pr = self.ref_point[c]
        # the chassis datum O and the centre of mass, leaning with the chassis
        P = design_points[:, pr]
        rot = lambda v: np.stack([cs * v[:, 0] + sn * v[:, 1], -sn * v[:, 0] + cs * v[:, 1]], -1)  # noqa: E731
        xO = x[:, pr] - rot(P)
        xG = xO + rot(np.stack([np.zeros(N), loads.com_height_mm], -1))
        dirn = np.stack([loads.side_ratio, np.ones(N)], -1)
        F_G = -(loads.front_load_n + loads.rear_load_n)[:, None] * dirn
        F_O = loads.rear_load_n[:, None] * dirn
        kerb = loads.kerb_force_n
        F_G = F_G - np.stack([kerb.sum(1), np.zeros(N)], -1)      # the lateral inertia of a kerb strike
        Q = np.zeros((N, self.n))
        pushes = [(F_G, xG, c), (F_O, xO, c)]
        if np.any(kerb != 0.0):
            for w, up in enumerate(self.upright):
                pushes.append((np.stack([kerb[:, w], np.zeros(N)], -1), contact[:, w], up))
        for F, at, body in pushes:
            w = at - x[:, self.ref_point[body]]
            Q[:, 3 * body] += F[:, 0]
            Q[:, 3 * body + 1] += F[:, 1]
            Q[:, 3 * body + 2] += F[:, 0] * w[:, 1] - F[:, 1] * w[:, 0]
        return Q, F_G + F_O, xG, xO

    # ------------------------------------------------------------------- solve
    def solve(self, x, ang, contact, design_points, loads: StateLoads, valid=None) -> ForceResult:
        """Forces at N solved states.

        Parameters
        ----------
        x : ndarray of shape (N, n_points, 2)
            Solved point positions (model.point_refs order), mm; NaN where not solved.
        ang : ndarray of shape (N, n_bodies)
            Body angles, rad.
        contact : ndarray of shape (N, 2, 2)
            Contact points [left, right] x (y, z), mm.
        design_points : ndarray of shape (N, n_points, 2)
        loads : StateLoads
        valid : ndarray of shape (N,), bool, optional
            Items with a solved pose (default: finite positions).
        """
        N = x.shape[0]
        if valid is None:
            valid = np.all(np.isfinite(x), axis=(1, 2)) & np.all(np.isfinite(ang), axis=1)
        # evaluate invalid items on a harmless stand-in pose, then mask
        xs = np.where(valid[:, None, None], x, design_points)
        angs = np.where(valid[:, None], ang, 0.0)
        cs = np.where(valid[:, None, None], contact, 0.0)
        if not valid.all():
            # stand-in contacts under the wheel centres
            wc = design_points[:, self.model.wheel_centre]
            cs = np.where(valid[:, None, None], cs, np.stack([wc[..., 0], np.zeros_like(wc[..., 0])], -1))
        J = self.assemble(xs, cs, loads.side_ratio)
        lock = self.lock_body
        J[:, self.r_lean, 3 * self.chassis + 2] = -ANGLE_ROW_MM * loads.locked + ANGLE_ROW_MM * ~loads.locked
        if lock >= 0:
            J[:, self.r_lean, 3 * lock + 2] += ANGLE_ROW_MM * loads.locked
        Q, F_app, xG, xO = self.applied(xs, angs, design_points, loads, cs)
        redundant, free = self._rank(J, valid)
        lam, Q, roll = self._min_norm(J, Q, loads.wheel_target_n[:, 0], square=redundant == 0 and free == 0)
        res = (J.transpose(0, 2, 1) @ lam[..., None])[..., 0] + Q
        scale = np.where(np.arange(self.n) % 3 == 2, 1.0 / ANGLE_ROW_MM, 1.0)
        qn = np.linalg.norm(Q * scale, axis=1)
        rel = np.linalg.norm(res * scale, axis=1) / np.maximum(qn, 1e-300)
        ok = valid & (rel <= EQUILIBRIUM_RTOL)
        ok &= np.isfinite(roll)
        lam = np.where(ok[:, None], lam, np.nan)

        P = len(self.pins)
        pin_force = lam[:, :2 * P].reshape(N, P, 2)
        link_t = -lam[:, self.r_link:self.r_spring]
        spring_f = lam[:, self.r_spring:self.r_slider]
        sl = lam[:, self.r_slider:self.r_ground]
        wheel = lam[:, self.r_ground:self.r_ground + 2]
        lat = lam[:, self.r_lat]
        side = wheel * loads.side_ratio[:, None] + 0.5 * lat[:, None] + loads.kerb_force_n
        lean = np.where(loads.locked, -lam[:, self.r_lean], lam[:, self.r_lean])
        # out-of-plane braking at the chassis pivots
        Fx = loads.brake_g[:, None] * np.abs(wheel)                      # (N, 2)
        lever = np.zeros((N, 2, P))
        for k in self.chassis_pins:
            p = self.pins[k][0] if self.pins[k][1] == self.chassis else self.pins[k][2]
            lever[:, :, k] = np.linalg.norm(cs - xs[:, p][:, None, :], axis=-1)
        Mb = np.einsum("nw,wk,nwk->nk", Fx, self.brake_share, lever)
        Vb = np.einsum("nw,wk->nk", Fx, self.brake_share)
        body_loads = self._body_loads(xs, cs, lam, loads)
        return ForceResult(
            row_names=self.row_names, n_coords=self.n, redundant=redundant, free=free,
            pin_force=pin_force, link_tension=link_t, spring_force=spring_f,
            slider_force=sl[:, 0::2], slider_moment=sl[:, 1::2], wheel_load=wheel, tyre_side_force=side,
            lateral_force=lat, lean_moment=lean, roll_couple=np.where(ok, roll, np.nan) / ANGLE_ROW_MM,
            brake_pivot_moment=Mb, brake_pivot_shear=Vb,
            brake_bearing_force=Mb / self.base_mm[None, :], applied_force=F_app,
            equilibrium_residual=np.where(valid, rel, np.nan), ok=ok, lam=lam, positions=xs, contact=cs,
            body_loads=body_loads)

    def _min_norm(self, J, Q, left_target, square=False):
        """``lambda = J (J^T J)^-1 (-Q)`` on angle-scaled columns; with prescribed left tyre loads
        (``left_target`` finite), plus the chassis roll couple that makes them come out.

        ``square``: the topology is properly constrained (as many rows as coordinates, full rank), so
        ``J^T lambda = -Q`` has one solution, found by one LU solve per state (the same lambda).

        Returns
        -------
        lam : (N, m); Q : (N, n) with the roll couple added; roll : (N,) the couple, N*mm (NaN
        where the tyre loads cannot be set by a chassis couple).
        """
        N = J.shape[0]
        scale = np.ones(self.n)
        scale[2::3] = 1.0 / ANGLE_ROW_MM
        Js = J * scale
        JsT = Js.transpose(0, 2, 1)

        def normal_equations(B):
            """lambda (N, m, k) for right-hand sides B (N, n, k), with one step of iterative
            refinement (the normal equations square the condition number)."""
            A = JsT @ Js
            tr = np.einsum("nii->n", A)
            A[:, np.arange(self.n), np.arange(self.n)] += 1e-13 * tr[:, None]
            Ainv = np.linalg.inv(A)
            lam = Js @ (Ainv @ B)
            return lam + Js @ (Ainv @ (B - JsT @ lam))

        def min_norm(B):
            if square and self.m == self.n:
                try:
                    return np.linalg.solve(JsT, B)
                except np.linalg.LinAlgError:    # a state exactly at a singular pose: the general rule
                    pass
            return normal_equations(B)

        prescribed = None if left_target is None else np.isfinite(left_target)
        if prescribed is None or not prescribed.any():
            return min_norm((-Q * scale)[..., None])[..., 0], Q, np.zeros(N)
        Qc = np.zeros_like(Q)
        Qc[:, 3 * self.chassis + 2] = 1.0        # a unit roll couple on the chassis, N*mm
        lam2 = min_norm(np.stack([-Q * scale, -Qc * scale], -1))
        lam_q, lam_c = lam2[..., 0], lam2[..., 1]
        per = lam_c[:, self.r_ground]                       # left tyre load per unit couple
        good = np.abs(per) > 1e-12 * np.maximum(np.abs(lam_q[:, self.r_ground]), 1.0) / 1000.0
        roll = np.where(prescribed, np.where(good, (left_target - lam_q[:, self.r_ground]) / np.where(good, per, 1.0),
                                             np.nan), 0.0)
        r0 = np.nan_to_num(roll)
        return lam_q + r0[:, None] * lam_c, Q + r0[:, None] * Qc, roll

    def _rank(self, J, valid):
        idx = np.flatnonzero(valid)
        if len(idx) == 0:
            return 0, 0
        Js = J[idx[0]].copy()
        Js[:, 2::3] /= ANGLE_ROW_MM
        s = np.linalg.svd(Js, compute_uv=False)
        r = int(np.sum(s > 1e-9 * s.max()))
        return self.m - r, self.n - r

    def _body_loads(self, x, contact, lam, loads: StateLoads) -> dict:
        """Loads on every body: list of (point, position (N,2), force (N,2), couple (N,) N*mm).

        ``point`` is the loaded body point the load is assigned to for the section cuts
        (a tyre force to its wheel centre, a guide's slider force to the guide point nearest
        the runner); the moments use the load's real position.
        """
        out: dict[int, list[BodyLoad]] = {b: [] for b in range(self.nb)}
        N = x.shape[0]
        zero = np.zeros(N)
        mech = self.model.mech
        for k, (pa, ba, pb, bb) in enumerate(self.pins):
            f = lam[:, 2 * k:2 * k + 2]
            out[ba].append(BodyLoad(pa, x[:, pa], f, zero, f"pin {mech.pins[k].name}"))
            out[bb].append(BodyLoad(pb, x[:, pb], -f, zero, f"pin {mech.pins[k].name}"))
        for r0, table, items, what in ((self.r_link, self.links, mech.links, "link"),
                                       (self.r_spring, self.springs, mech.springs, "spring")):
            for k, (pa, ba, pb, bb) in enumerate(table):
                d = x[:, pa] - x[:, pb]
                u = d / np.linalg.norm(d, axis=-1, keepdims=True)
                f = lam[:, r0 + k, None] * u
                out[ba].append(BodyLoad(pa, x[:, pa], f, zero, f"{what} {items[k].name}"))
                out[bb].append(BodyLoad(pb, x[:, pb], -f, zero, f"{what} {items[k].name}"))
        for k, (pf, pt, ga, pb, rb) in enumerate(self.sliders):
            g = x[:, pt] - x[:, pf]
            g = g / np.linalg.norm(g, axis=-1, keepdims=True)
            nrm = np.stack([-g[:, 1], g[:, 0]], -1)
            r = self.r_slider + 2 * k
            f = lam[:, r, None] * nrm
            mom = lam[:, r + 1] * ANGLE_ROW_MM
            name = mech.sliders[k].name
            out[rb].append(BodyLoad(pb, x[:, pb], f, mom, f"slider {name}"))
            out[ga].append(BodyLoad(self.slider_attach[k], x[:, pb], -f, -mom, f"runner of slider {name}", k))
        for w, up in enumerate(self.upright):
            f = np.stack([lam[:, self.r_ground + w] * loads.side_ratio + 0.5 * lam[:, self.r_lat]
                          + loads.kerb_force_n[:, w], lam[:, self.r_ground + w]], -1)
            out[up].append(BodyLoad(self.model.wheel_centre[w], contact[:, w], f, zero,
                                    f"tyre {('left', 'right')[w]}"))
        if self.lock_body >= 0:
            mom = np.where(loads.locked, lam[:, self.r_lean] * ANGLE_ROW_MM, 0.0)
            out[self.lock_body].append(BodyLoad(self.lock_attach, x[:, self.lock_attach], np.zeros((N, 2)), mom,
                                                "tilt lock"))
        return out


def state_loads(states, vehicle, n_candidates: int) -> StateLoads:
    """Per-item applied loads for (candidate, state) items, candidate-major order (N = C * S)."""
    S = len(states)

    def col(attr, dtype=float):
        return np.tile(np.array([getattr(s, attr) for s in states], dtype=dtype), n_candidates)

    def pair(values):
        return np.tile(np.array(values, dtype=float).reshape(S, 2), (n_candidates, 1))

    nan2 = (np.nan, np.nan)
    return StateLoads(front_load_n=col("front_load_n"), rear_load_n=col("rear_load_n"),
                      side_ratio=col("side_ratio"), brake_g=col("brake_g"), locked=col("locked", bool),
                      com_height_mm=np.full(n_candidates * S, vehicle.com_height_mm),
                      wheel_target_n=pair([s.wheel_load_n or nan2 for s in states]),
                      kerb_force_n=pair([s.kerb_force_n for s in states]))


def gather_states(sweep_result, states):
    """Pick the load-case states out of a sweep grid.

    Returns
    -------
    points : (C, S, n_points, 2), body_angle : (C, S, n_bodies), contact : (C, S, 2, 2),
    converged : (C, S), status : (C, S), or None if a state is not on the grid.
    """
    leans, travels = np.asarray(sweep_result.lean_deg), np.asarray(sweep_result.travel_mm)
    li, ti = [], []
    for s in states:
        l, t = int(np.argmin(np.abs(leans - s.lean_deg))), int(np.argmin(np.abs(travels - s.travel_mm)))
        if abs(leans[l] - s.lean_deg) >= 1e-9 or abs(travels[t] - s.travel_mm) >= 1e-9:
            return None
        li.append(l)       # the nearest grid state (two leans closer than 1e-9 are both on the grid)
        ti.append(t)
    li, ti = np.array(li), np.array(ti)
    r = sweep_result
    return (r.points[:, ti, li], r.body_angle[:, ti, li], r.contact[:, ti, li], r.converged[:, ti, li],
            r.status[:, ti, li])


def sweep_states(model: Model, geom: Geometry, states, sweep_result=None):
    """Solved poses at the load-case states: from ``sweep_result`` if it holds them, else one batched sweep."""
    if sweep_result is not None:
        got = gather_states(sweep_result, states)
        if got is not None:
            return got
    from .sweep import sweep

    leans = sorted({s.lean_deg for s in states})
    travels = sorted({s.travel_mm for s in states})
    res = sweep(model, geom, lean_deg=leans, travel_mm=travels)
    return gather_states(res, states)


def analyse_forces(model: Model, geom: Geometry, loads, sweep_result=None, force_model: ForceModel | None = None):
    """Force analysis of every candidate at every load-case state.

    Parameters
    ----------
    model : Model
    geom : Geometry
        n_candidates candidates.
    loads : tiltopt.kinematics.loads.LoadsSpec
    sweep_result : SweepResult, optional
        A sweep whose lean x travel grid holds every load-case state.

    Returns
    -------
    states : list of LoadState (S of them)
    forces : ForceResult
        Items in candidate-major order: item ``c * S + s``.
    status : ndarray of shape (C, S)
        Solver status of each state (tiltopt.kinematics.solver.STATUS_TEXT).
    force_model : ForceModel
        The tables used (pass it back in to skip rebuilding them).
    """
    states = loads.states()
    fm = force_model or ForceModel(model, loads.tilt_lock.body, loads.default_pivot_base_mm)
    pts, ang, contact, conv, status = sweep_states(model, geom, states, sweep_result)
    C, S = conv.shape
    design = np.repeat(geom.points, S, axis=0)
    sl = state_loads(states, loads.vehicle, C)
    res = fm.solve(pts.reshape(C * S, *pts.shape[2:]), ang.reshape(C * S, -1), contact.reshape(C * S, 2, 2),
                   design, sl, valid=conv.reshape(-1))
    return states, res, status, fm
