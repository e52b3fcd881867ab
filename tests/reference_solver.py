"""An independent scalar reference solver for the kinematics engine.

This module exists to check :mod:`tiltopt.kinematics.solver` and :mod:`tiltopt.kinematics.sweep`
from outside: it shares only the mechanism file reader with them and is
written from docs/domain.md alone, with a different formulation:

* absolute body coordinates: per body the global position of a reference
  point (the chassis: its datum, the design-position origin; any other body:
  the mean of its design points) and an angle ``theta`` measured from the
  design position in the lean sense, ``R(a) = [[cos a, sin a], [-sin a, cos a]]``
  on ``(y, z)``;
* one residual row per scalar equation, assembled joint by joint in plain
  Python: pins (2 rows), links (1), springs held at a length (1), sliders
  (point on the guide line and equal relative angle, 2), wheel on ground
  ``z_c - (R - r) cos(gamma) - r`` (1 per wheel), the lateral reference
  (mean contact y = 0), the chassis angle equal to the lean and, in the
  travel stage at lean 0, each wheel centre's height over the chassis datum
  changed by the travel ``s`` (2);
* one state at a time with :func:`scipy.optimize.least_squares`
  (Levenberg-Marquardt with an analytic Jacobian, tight tolerances),
  warm-started along the sweep procedure of docs/domain.md;
* two choices docs/domain.md leaves open, made here on their own grounds: at
  lean 0 a lean mode that only the springs hold is kept at its design value
  to first order (:func:`free_modes`), and a lean path that passes a fold
  (the linkage toggles) fails there (:func:`path_tangent`).

It is a plain Python loop per state (about 400-600 states/s on one core):
the tests compare it with the batched solver, and ``benchmarks/kinematics.py``
times it (:func:`reference_sweep`, i.e. :func:`reference_solve_state` per
state) as the scalar per-state baseline.

Units: mm and degrees at the public functions, mm and radians inside.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from tiltopt.kinematics.mechanism import Mechanism, split_ref

#: largest equation residual (mm) of a state reported as converged
REFERENCE_TOL_MM = 1e-8


@dataclass
class ReferenceMechanism:
    """A mechanism prepared for the scalar reference solve.

    Attributes
    ----------
    mech : Mechanism
    body_names : list of str
        Body order of the unknown vector; the chassis is body 0.
    origin : ndarray of shape (n_bodies, 2)
        Design-position reference point of each body, mm.
    char_length_mm : float
        Length that turns angle equations (rad) into mm-sized residuals.
    """

    mech: Mechanism
    body_names: list
    origin: np.ndarray
    char_length_mm: float

    @property
    def n_unknowns(self) -> int:
        return 3 * len(self.body_names)

    def design_x(self) -> np.ndarray:
        """Unknowns of the design position, shape (3 * n_bodies,)."""
        x = np.zeros(self.n_unknowns)
        x[0::3] = self.origin[:, 0]
        x[1::3] = self.origin[:, 1]
        return x


def prepare(mech: Mechanism) -> ReferenceMechanism:
    """Order the bodies (chassis first) and pick their reference points."""
    names = [mech.chassis] + [b for b in mech.bodies if b != mech.chassis]
    origin = []
    for b in names:
        if b == mech.chassis:
            origin.append((0.0, 0.0))  # docs/domain.md: the chassis datum O is the design origin
        else:
            pts = np.array(list(mech.bodies[b].values()), dtype=float)
            origin.append(tuple(pts.mean(axis=0)))
    all_pts = np.array([p for pts in mech.bodies.values() for p in pts.values()], dtype=float)
    char = float(max(100.0, np.max(np.abs(all_pts))))
    return ReferenceMechanism(mech, names, np.array(origin, dtype=float), char)


def _rot(a: float, d) -> tuple[float, float]:
    c, s = math.cos(a), math.sin(a)
    return c * d[0] + s * d[1], -s * d[0] + c * d[1]


def _drot(a: float, d) -> tuple[float, float]:
    c, s = math.cos(a), math.sin(a)
    return -s * d[0] + c * d[1], -c * d[0] - s * d[1]


class _Rows:
    """Residual rows and their dense Jacobian rows, appended one by one."""

    def __init__(self, n: int):
        self.n = n
        self.f: list[float] = []
        self.J: list[np.ndarray] = []

    def add(self, value: float, grad: np.ndarray):
        self.f.append(float(value))
        self.J.append(grad)


class _Evaluator:
    """Point positions and their derivatives for one unknown vector."""

    def __init__(self, ref: ReferenceMechanism, x: np.ndarray):
        self.ref = ref
        self.x = x
        self.bidx = {b: i for i, b in enumerate(ref.body_names)}

    def theta(self, body: str) -> tuple[float, np.ndarray]:
        i = self.bidx[body]
        g = np.zeros(self.ref.n_unknowns)
        g[3 * i + 2] = 1.0
        return self.x[3 * i + 2], g

    def point(self, ref_str: str, design_yz=None) -> tuple[np.ndarray, np.ndarray]:
        """Global (y, z) of a body point (or of a design-position location on that body).

        Returns the position, shape (2,), and its gradient, shape (2, n_unknowns).
        """
        body, pt = split_ref(ref_str)
        i = self.bidx[body]
        p = self.ref.mech.bodies[body][pt] if design_yz is None else design_yz
        d = (p[0] - self.ref.origin[i, 0], p[1] - self.ref.origin[i, 1])
        th = self.x[3 * i + 2]
        r = _rot(th, d)
        dr = _drot(th, d)
        pos = np.array([self.x[3 * i] + r[0], self.x[3 * i + 1] + r[1]])
        g = np.zeros((2, self.ref.n_unknowns))
        g[0, 3 * i] = 1.0
        g[1, 3 * i + 1] = 1.0
        g[0, 3 * i + 2] = dr[0]
        g[1, 3 * i + 2] = dr[1]
        return pos, g


def _distance(ev: _Evaluator, a: str, b: str):
    pa, ga = ev.point(a)
    pb, gb = ev.point(b)
    d = pa - pb
    L = math.hypot(d[0], d[1])
    return L, (d / L) @ (ga - gb)


def _wheel(ev: _Evaluator, w):
    """Hub, camber and contact of a wheel with their gradients."""
    hub, gh = ev.point(w.centre)
    th, gt = ev.theta(w.upright)
    gamma = math.radians(w.static_camber_deg) + th
    Rr = w.outer_radius_mm - w.crown_radius_mm
    cy = hub[0] - Rr * math.sin(gamma)            # docs/domain.md: contact (R - r) sin(gamma) toward -y
    gcy = gh[0] - Rr * math.cos(gamma) * gt
    return hub, gh, gamma, gt, cy, gcy


def residuals(ref: ReferenceMechanism, x: np.ndarray, lean_rad: float, *, travel_mm: float | None = None,
              spring_lengths_mm=None) -> tuple[np.ndarray, np.ndarray]:
    """All equations of one state.

    Parameters
    ----------
    ref : ReferenceMechanism
    x : ndarray of shape (3 * n_bodies,)
    lean_rad : float
    travel_mm : float, optional
        Travel stage (springs free, both wheels displaced by this travel).
    spring_lengths_mm : array-like of shape (n_springs,), optional
        Lean stage: springs held at these lengths (used when ``travel_mm`` is None).

    Returns
    -------
    f : ndarray of shape (n_equations,)
        Residuals in mm (angle equations multiplied by ``char_length_mm``).
    J : ndarray of shape (n_equations, 3 * n_bodies)
    """
    m = ref.mech
    ev = _Evaluator(ref, x)
    rows = _Rows(ref.n_unknowns)
    for p in m.pins:
        pa, ga = ev.point(p.a)
        pb, gb = ev.point(p.b)
        rows.add(pa[0] - pb[0], ga[0] - gb[0])
        rows.add(pa[1] - pb[1], ga[1] - gb[1])
    for l in m.links:
        L, g = _distance(ev, l.a, l.b)
        ya, za = m.point(l.a)
        yb, zb = m.point(l.b)
        rows.add(L - math.hypot(ya - yb, za - zb), g)
    if travel_mm is None:
        held = np.zeros(len(m.springs)) if spring_lengths_mm is None else np.asarray(spring_lengths_mm, float)
        for s, L0 in zip(m.springs, held):
            L, g = _distance(ev, s.a, s.b)
            rows.add(L - L0, g)
    for s in m.sliders:
        p0, g0 = ev.point(s.a_from)
        p1, g1 = ev.point(s.a_to)
        pb, gb = ev.point(s.b)
        y0, z0 = m.point(s.a_from)
        y1, z1 = m.point(s.a_to)
        length = math.hypot(y1 - y0, z1 - z0)     # rigid guide: its length is constant
        u = (p1 - p0) / length
        gu = (g1 - g0) / length
        e = pb - p0
        ge = gb - g0
        # signed distance of b from the guide line: e x u
        rows.add(e[0] * u[1] - e[1] * u[0], ge[0] * u[1] + e[0] * gu[1] - ge[1] * u[0] - e[1] * gu[0])
        ta, gta = ev.theta(split_ref(s.a_from)[0])
        tb, gtb = ev.theta(split_ref(s.b)[0])
        rows.add((tb - ta) * ref.char_length_mm, (gtb - gta) * ref.char_length_mm)
    wheels = {w.name: w for w in m.wheels}
    contact_y = []
    for name in ("left", "right"):
        w = wheels[name]
        hub, gh, gamma, gt, cy, gcy = _wheel(ev, w)
        Rr = w.outer_radius_mm - w.crown_radius_mm
        rows.add(hub[1] - Rr * math.cos(gamma) - w.crown_radius_mm, gh[1] + Rr * math.sin(gamma) * gt)
        contact_y.append((cy, gcy))
    rows.add(0.5 * (contact_y[0][0] + contact_y[1][0]), 0.5 * (contact_y[0][1] + contact_y[1][1]))
    th, gt = ev.theta(m.chassis)
    rows.add((th - lean_rad) * ref.char_length_mm, gt * ref.char_length_mm)
    if travel_mm is not None:
        O, gO = ev.point(m.chassis + ".__datum__", design_yz=(0.0, 0.0))
        for name in ("left", "right"):
            w = wheels[name]
            hub, gh = ev.point(w.centre)
            z_design = m.point(w.centre)[1]
            rows.add((hub[1] - O[1]) - z_design - travel_mm, gh[1] - gO[1])
    return np.array(rows.f), np.array(rows.J)


@dataclass
class StateSolution:
    """One solved state.

    x : ndarray of shape (3 * n_bodies,)
    converged : bool
    residual_mm : largest |equation residual|, mm
    nfev : residual evaluations used
    """

    x: np.ndarray
    converged: bool
    residual_mm: float
    nfev: int
    message: str


def reference_solve_state(ref: ReferenceMechanism, x0: np.ndarray, lean_deg: float, *,
                          travel_mm: float | None = None, spring_lengths_mm=None,
                          hold_modes: tuple | None = None, tol_mm: float = REFERENCE_TOL_MM) -> StateSolution:
    """Solve one state from a starting guess with scipy's least_squares.

    Parameters
    ----------
    ref : ReferenceMechanism
        From :func:`prepare`.
    x0 : ndarray of shape (3 * n_bodies,)
        Starting guess (the design position, or a neighbouring state).
    lean_deg : float
    travel_mm : float, optional
        Give it for the travel stage (springs free); leave None for the lean stage.
    spring_lengths_mm : array-like of shape (n_springs,), optional
        Held spring lengths of the lean stage.
    hold_modes : (ndarray of shape (k, 3 * n_bodies), ndarray of shape (3 * n_bodies,)), optional
        ``(N, x_ref)``: extra equations ``N (x - x_ref) = 0`` that hold free
        modes (see :func:`free_modes`) at their reference values.

    Returns
    -------
    StateSolution
    """
    lean = math.radians(lean_deg)
    cache: dict = {}

    def both(x):
        key = x.tobytes()
        if key not in cache:
            cache.clear()
            f, J = residuals(ref, x, lean, travel_mm=travel_mm, spring_lengths_mm=spring_lengths_mm)
            if hold_modes is not None:
                N, x_ref = hold_modes
                f = np.concatenate([f, N @ (x - x_ref)])
                J = np.vstack([J, N])
            cache[key] = (f, J)
        return cache[key]

    f0, _ = both(np.asarray(x0, float))
    method = "lm" if len(f0) >= len(x0) else "trf"
    sol = least_squares(lambda x: both(x)[0], np.asarray(x0, float), jac=lambda x: both(x)[1], method=method,
                        xtol=1e-15, ftol=1e-15, gtol=1e-15, max_nfev=400)
    f, _ = both(sol.x)
    res = float(np.max(np.abs(f))) if len(f) else 0.0
    ok = bool(np.isfinite(res) and res <= tol_mm)
    msg = "converged" if ok else f"not converged: residual {res:.3g} mm ({sol.message})"
    return StateSolution(sol.x, ok, res, int(sol.nfev), msg)


def free_modes(ref: ReferenceMechanism, x: np.ndarray, rel_tol: float = 1e-9) -> np.ndarray | None:
    """Directions the travel-stage equations leave free at ``x``.

    At lean 0 the springs are free, so a lean mode that only the springs hold
    (beams of a sprung twin beam, a tilt rocker) has no equation there.
    docs/domain.md leaves that mode open; this solver holds it at its value in the
    design position to first order: the returned rows span the null space of
    the travel-stage Jacobian at ``x`` (orthonormal, shape (k, 3 * n_bodies)),
    or None when there is none. On a mirror-symmetric mechanism that picks the
    symmetric solution.
    """
    _, J = residuals(ref, x, 0.0, travel_mm=0.0)
    col = np.ones(ref.n_unknowns)
    col[2::3] = ref.char_length_mm          # angles in mm-sized units
    _, sv, Vt = np.linalg.svd(J * col, full_matrices=True)
    rank = int(np.sum(sv > rel_tol * sv[0]))
    if rank >= ref.n_unknowns:
        return None
    N = Vt[rank:] * col                     # back to unscaled unknowns
    return N / np.linalg.norm(N, axis=1, keepdims=True)


def path_tangent(ref: ReferenceMechanism, x: np.ndarray, lean_rad: float, spring_lengths_mm) -> np.ndarray | None:
    """Unit tangent of the lean path at a solved state, in (x, lean) space.

    The lean-stage equations F(x, phi) = 0 of a one-freedom linkage define a
    curve; its tangent is the null vector of the augmented Jacobian
    [dF/dx, dF/dphi] (Keller's pseudo-arclength continuation). Its last
    component, dphi, changes sign where the curve turns back in lean: a fold,
    where the linkage toggles and cannot lean further on this branch.

    Returns
    -------
    ndarray of shape (3 * n_bodies + 1,) or None
        Scaled coordinates (angles times ``char_length_mm``); None when the
        path is not a simple curve here (no or several free directions).
    """
    _, J = residuals(ref, x, lean_rad, spring_lengths_mm=spring_lengths_mm)
    dphi = np.zeros((J.shape[0], 1))
    dphi[-1, 0] = -ref.char_length_mm          # the last row is the lean equation
    col = np.ones(ref.n_unknowns + 1)
    col[2::3] = ref.char_length_mm
    col[-1] = ref.char_length_mm
    A = np.hstack([J, dphi]) * col
    _, sv, Vt = np.linalg.svd(A, full_matrices=True)
    sv = np.concatenate([sv, np.zeros(A.shape[1] - len(sv))])
    if not (sv[-1] <= 1e-9 * sv[0] < sv[-2]):
        return None
    return Vt[-1]


# --------------------------------------------------------------------- metrics
def _state_geometry(ref: ReferenceMechanism, x: np.ndarray) -> dict:
    m = ref.mech
    ev = _Evaluator(ref, x)
    out = {"contact": {}, "gamma": {}}
    for w in m.wheels:
        hub, _, gamma, _, cy, _ = _wheel(ev, w)
        Rr = w.outer_radius_mm - w.crown_radius_mm
        out["contact"][w.name] = (cy, hub[1] - Rr * math.cos(gamma) - w.crown_radius_mm)
        out["gamma"][w.name] = gamma
    out["O"] = (x[0], x[1])
    out["springs"] = {s.name: _distance(ev, s.a, s.b)[0] for s in m.springs}
    out["body_angles"] = {b: x[3 * i + 2] for i, b in enumerate(ref.body_names)}
    return out


def _lean_nodes(leans: list[float], max_step: float) -> list[float]:
    nodes = [0.0]
    for v in leans:
        n = max(1, math.ceil(abs(v - nodes[-1]) / max_step - 1e-9))
        start = nodes[-1]
        nodes += [start + (v - start) * k / n for k in range(1, n)] + [v]
    return nodes


def lean_start(ref: ReferenceMechanism, travel_mm: float, max_travel_step_mm: float = 5.0):
    """The start of a lean path: travel ``travel_mm`` reached at lean 0, its spring lengths held.

    The travel is reached by continuation from the design position (free modes held, see
    :func:`free_modes`).

    Returns
    -------
    travel_solution : StateSolution
        The last travel-stage state (not converged: the travel is not reached).
    base : StateSolution or None
        The same state solved with the springs held (the lean-0 state of the path).
    held : ndarray of shape (n_springs,) or None
        The held spring lengths, mm.
    """
    x = ref.design_x()
    modes = free_modes(ref, x)
    hold = None if modes is None else (modes, x.copy())
    n = max(1, math.ceil(abs(travel_mm) / max_travel_step_mm - 1e-9))
    t_sol = None
    for k in range(1, n + 1):
        t_sol = reference_solve_state(ref, x, 0.0, travel_mm=travel_mm * k / n, hold_modes=hold)
        if not t_sol.converged:
            return t_sol, None, None
        x = t_sol.x
    held = np.array(list(_state_geometry(ref, t_sol.x)["springs"].values()))
    return t_sol, reference_solve_state(ref, t_sol.x, 0.0, spring_lengths_mm=held), held


def reference_sweep(mech: Mechanism, lean_deg, travel_mm, *, max_lean_step_deg: float = 1.0,
                    max_travel_step_mm: float = 5.0, with_body_angles: bool = False) -> list[dict]:
    """The sweep of docs/domain.md, one state at a time.

    Each travel is reached at lean 0 by continuation from the design position,
    the spring lengths there are held, and the mechanism is leaned from 0 to
    each requested lean (positive and negative leans on their own paths),
    each step warm-started from a secant prediction of the two previous ones.
    Once a path fails, its later states are reported as not converged. A
    path that passes a fold of the lean (the tangent of the solution curve
    turns back in lean, see :func:`path_tangent`) fails there: the state the
    solver found lies on another assembly branch.

    Parameters
    ----------
    mech : Mechanism
    lean_deg : array-like of shape (n_lean,)
    travel_mm : array-like of shape (n_travel,)
    with_body_angles : bool
        Add ``body_angles_deg`` ({body: angle from the design position}) to each record.

    Returns
    -------
    list of dict
        One record per (travel, lean), travel-major, with the keys of
        ``SweepResult.records()``; metrics are None where not converged.
    """
    ref = prepare(mech)
    leans = [float(v) for v in np.atleast_1d(np.asarray(lean_deg, float))]
    travels = [float(v) for v in np.atleast_1d(np.asarray(travel_mm, float))]
    r_mean = 0.5 * sum(w.crown_radius_mm for w in mech.wheels)
    out = []
    for s in travels:
        t_sol, base, held = lean_start(ref, s, max_travel_step_mm)
        solved: dict[float, StateSolution] = {}
        if t_sol.converged:
            solved[0.0] = base
            if base.converged:
                for branch in (sorted(v for v in set(leans) if v > 0),
                               sorted((v for v in set(leans) if v < 0), reverse=True)):
                    nodes = _lean_nodes(branch, max_lean_step_deg)
                    xs = [base.x]
                    alive = True
                    direction = 1.0 if branch and branch[0] > 0 else -1.0
                    t_prev = path_tangent(ref, base.x, 0.0, held)
                    if t_prev is not None and t_prev[-1] * direction < 0:
                        t_prev = -t_prev
                    for k in range(1, len(nodes)):
                        if alive:
                            guess = xs[-1]
                            if k >= 2:
                                ratio = (nodes[k] - nodes[k - 1]) / (nodes[k - 1] - nodes[k - 2])
                                guess = xs[-1] + (xs[-1] - xs[-2]) * ratio
                            sol = reference_solve_state(ref, guess, nodes[k], spring_lengths_mm=held)
                            if sol.converged:
                                t = path_tangent(ref, sol.x, math.radians(nodes[k]), held)
                                if t is not None and t_prev is not None:
                                    t = t if t @ t_prev >= 0 else -t
                                    if t[-1] * direction <= 0:
                                        sol = StateSolution(sol.x, False, sol.residual_mm, sol.nfev,
                                                            "not reached: the lean path passed a fold (the "
                                                            "linkage toggles before this lean)")
                                t_prev = t if t is not None else t_prev
                            alive = sol.converged
                            xs.append(sol.x)
                        else:
                            why = "passed a fold" if "fold" in sol.message else "failed"
                            sol = StateSolution(xs[-1], False, math.nan, 0, f"not attempted: the lean path {why} "
                                                "at a smaller lean")
                        if nodes[k] in branch:
                            solved.setdefault(nodes[k], sol)
        zero = solved.get(0.0)
        g0 = _state_geometry(ref, zero.x) if zero is not None and zero.converged else None
        for phi_deg in leans:
            sol = solved.get(phi_deg)
            ok = bool(sol is not None and sol.converged and g0 is not None)
            rec = {"lean_deg": phi_deg, "travel_mm": s, "converged": ok,
                   "status": sol.message if sol is not None else
                   ("not converged at lean 0: " + (t_sol.message if t_sol else "")),
                   "residual_mm": sol.residual_mm if sol is not None else None}
            keys = ["track_mm", "track_change_mm", "scrub_mm", "heave_mm", "camber_left_deg", "camber_right_deg",
                    "camber_error_left_deg", "camber_error_right_deg", "lean_point_offset_mm",
                    "contact_left_mm", "contact_right_mm"]
            rec.update({k: None for k in keys})
            rec["spring_lengths_mm"] = {sp.name: None for sp in mech.springs}
            if ok:
                g = _state_geometry(ref, sol.x)
                phi = math.radians(phi_deg)
                cl, cr = g["contact"]["left"], g["contact"]["right"]
                track = cr[0] - cl[0]
                track0 = g0["contact"]["right"][0] - g0["contact"]["left"][0]
                dgl = g["gamma"]["left"] - g0["gamma"]["left"]
                dgr = g["gamma"]["right"] - g0["gamma"]["right"]
                yO, zO = g["O"]
                mid = 0.5 * (cl[0] + cr[0])
                rec.update({
                    "track_mm": track,
                    "track_change_mm": track - track0,
                    "scrub_mm": (track - track0) - r_mean * (dgr - dgl),
                    "heave_mm": zO - g0["O"][1] - r_mean * (1.0 - math.cos(phi)),
                    "camber_left_deg": math.degrees(g["gamma"]["left"]),
                    "camber_right_deg": math.degrees(g["gamma"]["right"]),
                    "camber_error_left_deg": math.degrees(g["gamma"]["left"] - phi),
                    "camber_error_right_deg": math.degrees(g["gamma"]["right"] - phi),
                    # the chassis centre line through O along (sin phi, cos phi) meets z = 0 here
                    "lean_point_offset_mm": (yO - zO * math.tan(phi)) - mid,
                    "contact_left_mm": [cl[0], cl[1]],
                    "contact_right_mm": [cr[0], cr[1]],
                    "spring_lengths_mm": dict(g["springs"]),
                })
                if with_body_angles:
                    rec["body_angles_deg"] = {b: math.degrees(a) for b, a in g["body_angles"].items()}
            elif with_body_angles:
                rec["body_angles_deg"] = None
            out.append(rec)
    return out
