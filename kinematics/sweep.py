"""The sweep procedure of docs/domain.md and the per-state metrics.

1. Each travel ``s`` is solved at lean 0 (both wheel centres displaced by
   ``s`` relative to the chassis), by continuation from the design position.
2. The spring lengths found there are held.
3. The mechanism is leaned from 0 to each requested lean by continuation
   (Hermite predictor, Newton corrector, a branch guard on every step), all
   candidates and travels in one batch; a path that fails stops there and its
   later states are reported as not attempted.

All candidates (same topology, different geometry) and all travels are one
batch: there is no Python loop over candidates or states, only over the
continuation steps.
"""
from __future__ import annotations

import math
import dataclasses
from dataclasses import dataclass, field

import numpy as np

from .model import Geometry, Model
from .solver import (CONVERGED, FOLD, SKIPPED, STATUS_TEXT, Batch, SolveSettings, hold_free_directions, n_rows,
                     solve_states)


@dataclass
class SweepSettings:
    """Continuation settings.

    max_lean_step_deg : largest lean step between solved states; requested
        leans are always solved states.
    max_travel_step_mm : largest travel step of the lean-0 continuation.
    """

    max_lean_step_deg: float = 5.0
    max_travel_step_mm: float = 30.0
    solve: SolveSettings = field(default_factory=SolveSettings)


@dataclass
class SweepResult:
    """Every state of a sweep; arrays have shape (n_candidates, n_travel, n_lean, ...).

    Metric arrays hold NaN where ``converged`` is False; writers report those
    as null, never as numbers.
    """

    model: Model
    lean_deg: np.ndarray
    travel_mm: np.ndarray
    status: np.ndarray
    residual_mm: np.ndarray
    iterations: np.ndarray
    q: np.ndarray
    geometry: Geometry            # the candidates swept
    body_angle: np.ndarray        # (C, T, L, n_bodies) rad
    camber: np.ndarray            # (C, T, L, 2) rad
    contact: np.ndarray           # (C, T, L, 2, 2) mm, [left, right] x [y, z]
    spring_length: np.ndarray     # (C, T, L, n_springs) mm
    track: np.ndarray
    track_change: np.ndarray
    scrub: np.ndarray
    heave: np.ndarray
    camber_error: np.ndarray      # (C, T, L, 2) rad
    lean_point_offset: np.ndarray
    bump_track_change: np.ndarray   # (C, T) mm, against the design position
    bump_camber_change: np.ndarray  # (C, T, 2) rad
    motion_ratio: np.ndarray        # (C, T, n_springs): spring shortening per mm of bump
    travel_status: np.ndarray       # (C, T)

    engine: str = "compiled"        # of SolveSettings: how the lazy points are computed
    _points: np.ndarray | None = None

    @property
    def points(self) -> np.ndarray:
        """Every point of every state, shape (C, T, L, n_points, 2), mm (NaN where not converged).

        Computed on first use (the kinematic metrics do not need it).
        """
        if self._points is None:
            m = self.model
            C, T, L = self.status.shape
            q = self.q.reshape(C * T * L, -1)
            lean = np.broadcast_to(np.radians(self.lean_deg), (C * T, L)).reshape(-1)
            V, U = m.design_vectors(self.geometry, m._all)
            cand = np.repeat(np.arange(C), T * L)
            if self.engine == "compiled":
                from . import kernel  # noqa: PLC0415 (numba loads on first solve, not at start-up)
                x, _ = kernel.positions(m, q, lean, V, U, cand, "all")
            else:
                x, _, _ = m.positions(q, lean, V[cand], U[cand], m._all)
            x = x.reshape(C, T, L, -1, 2)
            self._points = np.where(self.converged[..., None, None], x, np.nan)
        return self._points

    @property
    def converged(self) -> np.ndarray:
        return self.status == CONVERGED

    def status_text(self, c: int, t: int, l: int) -> str:
        return STATUS_TEXT[int(self.status[c, t, l])]

    def records(self, candidate: int = 0) -> list[dict]:
        """One JSON-ready dict per state of one candidate (nulls where not converged)."""
        out = []
        names = self.model.spring_names
        for ti, s in enumerate(self.travel_mm):
            for li, phi in enumerate(self.lean_deg):
                ok = bool(self.converged[candidate, ti, li])

                def val(a, scale=1.0):
                    v = a[candidate, ti, li]
                    return float(v * scale) if ok and np.isfinite(v) else None

                deg = 180.0 / math.pi
                out.append({
                    "lean_deg": float(phi),
                    "travel_mm": float(s),
                    "converged": ok,
                    "status": self.status_text(candidate, ti, li),
                    "residual_mm": float(self.residual_mm[candidate, ti, li])
                    if np.isfinite(self.residual_mm[candidate, ti, li]) else None,
                    "track_mm": val(self.track),
                    "track_change_mm": val(self.track_change),
                    "scrub_mm": val(self.scrub),
                    "heave_mm": val(self.heave),
                    "camber_left_deg": val(self.camber[..., 0], deg),
                    "camber_right_deg": val(self.camber[..., 1], deg),
                    "camber_error_left_deg": val(self.camber_error[..., 0], deg),
                    "camber_error_right_deg": val(self.camber_error[..., 1], deg),
                    "lean_point_offset_mm": val(self.lean_point_offset),
                    "contact_left_mm": [val(self.contact[..., 0, 0]), val(self.contact[..., 0, 1])]
                    if ok else None,
                    "contact_right_mm": [val(self.contact[..., 1, 0]), val(self.contact[..., 1, 1])]
                    if ok else None,
                    "spring_lengths_mm": {n: val(self.spring_length[..., k]) for k, n in enumerate(names)},
                })
        return out

    def bump_records(self, candidate: int = 0) -> list[dict]:
        """Lean-0 bump metrics per travel, against the design position."""
        out = []
        for ti, s in enumerate(self.travel_mm):
            ok = bool(self.travel_status[candidate, ti] == CONVERGED)
            f = (lambda v: float(v) if ok and np.isfinite(v) else None)
            out.append({
                "travel_mm": float(s),
                "converged": ok,
                "track_change_mm": f(self.bump_track_change[candidate, ti]),
                "camber_change_left_deg": f(np.degrees(self.bump_camber_change[candidate, ti, 0])),
                "camber_change_right_deg": f(np.degrees(self.bump_camber_change[candidate, ti, 1])),
                "motion_ratio": {n: f(self.motion_ratio[candidate, ti, k])
                                 for k, n in enumerate(self.model.spring_names)},
            })
        return out


def _lean_paths(lean_rad: np.ndarray, max_step: float):
    """Continuation paths from 0 outward, one per sign, padded to equal length.

    Returns the (n_branch, K+1) node angles and, per requested lean, its
    (branch, node) position.
    """
    pos = sorted({float(v) for v in lean_rad if v >= 0} | {0.0})
    neg = sorted({float(v) for v in lean_rad if v < 0}, reverse=True)
    branches = [pos] + ([[0.0] + neg] if neg else [])
    paths, where = [], {}
    for bi, req in enumerate(branches):
        nodes = [0.0]
        for v in req[1:]:
            n = max(1, math.ceil(abs(v - nodes[-1]) / max_step - 1e-9))
            start = nodes[-1]
            nodes += [start + (v - start) * (k / n) for k in range(1, n + 1)]
            where.setdefault(v, (bi, len(nodes) - 1))
        where.setdefault(0.0, (bi, 0))
        paths.append(nodes)
    K = max(len(p) for p in paths)
    paths = np.array([p + [p[-1]] * (K - len(p)) for p in paths])
    index = [where[float(v)] for v in lean_rad]
    return paths, index


def _angles(model: Model, q: np.ndarray, lean: np.ndarray) -> np.ndarray:
    """Angle sources (N, n_ang) of states: the lean, then the angle coordinates."""
    return np.concatenate([np.asarray(lean, float).reshape(-1, 1), q[:, model.ang_coord]], axis=1)


#: trapezoid test of a continuation step (:func:`kernel.branch_test`): the secant dq/dphi against
#: the mean of the end tangents weighted by 1 / |(dq/dphi, 1)| (the trapezoid rule along the
#: arclength of the lean path, which stays accurate up to a fold, where dq/dphi grows without
#: bound); |secant - weighted mean| / (|secant| + |weighted mean|) above this marks a possible
#: jump to another assembly branch, and the step is redone in substeps. Measured on 1,200 random
#: wishbone-rocker linkages (template bounds and the property-test ranges) x 5 travels, leans
#: -45..45 deg in 5 deg steps, each step judged against a 0.05 deg continuation: along a branch
#: the ratio has a median of 0.002, a 99th percentile of 0.07, and 0.18 % of steps lie above 0.2;
#: the jumps that neither the tangent turn nor a det(J) sign change catches score 0.24 to 0.98.
BRANCH_JUMP_RATIO = 0.2


def sweep(model: Model, geom: Geometry | None = None, lean_deg=(0.0,), travel_mm=(0.0,),
          settings: SweepSettings | None = None) -> SweepResult:
    """Sweep lean x travel for every candidate of ``geom`` in one batch.

    Parameters
    ----------
    model : Model
    geom : Geometry, optional
        Candidates of the model's topology (default: the mechanism itself).
    lean_deg : array-like of shape (n_lean,)
    travel_mm : array-like of shape (n_travel,)

    Returns
    -------
    SweepResult
        Arrays of shape (n_candidates, n_travel, n_lean, ...).
    """
    from . import kernel  # noqa: PLC0415 (numba loads on first solve, not at start-up)

    settings = settings or SweepSettings()
    geom = geom or model.default_geometry
    lean_deg = np.atleast_1d(np.asarray(lean_deg, dtype=float))
    travel = np.atleast_1d(np.asarray(travel_mm, dtype=float))
    C, T, L = geom.n_candidates, len(travel), len(lean_deg)
    nq, ns = model.n_q, len(model.eq_spring)

    # ---------------------------------------------------------------- travel
    cand_t = np.repeat(np.arange(C), T)
    s_item = np.tile(travel, C)
    bt = Batch(model, geom, cand_t)
    bc = bt.take(np.arange(C) * T)                 # one item per candidate: the design Jacobian
    hold_free_directions(model, bc)
    bt.hold = bc.hold[cand_t]
    N = C * T
    q = model.design_q(N)
    zero = np.zeros(N)
    K = max(1, math.ceil(np.max(np.abs(travel)) / settings.max_travel_step_mm - 1e-9))
    tstatus = np.zeros(N, dtype=np.int8)
    t_resid = np.full(N, np.nan)          # residual of each item's last travel solve
    dq_ds = np.zeros((N, nq))             # travel path tangent at the solved state
    x0 = np.full((N, model._np["n"], 2), np.nan)    # equation points at the solved state
    s_prev = np.zeros(N)
    for k in range(1, K + 1):
        s_k = s_item * (k / K)
        ok = np.flatnonzero(tstatus == CONVERGED)
        if len(ok) == 0:
            break
        q_guess = q[ok] + dq_ds[ok] * (s_k - s_prev)[ok, None]
        r = solve_states(model, bt, q_guess, zero[ok], s_k[ok], "travel", settings.solve, ok)
        q[ok], tstatus[ok], t_resid[ok], dq_ds[ok], x0[ok] = r.q, r.status, r.resid, r.tangent, r.x
        s_prev = s_k
    # lean-0 references of the lean metrics, and the spring lengths held from here
    g0, contact0, Ls = kernel.contacts(model, x0, _angles(model, q, zero), bt, np.arange(N))

    # ------------------------------------------------------------------ lean
    lean_rad = np.radians(lean_deg)
    paths, index = _lean_paths(lean_rad, math.radians(settings.max_lean_step_deg))
    nb, Kl = paths.shape
    # items: (candidate, travel, branch)
    item_ct = np.repeat(np.arange(N), nb)
    item_branch = np.tile(np.arange(nb), N)
    bl = bt.take(item_ct)
    bl.hold = bl.hold[:, :0]
    M = len(item_ct)
    held = Ls[item_ct]
    Q = np.zeros((M, Kl, nq))
    S = np.full((M, Kl), SKIPPED, dtype=np.int8)
    RES = np.full((M, Kl), np.nan)
    IT = np.zeros((M, Kl), dtype=int)
    alive = tstatus[item_ct] == CONVERGED
    Q[:, 0] = q[item_ct]
    S[:, 0] = np.where(alive, CONVERGED, tstatus[item_ct])
    RES[:, 0] = t_resid[item_ct]
    # Branch guard. Along one assembly branch the corrector only mends the predictor's small
    # error; a step whose secant disagrees with its end tangents means Newton landed somewhere
    # else (past a toggle, where the lean path folds back). Such steps are redone in substeps;
    # if a substep still jumps, the state is reported as beyond a fold. On a square system a
    # sign change of det(J) (J passing singular) is caught as well.
    square = n_rows(model, "lean") == nq
    # the path tangent and det(J) sign at lean 0 (no iteration: the state is solved)
    at0 = dataclasses.replace(settings.solve, max_iter=0)
    r0 = solve_states(model, bl, Q[:, 0], np.zeros(M), held, "lean", at0)
    J0, T0, sign0 = r0.J, r0.tangent, r0.det_sign
    # motion ratios: spring shortening per mm of travel, from the spring rows of J at lean 0
    off = model.n_loop_rows + len(model.eq_link)
    dLs = J0[np.arange(N) * nb, off:off + ns, :nq]
    motion_ratio = -np.einsum("nkq,nq->nk", dLs, dq_ds)

    def advance(idx, hist_q, hist_phi, hist_t, phi_new):
        """One continuation step of items ``idx`` from their last states.

        ``hist_q``, ``hist_phi``, ``hist_t``: the last one or two solved states of each item,
        their leans and their path tangents dq/dphi. The predictor (:func:`kernel.predict`) is
        the cubic Hermite extrapolation through the last two states and their tangents (the
        tangent line from a single state); its error is O(h^4) in the step h, against O(h^3)
        for a Lagrange extrapolation through three states, which saves Newton iterations.
        """
        guess = kernel.predict(hist_q, hist_t, hist_phi, phi_new)
        # tangent and det sign of each state's last Newton step (saves a factorisation per state)
        r = solve_states(model, bl, guess, phi_new, held[idx], "lean", settings.solve, idx, final_jacobian=False)
        qs, st, res, it, t_new = r.q, r.status, r.resid, r.iters, r.tangent
        # trapezoid test of the step, and the tangent may not turn by more than a right angle
        ratio, turned = kernel.branch_test(qs, t_new, hist_q[-1], hist_t[-1], hist_phi[-1], phi_new,
                                           bl.col_scale, bl.Lc, idx)
        suspect = (st == CONVERGED) & ((ratio > BRANCH_JUMP_RATIO) | turned)
        if square:
            suspect |= (st == CONVERGED) & (r.det_sign != sign0[idx])
        return qs, st, res, it, suspect, t_new, r.x

    n_sub = 4
    TQ = np.zeros((M, Kl, nq))          # path tangent at every solved node
    TQ[:, 0] = T0
    XQ = np.zeros((M, Kl) + x0.shape[1:])      # equation points of every solved node
    XQ[:, 0] = x0[item_ct]
    for k in range(1, Kl):
        ok = np.flatnonzero(alive)
        if len(ok) == 0:
            break
        lo = max(0, k - 2)
        hq = [Q[ok, j] for j in range(lo, k)]
        ht = [TQ[ok, j] for j in range(lo, k)]
        hp = [paths[item_branch[ok], j] for j in range(lo, k)]
        phi = paths[item_branch[ok], k]
        qs, st, res, it, suspect, tn, xs = advance(ok, hq, hp, ht, phi)
        # redo in substeps the steps that look like a jump and those whose Newton corrector failed
        # (a long step can stall where shorter ones reach the state: never report a reachable state
        # as not reached)
        redo = suspect | (st != CONVERGED)
        if redo.any():
            si = np.flatnonzero(redo)
            idx = ok[si]
            sq = [h[si] for h in hq]
            st_ = [h[si] for h in ht]
            sp = [h[si] for h in hp]
            live = np.ones(len(si), bool)
            fst = np.full(len(si), CONVERGED, dtype=np.int8)
            fq, fres, fit, fx = qs[si].copy(), res[si].copy(), it[si].copy(), xs[si].copy()
            phi0, phi1 = paths[item_branch[idx], k - 1], paths[item_branch[idx], k]
            for j in range(1, n_sub + 1):
                li = np.flatnonzero(live)
                if len(li) == 0:
                    break
                pj = phi0[li] + (phi1[li] - phi0[li]) * (j / n_sub)
                q2, s2, r2, i2, sus2, t2, x2 = advance(idx[li], [h[li] for h in sq], [h[li] for h in sp],
                                                   [h[li] for h in st_], pj)
                failed = (s2 != CONVERGED) | sus2
                fst[li[failed]] = np.where(s2[failed] == CONVERGED, FOLD, s2[failed])
                live[li[failed]] = False
                good = li[~failed]
                fq[good], fres[good], fit[good] = q2[~failed], r2[~failed], fit[good] + i2[~failed]
                fx[good] = x2[~failed]
                new_q, new_p, new_t = sq[-1].copy(), sp[-1].copy(), st_[-1].copy()
                new_q[good], new_p[good], new_t[good] = q2[~failed], pj[~failed], t2[~failed]
                sq, sp, st_ = (sq + [new_q])[-2:], (sp + [new_p])[-2:], (st_ + [new_t])[-2:]
            qs[si], st[si], res[si], it[si], xs[si] = fq, fst, fres, fit, fx
            tn[si] = st_[-1]
        Q[ok, k], S[ok, k], RES[ok, k], IT[ok, k] = qs, st, res, it
        TQ[ok, k], XQ[ok, k] = tn, xs
        alive[ok] = st == CONVERGED

    # ----------------------------------------------------- gather requested
    sel_b = np.array([w[0] for w in index])
    sel_k = np.array([w[1] for w in index])
    # item of (n, branch) is n * nb + branch
    rows = (np.arange(N)[:, None] * nb + sel_b[None, :])           # (N, L)
    q_out = Q[rows, sel_k[None, :]]                                  # (N, L, nq)
    st_out = S[rows, sel_k[None, :]]
    res_out = RES[rows, sel_k[None, :]]
    it_out = IT[rows, sel_k[None, :]]
    # lean-0 reference of the same travel (always node 0)
    q_ref = Q[np.arange(N) * nb, 0]

    # ------------------------------------------------------------ metrics
    NL = N * L
    flat_q = q_out.reshape(NL, nq)
    flat_lean = np.broadcast_to(lean_rad, (N, L)).reshape(NL)
    item_nl = np.repeat(np.arange(N), L)
    x_np = XQ[rows, sel_k[None, :]].reshape((NL,) + x0.shape[1:])
    ang = _angles(model, flat_q, flat_lean)
    body_angle = model.body_angles(ang)
    gamma, contact, spring_len = kernel.contacts(model, x_np, ang, bt, item_nl)

    # references at lean 0 of the same travel
    track0 = contact0[:, 1, 0] - contact0[:, 0, 0]
    zO0 = q_ref[:, 1]

    shape = (C, T, L)
    track = (contact[:, 1, 0] - contact[:, 0, 0]).reshape(shape)
    gam = gamma.reshape(shape + (2,))
    track_change = track - track0.reshape(C, T, 1)
    dg = gam - g0.reshape(C, T, 1, 2)
    r_mean = bt.r.mean(axis=1).reshape(C, T, 1)
    scrub = track_change - r_mean * (dg[..., 1] - dg[..., 0])
    phi = lean_rad.reshape(1, 1, L)
    zO = flat_q[:, 1].reshape(shape)
    yO = flat_q[:, 0].reshape(shape)
    heave = zO - zO0.reshape(C, T, 1) - r_mean * (1.0 - np.cos(phi))
    mid = 0.5 * (contact[:, 0, 0] + contact[:, 1, 0]).reshape(shape)
    lean_point = yO - zO * np.tan(phi) - mid
    camber_error = gam - phi[..., None]

    # bump metrics at lean 0 against the design position
    design_track = (geom.points[:, model.wheel_centre[1], 0] - (geom.outer_radius[:, 1] - geom.crown_radius[:, 1])
                    * np.sin(geom.static_camber[:, 1])) - \
        (geom.points[:, model.wheel_centre[0], 0] - (geom.outer_radius[:, 0] - geom.crown_radius[:, 0])
         * np.sin(geom.static_camber[:, 0]))
    t_ok = (tstatus == CONVERGED).reshape(C, T)
    bump_track = np.where(t_ok, track0.reshape(C, T) - design_track[:, None], np.nan)
    bump_camber = np.where(t_ok[..., None], (g0 - bt.gamma0).reshape(C, T, 2), np.nan)
    motion_ratio = np.where(t_ok[..., None], motion_ratio.reshape(C, T, -1), np.nan)

    conv = (st_out == CONVERGED).reshape(shape)

    def mask(a):
        m = conv.reshape(conv.shape + (1,) * (a.ndim - 3))
        return np.where(m, a, np.nan)

    return SweepResult(
        model=model, lean_deg=lean_deg, travel_mm=travel,
        status=st_out.reshape(shape), residual_mm=res_out.reshape(shape), iterations=it_out.reshape(shape),
        q=q_out.reshape(shape + (nq,)),
        geometry=geom,
        body_angle=mask(body_angle.reshape(shape + (-1,))),
        camber=mask(gam), contact=mask(contact.reshape(shape + (2, 2))),
        spring_length=mask(spring_len.reshape(shape + (-1,))),
        track=mask(track), track_change=mask(track_change), scrub=mask(scrub), heave=mask(heave),
        camber_error=mask(camber_error), lean_point_offset=mask(lean_point),
        bump_track_change=bump_track, bump_camber_change=bump_camber, motion_ratio=motion_ratio,
        travel_status=tstatus.reshape(C, T), engine=settings.solve.engine,
    )
