"""Front-view clearance marks: the figures the drawings label, with the two points each is measured between.

Every member (a link or a body tube, :func:`tiltopt.kinematics.clearance.members_of`) lies in the
linkage plane, and so does the axle of a wheel that is straight ahead. The wheel solid
(docs/domain.md, "Body shell and clearance"; :mod:`tiltopt.kinematics.wheel_solid`) is a solid of
revolution about its axle, so the nearest point of the solid to a point of that plane lies in the
plane too: the clearance of a member to the unsteered wheel is the 2-D distance, in the front view,
from the member's axis to the solid's section (the two trapezoids of the rim-and-spoke disc either
side of the axle and the two discs of the tyre), less the tube radius. These are the 3-D clearances
at steer 0: what the 3-D search reports with no steer (to its 0.1 mm tolerance). The run's
figures are the smallest over the steer range as well; the pages show both, each named.

Marks of one state (:meth:`FrontMarks.state`), each with a value in mm and the points it is
measured between (front view, mm):

* ``other``: each wheel to the nearest member that does not carry it;
* ``carrier``: each wheel to the nearest of its own upright and arms, the hub zone left out (only the
  stub axle may enter it there);
* ``pair``: between the two wheel solids (the run's ``wheel_pair_mm``: front view, straight ahead);
* ``tubes``: the smallest gap between two member tubes that must keep clear (the run's
  ``member_gap_mm``);
* ``ground``: the lowest point of any tube above the ground.

A negative value is an overlap; its points are where it is deepest along the member (a depth reached,
as in the 3-D search).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from tiltopt.kinematics.wheel_solid import polygon_separation

KINDS = ("other", "carrier", "pair", "tubes", "ground")

#: what each mark measures, as the pages say it
KIND_TEXT = {
    "other": "wheel to the nearest member that does not carry it",
    "carrier": "wheel to its own upright and arms (hub zone left out)",
    "pair": "between the two wheels",
    "tubes": "between two member tubes",
    "ground": "lowest tube above the ground",
}

#: the gap between the wheels and between tubes is drawn (a leader) only within this; the readouts list it always
DRAWN_WITHIN_MM = 150.0

_GOLDEN = (math.sqrt(5.0) - 1.0) / 2.0
_ITERATIONS = 56          # golden-section steps along a member: 0.618^56 ~ 2e-12 of its length


# ------------------------------------------------------------------ elementary geometry (batched)
def point_segment(p, a, b):
    """Distance of points p to segments a-b and the closest segment points; arrays (..., 2) broadcast."""
    e = b - a
    t = np.clip(np.sum((p - a) * e, -1) / np.maximum(np.sum(e * e, -1), 1e-30), 0.0, 1.0)
    q = a + t[..., None] * e
    return np.linalg.norm(p - q, axis=-1), q


def polygon_signed(p, V):
    """Signed distance (negative inside) of points p (..., 2) to convex polygons V (..., k, 2), and the
    nearest boundary point (..., 2). Either orientation."""
    a = V
    b = np.roll(V, -1, axis=-2)
    d, q = point_segment(p[..., None, :], a, b)                      # (..., k)
    k = np.argmin(d, axis=-1)
    dmin = np.take_along_axis(d, k[..., None], -1)[..., 0]
    qmin = np.take_along_axis(q, k[..., None, None], -2)[..., 0, :]
    e = b - a
    cross = e[..., 0] * (p[..., None, 1] - a[..., 1]) - e[..., 1] * (p[..., None, 0] - a[..., 0])
    inside = np.all(cross >= 0, -1) | np.all(cross <= 0, -1)
    return np.where(inside, -dmin, dmin), qmin


def segment_polygon(a, b, V):
    """Smallest signed distance of the points of segments a-b (..., 2) to convex polygons V (..., k, 2).

    The signed distance to a convex set is convex along a line, so a golden-section search along the
    segment finds its minimum (both ends are tried as well). Returns (value, point on the segment,
    nearest point of the polygon's boundary).
    """
    shape = np.broadcast_shapes(a.shape[:-1], b.shape[:-1], V.shape[:-2])
    a = np.broadcast_to(a, shape + (2,))
    b = np.broadcast_to(b, shape + (2,))
    e = b - a

    def f(t):
        return polygon_signed(a + t[..., None] * e, V)[0]

    lo, hi = np.zeros(shape), np.ones(shape)
    x1, x2 = hi - _GOLDEN * (hi - lo), lo + _GOLDEN * (hi - lo)
    f1, f2 = f(x1), f(x2)
    for _ in range(_ITERATIONS):
        left = f1 < f2                     # the minimum lies in [lo, x2]
        hi = np.where(left, x2, hi)
        lo = np.where(left, lo, x1)
        xn = np.where(left, hi - _GOLDEN * (hi - lo), lo + _GOLDEN * (hi - lo))
        fn = f(xn)
        x1, x2, f1, f2 = (np.where(left, xn, x2), np.where(left, x1, xn),
                          np.where(left, fn, f2), np.where(left, f1, fn))
    cands = np.stack([np.zeros(shape), np.ones(shape), x1, x2], -1)
    vals = np.stack([f(cands[..., k]) for k in range(4)], -1)
    k = np.argmin(vals, -1)
    t = np.take_along_axis(cands, k[..., None], -1)[..., 0]
    q = a + t[..., None] * e
    value, p = polygon_signed(q, V)
    return value, q, p


def segment_segment(a1, a2, b1, b2):
    """Distance between segments a1-a2 and b1-b2 (..., 2) with the closest points; 0 where they cross."""
    cands = [(*point_segment(a1, b1, b2), a1), (*point_segment(a2, b1, b2), a2)]
    d3, q3 = point_segment(b1, a1, a2)
    d4, q4 = point_segment(b2, a1, a2)
    d = np.stack([cands[0][0], cands[1][0], d3, d4], -1)
    on_a = np.stack([np.broadcast_to(a1, q3.shape), np.broadcast_to(a2, q3.shape), q3, q4], -2)
    on_b = np.stack([cands[0][1], cands[1][1], np.broadcast_to(b1, q3.shape), np.broadcast_to(b2, q3.shape)], -2)
    k = np.argmin(d, -1)
    dist = np.take_along_axis(d, k[..., None], -1)[..., 0]
    pa = np.take_along_axis(on_a, k[..., None, None], -2)[..., 0, :]
    pb = np.take_along_axis(on_b, k[..., None, None], -2)[..., 0, :]

    def side(o, u, v):
        return (u[..., 0] - o[..., 0]) * (v[..., 1] - o[..., 1]) - (u[..., 1] - o[..., 1]) * (v[..., 0] - o[..., 0])

    s1, s2 = side(a1, a2, b1), side(a1, a2, b2)
    cross = (s1 * s2 < 0) & (side(b1, b2, a1) * side(b1, b2, a2) < 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = s1 / (s1 - s2)
        x = b1 + w[..., None] * (b2 - b1)
    pa = np.where(cross[..., None], x, pa)
    pb = np.where(cross[..., None], x, pb)
    return np.where(cross, 0.0, dist), pa, pb


def polygon_polygon(V, W):
    """Signed gap between convex polygons V, W (..., k, 2) and the two points it is measured between.

    Apart: their distance (the nearest vertex of one to an edge of the other). Overlapping: minus the
    overlap along the best separating edge normal (separating-axis test), as
    :func:`tiltopt.kinematics.wheel_solid.pair_gap`.
    """
    def vertex_to_edges(A, B):
        a, b = B, np.roll(B, -1, axis=-2)
        d, q = point_segment(A[..., :, None, :], a[..., None, :, :], b[..., None, :, :])   # (..., kA, kB)
        flat = d.reshape(d.shape[:-2] + (-1,))
        k = np.argmin(flat, -1)
        i, j = np.unravel_index(k, d.shape[-2:])
        dist = np.take_along_axis(flat, k[..., None], -1)[..., 0]
        pv = np.take_along_axis(A, i[..., None, None], -2)[..., 0, :]
        qe = np.take_along_axis(q.reshape(q.shape[:-3] + (-1, 2)), k[..., None, None], -2)[..., 0, :]
        return dist, pv, qe

    d1, p1, q1 = vertex_to_edges(V, W)
    d2, p2, q2 = vertex_to_edges(W, V)
    first = d1 <= d2
    dist = np.where(first, d1, d2)
    pv = np.where(first[..., None], p1, q2)
    pw = np.where(first[..., None], q1, p2)

    s = polygon_separation(V, W)
    return np.where(s > 0, dist, s), pv, pw


# ------------------------------------------------------------------ the wheel solid's section
def section_pieces(cy, cz, camber, R, r, hub_half, rho_lo=0.0):
    """The section of a wheel solid by the linkage plane, unsteered, as convex pieces.

    Parameters
    ----------
    cy, cz, camber, R, r, hub_half, rho_lo : arrays of shape (...) (broadcast)
        Wheel centre (mm), camber (rad, positive = top toward +y), outer and crown radius, half the
        hub width, and the hub-zone radius left out of the disc (0 for the whole solid; the hub
        radius for the members that carry the wheel, as :mod:`tiltopt.kinematics.wheel_solid`).

    Returns
    -------
    quads : ndarray of shape (..., 2, 4, 2)
        The rim-and-spoke disc above and below the axle: ``rho_lo <= rho <= R - r`` and
        ``|s| <= w(rho)``, ``w`` tapering linearly from the half hub width at the axle to ``r`` at
        the crown circle.
    discs : ndarray of shape (..., 2, 2)
        Centres of the tyre's two discs (radius ``r``) at the top and bottom of the crown circle.
    """
    cy, cz, g, R, r, h, lo = np.broadcast_arrays(*(np.asarray(v, float) for v in (cy, cz, camber, R, r, hub_half,
                                                                                   rho_lo)))
    rc = R - r
    lo = np.minimum(lo, rc)
    k = (h - r) / np.where(rc > 0, rc, 1.0)
    w_lo = h - k * lo
    uy, uz = np.sin(g), np.cos(g)          # up the wheel plane
    ny, nz = np.cos(g), -np.sin(g)         # along the axle

    def at(s, u):
        return np.stack([cy + s * ny + u * uy, cz + s * nz + u * uz], -1)

    quads = []
    for sgn in (1.0, -1.0):
        quads.append(np.stack([at(w_lo, sgn * lo), at(r, sgn * rc), at(-r, sgn * rc), at(-w_lo, sgn * lo)], -2))
    discs = np.stack([at(np.zeros_like(rc), rc), at(np.zeros_like(rc), -rc)], -2)
    return np.stack(quads, -3), discs


def _segment_to_section(a, b, quads, discs, r):
    """Signed distance of segments a-b (..., 2) to sections (quads (..., 2, 4, 2), discs (..., 2, 2), r (...)).

    Returns (value, point on the segment, point on the section's boundary).
    """
    vals, qs, ps = [], [], []
    for k in range(2):
        v, q, p = segment_polygon(a, b, quads[..., k, :, :])
        vals.append(v)
        qs.append(q)
        ps.append(p)
    for k in range(2):
        c = discs[..., k, :]
        d, q = point_segment(c, a, b)
        u = (q - c) / np.maximum(d, 1e-12)[..., None]
        vals.append(d - r)
        qs.append(q)
        ps.append(c + r[..., None] * u)
    V = np.stack(vals, -1)
    j = np.argmin(V, -1)
    pick = lambda L: np.take_along_axis(np.stack(L, -2), j[..., None, None], -2)[..., 0, :]   # noqa: E731
    return np.take_along_axis(V, j[..., None], -1)[..., 0], pick(qs), pick(ps)


def _section_gap(qa, da, ra, qb, db, rb):
    """Signed gap between two sections (pieces as :func:`section_pieces`) and the points it is measured between."""
    vals, pa, pb = [], [], []
    for i in range(2):
        for j in range(2):
            v, p, q = polygon_polygon(qa[..., i, :, :], qb[..., j, :, :])
            vals.append(v)
            pa.append(p)
            pb.append(q)
    for i in range(2):          # a tyre disc of one against the disc pieces of the other
        for j in range(2):
            for (c, rr, Q, flip) in ((da[..., i, :], ra, qb[..., j, :, :], False),
                                     (db[..., i, :], rb, qa[..., j, :, :], True)):
                d, on = polygon_signed(c, Q)
                u = (on - c) / np.maximum(np.abs(d), 1e-12)[..., None] * np.where(d < 0, -1.0, 1.0)[..., None]
                surf = c + rr[..., None] * u
                vals.append(d - rr)
                pa.append(on if flip else surf)
                pb.append(surf if flip else on)
    for i in range(2):
        for j in range(2):
            ca, cb = da[..., i, :], db[..., j, :]
            d = np.linalg.norm(cb - ca, axis=-1)
            u = (cb - ca) / np.maximum(d, 1e-12)[..., None]
            vals.append(d - ra - rb)
            pa.append(ca + ra[..., None] * u)
            pb.append(cb - rb[..., None] * u)
    V = np.stack(vals, -1)
    j = np.argmin(V, -1)
    pick = lambda L: np.take_along_axis(np.stack(L, -2), j[..., None, None], -2)[..., 0, :]   # noqa: E731
    return np.take_along_axis(V, j[..., None], -1)[..., 0], pick(pa), pick(pb)


def drawn(marks: list[dict]) -> list[dict]:
    """The marks a drawing shows as leaders: every wheel and ground mark, the gaps between the wheels and
    between tubes within :data:`DRAWN_WITHIN_MM` (a far gap is a long line across the drawing that says
    nothing; the readouts list every mark)."""
    return [m for m in marks if m["kind"] not in ("pair", "tubes") or m["mm"] < DRAWN_WITHIN_MM]


# ------------------------------------------------------------------ marks of every state
@dataclass
class FrontMarks:
    """Front-view clearance marks of a batch of states; arrays have shape (C, T, L, ...) (module docs).

    ``<kind>_mm`` is the value; ``<kind>_p`` and ``<kind>_q`` the points it is measured between
    (for the wheel marks: on the wheel solid and on the member's tube surface); ``<kind>_member``
    the member index (``tubes``: a pair of indices). NaN where a state did not converge; +inf (and
    index -1) where there is nothing to measure.
    """

    other_mm: np.ndarray          # (C, T, L, 2)
    other_p: np.ndarray           # (C, T, L, 2, 2)
    other_q: np.ndarray
    other_member: np.ndarray      # (C, T, L, 2)
    carrier_mm: np.ndarray
    carrier_p: np.ndarray
    carrier_q: np.ndarray
    carrier_member: np.ndarray
    pair_mm: np.ndarray           # (C, T, L)
    pair_p: np.ndarray            # (C, T, L, 2)
    pair_q: np.ndarray
    tubes_mm: np.ndarray          # (C, T, L)
    tubes_p: np.ndarray
    tubes_q: np.ndarray
    tubes_member: np.ndarray      # (C, T, L, 2)
    ground_mm: np.ndarray         # (C, T, L)
    ground_p: np.ndarray          # (C, T, L, 2): the lowest tube point
    ground_member: np.ndarray     # (C, T, L)
    member_names: list

    def state(self, c: int, t: int, l: int, digits: int = 1) -> list[dict]:
        """JSON-ready marks of one state: ``kind``, ``wheel`` (0 left, 1 right, or None), ``mm`` (rounded to
        ``digits``), ``p``, ``q`` (front view, mm, 0.01 mm), ``to`` (what it is measured to) and ``members``
        (the member indices it is measured to: [i, -1], [i, j] for two tubes, [-1, -1] for the other wheel)."""
        out = []
        names = self.member_names

        def pt(a):
            return [round(float(a[0]), 2), round(float(a[1]), 2)]

        def add(kind, wheel, v, p, q, to, members):
            v = float(v)
            if not math.isfinite(v):
                return
            out.append({"kind": kind, "wheel": wheel, "mm": round(v, digits), "p": pt(p), "q": pt(q), "to": to,
                        "members": members})

        for kind in ("other", "carrier"):
            mm, P, Q, M = (getattr(self, f"{kind}_{s}") for s in ("mm", "p", "q", "member"))
            for w in range(2):
                m = int(M[c, t, l, w])
                add(kind, w, mm[c, t, l, w], P[c, t, l, w], Q[c, t, l, w], names[m] if m >= 0 else "", [m, -1])
        add("pair", None, self.pair_mm[c, t, l], self.pair_p[c, t, l], self.pair_q[c, t, l], "the other wheel",
            [-1, -1])
        i, j = (int(v) for v in self.tubes_member[c, t, l])
        add("tubes", None, self.tubes_mm[c, t, l], self.tubes_p[c, t, l], self.tubes_q[c, t, l],
            f"{names[i]} / {names[j]}" if i >= 0 else "", [i, j])
        g = self.ground_p[c, t, l]
        m = int(self.ground_member[c, t, l])
        add("ground", None, self.ground_mm[c, t, l], g, [g[0], 0.0], names[m] if m >= 0 else "", [m, -1])
        return out


def front_marks(model, geom, sweep_result) -> FrontMarks:
    """The marks of every state of a sweep (module docs), batched over candidates and states.

    Parameters
    ----------
    model : kinematics.Model
    geom : kinematics.Geometry
        The candidates the sweep was run on.
    sweep_result : kinematics.sweep.SweepResult
    """
    from tiltopt.kinematics.clearance import member_pairs, members_of

    mech = model.mech
    sr = sweep_result
    pts = sr.points                                                       # (C, T, L, P, 2)
    C, T, L = pts.shape[:3]
    mem = members_of(model)
    M = len(mem)
    nan2 = np.full((C, T, L, 2), np.nan)
    nan22 = np.full((C, T, L, 2, 2), np.nan)
    conv = sr.converged
    centres = pts[..., np.array(model.wheel_centre), :]                  # (C, T, L, 2, 2)
    R = np.asarray(geom.outer_radius, float)[:, None, None, :]           # (C, 1, 1, 2)
    r = np.asarray(geom.crown_radius, float)[:, None, None, :]
    hub_half = np.array([0.5 * w.hub_width_mm for w in mech.wheels])
    hub_zone = np.array([w.hub_radius_mm for w in mech.wheels])
    cam = sr.camber
    rr = np.broadcast_to(r, cam.shape)
    out: dict = {}
    for kind, lo, members in (("other", 0.0, ~mem.carries), ("carrier", hub_zone, mem.carries)):
        quads, discs = section_pieces(centres[..., 0], centres[..., 1], cam, R, r, hub_half, lo)  # (C,T,L,2,...)
        if M == 0:
            out[kind] = (np.full((C, T, L, 2), np.inf), nan22, nan22, np.full((C, T, L, 2), -1))
            continue
        a = pts[..., mem.ia, :][..., None, :, :]                          # (C, T, L, 1, M, 2)
        b = pts[..., mem.ib, :][..., None, :, :]
        v, q, p = _segment_to_section(a, b, quads[..., None, :, :, :], discs[..., None, :, :], rr[..., None])
        surf = q + mem.radius[:, None] * (p - q) / np.maximum(np.linalg.norm(p - q, axis=-1), 1e-12)[..., None]
        v = v - mem.radius                                                # (C, T, L, 2, M)
        v = np.where(members[None, None, None], v, np.inf)
        k = np.argmin(np.where(np.isnan(v), np.inf, v), -1)
        val = np.take_along_axis(v, k[..., None], -1)[..., 0]
        idx = np.where(np.isfinite(val), k, -1)
        out[kind] = (np.where(conv[..., None], val, np.nan), np.take_along_axis(p, k[..., None, None], -2)[..., 0, :],
                     np.take_along_axis(surf, k[..., None, None], -2)[..., 0, :], idx)

    # the two wheels
    qa, da = section_pieces(centres[..., 0, 0], centres[..., 0, 1], cam[..., 0], R[..., 0], r[..., 0], hub_half[0])
    qb, db = section_pieces(centres[..., 1, 0], centres[..., 1, 1], cam[..., 1], R[..., 1], r[..., 1], hub_half[1])
    pair, pp, pq = _section_gap(qa, da, rr[..., 0], qb, db, rr[..., 1])
    pair = np.where(conv, pair, np.nan)

    # member tubes against each other, and the ground
    pairs = member_pairs(model, mem) if M else np.zeros((0, 2), int)
    if len(pairs):
        i, j = pairs[:, 0], pairs[:, 1]
        d, pa, pb = segment_segment(pts[..., mem.ia[i], :], pts[..., mem.ib[i], :], pts[..., mem.ia[j], :],
                                    pts[..., mem.ib[j], :])
        u = (pb - pa) / np.maximum(d, 1e-12)[..., None]
        g = d - mem.radius[i] - mem.radius[j]
        k = np.argmin(np.where(np.isnan(g), np.inf, g), -1)
        tubes = np.where(conv, np.take_along_axis(g, k[..., None], -1)[..., 0], np.nan)
        take = lambda A: np.take_along_axis(A, k[..., None, None], -2)[..., 0, :]   # noqa: E731
        tp = take(pa + mem.radius[i][:, None] * u)
        tq = take(pb - mem.radius[j][:, None] * u)
        tm = np.stack([i[k], j[k]], -1)
    else:
        tubes = np.where(conv, np.inf, np.nan)
        tp = tq = np.full((C, T, L, 2), np.nan)
        tm = np.full((C, T, L, 2), -1)
    if M:
        za, zb = pts[..., mem.ia, 1], pts[..., mem.ib, 1]
        low_end = np.where((za <= zb)[..., None], pts[..., mem.ia, :], pts[..., mem.ib, :])   # (C, T, L, M, 2)
        z = np.minimum(za, zb) - mem.radius
        k = np.argmin(np.where(np.isnan(z), np.inf, z), -1)
        ground = np.where(conv, np.take_along_axis(z, k[..., None], -1)[..., 0], np.nan)
        gp = np.take_along_axis(low_end, k[..., None, None], -2)[..., 0, :].copy()
        gp[..., 1] = ground
        gm = k
    else:
        ground = np.where(conv, np.inf, np.nan)
        gp = np.full((C, T, L, 2), np.nan)
        gm = np.full((C, T, L), -1)
    o, cr = out["other"], out["carrier"]
    del nan2
    return FrontMarks(other_mm=o[0], other_p=o[1], other_q=o[2], other_member=o[3],
                      carrier_mm=cr[0], carrier_p=cr[1], carrier_q=cr[2], carrier_member=cr[3],
                      pair_mm=pair, pair_p=pp, pair_q=pq, tubes_mm=tubes, tubes_p=tp, tubes_q=tq, tubes_member=tm,
                      ground_mm=ground, ground_p=gp, ground_member=gm, member_names=list(mem.names))
