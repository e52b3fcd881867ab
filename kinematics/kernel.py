"""Compiled Newton corrector: the batched solve of :mod:`tiltopt.kinematics.solver`, one item per loop pass.

At the optimizer's batch sizes (a few hundred items of ten unknowns) the
numpy path of :func:`tiltopt.kinematics.solver.newton` spends most of its time in
array-call overhead and in passes over the (N, m, n_q + 1) Jacobian. This
module runs the same iteration per item in code compiled by numba, with the
item's point positions, point Jacobian, residual and LU factors in small
scratch arrays: the same equations, the same analytic Jacobian (the rotated
design vectors of :meth:`Model.positions`, written by index), the same step
rule and the same status codes. At the solution it also returns the lean
tangent dq/dphi and the sign of det(J), which the continuation's branch guard
needs, from one more factorisation of the Jacobian it already has.

The numpy path stays the reference: tests solve the same states both ways and
compare them (``tests/test_kernel.py``).

Shapes: ``N`` items, ``n_q`` coordinates, ``m`` equation rows of the stage.
"""
from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

from .model import ANGLE, Model

# solver imports this module only inside functions; the step rules and status codes are solver's
from .solver import (
    BEST_FROM_ITER,
    CHORD_CUT,
    STALL_FROM_ITER,
    STALL_RATIO,
    Solved,
    _layout,
    n_rows,
)
from .solver import CONVERGED as _CONVERGED
from .solver import MAX_ITER as _MAX_ITER
from .solver import NONFINITE as _NONFINITE
from .solver import STALLED as _STALLED

_STAGE = {"lean": 0, "travel": 1}


class Topology(NamedTuple):
    """The model's integer tables the Newton kernel reads (from :func:`tables`), one record for numba."""

    n_pts: int
    src_col: np.ndarray
    ang_coord: np.ndarray
    pk_src: np.ndarray
    p_start: np.ndarray
    p_col: np.ndarray
    ty: np.ndarray
    tz: np.ndarray
    sl_pk: np.ndarray
    sl_pt: np.ndarray
    sl_coord: np.ndarray
    eq_pin: np.ndarray
    eq_slider: np.ndarray
    sl_src: np.ndarray
    eq_link: np.ndarray
    eq_spring: np.ndarray
    eq_wheel: np.ndarray
    usrc: np.ndarray
    angle_col: np.ndarray
    r_travel: int            # first row of the travel equations


class Constants(NamedTuple):
    """Per-candidate constants of a batch (:class:`tiltopt.kinematics.solver.Batch`), one row per item."""

    V: np.ndarray            # (Nb, n_pk) complex design vectors
    U: np.ndarray            # (Nb, n_sl) complex slide directions
    R: np.ndarray            # (Nb, 2) tyre outer radius, mm
    r: np.ndarray            # (Nb, 2) crown radius, mm
    sc0: np.ndarray          # (Nb, 2, 2) sin, cos of the static cambers
    Lc: np.ndarray           # (Nb,) length scale, mm
    L_link: np.ndarray       # (Nb, n_links) link lengths, mm
    n0: np.ndarray           # (Nb, n_sliders, 2) guide normals
    zc0: np.ndarray          # (Nb, 2) wheel-centre heights at the design position, mm
    scale: np.ndarray        # (Nb, n_q) column scales


class Options(NamedTuple):
    """Stage and step rule of one solve (:class:`tiltopt.kinematics.solver.SolveSettings`)."""

    stage: int               # 0 lean, 1 travel
    tol: float               # mm
    max_iter: int
    max_step: float          # rad
    chord_below: float       # mm
    final_jacobian: bool


class Outputs(NamedTuple):
    """Arrays the kernel fills in place (:class:`tiltopt.kinematics.solver.Solved`)."""

    status: np.ndarray
    resid: np.ndarray
    iters: np.ndarray
    J: np.ndarray
    tan: np.ndarray
    det: np.ndarray
    X: np.ndarray


class Scratch(NamedTuple):
    """Scratch arrays of one item: angles and their cos/sin, design vectors and their rotations, slide
    directions, point positions, the residual, the wheels' camber sin/cos, the rotated guide normals."""

    ang: np.ndarray
    cs: np.ndarray
    wy: np.ndarray
    wz: np.ndarray
    x: np.ndarray
    ry: np.ndarray
    rz: np.ndarray
    uy: np.ndarray
    uz: np.ndarray
    F: np.ndarray
    gsc: np.ndarray
    sn: np.ndarray


def tables(model: Model) -> dict:
    """Integer topology tables of the model for the kernel (cached on the model)."""
    cache = model.__dict__.get("_kernel_tables")
    if cache is not None:
        return cache

    m, tab = model, model._np
    src_col = np.r_[m.n_q, m.ang_coord].astype(np.int64)     # angle source -> Jacobian column
    lay = _layout(m, "lean")
    sa, sb = lay["slider_src"]

    def i64(a, shape=None):
        a = np.ascontiguousarray(np.asarray(a, dtype=np.int64))
        return a.reshape(shape) if shape is not None else a

    pt = _point_tables(model, "needed")    # ang_coord, pk_src, pk_point, ty, tz, sl_pk, sl_coord
    t = dict(
        pt, n_q=m.n_q, n_pts=tab["n"], src_col=src_col,
        p_start=i64(np.r_[tab["starts"], len(tab["pk_src"])]),    # pairs of point j: p_start[j]:p_start[j+1]
        p_col=src_col[pt["pk_src"]],                              # Jacobian column of each pair
        sl_pt=pt["pk_point"][pt["sl_pk"]],                        # point of each slide term
        eq_pin=i64(m.eq_pin, (-1, 2)), eq_slider=i64(m.eq_slider, (-1, 3)),
        sl_src=i64(np.stack([sa, sb], -1) if len(sa) else np.zeros((0, 2)), (-1, 2)),
        eq_link=i64(m.eq_link, (-1, 2)), eq_spring=i64(m.eq_spring, (-1, 2)),
        eq_wheel=i64(m.eq_wheel), usrc=i64(lay["usrc"]),
        angle_col=(m.coord_kind == ANGLE).astype(np.bool_),
    )
    model.__dict__["_kernel_tables"] = t
    return t



def topology(model: Model) -> Topology:
    """:func:`tables` as the kernel's :class:`Topology` record (cached on the model)."""
    cache = model.__dict__.get("_kernel_topology")
    if cache is None:
        t = tables(model)
        cache = Topology(t["n_pts"], *(t[f] for f in Topology._fields[1:-1]), model.n_loop_rows + len(model.eq_link))
        model.__dict__["_kernel_topology"] = cache
    return cache

def positions(model: Model, q: np.ndarray, lean: np.ndarray, V: np.ndarray, U: np.ndarray, cand: np.ndarray,
              which: str = "needed"):
    """Point positions of many states, compiled (same arithmetic as :meth:`Model.positions`).

    Parameters
    ----------
    q : ndarray of shape (N, n_q)
    lean : ndarray of shape (N,)
        Chassis angle, radians.
    V, U : complex ndarrays of shapes (C, n_pk) and (C, n_sl)
        Per-candidate design vectors of the point table (:meth:`Model.design_vectors`).
    cand : ndarray of shape (N,)
        Candidate (row of V and U) of each state.
    which : {'needed', 'all'} or str
        The points of the equations (``model._np``), every point (``model._all``), or a table of
        the model's own made by :meth:`Model._compile_points` with tag ``"_" + which``.

    Returns
    -------
    x : ndarray of shape (N, n_points_in_table, 2)
    ang : ndarray of shape (N, n_ang)
        Angle sources: the lean, then the angle coordinates.
    """
    tab = _table(model, which)
    pt = _point_tables(model, which)
    N = q.shape[0]
    x = np.empty((N, tab["n"], 2))
    ang = np.empty((N, model.n_ang))
    _positions(np.ascontiguousarray(q, dtype=float), np.ascontiguousarray(lean, dtype=float),
               np.ascontiguousarray(V, dtype=np.complex128), np.ascontiguousarray(U, dtype=np.complex128),
               np.ascontiguousarray(cand, dtype=np.int64), pt["ang_coord"], pt["pk_src"], pt["pk_point"],
               pt["ty"], pt["tz"], pt["sl_pk"], pt["sl_coord"], x, ang)
    return x, ang


def _table(model: Model, which: str) -> dict:
    return getattr(model, {"needed": "_np", "all": "_all"}.get(which, "_" + which))


def _point_tables(model: Model, which: str) -> dict:
    cache = model.__dict__.setdefault("_kernel_point_tables", {})
    if which not in cache:
        tab = _table(model, which)
        i64 = (lambda a: np.ascontiguousarray(np.asarray(a, dtype=np.int64)))
        cache[which] = dict(ang_coord=i64(model.ang_coord), pk_src=i64(tab["pk_src"]),
                            pk_point=i64(tab["pk_point"]), ty=i64(tab["ty"]), tz=i64(tab["tz"]),
                            sl_pk=i64(tab["sl_pk"]), sl_coord=i64(tab["sl_coord"]))
    return cache[which]


@numba.njit(cache=True, error_model="numpy")
def _positions(Q, lean, V, U, cand, ang_coord, pk_src, pk_point, ty, tz, sl_pk, sl_coord, X, ANG):
    n_src = ang_coord.shape[0] + 1
    cs = np.empty((n_src, 2))
    w = np.empty(V.shape[1], np.complex128)
    for i in range(Q.shape[0]):
        q = Q[i]
        c_ = cand[i]
        ANG[i, 0] = lean[i]
        for k in range(n_src - 1):
            ANG[i, k + 1] = q[ang_coord[k]]
        for k in range(n_src):
            cs[k, 0] = np.cos(ANG[i, k])
            cs[k, 1] = np.sin(ANG[i, k])
        for k in range(V.shape[1]):
            w[k] = V[c_, k]
        for s in range(sl_pk.shape[0]):
            w[sl_pk[s]] += U[c_, s] * q[sl_coord[s]]
        for j in range(X.shape[1]):
            X[i, j, 0] = q[ty[j]]
            X[i, j, 1] = q[tz[j]]
        for k in range(V.shape[1]):
            c, s = cs[pk_src[k], 0], cs[pk_src[k], 1]
            j = pk_point[k]
            X[i, j, 0] += c * w[k].real + s * w[k].imag
            X[i, j, 1] += c * w[k].imag - s * w[k].real


def _static_camber_sc(b) -> np.ndarray:
    """sin and cos of each item's static camber, (N, 2, 2), kept on the batch after the first use."""
    sc = b.__dict__.get("_static_camber_sc")
    if sc is None or len(sc) != len(b.gamma0):
        sc = np.ascontiguousarray(np.stack([np.sin(b.gamma0), np.cos(b.gamma0)], -1))
        b.__dict__["_static_camber_sc"] = sc
    return sc


def solve(model: Model, b, q0: np.ndarray, lean: np.ndarray, target: np.ndarray, stage: str, settings,
          items: np.ndarray | None = None, final_jacobian: bool = True):
    """Compiled Newton solve of a batch of states; see :func:`tiltopt.kinematics.solver.solve_states`.

    items : ndarray of shape (N,), optional
        Rows of ``b`` the states belong to (default: all, in order); saves
        copying a sub-batch for a step of some of the items.
    final_jacobian : bool
        True: J, tangent and det sign at the returned q (one more Jacobian and
        factorisation per state). False: those of the last Newton step's
        Jacobian, from the factors of that step (a state solved without a step
        still gets them at q).

    Returns
    -------
    q : ndarray of shape (N, n_q)
    status : ndarray of shape (N,), int8
    resid : ndarray of shape (N,)
        Largest absolute equation residual, mm.
    iters : ndarray of shape (N,)
    J : ndarray of shape (N, m, n_q + 1)
        Jacobian (see ``final_jacobian``), the lean column last.
    tangent : ndarray of shape (N, n_q)
        The path tangent of that Jacobian (least squares): dq/dphi (``J_q t = -J_phi``) in the
        lean stage, dq/ds (``J_q t = -dF/ds``) in the travel stage.
    det_sign : ndarray of shape (N,)
        Sign of det(J_q) for a square system (0 when singular), else 0.
    x : ndarray of shape (N, n_needed, 2)
        Positions of the equation points at the returned q, mm.
    """
    t = tables(model)
    N, Nb = q0.shape[0], len(b.cand)
    items = np.arange(N) if items is None else np.ascontiguousarray(items, dtype=np.int64)
    st = _STAGE[stage]
    if st == 1:
        tgt = np.ascontiguousarray(np.asarray(target, float).reshape(N, 1))
        hold = np.ascontiguousarray(b.hold, dtype=float)
    else:
        tgt = np.ascontiguousarray(np.asarray(target, float).reshape(N, len(model.eq_spring)))
        hold = np.zeros((Nb, 0, model.n_q))
    rows = n_rows(model, stage, hold.shape[1] if st == 1 else 0)
    q = np.ascontiguousarray(q0, dtype=float).copy()
    status = np.empty(N, np.int8)
    resid = np.empty(N)
    iters = np.zeros(N, np.int64)
    J = np.empty((N, rows, model.n_q + 1))
    tan = np.empty((N, model.n_q))
    det = np.zeros(N)
    X = np.empty((N, t["n_pts"], 2))
    n0 = b.n0 if b.n0.shape[1] else np.zeros((Nb, 0, 2))
    consts = Constants(
        np.ascontiguousarray(b.V, dtype=np.complex128), np.ascontiguousarray(b.U, dtype=np.complex128),
        np.ascontiguousarray(b.R), np.ascontiguousarray(b.r), _static_camber_sc(b), np.ascontiguousarray(b.Lc),
        np.ascontiguousarray(b.L_link.reshape(Nb, len(model.eq_link))), np.ascontiguousarray(n0, dtype=float),
        np.ascontiguousarray(b.zc0), np.ascontiguousarray(b.col_scale))
    opts = Options(st, float(settings.tol_mm), int(settings.max_iter), float(settings.max_angle_step_rad),
                   float(settings.chord_below_mm), bool(final_jacobian))
    _newton(q, np.ascontiguousarray(lean, dtype=float), tgt, items, hold, consts, topology(model), opts,
            Outputs(status, resid, iters, J, tan, det, X))
    return Solved(q, status, resid, iters, J, tan, det, X)


@numba.njit(cache=True, error_model="numpy")
def _lu_factor(A, n, piv):
    """LU factors of A[:n, :n] in place (partial pivoting; multipliers below the diagonal).

    Returns (ok, det_sign); ``piv[k]`` is the row swapped with row k.
    """
    sign = 1.0
    for k in range(n):
        p = k
        big = abs(A[k, k])
        for i in range(k + 1, n):
            v = abs(A[i, k])
            if v > big:
                big = v
                p = i
        if big == 0.0 or not np.isfinite(big):
            return False, 0.0
        piv[k] = p
        if p != k:
            sign = -sign
            for j in range(n):
                A[k, j], A[p, j] = A[p, j], A[k, j]
        if A[k, k] < 0.0:
            sign = -sign
        inv = 1.0 / A[k, k]
        for i in range(k + 1, n):
            f = A[i, k] * inv
            A[i, k] = f
            if f != 0.0:            # the Jacobians are sparse: skip rows with nothing to eliminate
                for j in range(k + 1, n):
                    A[i, j] -= f * A[k, j]
    return True, sign


@numba.njit(cache=True, error_model="numpy")
def _lu_apply(A, piv, B, n):
    """Solve with the factors of :func:`_lu_factor`, in place on B[:n] (all its columns)."""
    for j in range(B.shape[1]):
        for k in range(n):          # the row swaps of the factorisation (rows of L swapped too)
            p = piv[k]
            if p != k:
                B[k, j], B[p, j] = B[p, j], B[k, j]
        for k in range(n):          # L (unit diagonal)
            f = B[k, j]
            if f != 0.0:
                for i in range(k + 1, n):
                    B[i, j] -= A[i, k] * f
        for i in range(n - 1, -1, -1):
            s = B[i, j]
            for c in range(i + 1, n):
                s -= A[i, c] * B[c, j]
            B[i, j] = s / A[i, i]


@numba.njit(cache=True, error_model="numpy")
def _ls_factor(Jm, rows, n, scale, A, piv):
    """Factor the least-squares step of ``(Jm[:, :n] * scale) y = rhs``.

    Square: the LU factors of the scaled Jacobian, or, if it is exactly
    singular, of the damped normal equations (as :func:`tiltopt.kinematics.solver._ls_step`);
    otherwise the normal equations with a vanishing Tikhonov term.
    Returns (ok, det_sign, normal): det_sign 0 unless square and not singular.
    """
    if rows == n:
        for i in range(n):
            for j in range(n):
                A[i, j] = Jm[i, j] * scale[j]
        ok, sign = _lu_factor(A, n, piv)
        if ok:
            return True, sign, False
    dmax = 1.0
    for i in range(n):
        for j in range(n):
            s = 0.0
            for r in range(rows):
                s += Jm[r, i] * Jm[r, j]
            A[i, j] = s * scale[i] * scale[j]
        if A[i, i] > dmax:
            dmax = A[i, i]
    for i in range(n):
        A[i, i] += 1e-13 * dmax
    ok, _ = _lu_factor(A, n, piv)
    return ok, 0.0, True


@numba.njit(cache=True, error_model="numpy")
def _ls_apply(Jm, rows, n, scale, A, piv, normal, rhs, B):
    """The step y of :func:`_ls_factor`'s factors for each column of rhs (rows, nr), into B[:n]."""
    for j in range(rhs.shape[1]):
        for i in range(n):
            if normal:
                s = 0.0
                for r in range(rows):
                    s += Jm[r, i] * rhs[r, j]
                B[i, j] = s * scale[i]
            else:
                B[i, j] = rhs[i, j]
    _lu_apply(A, piv, B, n)


@numba.njit(cache=True, error_model="numpy", inline="always")
def _add_point(J, n, r, j, cy, cz, ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz):
    """J[n, r] += cy * d(y_j)/d(q, phi) + cz * d(z_j)/d(q, phi): the point Jacobian, written by index.

    A pair vector (ry, rz) of angle column c gives dy/dc = rz, dz/dc = -ry; a
    slide direction (uy, uz) of slide column c gives dy/dc = uy, dz/dc = uz.
    """
    J[n, r, ty[j]] += cy
    J[n, r, tz[j]] += cz
    for k in range(p_start[j], p_start[j + 1]):
        J[n, r, p_col[k]] += cy * rz[k] - cz * ry[k]
    for s in range(sl_pt.shape[0]):
        if sl_pt[s] == j:
            J[n, r, sl_coord[s]] += cy * uy[s] + cz * uz[s]


@numba.njit(cache=True, error_model="numpy", inline="always")
def _residual(i, n, lean_n, Q, tgt, hold, k_, t, stage, w):
    """Residual F (m,) of state n, constants in row i (tiltopt.kinematics.solver.residual), into ``w.F``.

    Leaves the rotated pair vectors, slide directions and positions in the scratch arrays ``w``, from
    which :func:`_jacobian` writes J[n]: a converged state needs no Jacobian unless it is asked for.
    """
    V, U, R, r, sc0, Lc, L_link, n0, zc0, scale = k_
    (n_pts, src_col, ang_coord, pk_src, p_start, p_col, ty, tz, sl_pk, sl_pt, sl_coord, eq_pin, eq_slider,
     sl_src, eq_link, eq_spring, eq_wheel, usrc, angle_col, r_travel) = t
    ang, cs, wy, wz, x, ry, rz, uy, uz, F, gsc, sn = w
    nq = Q.shape[1]
    ang[0] = lean_n
    for k in range(ang_coord.shape[0]):
        ang[k + 1] = Q[n, ang_coord[k]]
    for k in range(1, ang.shape[0]):     # cs[0]: the lean's, set once per state
        cs[k, 0] = np.cos(ang[k])
        cs[k, 1] = np.sin(ang[k])
    for k in range(V.shape[1]):
        wy[k] = V[i, k].real
        wz[k] = V[i, k].imag
    for s_ in range(sl_pk.shape[0]):
        qs_ = Q[n, sl_coord[s_]]
        wy[sl_pk[s_]] += U[i, s_].real * qs_
        wz[sl_pk[s_]] += U[i, s_].imag * qs_
        c, s = cs[pk_src[sl_pk[s_]], 0], cs[pk_src[sl_pk[s_]], 1]
        uy[s_] = c * U[i, s_].real + s * U[i, s_].imag
        uz[s_] = c * U[i, s_].imag - s * U[i, s_].real
    for j in range(x.shape[0]):
        xy = Q[n, ty[j]]
        xz = Q[n, tz[j]]
        for k in range(p_start[j], p_start[j + 1]):
            c, s = cs[pk_src[k], 0], cs[pk_src[k], 1]
            # exp(-i a) (wy + i wz) = (c wy + s wz) + i (c wz - s wy)
            ry[k] = c * wy[k] + s * wz[k]
            rz[k] = c * wz[k] - s * wy[k]
            xy += ry[k]
            xz += rz[k]
        x[j, 0] = xy
        x[j, 1] = xz
    r0 = 0
    for e in range(eq_pin.shape[0]):
        a, b = eq_pin[e, 0], eq_pin[e, 1]
        F[r0] = x[a, 0] - x[b, 0]
        F[r0 + 1] = x[a, 1] - x[b, 1]
        r0 += 2
    for e in range(eq_slider.shape[0]):
        f, p = eq_slider[e, 0], eq_slider[e, 2]
        c, s = cs[sl_src[e, 0], 0], cs[sl_src[e, 0], 1]
        sn[e, 0] = c * n0[i, e, 0] + s * n0[i, e, 1]         # the guide normal, rotated
        sn[e, 1] = -s * n0[i, e, 0] + c * n0[i, e, 1]
        F[r0] = sn[e, 0] * (x[p, 0] - x[f, 0]) + sn[e, 1] * (x[p, 1] - x[f, 1])
        F[r0 + 1] = (ang[sl_src[e, 1]] - ang[sl_src[e, 0]]) * Lc[i]
        r0 += 2
    n_len = eq_link.shape[0] + (eq_spring.shape[0] if stage == 0 else 0)
    for e in range(n_len):
        if e < eq_link.shape[0]:
            a, b, L0 = eq_link[e, 0], eq_link[e, 1], L_link[i, e]
        else:
            k = e - eq_link.shape[0]
            a, b, L0 = eq_spring[k, 0], eq_spring[k, 1], tgt[n, k]
        dy, dz = x[a, 0] - x[b, 0], x[a, 1] - x[b, 1]
        F[r0] = np.sqrt(dy * dy + dz * dz) - L0
        r0 += 1
    if stage == 1:
        for k in range(2):
            F[r0] = x[eq_wheel[k], 1] - Q[n, 1] - zc0[i, k] - tgt[n, 0]
            r0 += 1
        for h in range(hold.shape[1]):
            s = 0.0
            for c in range(nq):
                s += hold[i, h, c] * Q[n, c] / scale[i, c]
            F[r0] = s
            r0 += 1
    lat = 0.0
    for k in range(2):
        j = eq_wheel[k]
        # sin, cos of the camber gamma0 + a from those of the static camber and the angle a
        c, s = cs[usrc[k], 0], cs[usrc[k], 1]
        Rr = R[i, k] - r[i, k]
        gsc[k, 0] = sc0[i, k, 0] * c + sc0[i, k, 1] * s
        gsc[k, 1] = sc0[i, k, 1] * c - sc0[i, k, 0] * s
        F[r0 + k] = x[j, 1] - Rr * gsc[k, 1] - r[i, k]
        lat += x[j, 0] - Rr * gsc[k, 0]
    F[r0 + 2] = 0.5 * lat


@numba.njit(cache=True, error_model="numpy", inline="always")
def _jacobian(i, n, Q, hold, k_, t, stage, w, J):
    """Jacobian J[n] (m, n_q + 1) of the state :func:`_residual` was last called for."""
    V, U, R, r, sc0, Lc, L_link, n0, zc0, scale = k_
    (n_pts, src_col, ang_coord, pk_src, p_start, p_col, ty, tz, sl_pk, sl_pt, sl_coord, eq_pin, eq_slider,
     sl_src, eq_link, eq_spring, eq_wheel, usrc, angle_col, r_travel) = t
    x, ry, rz, uy, uz, gsc, sn = w.x, w.ry, w.rz, w.uy, w.uz, w.gsc, w.sn
    nq = Q.shape[1]
    for a in range(J.shape[1]):
        for c in range(J.shape[2]):
            J[n, a, c] = 0.0
    r0 = 0
    for e in range(eq_pin.shape[0]):
        a, b = eq_pin[e, 0], eq_pin[e, 1]
        for d in range(2):
            _add_point(J, n, r0, a, 1.0 - d, float(d), ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
            _add_point(J, n, r0, b, d - 1.0, -float(d), ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
            r0 += 1
    for e in range(eq_slider.shape[0]):
        f, p = eq_slider[e, 0], eq_slider[e, 2]
        ny, nz = sn[e, 0], sn[e, 1]
        dy, dz = x[p, 0] - x[f, 0], x[p, 1] - x[f, 1]
        _add_point(J, n, r0, p, ny, nz, ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
        _add_point(J, n, r0, f, -ny, -nz, ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
        ca, cb = src_col[sl_src[e, 0]], src_col[sl_src[e, 1]]
        J[n, r0, ca] += nz * dy - ny * dz
        J[n, r0 + 1, ca] -= Lc[i]
        J[n, r0 + 1, cb] += Lc[i]
        r0 += 2
    n_len = eq_link.shape[0] + (eq_spring.shape[0] if stage == 0 else 0)
    for e in range(n_len):
        if e < eq_link.shape[0]:
            a, b = eq_link[e, 0], eq_link[e, 1]
        else:
            a, b = eq_spring[e - eq_link.shape[0], 0], eq_spring[e - eq_link.shape[0], 1]
        dy, dz = x[a, 0] - x[b, 0], x[a, 1] - x[b, 1]
        L = np.sqrt(dy * dy + dz * dz)
        _add_point(J, n, r0, a, dy / L, dz / L, ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
        _add_point(J, n, r0, b, -dy / L, -dz / L, ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
        r0 += 1
    if stage == 1:
        for k in range(2):
            _add_point(J, n, r0, eq_wheel[k], 0.0, 1.0, ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
            J[n, r0, 1] -= 1.0
            r0 += 1
        for h in range(hold.shape[1]):
            for c in range(nq):
                J[n, r0, c] = hold[i, h, c] / scale[i, c]
            r0 += 1
    for k in range(2):
        j = eq_wheel[k]
        Rr = R[i, k] - r[i, k]
        _add_point(J, n, r0 + k, j, 0.0, 1.0, ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
        _add_point(J, n, r0 + 2, j, 0.5, 0.0, ty, tz, p_start, p_col, ry, rz, sl_pt, sl_coord, uy, uz)
        col = src_col[usrc[k]]
        J[n, r0 + k, col] += Rr * gsc[k, 0]
        J[n, r0 + 2, col] -= 0.5 * Rr * gsc[k, 1]


@numba.njit(cache=True, error_model="numpy", inline="always")
def _max_abs(F, rows):
    """(all finite, largest |F[k]|) over the first ``rows`` residuals."""
    rmax = 0.0
    finite = True
    for k in range(rows):
        v = abs(F[k])
        if not np.isfinite(v):
            finite = False
        elif v > rmax:
            rmax = v
    return finite, rmax


@numba.njit(cache=True, error_model="numpy", inline="always")
def _final_tangent(i, it_, Jm, rows, stage, r_travel, scale, A, piv, rhs, B, det, tan):
    """The path tangent and det(J) sign of item ``it_`` from its Jacobian ``Jm`` (least squares)."""
    nq = tan.shape[1]
    for k in range(rows):
        rhs[k, 0] = -Jm[k, nq] if stage == 0 else (1.0 if r_travel <= k < r_travel + 2 else 0.0)
        rhs[k, 1] = 0.0
    ok, sign, normal = _ls_factor(Jm, rows, nq, scale[i], A, piv)
    if ok:
        _ls_apply(Jm, rows, nq, scale[i], A, piv, normal, rhs, B)
    det[it_] = sign if rows == nq else 0.0
    for c in range(nq):
        tan[it_, c] = B[c, 0] * scale[i, c] if ok else np.nan


@numba.njit(cache=True, error_model="numpy")
def _newton(Q, lean, tgt, item, hold, k_, t, o, out):
    """Newton iteration of every item in place (Q, and the arrays of ``out``).

    Q (N, n_q) start states; lean (N,); tgt (N, n_targets) spring lengths or the travel; item (N,) row of
    each item's constants; hold (Nb, n_hold, n_q) held directions (travel stage). ``k_``: :class:`Constants`,
    ``t``: :class:`Topology`, ``o``: :class:`Options`, ``out``: :class:`Outputs`.
    """
    V, U, R, r, sc0, Lc, L_link, n0, zc0, scale = k_
    (n_pts, src_col, ang_coord, pk_src, p_start, p_col, ty, tz, sl_pk, sl_pt, sl_coord, eq_pin, eq_slider,
     sl_src, eq_link, eq_spring, eq_wheel, usrc, angle_col, r_travel) = t
    stage, tol, max_iter, max_step, chord_below, final_jacobian = o
    status, resid, iters, J, tan, det, X = out
    N, nq = Q.shape
    rows = J.shape[1]
    w = Scratch(np.empty(ang_coord.shape[0] + 1), np.empty((ang_coord.shape[0] + 1, 2)), np.empty(V.shape[1]),
                np.empty(V.shape[1]), np.empty((n_pts, 2)), np.empty(V.shape[1]), np.empty(V.shape[1]),
                np.empty(U.shape[1]), np.empty(U.shape[1]), np.empty(rows), np.empty((2, 2)),
                np.empty((max(eq_slider.shape[0], 1), 2)))
    cs, x, F = w.cs, w.x, w.F
    A = np.empty((nq, nq))
    B = np.empty((nq, 2))
    rhs = np.empty((rows, 2))
    piv = np.empty(nq, np.int64)
    ok, normal = False, False
    for it_ in range(N):
        i = item[it_]           # row of the item's constants
        q = Q[it_]
        Jm = J[it_]
        prev = np.inf
        st = _MAX_ITER
        cs[0, 0] = np.cos(lean[it_])
        cs[0, 1] = np.sin(lean[it_])
        stepped = False         # tan[it_] and det[it_] hold those of the last step's Jacobian
        chord_ok = False        # factors of an earlier step may be reused (a chord step)
        was_chord = False
        r_last = np.inf
        for it in range(max_iter + 1):
            _residual(i, it_, lean[it_], Q, tgt, hold, k_, t, stage, w)
            finite, rmax = _max_abs(F, rows)
            if not finite:
                resid[it_] = np.nan
                st = _NONFINITE
                break
            resid[it_] = rmax
            if rmax <= tol:
                st = _CONVERGED
                break
            if it >= STALL_FROM_ITER and rmax > STALL_RATIO * prev:
                st = _STALLED
                break
            if it >= BEST_FROM_ITER:
                if rmax < prev:
                    prev = rmax
            else:
                prev = rmax
            if it == max_iter:
                break
            iters[it_] += 1
            # near the solution the factors of the last Jacobian serve again (a chord step)
            # unless the last chord step did not cut the residual tenfold
            if was_chord and rmax > CHORD_CUT * r_last:
                chord_ok = False
            use_chord = chord_ok and rmax <= chord_below
            if not use_chord:
                _jacobian(i, it_, Q, hold, k_, t, stage, w, J)
                ok, sign, normal = _ls_factor(Jm, rows, nq, scale[i], A, piv)
                det[it_] = sign if rows == nq else 0.0
            chord_ok = True
            was_chord = use_chord
            r_last = rmax
            # the step and, from the same factors, the lean tangent of their Jacobian
            for k in range(rows):
                rhs[k, 0] = -F[k]
                rhs[k, 1] = -Jm[k, nq] if stage == 0 else (1.0 if r_travel <= k < r_travel + 2 else 0.0)
            if ok:
                _ls_apply(Jm, rows, nq, scale[i], A, piv, normal, rhs, B)
            big = 0.0
            for c in range(nq):
                dq = B[c, 0] * scale[i, c]
                if not ok or not np.isfinite(dq):
                    big = np.nan
                    break
                if angle_col[c] and abs(dq) > big:
                    big = abs(dq)
            stepped = ok
            for c in range(nq):
                tan[it_, c] = B[c, 1] * scale[i, c] if ok else np.nan
            if not big == big:      # a singular step fails the item at the next check
                for c in range(nq):
                    q[c] = np.nan
                continue
            f = 1.0
            if big > max_step:
                f = max_step / big
            for c in range(nq):
                q[c] += B[c, 0] * scale[i, c] * f
        status[it_] = st
        for j in range(x.shape[0]):     # positions at the returned state (its last residual)
            X[it_, j, 0] = x[j, 0]
            X[it_, j, 1] = x[j, 1]
        if final_jacobian or not stepped:
            # the Jacobian, lean tangent and det(J) sign at the returned state
            _jacobian(i, it_, Q, hold, k_, t, stage, w, J)
            _final_tangent(i, it_, Jm, rows, stage, r_travel, scale, A, piv, rhs, B, det, tan)


def predict(hist_q: list, hist_t: list, hist_phi: list, phi_new: np.ndarray) -> np.ndarray:
    """Predicted states of a continuation step, shape (N, n_q).

    With two solved states per item (``hist_*[-2]`` and ``hist_*[-1]``: states q, path tangents
    dq/dphi, leans phi) the cubic Hermite extrapolation through both states and tangents
    (divided differences on the nodes a, a, b, b); with one, or where the two leans coincide
    (padded paths), the tangent line of the last state.
    """
    qb, tb, pb = hist_q[-1], hist_t[-1], hist_phi[-1]
    qa, ta, pa = (hist_q[-2], hist_t[-2], hist_phi[-2]) if len(hist_q) > 1 else (qb, tb, pb)
    out = np.empty(qb.shape)
    c = np.ascontiguousarray
    _predict(c(qa), c(ta), c(pa, dtype=float), c(qb), c(tb), c(pb, dtype=float), c(phi_new, dtype=float),
             len(hist_q) > 1, out)
    return out


@numba.njit(cache=True, error_model="numpy")
def _predict(qa, ta, pa, qb, tb, pb, phi, two, out):
    N, n = qb.shape
    for i in range(N):
        x, a, b = phi[i], pa[i], pb[i]
        ok = two and a != b
        if ok:
            H = b - a
            for c in range(n):
                fab = (qb[i, c] - qa[i, c]) / H
                faab = (fab - ta[i, c]) / H
                faabb = ((tb[i, c] - fab) / H - faab) / H
                v = qa[i, c] + (x - a) * (ta[i, c] + (x - a) * (faab + faabb * (x - b)))
                if not np.isfinite(v):
                    ok = False
                    break
                out[i, c] = v
        if not ok:
            for c in range(n):
                out[i, c] = qb[i, c] + tb[i, c] * (x - b)


def branch_test(q_new, t_new, q_old, t_old, phi_old, phi_new, col_scale, lc, items):
    """Trapezoid ratio and tangent turn of continuation steps (see sweep.BRANCH_JUMP_RATIO).

    The trapezoid rule is applied along the arclength of the lean path, a curve in (q, phi)
    space (scaled coordinates: angles, the lean included, times the item's characteristic
    length ``lc``), whose unit tangent ``T = (dq/dphi, 1) / |(dq/dphi, 1)|`` stays smooth
    through a fold: the step ``(dq, dphi) = l (T0 + T1) / 2`` up to a relative error of about
    ``(l kappa)^2 / 12`` (``l`` its arclength, ``kappa`` the curvature of the path), however
    near the fold the step ends. Taking ``l`` from the lean component, the secant dq/dphi of a
    step on one branch matches the mean of the end tangents dq/dphi weighted by
    ``w = 1 / |(dq/dphi, 1)|``. Returns ``ratio`` (N,):
    |secant - weighted mean| / (|secant| + |weighted mean|) in scaled coordinates (0 for a
    zero step, NaN where a tangent is not finite), and ``turned`` (N,): the tangent dq/dphi
    turned by more than a right angle. ``items``: the rows of ``col_scale`` (n_items, n_q)
    and ``lc`` (n_items,).

    The plain mean of the end tangents (the trapezoid rule in the lean) fails near a fold:
    there dq/dphi grows like 1 / sqrt(phi_fold - phi), the plain mean outruns the secant, and
    its ratio tends to 1 for a good step that ends just before the fold.
    """
    N = q_new.shape[0]
    ratio, turned = np.empty(N), np.empty(N, np.bool_)
    c = np.ascontiguousarray
    _branch_test(c(q_new), c(t_new), c(q_old), c(t_old), c(phi_old, dtype=float), c(phi_new, dtype=float),
                 c(col_scale), c(lc, dtype=float), c(items, dtype=np.int64), ratio, turned)
    return ratio, turned


@numba.njit(cache=True, error_model="numpy")
def _branch_test(q1, t1, q0, t0, p0, p1, col_scale, lc, items, ratio, turned):
    N, n = q1.shape
    for i in range(N):
        row = items[i]
        dphi = p1[i] - p0[i]
        L2 = lc[row] * lc[row]             # the lean component of (dq/dphi, 1), scaled, squared
        a0 = L2
        a1 = L2
        dot = 0.0
        for c in range(n):
            s = 1.0 / col_scale[row, c]
            a0 += (t0[i, c] * s) ** 2
            a1 += (t1[i, c] * s) ** 2
            dot += t0[i, c] * t1[i, c] * s * s
        w0 = 1.0 / np.sqrt(a0)             # weights of the end tangents: 1 / |(dq/dphi, 1)|
        w1 = 1.0 / np.sqrt(a1)
        mis = 0.0
        sec2 = 0.0
        mean2 = 0.0
        for c in range(n):
            s = 1.0 / col_scale[row, c]
            sec = (q1[i, c] - q0[i, c]) / dphi if dphi != 0.0 else 0.0
            mean = (w0 * t0[i, c] + w1 * t1[i, c]) / (w0 + w1)
            mis += ((sec - mean) * s) ** 2
            sec2 += (sec * s) ** 2
            mean2 += (mean * s) ** 2
        ratio[i] = np.sqrt(mis) / max(np.sqrt(sec2) + np.sqrt(mean2), 1e-12) if dphi != 0.0 else 0.0
        turned[i] = dot < 0.0


def contacts(model: Model, x: np.ndarray, ang: np.ndarray, b, items: np.ndarray):
    """Camber, tyre contact points and spring lengths of solved states (docs/domain.md).

    Parameters
    ----------
    x : ndarray of shape (N, n_needed, 2)
        Positions of the equation points (:func:`positions`).
    ang : ndarray of shape (N, n_ang)
        Angle sources of the states.
    b : Batch
        Wheel data per row; ``items`` (N,) gives each state's row.

    Returns
    -------
    gamma : ndarray of shape (N, 2)
        Camber of the [left, right] wheel, rad: static camber plus the upright's angle.
    contact : ndarray of shape (N, 2, 2)
        Contact point [y, z] per wheel, mm: ``y_c - (R - r) sin(gamma)``, ``z_c - (R - r) cos(gamma) - r``.
    spring_len : ndarray of shape (N, n_springs)
        Spring lengths, mm.
    """
    N = x.shape[0]
    gamma, contact = np.empty((N, 2)), np.empty((N, 2, 2))
    spring_len = np.empty((N, len(model.eq_spring)))
    t = tables(model)
    c = np.ascontiguousarray
    _contacts(c(x), c(ang), t["usrc"], t["eq_wheel"], t["eq_spring"], c(b.gamma0), c(b.R), c(b.r),
              c(items, dtype=np.int64), gamma, contact, spring_len)
    return gamma, contact, spring_len


@numba.njit(cache=True, error_model="numpy")
def _contacts(x, ang, usrc, eq_wheel, eq_spring, gamma0, R, r, items, gamma, contact, spring_len):
    for n in range(x.shape[0]):
        i = items[n]
        for w in range(2):
            g = gamma0[i, w] + ang[n, usrc[w]]
            gamma[n, w] = g
            Rr = R[i, w] - r[i, w]
            j = eq_wheel[w]
            contact[n, w, 0] = x[n, j, 0] - Rr * np.sin(g)
            contact[n, w, 1] = x[n, j, 1] - Rr * np.cos(g) - r[i, w]
        for e in range(eq_spring.shape[0]):
            dy = x[n, eq_spring[e, 0], 0] - x[n, eq_spring[e, 1], 0]
            dz = x[n, eq_spring[e, 0], 1] - x[n, eq_spring[e, 1], 1]
            spring_len[n, e] = np.sqrt(dy * dy + dz * dz)
