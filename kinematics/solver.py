"""Batched Newton (Gauss-Newton) solve of the assembly equations.

Equations, all in mm (see docs/domain.md and :mod:`tiltopt.kinematics.model`):

- loop pins: ``x(a) - x(b) = 0`` (2 rows each);
- loop sliders: offset of the runner point from the guide line, and the
  relative angle times a characteristic length (2 rows each);
- links: ``|x(a) - x(b)| - L0 = 0``; springs: the same with a target length;
- wheel on ground: ``z_c - (R - r) cos(gamma) - r = 0`` per wheel;
- lateral reference: mean contact ``y = y_c - (R - r) sin(gamma)`` is 0;
- travel (lean-0 stage only): ``z_c - z_O - (z_c0 - z_O0) - s = 0`` per wheel.

The chassis angle is the prescribed lean. The step is the least-squares
Newton step ``(J^T J) dq = -J^T r`` on angle-scaled columns (exact Newton for a
square system, Gauss-Newton for a redundant one such as the rigid
parallelogram, whose redundant equation stays consistent).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from .model import ANGLE, Geometry, Model

# status codes of a solved state
CONVERGED = 0
STALLED = 1        # the equations cannot all be met here (locked, toggled, over-constrained)
MAX_ITER = 2       # iteration limit reached
NONFINITE = 3      # geometry degenerated (zero-length member, NaN)
SKIPPED = 4        # not attempted: an earlier state of the same path failed
FOLD = 5           # the path passed a toggle: the solution found lies on another assembly branch
# Newton step rules, shared by this numpy path and the compiled kernel (kinematics/kernel.py reads them
# from here; numba takes module globals as compile-time constants):
STALL_FROM_ITER = 4       # from this iteration on, an item whose residual ...
STALL_RATIO = 0.9         # ... is above this share of its best earlier residual is stalled
BEST_FROM_ITER = 2        # the best earlier residual counts from this iteration (the first steps may rise)
CHORD_CUT = 0.1           # a chord step must cut the residual to this share, or chord steps stop for the item
STATUS_TEXT = {
    CONVERGED: "converged",
    STALLED: "cannot reach this state (locked: the equations have no solution here)",
    MAX_ITER: "no convergence within the iteration limit",
    NONFINITE: "geometry degenerated (non-finite values)",
    SKIPPED: "not attempted: an earlier state on the same path failed",
    FOLD: "cannot reach this state: the linkage toggles before it (the lean path folds back; the solution "
          "found belongs to another assembly branch)",
}


@dataclass(frozen=True)
class SolveSettings:
    """Newton settings.

    tol_mm : largest equation residual accepted as converged, mm.
    max_iter : iteration limit per solve.
    max_angle_step_rad : largest change of any angle in one iteration.
    chord_below_mm : below this largest residual a Newton step reuses the
        Jacobian (and, compiled, its LU factors) of the item's previous step, a
        chord step: from a good predictor that cuts the residual to about its
        square times the distance moved, so convergence is unchanged while
        a Jacobian and a factorisation are saved. A chord step that does not
        cut the residual tenfold stops chord steps for that item. 0 disables it.
    engine : {'compiled', 'numpy'}
        'compiled' runs the iteration per item in numba-compiled code
        (:mod:`tiltopt.kinematics.kernel`); 'numpy' is the array-at-a-time reference
        path. Both solve the same equations with the same step rule.
    """

    tol_mm: float = 1e-10
    max_iter: int = 30
    max_angle_step_rad: float = 0.25
    chord_below_mm: float = 1e-6
    engine: str = "compiled"

    def __post_init__(self):
        if self.engine not in ENGINES:
            raise ValueError(f"SolveSettings.engine must be one of {ENGINES}; got {self.engine!r}.")


ENGINES = ("compiled", "numpy")


class Batch:
    """Per-item constant arrays of one batched solve.

    Items are (candidate, path) pairs; ``cand`` maps each item to its
    candidate in ``geom``.
    """

    def __init__(self, model: Model, geom: Geometry, cand: np.ndarray):
        self.model = model
        self.cand = np.asarray(cand, dtype=int)
        tab = model._np
        V, U = model.design_vectors(geom, tab)
        self.V, self.U = V[self.cand], U[self.cand]
        pts = geom.points[self.cand]
        self.R = geom.outer_radius[self.cand]
        self.r = geom.crown_radius[self.cand]
        self.gamma0 = geom.static_camber[self.cand]
        self.Lc = model.char_length(geom)[self.cand]
        m = model
        # link and spring design lengths
        self.L_link = np.linalg.norm(pts[:, m.mech_idx(m.eq_link, 0)] - pts[:, m.mech_idx(m.eq_link, 1)], axis=-1)
        self.L_spring0 = np.linalg.norm(pts[:, m.mech_idx(m.eq_spring, 0)] - pts[:, m.mech_idx(m.eq_spring, 1)],
                                        axis=-1)
        # slider guide normals (design) and wheel-centre design heights
        if len(m.eq_slider):
            u = pts[:, m.mech_idx(m.eq_slider, 1)] - pts[:, m.mech_idx(m.eq_slider, 0)]
            u /= np.linalg.norm(u, axis=-1, keepdims=True)
            self.n0 = np.stack([-u[..., 1], u[..., 0]], axis=-1)
        else:
            self.n0 = np.zeros((len(self.cand), 0, 2))
        self.zc0 = pts[:, m.needed[m.eq_wheel], 1]
        # scaling of angle columns: an angle step of 1 rad moves points by ~Lc mm
        self.col_scale = np.where(m.coord_kind[None, :] == ANGLE, 1.0 / self.Lc[:, None], 1.0)
        # extra lean-0 rows holding directions no travel equation fixes (see hold_free_directions)
        self.hold = np.zeros((len(self.cand), 0, m.n_q))

    def take(self, idx) -> "Batch":
        new = object.__new__(Batch)
        for k, v in self.__dict__.items():
            new.__dict__[k] = v[idx] if isinstance(v, np.ndarray) else v
        return new


def n_rows(model: Model, stage: str, n_hold: int = 0) -> int:
    base = model.n_loop_rows + len(model.eq_link) + 3
    return base + (2 + n_hold if stage == "travel" else len(model.eq_spring))


def row_names(model: Model, stage: str) -> list[str]:
    tail = (["travel left", "travel right"] if stage == "travel" else model.row_names_spring)
    return model.row_names_kin + tail + ["ground left", "ground right", "lateral reference"]


def _layout(model: Model, stage: str) -> dict:
    """The linear functionals of a stage and their constant Jacobian maps (cached on the model)."""
    cache = model.__dict__.setdefault("_layouts", {})
    if stage in cache:
        return cache[stage]
    m = model
    rows: list[list[tuple]] = []
    blocks = {}

    def block(name, funcs):
        blocks[name] = slice(len(rows), len(rows) + len(funcs))
        rows.extend(funcs)

    def diffs(eq):
        return [[(a, d, 1.0), (b_, d, -1.0)] for a, b_ in eq for d in (0, 1)]

    block("pin", diffs(m.eq_pin))
    block("slider", diffs([(p, f) for f, _, p in m.eq_slider]))
    block("link", diffs(m.eq_link))
    if stage == "travel":
        block("travel", [[(int(w), 1, 1.0), ("q", 1, -1.0)] for w in m.eq_wheel])
    else:
        block("spring", diffs(m.eq_spring))
    block("ground", [[(int(w), 1, 1.0)] for w in m.eq_wheel])
    block("lateral", [[(int(m.eq_wheel[0]), 0, 0.5), (int(m.eq_wheel[1]), 0, 0.5)]])
    W1, W2, Jc = m.functional_map(rows)
    lay = dict(W1=W1, W2=W2, Jc=Jc, blocks=blocks, n_func=len(rows),
               usrc=np.array(m.tree.ang_src)[m.wheel_upright],
               slider_src=(np.array(m.tree.ang_src)[m.eq_slider_bodies[:, 0]],
                           np.array(m.tree.ang_src)[m.eq_slider_bodies[:, 1]]))
    cache[stage] = lay
    return lay


def residual(model: Model, b: Batch, q: np.ndarray, lean: np.ndarray, target: np.ndarray, stage: str,
             jac: bool = True):
    """Residual (N, m) and Jacobian (N, m, n_q + 1) of a stage.

    The Jacobian's last column is the derivative with respect to the
    prescribed lean (the chassis angle): path tangents come without extra
    residual evaluations.

    Every row is a function of a few point coordinates; the Jacobian rows of
    the linear parts (pins, coordinate differences, ground heights, lateral
    reference, travel) come from one matmul of the elementary entries with a
    constant map of fixed sparsity (:meth:`Model.functional_map`), then the
    nonlinear rows combine them with per-item unit vectors.

    Parameters
    ----------
    target : ndarray
        stage ``"travel"``: travel s per item, shape (N,), mm;
        stage ``"lean"``: held spring lengths, shape (N, n_springs), mm.
    """
    m = model
    lay = _layout(m, stage)
    x, E, ang = m.positions(q, lean, b.V, b.U, m._np, jac=jac)
    N = q.shape[0]
    nq = m.n_q + 1                       # coordinates + the lean column
    n_hold = b.hold.shape[1] if stage == "travel" else 0
    rows = n_rows(m, stage, n_hold)
    F = np.empty((N, rows))
    if jac:
        J = np.empty((N, rows, nq))
        Jf = E[0] @ lay["W1"]
        if E[1].shape[1]:
            Jf += E[1] @ lay["W2"]
        Jf = Jf.reshape(N, lay["n_func"], nq)
        Jf += lay["Jc"]
    else:
        J = Jf = None
    rs = _Rows(F, J, Jf, lay["blocks"], x)
    r0 = 0
    if len(m.eq_pin):                    # loop pins
        a, bb = m.eq_pin[:, 0], m.eq_pin[:, 1]
        k = 2 * len(a)
        F[:, r0:r0 + k] = (x[:, a] - x[:, bb]).reshape(N, k)
        if jac:
            J[:, r0:r0 + k] = Jf[:, rs.blocks["pin"]]
        r0 += k
    if len(m.eq_slider):                 # loop sliders
        r0 = _slider_rows(m, b, lay, ang, rs, r0)
    if len(m.eq_link):
        r0 = _length_rows(m.eq_link, b.L_link, rs, r0, "link")
    if stage == "travel":
        # wheel centres move s relative to the chassis datum (lean 0: chassis frame = global)
        F[:, r0:r0 + 2] = x[:, m.eq_wheel, 1] - q[:, 1, None] - b.zc0 - target[:, None]
        if jac:
            J[:, r0:r0 + 2] = Jf[:, rs.blocks["travel"]]
        r0 += 2
        if n_hold:
            # hold: v^T (q / col_scale) = 0 for each free direction v (scaled coordinates, mm)
            F[:, r0:r0 + n_hold] = np.einsum("nkq,nq->nk", b.hold, q / b.col_scale)
            if jac:
                J[:, r0:r0 + n_hold, :m.n_q] = b.hold / b.col_scale[:, None, :]
                J[:, r0:r0 + n_hold, m.n_q] = 0.0
            r0 += n_hold
    elif len(m.eq_spring):
        r0 = _length_rows(m.eq_spring, target, rs, r0, "spring")
    _ground_rows(m, b, lay, ang, rs, r0)
    return F, J


class _Rows(NamedTuple):
    """What the row writers of :func:`residual` share: F (N, m), J (N, m, n_q + 1) or None, the elementary
    Jacobian rows Jf, the row blocks of ``Jf`` and the point positions x (N, n_pts, 2)."""

    F: np.ndarray
    J: np.ndarray | None
    Jf: np.ndarray | None
    blocks: dict
    x: np.ndarray


def _slider_rows(m: Model, b: Batch, lay: dict, ang: np.ndarray, rs: _Rows, r0: int) -> int:
    """Slider rows from ``r0``: the point on the guide line (normal offset) and the guide's angle held."""
    F, J, x, N = rs.F, rs.J, rs.x, rs.F.shape[0]
    f, p = m.eq_slider[:, 0], m.eq_slider[:, 2]
    srca, srcb = lay["slider_src"]
    th_a, th_b = ang[:, srca], ang[:, srcb]
    c, s = np.cos(th_a), np.sin(th_a)
    n = np.stack([c * b.n0[..., 0] + s * b.n0[..., 1], -s * b.n0[..., 0] + c * b.n0[..., 1]], -1)
    d = x[:, p] - x[:, f]
    ns = len(f)
    F[:, r0:r0 + 2 * ns:2] = np.sum(n * d, -1)
    F[:, r0 + 1:r0 + 2 * ns:2] = (th_b - th_a) * b.Lc[:, None]
    if J is not None:
        Jd = rs.Jf[:, rs.blocks["slider"]].reshape(N, ns, 2, J.shape[2])
        J[:, r0:r0 + 2 * ns:2] = n[..., 0, None] * Jd[:, :, 0] + n[..., 1, None] * Jd[:, :, 1]
        J[:, r0 + 1:r0 + 2 * ns:2] = 0.0
        dn = np.stack([n[..., 1], -n[..., 0]], -1)
        for j in range(ns):  # few sliders; loop over joints, not items
            col_a = m.ang_coord[srca[j] - 1] if srca[j] > 0 else m.n_q
            col_b = m.ang_coord[srcb[j] - 1] if srcb[j] > 0 else m.n_q
            J[:, r0 + 2 * j, col_a] += np.sum(dn[:, j] * d[:, j], -1)
            J[:, r0 + 2 * j + 1, col_a] -= b.Lc
            J[:, r0 + 2 * j + 1, col_b] += b.Lc
    return r0 + 2 * ns


def _length_rows(eq: np.ndarray, L0, rs: _Rows, r0: int, blk: str) -> int:
    """Length rows |x_a - x_b| - L0 from ``r0`` for the point pairs ``eq`` (links or held springs)."""
    F, J, x, N = rs.F, rs.J, rs.x, rs.F.shape[0]
    a, bb = eq[:, 0], eq[:, 1]
    d = x[:, a] - x[:, bb]
    L = np.sqrt(np.sum(d * d, -1))
    k = len(a)
    F[:, r0:r0 + k] = L - L0
    if J is not None:
        Jd = rs.Jf[:, rs.blocks[blk]].reshape(N, k, 2, J.shape[2])
        u = d / L[..., None]
        J[:, r0:r0 + k] = u[..., 0, None] * Jd[:, :, 0] + u[..., 1, None] * Jd[:, :, 1]
    return r0 + k


def _ground_rows(m: Model, b: Batch, lay: dict, ang: np.ndarray, rs: _Rows, r0: int) -> None:
    """The last three rows: each tyre touching the ground, and the lateral reference (docs/domain.md)."""
    F, J, x = rs.F, rs.J, rs.x
    wc = m.eq_wheel
    usrc = lay["usrc"]
    gamma = b.gamma0 + ang[:, usrc]
    Rr = b.R - b.r
    sg, cg = np.sin(gamma), np.cos(gamma)
    F[:, r0:r0 + 2] = x[:, wc, 1] - Rr * cg - b.r
    F[:, r0 + 2] = 0.5 * (x[:, wc[0], 0] + x[:, wc[1], 0] - Rr[:, 0] * sg[:, 0] - Rr[:, 1] * sg[:, 1])
    if J is not None:
        J[:, r0:r0 + 2] = rs.Jf[:, rs.blocks["ground"]]
        J[:, r0 + 2] = rs.Jf[:, rs.blocks["lateral"].start]
        for w in range(2):
            col = m.ang_coord[usrc[w] - 1] if usrc[w] > 0 else m.n_q
            J[:, r0 + w, col] += Rr[:, w] * sg[:, w]
            J[:, r0 + 2, col] -= 0.5 * Rr[:, w] * cg[:, w]


def _ls_step(model: Model, Js: np.ndarray, F: np.ndarray, minnorm: bool) -> np.ndarray:
    """Least-squares step ``-J^+ F`` on scaled columns, batched.

    ``minnorm``: the exact pseudo-inverse (SVD), which leaves a free direction
    of the equations untouched (used at lean 0, where springs are free and a
    lean mode compensated by the springs may have no equation); otherwise the
    normal equations with a vanishing Tikhonov term (faster).
    """
    if minnorm:
        return -np.einsum("nij,nj->ni", np.linalg.pinv(Js, rcond=1e-10), F)
    if Js.shape[1] == Js.shape[2]:
        # square: the plain Newton step (LU with partial pivoting)
        try:
            return -np.linalg.solve(Js, F[..., None])[..., 0]
        except np.linalg.LinAlgError:
            pass  # an exactly singular item: fall back to the damped normal equations
    JT = Js.transpose(0, 2, 1)
    A = JT @ Js
    diag = np.einsum("nii->ni", A)
    A[:, np.arange(model.n_q), np.arange(model.n_q)] += 1e-13 * np.maximum(diag.max(1, keepdims=True), 1.0)
    g = JT @ F[..., None]
    try:
        return -np.linalg.solve(A, g)[..., 0]
    except np.linalg.LinAlgError:
        return -np.einsum("nij,nj->ni", np.linalg.pinv(A), g[..., 0])


def hold_free_directions(model: Model, b: Batch) -> None:
    """Find the directions the lean-0 travel equations leave free, and hold them.

    At lean 0 the springs are free, so a lean mode that only the springs hold
    (the beams of a sprung twin beam, a tilt rocker) has no equation. One SVD
    per candidate at the design position finds those directions; holding them
    (zero change along them, to first order) keeps the solve well posed and
    leaves a symmetric linkage exactly symmetric. Sets ``b.hold``.
    """
    N = len(b.cand)
    _, J = residual(model, b, model.design_q(N), np.zeros(N), np.zeros(N), "travel")
    Js = J[..., :model.n_q] * b.col_scale[:, None, :]
    _, sv, vt = np.linalg.svd(Js, full_matrices=Js.shape[1] < Js.shape[2])   # all n_q right vectors
    tol = 1e-9 * np.maximum(sv[:, :1], 1.0)
    n = model.n_q
    svp = np.zeros((N, n))
    svp[:, :sv.shape[1]] = sv
    free = svp <= tol                                  # (N, n_q) per right-singular vector
    k = int(free.sum(axis=1).max()) if N else 0
    hold = np.zeros((N, k, n))
    if k:
        order = np.argsort(~free, axis=1, kind="stable")[:, :k]     # free vectors first
        picked = np.take_along_axis(vt, order[..., None], axis=1)
        hold = np.where(np.take_along_axis(free, order, axis=1)[..., None], picked, 0.0)
    b.hold = hold


def newton(model: Model, b: Batch, q0: np.ndarray, lean: np.ndarray, target: np.ndarray, stage: str,
           settings: SolveSettings = SolveSettings(), minnorm: bool | None = None):
    """Solve a batch of states from the start guesses ``q0``.

    Returns
    -------
    q : ndarray of shape (N, n_q)
    status : ndarray of shape (N,), int8 (see STATUS_TEXT)
    resid : ndarray of shape (N,)
        Largest absolute equation residual, mm.
    iters : ndarray of shape (N,)
    J : ndarray of shape (N, m, n_q + 1)
        Jacobian at the returned q, with the lean column last (used for tangents).
    """
    minnorm = False if minnorm is None else minnorm
    if settings.engine == "compiled" and not minnorm:
        return solve_states(model, b, q0, lean, target, stage, settings)[:5]
    return _newton_numpy(model, b, q0, lean, target, stage, settings, minnorm)[:5]


def _newton_numpy(model: Model, b: Batch, q0, lean, target, stage: str, settings: SolveSettings, minnorm: bool):
    """The numpy path of :func:`newton`; also returns the Jacobian of each item's last step."""
    N = q0.shape[0]
    q = q0.copy()
    status = np.full(N, MAX_ITER, dtype=np.int8)
    resid = np.full(N, np.inf)
    iters = np.zeros(N, dtype=int)
    active = np.arange(N)
    rows = n_rows(model, stage, b.hold.shape[1] if stage == "travel" else 0)
    Jout = np.zeros((N, rows, model.n_q + 1))
    Jstep = np.zeros_like(Jout)
    prev = np.full(N, np.inf)
    chord_ok = np.zeros(N, bool)         # an earlier step's Jacobian may be reused (chord step)
    was_chord = np.zeros(N, bool)
    r_last = np.full(N, np.inf)
    angle_cols = model.coord_kind == ANGLE
    sub, qs, ls, ts = b, q, lean, target
    for it in range(settings.max_iter + 1):
        F, J = residual(model, sub, qs, ls, ts, stage)
        rmax = np.max(np.abs(F), axis=1)
        finite = np.isfinite(rmax)
        resid[active] = rmax
        Jout[active] = J
        q[active] = qs
        done = finite & (rmax <= settings.tol_mm)
        bad = ~finite
        # stalled: no longer decreasing although not converged
        stalled = finite & ~done & (it >= STALL_FROM_ITER) & (rmax > STALL_RATIO * prev[active])
        status[active[done]] = 0
        status[active[bad]] = NONFINITE
        status[active[stalled]] = STALLED
        keep = ~(done | bad | stalled)
        prev[active] = np.where(rmax < prev[active], rmax, prev[active]) if it >= BEST_FROM_ITER else rmax
        if it == settings.max_iter or not keep.any():
            status[active[keep]] = MAX_ITER
            break
        if not keep.all():
            active = active[keep]
            F, J, qs, rmax = F[keep], J[keep], qs[keep], rmax[keep]
            sub, ls, ts = b.take(active), lean[active], target[active]
        iters[active] += 1
        a = active
        chord_ok[a] &= ~(was_chord[a] & (rmax > CHORD_CUT * r_last[a]))
        use = chord_ok[a] & (rmax <= settings.chord_below_mm)
        if use.any():
            J = np.where(use[:, None, None], Jstep[a], J)
        Jstep[a] = J
        chord_ok[a], was_chord[a], r_last[a] = True, use, rmax
        dq = _ls_step(model, J[..., :model.n_q] * sub.col_scale[:, None, :], F, minnorm)
        dq *= sub.col_scale
        dq[~np.isfinite(dq)] = np.inf  # a singular step fails the item at the next check
        big = np.max(np.abs(np.where(angle_cols, dq, 0.0)), axis=1)
        f = np.minimum(1.0, settings.max_angle_step_rad / np.maximum(big, 1e-300))
        qs = qs + dq * f[:, None]
    return q, status, resid, iters, Jout, Jstep


class Solved(NamedTuple):
    """Result of :func:`solve_states` (the first five fields are those of :func:`newton`)."""

    q: np.ndarray            # (N, n_q)
    status: np.ndarray       # (N,) int8, see STATUS_TEXT
    resid: np.ndarray        # (N,) largest absolute equation residual, mm
    iters: np.ndarray        # (N,) Newton steps
    J: np.ndarray            # (N, m, n_q + 1) Jacobian, the lean column last
    tangent: np.ndarray      # (N, n_q) path tangent (dq/dphi lean stage, dq/ds travel stage)
    det_sign: np.ndarray     # (N,) sign of det(J_q) for a square system, else 0
    x: np.ndarray            # (N, n_needed, 2) positions of the equation points at q, mm


def solve_states(model: Model, b: Batch, q0: np.ndarray, lean: np.ndarray, target: np.ndarray, stage: str,
                 settings: SolveSettings = SolveSettings(), items: np.ndarray | None = None,
                 final_jacobian: bool = True):
    """:func:`newton`, plus the path tangent and the det(J) sign.

    Parameters
    ----------
    items : ndarray of shape (N,), optional
        The rows of ``b`` the N states belong to (default: all of them, in order).
    final_jacobian : bool
        True: J, tangent and det sign at the returned q. False: those of the
        Jacobian of each state's last Newton step (within one converged step of
        the returned q), which saves a Jacobian and a factorisation per state;
        the continuation uses them for its predictor and branch guard.

    Returns
    -------
    q, status, resid, iters, J : as :func:`newton` (J as ``final_jacobian`` says)
    path_tangent : ndarray of shape (N, n_q)
        The path tangent of that Jacobian (least squares of ``J_q t = -dF``): dq/dphi in the
        lean stage (dF = J_phi), dq/ds in the travel stage (dF = dF/ds, -1 on the travel rows).
    det_sign : ndarray of shape (N,)
        Sign of det(J_q) for a square system (0 when singular); 0 otherwise.
    x : ndarray of shape (N, n_needed, 2)
        Positions of the equation points at the returned q.

    The result is a :class:`Solved` named tuple.
    """
    if settings.engine == "compiled":
        from . import kernel  # noqa: PLC0415 (numba loads on first use)
        return kernel.solve(model, b, q0, lean, target, stage, settings, items, final_jacobian)
    if items is not None:
        b = b.take(items)
    q, st, res, it, J, Jstep = _newton_numpy(model, b, q0, lean, target, stage, settings, False)
    if not final_jacobian:
        J = np.where((it > 0)[:, None, None], Jstep, J)
    t = tangent(model, J, path_derivative(model, J, stage), b.col_scale)
    with np.errstate(invalid="ignore"):       # a non-finite item has sign NaN; its status says why
        sign = np.linalg.slogdet(J[..., :model.n_q])[0] if J.shape[1] == model.n_q else np.zeros(len(q))
    x = model.positions(q, lean, b.V, b.U, model._np)[0]
    return Solved(q, st, res, it, J, t, sign, x)


def path_derivative(model: Model, J: np.ndarray, stage: str) -> np.ndarray:
    """dF along the stage's path (N, m): the lean column of J, or dF/ds of the travel rows."""
    if stage == "lean":
        return J[..., model.n_q]
    dF = np.zeros(J.shape[:2])
    off = model.n_loop_rows + len(model.eq_link)
    dF[:, off:off + 2] = -1.0
    return dF


def tangent(model: Model, J: np.ndarray, dF: np.ndarray, col_scale: np.ndarray,
            minnorm: bool = False) -> np.ndarray:
    """Least-squares solution of ``J dq = -dF`` (batched), e.g. dq/d(lean) or dq/d(travel).

    Parameters
    ----------
    J : ndarray of shape (N, m, n_q)
    dF : ndarray of shape (N, m)
        Partial derivative of the residual with respect to the parameter.
    """
    return _ls_step(model, J[..., :model.n_q] * col_scale[:, None, :], dF, minnorm) * col_scale
