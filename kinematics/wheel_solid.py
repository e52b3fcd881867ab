"""The wheel as a solid, and the clearance of members (tubes) to it.

The solid (docs/domain.md, "Body shell and clearance") is the union of

* the tyre: the torus of crown circle radius ``rho_c = R - r`` and tube radius ``r``;
* the rim-and-spoke disc: ``rho <= rho_c`` and ``|s| <= w(rho)``, with
  ``w(rho) = h - (h - r) rho / rho_c`` and ``h`` half the hub width: as wide as the hub at the
  axle, tapering to the tyre's width at the crown circle (a spoked or disc wheel with its hub);

where ``s`` is the coordinate along the axle from the wheel centre and ``rho`` the distance from
the axle. Nothing may enter the solid but the stub axle. The members that carry the
wheel (its upright, and the arms and links that hold the upright) meet it at the hub, where the
stub axle is held: for them the hub zone ``rho < hub_radius`` is left out of the disc (it becomes a
ring). The tubes of the wheel's own upright turn with the wheel when it steers: they are checked
straight ahead. Every other member (the arms, links, the other side, the chassis) stays put while
the wheel turns through its steer range about its steering axis.

Search (per (state, wheel) item and member, compiled): the clearance ``f(t, delta)`` of the point
``t`` of the member's axis (``t`` in [0, 1]) at steer ``delta`` is the signed distance of that
point, turned by ``-delta`` about the steering axis, to the unsteered solid, less the tube radius.
A coarse grid of cells over (t, delta) is refined by branch and bound: the cell with the lowest
lower bound is split until no cell's bound lies more than ``TOLERANCE_MM`` below the best value
found (or ``MAX_SPLITS`` is reached). Cell bounds are rigorous for the unsigned distance ``d``:
along ``t`` the point moves on a straight line at speed ``L`` (the member length) and along
``delta`` on a circle about the axis at speed ``rho_a`` (its distance from the axis); ``d^2 / 2``
is semiconcave with constant 1 in space (true for the distance to any closed set), so along a line
of the cell its second derivative is at most ``L^2`` (t) or ``rho_a^2 + d rho_a`` (delta), and a
function ``g`` with ``g'' <= K`` on an interval of width ``H`` lies above ``min(g(ends)) - K H^2 / 8``.
The reported value is always a clearance actually reached (never below the true one); its error
bound says how far the true minimum may lie below it.

Item data are packed in one array ``q`` of shape (n_items, N_ITEM) (columns below); the members
of an item in ``mem`` of shape (n_items, k, N_MEM).
"""
from __future__ import annotations

import math

import numba
import numpy as np

# item columns: wheel centre, axle unit vector (unsteered), steering axis point and unit vector,
# crown circle radius, crown radius, half hub width, hub zone radius, half the steer range (rad), bound
# of every solid point's distance from the wheel centre (max(R, half hub width)), the middle of the
# steer range (rad; the range is DMID +- DMAX, 0 +- max for a symmetric envelope)
CX, CY, CZ, NX, NY, NZ, PX, PY, PZ, EX, EY, EZ, RHOC, RT, WH, RHOH, DMAX, REACH, DMID = range(19)
N_ITEM = 19
# member columns: ends (y, z) in the linkage plane, tube radius, class (0 other, 1 carrier: the hub
# zone left out), own (1: a tube of the wheel's upright: checked straight ahead), global member index
AY, AZ, BY, BZ, RAD, CLS, OWN, IDX = range(8)
N_MEM = 8
N_CLASSES = 2
OTHER, CARRIER = 0, 1

T_SAMPLES = 9          # coarse samples along a member
STEER_SAMPLES = 5      # coarse steer samples over [-max, max]
MAX_SPLITS = 128       # branch-and-bound splits per (item, member)
TOLERANCE_MM = 0.1    # stop once no cell can hold a minimum this far below the best found
_MAX_CELLS = (T_SAMPLES - 1) * (STEER_SAMPLES - 1) + MAX_SPLITS + 1


@numba.njit(cache=True)
def _seg2(pr, pa, ar, aa, br, ba):
    """Distance of (pr, pa) to the segment (ar, aa)-(br, ba) in the meridian half plane."""
    er, ea = br - ar, ba - aa
    L2 = er * er + ea * ea
    s = 0.0
    if L2 > 0.0:
        s = min(max(((pr - ar) * er + (pa - aa) * ea) / L2, 0.0), 1.0)
    dr, da = pr - ar - s * er, pa - aa - s * ea
    return math.sqrt(dr * dr + da * da)


@numba.njit(cache=True)
def meridian_distance(rho, s, rhoc, rt, wh, rho_lo):
    """Signed distance (mm, negative inside) of a point at (rho, s) in wheel coordinates to the solid.

    rho : distance from the axle; s : coordinate along the axle from the wheel centre.
    rho_lo : 0 for the whole solid, or the hub zone radius left out for the upright's own tubes.
    """
    dt = math.sqrt((rho - rhoc) ** 2 + s * s) - rt          # the tyre torus
    a = abs(s)
    k = (wh - rt) / rhoc
    w_lo = wh - k * rho_lo
    d = min(_seg2(rho, a, rho_lo, w_lo, rhoc, rt), _seg2(rho, a, rhoc, rt, rhoc, 0.0))
    if rho_lo > 0.0:
        d = min(d, _seg2(rho, a, rho_lo, 0.0, rho_lo, w_lo))
    inside = rho_lo <= rho <= rhoc and a <= wh - k * rho
    dd = -d if inside else d
    return min(dt, dd)


@numba.njit(cache=True)
def _point_value(q, i, x, y, z, c, s, rho_lo):
    """Signed distance of world point (x, y, z) to the solid of item i steered by the angle (cos c, sin s)."""
    # turn the point by -delta about the steering axis instead of turning the wheel by +delta
    vx, vy, vz = x - q[i, PX], y - q[i, PY], z - q[i, PZ]
    ex, ey, ez = q[i, EX], q[i, EY], q[i, EZ]
    dot = (ex * vx + ey * vy + ez * vz) * (1.0 - c)
    cx, cy, cz = ey * vz - ez * vy, ez * vx - ex * vz, ex * vy - ey * vx
    rx = vx * c - cx * s + ex * dot + q[i, PX] - q[i, CX]
    ry = vy * c - cy * s + ey * dot + q[i, PY] - q[i, CY]
    rz = vz * c - cz * s + ez * dot + q[i, PZ] - q[i, CZ]
    sa = rx * q[i, NX] + ry * q[i, NY] + rz * q[i, NZ]
    wx, wy, wz = rx - sa * q[i, NX], ry - sa * q[i, NY], rz - sa * q[i, NZ]
    rho = math.sqrt(wx * wx + wy * wy + wz * wz)
    return meridian_distance(rho, sa, q[i, RHOC], q[i, RT], q[i, WH], rho_lo)


@numba.njit(cache=True)
def _axis_distance(q, i, x, y, z):
    vx, vy, vz = x - q[i, PX], y - q[i, PY], z - q[i, PZ]
    d = vx * q[i, EX] + vy * q[i, EY] + vz * q[i, EZ]
    return math.sqrt(max(vx * vx + vy * vy + vz * vz - d * d, 0.0))


@numba.njit(cache=True)
def _cell_bound(f00, f01, f10, f11, rad, L, arm, Ht, Hd):
    """Lower bound of the clearance over a cell from its corner clearances (see module docs)."""
    dmin = max(min(min(f00, f01), min(f10, f11)) + rad, 0.0)
    lip = L * Ht + arm * Hd
    dmax = dmin + lip
    phi = 0.5 * dmin * dmin - (L * L * Ht * Ht + (arm * arm + dmax * arm) * Hd * Hd) / 8.0
    semi = math.sqrt(2.0 * phi) if phi > 0.0 else 0.0
    return max(semi, dmin - 0.5 * lip) - rad


@numba.njit(cache=True)
def _member_search(q, i, m, xs, dmax, dmid, enough):
    """Branch-and-bound minimum of one member's clearance to item i's solid.

    enough : the smallest clearance already found for the member's class; cells whose bound lies
    above it are not refined (they cannot hold the class minimum).
    Steers run over dmid + [-dmax, dmax] (the search works on the offset from dmid).
    Returns (best clearance, its steer (rad), lower bound of the true minimum, or of the part of
    it below ``enough``).
    """
    ay, az, by, bz, rad = m[AY], m[AZ], m[BY], m[BZ], m[RAD]
    rho_lo = q[i, RHOH] if m[CLS] == CARRIER else 0.0
    L = math.hypot(by - ay, bz - az)
    arm = max(_axis_distance(q, i, xs, ay, az), _axis_distance(q, i, xs, by, bz))
    nt = min(T_SAMPLES, max(3, int(math.ceil(L / 40.0)) + 1))   # about 40 mm between samples
    nd = STEER_SAMPLES if dmax > 0.0 else 1
    # corner values of the coarse grid
    grid = np.empty((nt, nd))
    best, best_d, best_t = np.inf, 0.0, 0.0
    for a in range(nt):
        t = a / (nt - 1.0)
        y, z = ay + t * (by - ay), az + t * (bz - az)
        for b in range(nd):
            dl = -dmax + 2.0 * dmax * b / (nd - 1.0) if nd > 1 else 0.0
            v = _point_value(q, i, xs, y, z, math.cos(dl + dmid), math.sin(dl + dmid), rho_lo) - rad
            grid[a, b] = v
            if v < best:
                best, best_d, best_t = v, dl, t
    # cells: t0, t1, d0, d1, f00, f01, f10, f11, lower bound
    cells = np.empty((_MAX_CELLS, 9))
    n = 0
    for a in range(nt - 1):
        for b in range(max(nd - 1, 1)):
            b1 = b + 1 if nd > 1 else b
            t0, t1 = a / (nt - 1.0), (a + 1) / (nt - 1.0)
            d0 = -dmax + 2.0 * dmax * b / (nd - 1.0) if nd > 1 else 0.0
            d1 = -dmax + 2.0 * dmax * b1 / (nd - 1.0) if nd > 1 else 0.0
            f00, f01, f10, f11 = grid[a, b], grid[a, b1], grid[a + 1, b], grid[a + 1, b1]
            cells[n, 0], cells[n, 1], cells[n, 2], cells[n, 3] = t0, t1, d0, d1
            cells[n, 4], cells[n, 5], cells[n, 6], cells[n, 7] = f00, f01, f10, f11
            cells[n, 8] = _cell_bound(f00, f01, f10, f11, rad, L, arm, t1 - t0, d1 - d0)
            n += 1
    for _ in range(MAX_SPLITS):
        if n + 1 >= _MAX_CELLS:
            break
        j = 0
        for k in range(1, n):
            if cells[k, 8] < cells[j, 8]:
                j = k
        if cells[j, 8] >= min(best, enough) - TOLERANCE_MM:
            break
        t0, t1, d0, d1 = cells[j, 0], cells[j, 1], cells[j, 2], cells[j, 3]
        f00, f01, f10, f11 = cells[j, 4], cells[j, 5], cells[j, 6], cells[j, 7]
        Ht, Hd = t1 - t0, d1 - d0
        if L * L * Ht * Ht >= (arm * arm + arm * (best + rad + L * Ht + arm * Hd)) * Hd * Hd:
            tm = 0.5 * (t0 + t1)
            y, z = ay + tm * (by - ay), az + tm * (bz - az)
            g0 = _point_value(q, i, xs, y, z, math.cos(d0 + dmid), math.sin(d0 + dmid), rho_lo) - rad
            g1 = g0 if Hd == 0.0 else _point_value(q, i, xs, y, z, math.cos(d1 + dmid), math.sin(d1 + dmid),
                                                   rho_lo) - rad
            if g0 < best:
                best, best_d, best_t = g0, d0, tm
            if g1 < best:
                best, best_d, best_t = g1, d1, tm
            # child 1 replaces j: [t0, tm]; child 2 appended: [tm, t1]
            cells[n, 0], cells[n, 1], cells[n, 2], cells[n, 3] = tm, t1, d0, d1
            cells[n, 4], cells[n, 5], cells[n, 6], cells[n, 7] = g0, g1, f10, f11
            cells[j, 1], cells[j, 6], cells[j, 7] = tm, g0, g1
        else:
            dm = 0.5 * (d0 + d1)
            cm, sm = math.cos(dm + dmid), math.sin(dm + dmid)
            g0 = _point_value(q, i, xs, ay + t0 * (by - ay), az + t0 * (bz - az), cm, sm, rho_lo) - rad
            g1 = _point_value(q, i, xs, ay + t1 * (by - ay), az + t1 * (bz - az), cm, sm, rho_lo) - rad
            if g0 < best:
                best, best_d, best_t = g0, dm, t0
            if g1 < best:
                best, best_d, best_t = g1, dm, t1
            cells[n, 0], cells[n, 1], cells[n, 2], cells[n, 3] = t0, t1, dm, d1
            cells[n, 4], cells[n, 5], cells[n, 6], cells[n, 7] = g0, f01, g1, f11
            cells[j, 3], cells[j, 5], cells[j, 7] = dm, g0, g1
        for k in (j, n):
            cells[k, 8] = _cell_bound(cells[k, 4], cells[k, 5], cells[k, 6], cells[k, 7], rad, L, arm,
                                      cells[k, 1] - cells[k, 0], cells[k, 3] - cells[k, 2])
        n += 1
    lb = best
    for k in range(n):
        lb = min(lb, cells[k, 8])
    if best < 0.0:
        # an overlap: the bounds above hold for distances, not depths; a local coordinate search
        # deepens the reported overlap towards the deepest point (a reached depth, the true one may
        # be deeper)
        ht, hd = 1.0 / (nt - 1.0), (2.0 * dmax / (nd - 1.0) if nd > 1 else 0.0)
        for _ in range(30):
            for dt_, dd_ in ((-ht, 0.0), (ht, 0.0), (0.0, -hd), (0.0, hd)):
                if dt_ == 0.0 and dd_ == 0.0:
                    continue
                t = min(max(best_t + dt_, 0.0), 1.0)
                dl = min(max(best_d + dd_, -dmax), dmax)
                v = _point_value(q, i, xs, ay + t * (by - ay), az + t * (bz - az), math.cos(dl + dmid),
                                 math.sin(dl + dmid), rho_lo) - rad
                if v < best:
                    best, best_d, best_t = v, dl, t
            ht, hd = 0.5 * ht, 0.5 * hd
        lb = best
    return best, best_d + dmid, lb


@numba.njit(cache=True)
def _segment_point_distance(x, y, z, xs, ay, az, by, bz):
    ey, ez = by - ay, bz - az
    L2 = ey * ey + ez * ez
    s = 0.0
    if L2 > 0.0:
        s = min(max(((y - ay) * ey + (z - az) * ez) / L2, 0.0), 1.0)
    dy, dz = y - ay - s * ey, z - az - s * ez
    dx = x - xs
    return math.sqrt(dx * dx + dy * dy + dz * dz)


@numba.njit(cache=True)
def search(q, mem, xs, out):
    """Per item and class, the smallest member clearance to the wheel solid.

    q : (n, N_ITEM); mem : (n, k, N_MEM), rows with IDX < 0 are padding.
    out : (n, N_CLASSES, 4) written with (clearance, error bound, member index, steer rad); a class
    with no member gets (+inf, 0, -1, 0).
    """
    n, k = mem.shape[0], mem.shape[1]
    order = np.empty(k, np.int64)
    pre = np.empty(k)
    for i in range(n):
        for c in range(N_CLASSES):
            out[i, c, 0], out[i, c, 1], out[i, c, 2], out[i, c, 3] = np.inf, 0.0, -1.0, 0.0
        low = np.full(N_CLASSES, np.inf)
        # every point of the solid lies within REACH of the wheel centre, which steering moves by at
        # most the chord of its circle about the axis: a lower bound per member
        swing = 2.0 * _axis_distance(q, i, q[i, CX], q[i, CY], q[i, CZ]) * math.sin(
            0.5 * min(abs(q[i, DMID]) + q[i, DMAX], math.pi))
        for j in range(k):
            m = mem[i, j]
            if m[IDX] < 0:
                pre[j] = np.inf
            else:
                sw = 0.0 if m[OWN] > 0.5 else swing
                pre[j] = _segment_point_distance(q[i, CX], q[i, CY], q[i, CZ], xs, m[AY], m[AZ], m[BY],
                                                 m[BZ]) - sw - q[i, REACH] - m[RAD]
        order[:] = np.argsort(pre)
        for jj in range(k):
            j = order[jj]
            m = mem[i, j]
            if m[IDX] < 0:
                continue
            c = int(m[CLS])
            if pre[j] >= out[i, c, 0]:
                low[c] = min(low[c], pre[j])
                continue
            own = m[OWN] > 0.5
            v, d, lb = _member_search(q, i, m, xs, 0.0 if own else q[i, DMAX], 0.0 if own else q[i, DMID],
                                      out[i, c, 0])
            low[c] = min(low[c], lb)
            if v < out[i, c, 0]:
                out[i, c, 0], out[i, c, 2], out[i, c, 3] = v, m[IDX], d
        for c in range(N_CLASSES):
            if np.isfinite(out[i, c, 0]):
                out[i, c, 1] = max(out[i, c, 0] - low[c], 0.0)


# ------------------------------------------------------------------ front view (numpy)
def lateral_reach(R, r, hub_half, camber):
    """How far the solid reaches either side of its centre in the front view, unsteered (mm).

    The tyre's outline reaches ``(R - r)|sin gamma| + r`` and the hub ``h cos gamma`` (docs/domain.md,
    "Widths"). Arrays broadcast.
    """
    return np.maximum((R - r) * np.abs(np.sin(camber)) + r, hub_half * np.abs(np.cos(camber)))


def section_polygon(cy, cz, camber, R, r, hub_half):
    """Vertices (..., 6, 2) of the disc's section by the plane of its axle, unsteered.

    The section of the whole solid is this hexagon (hub at the centre, rim at the crown circle)
    with the two tyre circles (radius r) at ``centre +- (R - r) u`` (``u`` the wheel plane's up).
    With a hub narrower than the tyre the hexagon is its convex hull (the rectangle of the rim).
    """
    sg, cg = np.sin(camber), np.cos(camber)
    uy, uz, ny, nz = sg, cg, cg, -sg
    rc = R - r
    h = np.maximum(hub_half, r)
    corners = [(h, 0.0), (r, rc), (-r, rc), (-h, 0.0), (-r, -rc), (r, -rc)]   # (along n, along u)
    return np.stack([np.stack([cy + a * ny + b * uy, cz + a * nz + b * uz], -1) for a, b in corners], -2)


def point_segment_distance(p, a, b):
    """Distance of points p (..., 2) to segments a-b (..., 2)."""
    e = b - a
    t = np.clip(np.sum((p - a) * e, -1) / np.maximum(np.sum(e * e, -1), 1e-30), 0.0, 1.0)
    return np.linalg.norm(p - a - t[..., None] * e, axis=-1)


def _polygon_signed(p, V):
    """Signed distance of points p (..., 2) to convex polygons V (..., k, 2) (counter-clockwise or not)."""
    a, b = V, np.roll(V, -1, axis=-2)
    d = np.min(point_segment_distance(p[..., None, :], a, b), axis=-1)
    cross = ((b[..., 0] - a[..., 0]) * (p[..., None, 1] - a[..., 1])
             - (b[..., 1] - a[..., 1]) * (p[..., None, 0] - a[..., 0]))
    inside = np.all(cross >= 0, -1) | np.all(cross <= 0, -1)
    return np.where(inside, -d, d)


def polygon_separation(V, W):
    """Separating-axis test of convex polygons V, W (..., k, 2): the largest gap between their projections
    on an edge normal of either; positive when they are apart, minus the overlap along the best axis when
    they intersect."""
    def sep(A, B):
        a, b = A, np.roll(A, -1, axis=-2)
        e = b - a
        nrm = np.stack([e[..., 1], -e[..., 0]], -1) / np.maximum(np.linalg.norm(e, axis=-1), 1e-30)[..., None]
        pa = np.einsum("...kd,...jd->...kj", nrm, A)
        pb = np.einsum("...kd,...jd->...kj", nrm, B)
        return np.max(np.maximum(pb.min(-1) - pa.max(-1), pa.min(-1) - pb.max(-1)), -1)
    return np.maximum(sep(V, W), sep(W, V))


def _polygon_gap(V, W):
    """Signed gap between convex polygons V, W (..., k, 2): their distance, or minus the overlap
    along the best separating edge normal (separating-axis test) where they intersect."""
    s = polygon_separation(V, W)
    d = np.minimum(np.min(_polygon_signed_abs(V, W), -1), np.min(_polygon_signed_abs(W, V), -1))
    return np.where(s > 0, d, s)


def _polygon_signed_abs(V, W):
    """Distances of the vertices of V (..., k, 2) to the boundary of W."""
    a, b = W, np.roll(W, -1, axis=-2)
    return np.min(point_segment_distance(V[..., :, None, :], a[..., None, :, :], b[..., None, :, :]), -1)


@numba.njit(cache=True)
def _hexagon(cy, cz, sg, cg, rc, r, h, V):
    ny, nz, uy, uz = cg, -sg, sg, cg
    hh = max(h, r)
    A = (hh, r, -r, -hh, -r, r)
    B = (0.0, rc, rc, 0.0, -rc, -rc)
    for k in range(6):
        V[k, 0] = cy + A[k] * ny + B[k] * uy
        V[k, 1] = cz + A[k] * nz + B[k] * uz


@numba.njit(cache=True)
def _poly_signed(py, pz, V):
    d = np.inf
    pos, neg = True, True
    for k in range(6):
        ay, az = V[k, 0], V[k, 1]
        by, bz = V[(k + 1) % 6, 0], V[(k + 1) % 6, 1]
        d = min(d, _seg2(py, pz, ay, az, by, bz))
        cr = (by - ay) * (pz - az) - (bz - az) * (py - ay)
        pos = pos and cr >= 0.0
        neg = neg and cr <= 0.0
    return -d if (pos or neg) else d


@numba.njit(cache=True)
def _separation(V, W):
    """Largest separation of W from V along V's edge normals (separating-axis test)."""
    best = -np.inf
    for k in range(6):
        ey, ez = V[(k + 1) % 6, 0] - V[k, 0], V[(k + 1) % 6, 1] - V[k, 1]
        L = math.hypot(ey, ez)
        if L == 0.0:
            continue
        ny, nz = ez / L, -ey / L
        amin, amax, bmin, bmax = np.inf, -np.inf, np.inf, -np.inf
        for j in range(6):
            a = V[j, 0] * ny + V[j, 1] * nz
            b = W[j, 0] * ny + W[j, 1] * nz
            amin, amax, bmin, bmax = min(amin, a), max(amax, a), min(bmin, b), max(bmax, b)
        best = max(best, bmin - amax, amin - bmax)
    return best


@numba.njit(cache=True)
def _pair_gaps(q, out):
    """q : (n, 12) rows (cy, cz, camber, R, r, half hub) of the left then the right wheel."""
    V = np.empty((6, 2))
    W = np.empty((6, 2))
    for i in range(q.shape[0]):
        c = q[i]
        s0, c0, s1, c1 = math.sin(c[2]), math.cos(c[2]), math.sin(c[8]), math.cos(c[8])
        rc0, rc1 = c[3] - c[4], c[9] - c[10]
        _hexagon(c[0], c[1], s0, c0, rc0, c[4], c[5], V)
        _hexagon(c[6], c[7], s1, c1, rc1, c[10], c[11], W)
        sep = max(_separation(V, W), _separation(W, V))
        if sep > 0.0:
            g = np.inf
            for k in range(6):
                g = min(g, abs(_poly_signed(V[k, 0], V[k, 1], W)), abs(_poly_signed(W[k, 0], W[k, 1], V)))
        else:
            g = sep
        for a in (1.0, -1.0):                     # the tyre circles at the top and bottom of each section
            pa = (c[0] + a * rc0 * s0, c[1] + a * rc0 * c0)
            pb = (c[6] + a * rc1 * s1, c[7] + a * rc1 * c1)
            g = min(g, _poly_signed(pa[0], pa[1], W) - c[4], _poly_signed(pb[0], pb[1], V) - c[10])
            for b in (1.0, -1.0):
                qy, qz = c[6] + b * rc1 * s1, c[7] + b * rc1 * c1
                g = min(g, math.hypot(pa[0] - qy, pa[1] - qz) - c[4] - c[10])
        out[i] = g


@numba.njit(cache=True)
def _segments_gap_one(a1y, a1z, a2y, a2z, b1y, b1z, b2y, b2z):
    d = min(_seg2(a1y, a1z, b1y, b1z, b2y, b2z), _seg2(a2y, a2z, b1y, b1z, b2y, b2z),
            _seg2(b1y, b1z, a1y, a1z, a2y, a2z), _seg2(b2y, b2z, a1y, a1z, a2y, a2z))
    s1 = (a2y - a1y) * (b1z - a1z) - (a2z - a1z) * (b1y - a1y)
    s2 = (a2y - a1y) * (b2z - a1z) - (a2z - a1z) * (b2y - a1y)
    s3 = (b2y - b1y) * (a1z - b1z) - (b2z - b1z) * (a1y - b1y)
    s4 = (b2y - b1y) * (a2z - b1z) - (b2z - b1z) * (a2y - b1y)
    return 0.0 if (s1 * s2 < 0.0 and s3 * s4 < 0.0) else d


@numba.njit(cache=True)
def member_gaps(pts, ia, ib, rad, pi, pj, gap, which):
    """Smallest gap between the tubes of member pairs at every state.

    pts : (n_states, n_points, 2); ia, ib, rad : (n_members,); pi, pj : (n_pairs,) member indices.
    Writes gap (n_states,): distance between the tube surfaces (negative: they overlap; +inf without
    pairs) and which (n_states,): the pair index of the smallest (-1 without pairs).
    """
    for s in range(pts.shape[0]):
        g, w = np.inf, -1
        for k in range(pi.shape[0]):
            i, j = pi[k], pj[k]
            d = _segments_gap_one(pts[s, ia[i], 0], pts[s, ia[i], 1], pts[s, ib[i], 0], pts[s, ib[i], 1],
                                  pts[s, ia[j], 0], pts[s, ia[j], 1], pts[s, ib[j], 0], pts[s, ib[j], 1])
            d -= rad[i] + rad[j]
            if d < g:
                g, w = d, k
        gap[s], which[s] = g, w


def pair_gap(cy, cz, camber, R, r, hub_half):
    """Signed front-view gap (mm) between the two wheels' solids, unsteered, at one station.

    cy, cz, camber, R, r, hub_half : arrays (..., 2) for the [left, right] wheel. Both wheels lie
    at the linkage station with their axles in its plane, so the plane's section of each solid is
    its front-view outline and the gap between the sections is the 3-D gap. Negative: overlap.
    Compiled per state (:func:`pair_gap_numpy` is the same sum in numpy, the tests' reference).
    """
    cols = np.broadcast_arrays(*(np.asarray(a, float) for a in (cy, cz, camber, R, r, hub_half)))
    shape = cols[0].shape[:-1]
    q = np.ascontiguousarray(np.concatenate([np.stack([c[..., k] for c in cols], -1) for k in (0, 1)], -1)
                             .reshape(-1, 12))
    out = np.empty(len(q))
    _pair_gaps(q, out)
    return out.reshape(shape)


def pair_gap_numpy(cy, cz, camber, R, r, hub_half):
    """:func:`pair_gap` in numpy (the reference of the compiled one)."""
    V = [section_polygon(cy[..., k], cz[..., k], camber[..., k], R[..., k], r[..., k], hub_half[..., k])
         for k in (0, 1)]
    rc = R - r
    circ = [np.stack([cy[..., k:k + 1] + s * rc[..., k:k + 1] * np.sin(camber[..., k:k + 1]),
                      cz[..., k:k + 1] + s * rc[..., k:k + 1] * np.cos(camber[..., k:k + 1])], -1)
            for k in (0, 1) for s in (1.0, -1.0)]
    gaps = [_polygon_gap(V[0], V[1])]
    for i in (0, 1):
        for j in (2, 3):
            gaps.append(np.linalg.norm(circ[i][..., 0, :] - circ[j][..., 0, :], axis=-1) - r[..., 0] - r[..., 1])
    for k, other in ((0, 1), (1, 0)):
        for c in circ[2 * k:2 * k + 2]:
            gaps.append(_polygon_signed(c[..., 0, :], V[other]) - r[..., k])
    return np.min(np.stack(gaps), 0)
