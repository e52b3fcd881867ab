"""The steering linkage, solved in 3-D on top of every planar pose (docs/domain.md, "Steering").

The tilting linkage moves every body in y and z only (:mod:`tiltopt.kinematics.sweep`). On each
solved pose this module places, in 3-D, each steered wheel's steering axis (turning with its
upright), its steering arm point, the rod's other end and the drive that moves it, and solves the
steer angle ``delta`` of the wheel about its axis that keeps the rod at its design length, for
every state ``(lean, travel, input)`` and every candidate at once.

Closed form. The arm point turns on a circle about the axis: ``S(delta) = c + r cos(delta) +
b sin(delta)`` (``c`` the circle's centre on the axis, ``r`` its radius vector at zero steer,
``b = e x r``). With ``m = c - I`` (``I`` the rod's end, moved by the input) the rod equation
``|S - I|^2 = l^2`` is

    P cos(delta) + Q sin(delta) = K,   P = 2 m.r,  Q = 2 m.b,  K = l^2 - |m|^2 - |r|^2,

so ``delta = atan2(Q, P) + sigma atan2(sqrt(P^2 + Q^2 - K^2), K)``. The branch ``sigma`` is the
one of the design position (``delta = 0`` there: ``sigma = -sign(Q)`` of the design). Where
``K^2 > P^2 + Q^2`` the rod cannot reach: the linkage is past its toggle (the rod and the arm in
line). Both drives give ``P``, ``Q`` and ``K`` as a few state coefficients times functions of the
input alone (a slide: ``t`` and ``t^2``, a lever: ``cos`` and ``sin`` of its turn), so the hot
path is a handful of array operations over (candidates, travels, leans, inputs, wheels), with no
loop over states or candidates.

Honesty. A state is reached only when its planar pose converged, the rod reaches at its input
and at every input between zero and it (at that lean and travel), and, at zero input, at every
lean between 0 and it and every travel between 0 and it: a toggle on the way stops the path, as
it stops the real linkage. An input outside the lock (``input_range_deg``) is never solved.
Unreached states are NaN with a status (:data:`STATUS_TEXT`).

Derivative. ``d delta / d u = (S - I).dI/du / ((S - I).(b cos(delta) - r sin(delta)))`` (implicit
differentiation of the rod equation), which gives the steering ratio.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from .mechanism import axis_parts, axis_refs, split_ref
from .model import Geometry, Model

REACHED, TOGGLE, LOCK, NOT_SOLVED = 0, 1, 2, 3
STATUS_TEXT = {
    REACHED: "reached",
    TOGGLE: "not reached: the rod cannot reach (the steering is past its toggle)",
    LOCK: "not reached: the input is beyond the lock (input_range_deg)",
    NOT_SOLVED: "not reached: the linkage state itself was not reached",
}
#: steering inputs per state of an envelope: the lock (scaled by the steer envelope's taper with lean)
#: sampled at this many evenly spaced inputs, zero among them
ENVELOPE_INPUTS = 9
SLIDE, LEVER = 0, 1
_DEG = math.pi / 180.0


class SteeringModel:
    """Index tables of a model's steering (built once per topology; see module docs).

    Attributes
    ----------
    steered : ndarray of shape (2,) of bool
        Which wheel ([left, right]) the linkage steers.
    """

    def __init__(self, model: Model):
        mech = model.mech
        st = mech.steering
        pidx = model.point_index
        self.model = model
        self.has_linkage = st is not None
        self.axis_a = np.array([pidx[axis_refs(mech, w)[0]] for w in mech.wheels])
        self.axis_b = np.array([pidx[axis_refs(mech, w)[1] or w.centre] for w in mech.wheels])
        parts = np.array([axis_parts(mech, w) for w in mech.wheels])
        self.tx, self.ty, self.two = parts[:, 0], parts[:, 1], parts[:, 2] > 0.5
        self.upright = np.array(model.wheel_upright)
        self.centre = np.array(model.wheel_centre)
        self.inboard = np.array([1.0 if w.name == "left" else -1.0 for w in mech.wheels])
        self.steered = np.zeros(2, bool)
        self.arm = np.zeros(2, int)
        self.end = np.zeros(2, int)
        self.kind = np.zeros(2, int)
        self.gain = np.zeros(2)
        self.drive_a = np.zeros(2, int)
        self.drive_b = np.zeros(2, int)
        self.input_range = (0.0, 0.0)
        self.drive_body = []
        if st is None:
            return
        self.arm, self.end = self.centre.copy(), self.axis_a.copy()      # unsteered wheels: placeholders
        self.drive_a, self.drive_b = self.axis_a.copy(), self.axis_b.copy()
        self.input_range = tuple(float(v) for v in st.input_range_deg)
        for k, w in enumerate(mech.wheels):
            rod = st.rod_of(w.name)
            if rod is None:
                continue
            d = st.drive_of(rod.end)
            self.steered[k] = True
            self.arm[k], self.end[k] = pidx[rod.arm], pidx[rod.end]
            self.kind[k] = LEVER if d.kind == "lever" else SLIDE
            self.gain[k] = d.gain * (_DEG if d.kind == "lever" else 1.0)   # rad or mm per input degree
            self.drive_a[k], self.drive_b[k] = pidx[d.axis[0]], pidx[d.axis[1]]
        self.drive_body = [split_ref(model.point_refs[i])[0] for i in self.drive_a]

    @property
    def point_class(self) -> np.ndarray:
        """How the kernel places each of ``point_idx`` (6, 2): 0 a chassis point, 1 a point of that
        wheel's upright, 2 any other (from the model's chain)."""
        body = self.model.point_body[self.point_idx]
        return np.where(body == self.model.chassis, 0, np.where(body == self.upright[None, :], 1, 2)).astype(np.int64)

    @property
    def kind_i64(self) -> np.ndarray:
        return self.kind.astype(np.int64)

    @property
    def point_idx(self) -> np.ndarray:
        """The six points of each wheel (axis point, arm, rod end, drive axis a and b, centre), (6, 2)."""
        return np.stack([self.axis_a, self.arm, self.end, self.drive_a, self.drive_b, self.centre])

    def table(self) -> tuple[np.ndarray, np.ndarray]:
        """The model's compiled point table of these points (tag ``_steer``) and each point's row in it."""
        model = self.model
        if not hasattr(model, "_steer"):
            uniq, inv = np.unique(self.point_idx.ravel(), return_inverse=True)
            model._compile_points(uniq, "_steer")
            model._steer_rows = inv.reshape(6, 2)
        return model._steer, model._steer_rows


def steering_model(model: Model) -> SteeringModel:
    """The model's :class:`SteeringModel`, built on first use and kept on the model."""
    sm = model.__dict__.get("_steering_model")
    if sm is None:
        sm = model.__dict__["_steering_model"] = SteeringModel(model)
    return sm


# ----------------------------------------------------------------- geometry
def _rot_yz(v, beta):
    """R(beta) of docs/domain.md applied to the (y, z) part of vectors v (..., 3); x unchanged."""
    cb, sb = np.cos(beta), np.sin(beta)
    vx, vy, vz = np.broadcast_arrays(v[..., 0], v[..., 1], v[..., 2], cb)[:3]
    return np.stack([vx, cb * vy + sb * vz, -sb * vy + cb * vz], -1)


def _dot(a, b):
    return np.einsum("...k,...k->...", a, b)


def _unit(v):
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def design_axis_dirs(sm: SteeringModel, geom: Geometry) -> np.ndarray:
    """Upward unit steering axis direction of each wheel in the design position, (C, 2, 3).

    Two points: ``(dx / dz + tx, dy / dz, 1)`` normalised (their difference, caster_deg's tilt on
    top); one point: ``(tx, ty, 1)`` normalised (:func:`tiltopt.kinematics.mechanism.axis_parts`).
    """
    d = np.concatenate([(geom.x[:, sm.axis_b] - geom.x[:, sm.axis_a])[..., None],
                        geom.points[:, sm.axis_b] - geom.points[:, sm.axis_a]], -1)        # (C, 2, 3)
    with np.errstate(divide="ignore", invalid="ignore"):
        two = np.stack([d[..., 0] / d[..., 2] + sm.tx, d[..., 1] / d[..., 2], np.ones(d.shape[:2])], -1)
    one = np.broadcast_to(np.stack([sm.tx, sm.ty, np.ones(2)], -1), two.shape)
    return _unit(np.where(sm.two[:, None], two, one))


@dataclass
class Frames:
    """Everything the steer solve and the steering metrics need of each (state, wheel), (..., 2[, 3]).

    ``A`` a point of the steering axis and ``e`` its upward unit direction; ``S0`` the steering
    arm point and ``I0`` the rod's end at zero input; ``P`` and ``a`` the drive's axis point and
    unit direction; ``C`` the wheel centre, ``gamma`` the camber; world coordinates (x, y, z), mm.
    """

    A: np.ndarray
    e: np.ndarray
    S0: np.ndarray
    I0: np.ndarray
    P: np.ndarray
    a: np.ndarray
    C: np.ndarray
    gamma: np.ndarray
    lean: np.ndarray


def frames(sm: SteeringModel, geom: Geometry, sweep_result=None) -> Frames:
    """The :class:`Frames` of every state of a sweep, (C, T, L, 2, ...), or of the design position,
    (C, 1, 1, 2, ...), without one."""
    C = geom.n_candidates
    idx = np.concatenate([sm.axis_a, sm.arm, sm.end, sm.drive_a, sm.drive_b, sm.centre])
    x = geom.x[:, idx]                                                   # (C, 12)
    if sweep_result is None:
        yz = geom.points[:, idx][:, None, None]                          # (C, 1, 1, 12, 2)
        beta = np.zeros((C, 1, 1, 2))
        gamma = np.broadcast_to(geom.static_camber[:, None, None], (C, 1, 1, 2))
        lean = np.zeros((1, 1, 1))
    else:
        sr = sweep_result
        yz = sr.points[:, :, :, idx]                                     # (C, T, L, 12, 2)
        beta = sr.body_angle[..., sm.upright]
        gamma = sr.camber
        lean = np.radians(np.asarray(sr.lean_deg, float))[None, None, :]
    shape = yz.shape[:3]
    X = np.concatenate([np.broadcast_to(x[:, None, None, :, None], shape + (len(idx), 1)), yz], -1)
    A, S0, I0, Pa, Pb, Cw = (X[..., 2 * k:2 * k + 2, :] for k in range(6))
    e = _rot_yz(design_axis_dirs(sm, geom)[:, None, None], beta)
    return Frames(A=A, e=e, S0=S0, I0=I0, P=Pa, a=_unit(Pb - Pa), C=Cw, gamma=np.asarray(gamma), lean=lean)


# ----------------------------------------------------------------- the solve
@dataclass
class Coefficients:
    """P, Q and K of the rod equation as state coefficients times input functions (module docs).

    ``P = p0 + p1 f1 + p2 f2`` and the same for ``Q``; ``K = k0 + k1 f1 + k2 f2 + k3 f3`` with
    (f1, f2, f3) = (t, 0, t^2) for a slide (t mm) and (cos th, sin th, 0) for a lever (th rad).
    Shapes (..., 2) for each wheel; ``r``, ``b``, ``c`` the arm circle (..., 2, 3).
    """

    p: tuple
    q: tuple
    k: tuple
    r: np.ndarray
    b: np.ndarray
    c: np.ndarray


def coefficients(sm: SteeringModel, fr: Frames, length: np.ndarray) -> Coefficients:
    """Coefficients of every (state, wheel); ``length`` the rods' lengths, (C, 2) (module docs)."""
    e = fr.e
    v = fr.S0 - fr.A
    c = fr.A + e * _dot(e, v)[..., None]
    r = fr.S0 - c
    b = np.cross(e, r)
    rho2 = _dot(r, r)
    L2 = (length ** 2)[:, None, None, :]
    lever = (sm.kind == LEVER)
    # slide: m = m0 - t a
    m0 = c - fr.I0
    # lever: m = g - qp cos th - kq sin th
    qv = fr.I0 - fr.P
    qpar = fr.a * _dot(fr.a, qv)[..., None]
    qp = qv - qpar
    kq = np.cross(fr.a, qv)
    g = c - fr.P - qpar
    mr, mb = np.where(lever, _dot(g, r), _dot(m0, r)), np.where(lever, _dot(g, b), _dot(m0, b))
    p1 = np.where(lever, -_dot(qp, r), -_dot(fr.a, r))
    q1 = np.where(lever, -_dot(qp, b), -_dot(fr.a, b))
    p2 = np.where(lever, -_dot(kq, r), 0.0)
    q2 = np.where(lever, -_dot(kq, b), 0.0)
    # |m|^2: slide |m0|^2 - 2 t m0.a + t^2; lever |g|^2 + |qp|^2 - 2 g.qp cos - 2 g.kq sin
    mm = np.where(lever, _dot(g, g) + _dot(qp, qp), _dot(m0, m0))
    n1 = np.where(lever, -2.0 * _dot(g, qp), -2.0 * _dot(m0, fr.a))
    n2 = np.where(lever, -2.0 * _dot(g, kq), 0.0)
    n3 = np.where(lever, 0.0, 1.0)
    k0 = L2 - mm - rho2
    return Coefficients(p=(2 * mr, 2 * p1, 2 * p2), q=(2 * mb, 2 * q1, 2 * q2), k=(k0, -n1, -n2, -n3 + 0 * k0),
                        r=r, b=b, c=c)


def input_functions(sm: SteeringModel, u_deg: np.ndarray):
    """(f1, f2, f3) of inputs u (deg), shape u.shape + (2,) each (module docs)."""
    t = u_deg[..., None] * sm.gain
    lever = sm.kind == LEVER
    return (np.where(lever, np.cos(t), t), np.where(lever, np.sin(t), 0.0), np.where(lever, 0.0, t * t))


def branch(sm: SteeringModel, geom: Geometry) -> np.ndarray:
    """The assembly branch sigma of each candidate's rods (C, 2): -sign(Q) at the design position,
    0 where the design position is a toggle (or the wheel does not steer).

    At zero input either drive has ``Q = 2 (c - I0).b`` (module docs), so the branch needs only the
    arm circle and the rod's end in the design position.
    """
    def p3(i):
        return np.concatenate([geom.x[:, i, None], geom.points[:, i]], -1)

    A, S0, I0 = p3(sm.axis_a), p3(sm.arm), p3(sm.end)
    e = design_axis_dirs(sm, geom)
    c = A + e * _dot(e, S0 - A)[..., None]
    q0 = _dot(c - I0, np.cross(e, S0 - c))
    return np.where(sm.steered[None], -np.sign(q0), 0.0)


def rod_lengths(sm: SteeringModel, geom: Geometry) -> np.ndarray:
    """Each rod's length, (C, 2): the design-position distance of its two ends (3-D)."""
    dx = geom.x[:, sm.arm] - geom.x[:, sm.end]
    dyz = geom.points[:, sm.arm] - geom.points[:, sm.end]
    return np.sqrt(dx * dx + np.sum(dyz * dyz, -1))


def solve(co: Coefficients, f, sigma) -> tuple[np.ndarray, np.ndarray]:
    """Steer angles (rad) and reach of the rod equation; ``co`` (..., 2), ``f`` broadcast to it.

    Returns ``delta`` (NaN where the rod cannot reach) and ``ok``.
    """
    f1, f2, f3 = f
    P = co.p[0] + co.p[1] * f1 + co.p[2] * f2
    Q = co.q[0] + co.q[1] * f1 + co.q[2] * f2
    K = co.k[0] + co.k[1] * f1 + co.k[2] * f2 + co.k[3] * f3
    disc = P * P + Q * Q - K * K
    ok = disc >= 0.0
    with np.errstate(invalid="ignore"):
        rt = sigma * np.sqrt(np.where(ok, disc, np.nan))
    # atan2(Q, P) + sigma atan2(sqrt(disc), K) as one angle in (-pi, pi]
    return np.arctan2(Q * K + P * rt, P * K - Q * rt), ok


def _reach_outward(ok: np.ndarray, values: np.ndarray, axis: int) -> np.ndarray:
    """ok along ``axis`` only where every entry between the one nearest zero and it is ok."""
    values = np.asarray(values)
    if len(values) and abs(values[0]) == np.min(np.abs(values)) and np.all(np.diff(values) > 0):
        return np.logical_and.accumulate(ok, axis=axis)       # from the first, ascending (the usual case)
    order = np.argsort(values, kind="stable")
    z = int(np.argmin(np.abs(values[order])))
    o = np.take(ok, order, axis=axis)
    hi = np.logical_and.accumulate(np.take(o, np.arange(z, len(order)), axis=axis), axis=axis)
    lo = np.flip(np.logical_and.accumulate(np.flip(np.take(o, np.arange(0, z + 1), axis=axis), axis), axis=axis),
                 axis)
    both = np.concatenate([np.take(lo, np.arange(0, z), axis=axis), hi], axis=axis)
    out = np.empty_like(both)
    idx = [slice(None)] * ok.ndim
    idx[axis] = order
    out[tuple(idx)] = both
    return out


def envelope_inputs(mech, lean_deg, n: int = ENVELOPE_INPUTS) -> np.ndarray:
    """The inputs (deg) of each lean of an envelope, (L, n): the lock sampled evenly (zero in the
    middle), scaled by the steer envelope's taper ``max_steer(|lean|) / max_steer(0)``
    (``Mechanism.steer_rows``; no rows: zero only)."""
    lo, hi = mech.steering.input_range_deg
    fr = np.linspace(-1.0, 1.0, n)
    u = np.where(fr < 0, -fr * lo, fr * hi)
    rows = mech.steer_rows
    lean = np.abs(np.asarray(lean_deg, float))
    if not rows or rows[0][1] <= 0.0:
        taper = np.zeros_like(lean)
    else:
        rows = np.array(rows, float)
        taper = np.interp(lean, rows[:, 0], rows[:, 1]) / np.interp(0.0, rows[:, 0], rows[:, 1])
    return taper[:, None] * u[None, :]


@dataclass
class SteerResult:
    """The steering over a sweep's envelope; arrays (C, T, L[, U], 2), [left, right] last.

    Attributes
    ----------
    input_deg : ndarray of shape (L, U)
        The inputs solved at each lean (:func:`envelope_inputs`); column ``u0`` is zero.
    steer : ndarray of shape (C, T, L, U, 2)
        Steer angle of each wheel about its axis, rad (front toward +y positive); NaN where not reached.
    status : ndarray of shape (C, T, L, U, 2) of int8
        :data:`STATUS_TEXT` codes.
    toe, lean_steer : (C, T, L, 2), rad: the steer at zero input, and its change against lean 0.
    bump_steer : (C, T, 2), rad: the steer at zero input and lean 0 against the design position.
    lo, hi : (C, T, L, 2), rad: each wheel's steer range over the state's inputs (the steer
        envelope of the clearance check); NaN where the state is not reached at zero input.
    caster, kpi : (C, T, L, 2), rad: the axis in the chassis frame (top rearward, top inboard positive).
    trail, scrub_radius : (C, T, L, 2), mm: where the axis meets the ground against the contact point.
    reached : (C,) bool: every state and input of the envelope reached.
    """

    input_deg: np.ndarray
    u0: int
    steer: np.ndarray
    status: np.ndarray
    toe: np.ndarray
    lean_steer: np.ndarray
    bump_steer: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    caster: np.ndarray
    kpi: np.ndarray
    trail: np.ndarray
    scrub_radius: np.ndarray
    reached: np.ndarray
    steered: np.ndarray

    def first_failure(self, c: int) -> tuple[int, int, int, int, int] | None:
        """(travel, lean, input, wheel, status) of candidate c's first unreached state, or None."""
        bad = np.argwhere(self.status[c] != REACHED)
        if not len(bad):
            return None
        t, l, u, w = (int(v) for v in bad[0])
        return t, l, u, w, int(self.status[c, t, l, u, w])


ENGINES = ("compiled", "numpy")


def steer_envelope(model: Model, geom: Geometry, sweep_result, n_inputs: int = ENVELOPE_INPUTS,
                   engine: str = "compiled", every_input: bool = True) -> SteerResult:
    """Solve the steering over every lean x travel x input state of a sweep (see module docs).

    The mechanism must have a steering linkage (``Mechanism.steering``). ``engine``: the compiled
    per-item kernel (:mod:`tiltopt.kinematics.steering_kernel`, default) or the numpy reference;
    both give the same figures (``tests/test_steering.py``). ``every_input`` false (the
    optimiser's case, compiled only): ``steer`` holds the zero input's column only (the rest NaN);
    the reach, the ranges and every metric are the same.
    """
    if engine not in ENGINES:
        raise ValueError(f"engine must be one of {ENGINES}; got {engine!r}")
    sm = steering_model(model)
    mech = model.mech
    sr = sweep_result
    C, T, L = sr.status.shape
    u = envelope_inputs(mech, sr.lean_deg, n_inputs)                          # (L, U)
    u0 = n_inputs // 2
    sigma = branch(sm, geom)
    length = rod_lengths(sm, geom)
    run = _envelope_numpy if engine == "numpy" else _envelope_compiled
    d, ok, geo, lo, hi = run(sm, geom, sr, u, u0, sigma, length, every_input)   # (C, T, L, U, 2) ...
    conv = sr.converged
    # paths: zero input along lean (from lean 0) and along travel (at lean 0); the input's own path
    # from zero is in ``ok`` already
    z = ok[:, :, :, u0] & conv[..., None]
    z = _reach_outward(z, np.asarray(sr.lean_deg, float), 2)
    l0 = int(np.argmin(np.abs(np.asarray(sr.lean_deg, float))))
    z &= _reach_outward(z[:, :, l0], np.asarray(sr.travel_mm, float), 1)[:, :, None]
    ok &= z[:, :, :, None]
    status = (~ok).view(np.int8) * np.int8(TOGGLE)                             # REACHED 0, TOGGLE 1
    status[~conv] = NOT_SOLVED
    steer = d
    steer[~ok] = np.nan
    toe = steer[:, :, :, u0]
    lean_steer = toe - toe[:, :, l0:l0 + 1]
    bump = toe[:, :, l0]
    lo, hi = np.where(z, lo, np.nan), np.where(z, hi, np.nan)
    geo = {k: np.where(z, v, np.nan) for k, v in geo.items()}
    reached = ok.reshape(C, -1).all(axis=1)
    return SteerResult(input_deg=u, u0=u0, steer=steer, status=status, toe=toe, lean_steer=lean_steer,
                       bump_steer=bump, lo=lo, hi=hi, caster=geo["caster"], kpi=geo["kpi"], trail=geo["trail"],
                       scrub_radius=geo["scrub_radius"], reached=reached, steered=sm.steered.copy())


def _envelope_numpy(sm, geom, sr, u, u0, sigma, length, full=True):
    """The reference path: (steer, ok along each input's path from zero, ground geometry at zero input,
    lo, hi), arrays (C, T, L, U, 2) and (C, T, L, 2); whole arrays at a time."""
    with np.errstate(invalid="ignore", divide="ignore"):
        fr = frames(sm, geom, sr)
        co = coefficients(sm, fr, length)
        f = tuple(fk[None, None] for fk in input_functions(sm, u))            # (1, 1, L, U, 2)
        cok = tuple(tuple(x[:, :, :, None] for x in part) for part in (co.p, co.q, co.k))
        sg = sigma[:, None, None, None, :]
        d, ok = solve(Coefficients(*cok, co.r, co.b, co.c), f, sg)            # (C, T, L, U, 2)
        ok &= sr.converged[..., None, None] & (sg != 0)
        ok = _reach_outward(ok, np.arange(u.shape[1]) - u0, 3)
        ok |= ~sm.steered & sr.converged[..., None, None]                     # an unsteered wheel: 0
        d = np.where(sm.steered, d, 0.0)
        dd = np.where(ok, d, np.nan)
        lo = np.min(np.where(ok, d, np.inf), axis=3)
        hi = np.max(np.where(ok, d, -np.inf), axis=3)
        toe = dd[:, :, :, u0]
        geo = ground_geometry(sm, fr, co, np.nan_to_num(toe), geom)
    return d, ok, geo, lo, hi


def _envelope_compiled(sm, geom, sr, u, u0, sigma, length, full=True):
    """The compiled path (:func:`tiltopt.kinematics.steering_kernel.envelope`), same outputs (without
    ``full`` the steer of the inputs other than zero is not computed: NaN)."""
    from .steering_kernel import envelope

    C, T, L = sr.status.shape
    NS = C * T * L
    idx = sm.point_idx
    # the points: a chassis point from the datum's position and the lean, a point of the wheel's
    # upright from the wheel centre (its contact point and camber) and the upright's angle, in the
    # kernel; any other body's points from the sweep's points, or the model's chain
    cls = sm.point_class
    if (cls == 2).any():
        if sr._points is not None:
            yzg = sr._points[:, :, :, idx.ravel()].reshape(NS, 6, 2, 2)
        else:
            from . import kernel

            tab, rows = sm.table()
            V, Uc = sm.model.design_vectors(geom, tab)
            lean = np.broadcast_to(np.radians(sr.lean_deg), (C * T, L)).reshape(-1)
            X, _ = kernel.positions(sm.model, sr.q.reshape(NS, -1), lean, V, Uc, np.repeat(np.arange(C), T * L),
                                    "steer")
            yzg = X[:, rows.ravel()].reshape(NS, 6, 2, 2)
    else:
        yzg = np.zeros((1, 6, 2, 2))
    c_ = np.ascontiguousarray
    P0 = c_(geom.points[:, idx.ravel()].reshape(C, 6, 2, 2))
    x = c_(geom.x[:, idx.ravel()].reshape(C, 6, 2))
    F = c_(np.stack(input_functions(sm, u), -1))                              # (L, U, 2, 3)
    lean_s = np.repeat(np.tile(np.radians(np.asarray(sr.lean_deg, float)), C * T), 1)
    cand = np.repeat(np.arange(C, dtype=np.int64), T * L)
    lidx = np.tile(np.arange(L, dtype=np.int64), C * T)
    U = u.shape[1]
    steer, ok = np.empty((NS, U, 2)), np.empty((NS, U, 2), np.bool_)
    geo, rng = np.empty((NS, 2, 4)), np.empty((NS, 2, 2))
    # a state that did not converge is skipped by the kernel (its NaNs are never read)
    envelope(P0, cls, c_(yzg), c_(sr.q.reshape(NS, -1)[:, :2]), c_(sr.contact.reshape(NS, 2, 2)), x,
             c_(sr.body_angle[..., sm.upright].reshape(NS, 2)), c_(sr.camber.reshape(NS, 2)),
             c_(design_axis_dirs(sm, geom)), lean_s, cand, lidx, c_(sr.converged.reshape(NS)), F, sm.kind_i64,
             c_(geom.outer_radius, float), c_(geom.crown_radius, float), c_(length, float), c_(sigma, float),
             sm.steered, sm.inboard, u0, full, steer, ok, geo, rng)
    shape = (C, T, L)
    d = steer.reshape(shape + (U, 2))
    okk = ok.reshape(shape + (U, 2))
    g = geo.reshape(shape + (2, 4))
    geo_d = {"caster": g[..., 0], "kpi": g[..., 1], "trail": g[..., 2], "scrub_radius": g[..., 3]}
    rg = rng.reshape(shape + (2, 2))
    return d, okk, geo_d, rg[..., 0], rg[..., 1]


def _turn(v, e, delta):
    """Rodrigues rotation of vectors v about unit e by delta (broadcasting)."""
    cd, sd = np.cos(delta)[..., None], np.sin(delta)[..., None]
    return v * cd + np.cross(e, v) * sd + e * (_dot(e, v)[..., None] * (1.0 - cd))


def ground_geometry(sm: SteeringModel, fr: Frames, co: Coefficients, delta, geom: Geometry) -> dict:
    """Caster, kingpin inclination, mechanical trail and scrub radius of each (state, wheel) at steer delta.

    The wheel turns about its axis by delta; its contact point is the lowest point of the tyre
    (the crown circle's lowest point, docs/domain.md "Tyre contact"); the heading is the wheel
    plane's horizontal direction. Trail: the axis' ground point ahead of the contact point along
    the heading; scrub radius: the axis' ground point inboard of it, square to the heading.
    Caster and kingpin inclination are the axis' angles in the chassis frame (the axis turned
    back by the lean): side view, top rearward positive; front view, top inboard positive.
    """
    e = fr.e
    R, r = geom.outer_radius[:, None, None, :], geom.crown_radius[:, None, None, :]
    rho = R - r
    g = fr.gamma
    n0 = np.stack([np.zeros(g.shape), np.cos(g), -np.sin(g)], -1)          # axle, unsteered
    n = _turn(n0, e, delta)
    Cw = fr.A + _turn(fr.C - fr.A, e, delta)
    zhat = np.array([0.0, 0.0, 1.0])
    dv = zhat - n * n[..., 2:3]
    p = Cw - rho[..., None] * _unit(dv)                                     # lowest crown point
    h = _unit(np.stack([n[..., 1], -n[..., 0], np.zeros(n.shape[:-1])], -1))   # n x z: forward
    lat = np.stack([-h[..., 1], h[..., 0], np.zeros(h.shape[:-1])], -1)       # z x h
    with np.errstate(divide="ignore", invalid="ignore"):
        tg = -fr.A[..., 2] / e[..., 2]
    gp = fr.A + e * tg[..., None]
    dg = gp - p
    trail = dg[..., 0] * h[..., 0] + dg[..., 1] * h[..., 1]
    scrub = sm.inboard * (dg[..., 0] * lat[..., 0] + dg[..., 1] * lat[..., 1])
    ec = _rot_yz(e, -np.broadcast_to(fr.lean[..., None], e.shape[:-1]))
    caster = np.arctan2(-ec[..., 0], ec[..., 2])
    kpi = np.arctan2(sm.inboard * ec[..., 1], ec[..., 2])
    return {"caster": caster, "kpi": kpi, "trail": trail, "scrub_radius": scrub}


# ----------------------------------------------------------------- design position
@dataclass
class DesignSteer:
    """The steering at the design position (lean 0, travel 0): shapes (C, A[, 2]).

    Attributes
    ----------
    input_deg : (A,) inputs; steer : (C, A, 2) rad (NaN where not reached); status : (C, A, 2).
    ratio : (C,) steering ratio: input degrees per degree of the wheels' mean steer at zero input.
    ackermann_inputs : (Ak,) the Ackermann inputs; ackermann_error : (C, Ak) rad: the outer wheel's
        steer less the ideal for the inner one's (Gillespie's condition, docs/domain.md); NaN
        without a wheelbase or where not reached.
    track : (C,) mm, the design track used for the ideal.
    """

    input_deg: np.ndarray
    steer: np.ndarray
    status: np.ndarray
    ratio: np.ndarray
    ackermann_inputs: np.ndarray
    ackermann_error: np.ndarray
    ackermann_ideal: np.ndarray
    ackermann_inner: np.ndarray
    track: np.ndarray


def solve_inputs(model: Model, geom: Geometry, input_deg, sweep_result=None) -> tuple[np.ndarray, np.ndarray]:
    """Steer angles of given inputs at every state of a sweep (or at the design position without one).

    input_deg : (U,) inputs (deg), in any order; each is reached only when every input between zero
    and it is (at that state), and not at all beyond the lock.

    Returns ``steer`` (C, T, L, U, 2) rad (NaN where not reached) and ``status`` of the same shape.
    """
    sm = steering_model(model)
    u = np.atleast_1d(np.asarray(input_deg, float))
    fr = frames(sm, geom, sweep_result)
    co = coefficients(sm, fr, rod_lengths(sm, geom))
    sigma = branch(sm, geom)[:, None, None, None, :]
    # a path from zero to each input, in steps no coarser than the envelope's (toggles between inputs)
    lo, hi = sm.input_range
    step = max(hi, -lo) / (ENVELOPE_INPUTS // 2)
    span = max(float(np.max(np.abs(u))), step)
    n = int(math.ceil(span / step))
    path = np.unique(np.concatenate([u, np.linspace(-span, span, 2 * n + 1), [0.0]]))
    f = tuple(fk[None, None, None] for fk in input_functions(sm, path))        # (1, 1, 1, Up, 2)
    cok = tuple(tuple(x[:, :, :, None] for x in part) for part in (co.p, co.q, co.k))
    d, ok = solve(Coefficients(*cok, co.r, co.b, co.c), f, sigma)
    conv = np.ones(d.shape[:3], bool) if sweep_result is None else sweep_result.converged
    ok &= conv[..., None, None] & (sigma != 0)
    ok = _reach_outward(ok, path, 3)
    beyond = (path < lo - 1e-9) | (path > hi + 1e-9)
    status = np.where(ok, REACHED, TOGGLE)
    status = np.where(beyond[:, None], LOCK, status)
    status = np.where(conv[..., None, None], status, NOT_SOLVED)
    status = np.where(sm.steered, status, REACHED)
    d = np.where(sm.steered, d, 0.0)
    pick = np.searchsorted(path, u)
    steer = np.where(status == REACHED, d, np.nan)[:, :, :, pick]
    return steer, status[:, :, :, pick].astype(np.int8)


def design_steer(model: Model, geom: Geometry, input_deg=None) -> DesignSteer:
    """The steering at the design position: the curve of given inputs (default: the lock at 21
    inputs), the steering ratio and the Ackermann error (see :class:`DesignSteer`)."""
    sm = steering_model(model)
    st = model.mech.steering
    lo, hi = st.input_range_deg
    u = np.linspace(lo, hi, 21) if input_deg is None else np.atleast_1d(np.asarray(input_deg, float))
    ack = np.asarray(st.ackermann_inputs, float)
    steer, status = solve_inputs(model, geom, np.concatenate([u, ack]))
    steer, status = steer[:, 0, 0], status[:, 0, 0]
    # the steering ratio from the derivative at zero input (module docs)
    fr = frames(sm, geom)
    S, I = fr.S0[:, 0, 0], fr.I0[:, 0, 0]
    lever = sm.kind == LEVER
    dI = np.where(lever[:, None], np.cross(fr.a[:, 0, 0], I - fr.P[:, 0, 0]), fr.a[:, 0, 0]) * sm.gain[:, None]
    co = coefficients(sm, fr, rod_lengths(sm, geom))
    num = _dot(S - I, dI)
    den = _dot(S - I, co.b[:, 0, 0])
    with np.errstate(divide="ignore", invalid="ignore"):
        rate = np.where(sm.steered, num / den, np.nan)                    # rad per input degree
        ratio = _DEG / np.mean(rate[:, sm.steered], axis=1)
    ratio = np.where(np.isfinite(ratio) & (branch(sm, geom)[:, sm.steered] != 0).all(1), ratio, np.nan)
    # Ackermann: Gillespie's cot(outer) - cot(inner) = track / wheelbase
    na = len(ack)
    da = steer[:, len(u):]                                                 # (C, Ak, 2)
    track = _design_track(geom, sm)
    err = ideal = inner = np.full((geom.n_candidates, na), np.nan)
    if st.wheelbase_mm is not None and sm.steered.all():
        err, ideal, inner = ackermann_error(da, track[:, None], st.wheelbase_mm)
    return DesignSteer(input_deg=u, steer=steer[:, :len(u)], status=status[:, :len(u)], ratio=ratio,
                       ackermann_inputs=ack, ackermann_error=err, ackermann_ideal=ideal, ackermann_inner=inner,
                       track=track)


def _design_track(geom: Geometry, sm: SteeringModel) -> np.ndarray:
    """Track at the design position, (C,): contact to contact (docs/domain.md)."""
    hub = geom.points[:, sm.centre]
    cy = hub[..., 0] - (geom.outer_radius - geom.crown_radius) * np.sin(geom.static_camber)
    return cy[:, 1] - cy[:, 0]


def ackermann_error(delta: np.ndarray, track, wheelbase):
    """Outer wheel's steer against the ideal for the inner one's (Gillespie, Fundamentals of Vehicle
    Dynamics: cot(outer) - cot(inner) = track / wheelbase), for steers delta (..., 2) [left, right] rad.

    The turn goes the way the wheels' mean steer does (positive: toward +y, the right wheel inside).
    Returns (error, ideal outer, inner steer), each (...,) rad, in the turn's sense (positive:
    the outer wheel steers more than the ideal, toward parallel steer).
    """
    sgn = np.sign(delta[..., 0] + delta[..., 1])
    inner = np.where(sgn > 0, delta[..., 1], delta[..., 0]) * sgn
    outer = np.where(sgn > 0, delta[..., 0], delta[..., 1]) * sgn
    with np.errstate(divide="ignore", invalid="ignore"):
        ideal = np.arctan(1.0 / (1.0 / np.tan(inner) + track / wheelbase))
    ideal = np.where(inner > 0, ideal, np.nan)
    return outer - ideal, ideal, inner
