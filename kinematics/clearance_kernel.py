"""Compiled per-item kernel of the clearance search (numba).

:func:`search` runs, for each (state, wheel) item in one compiled loop, the same search as the
numpy reference :func:`tiltopt.kinematics.clearance._search` (the coarse grid, the coordinate refinement,
and the error estimate of :func:`tiltopt.kinematics.clearance._estimate`) with the same distance
functions as :mod:`tiltopt.kinematics.shell` and :func:`tiltopt.kinematics.clearance._segment_distance`, written
here for one point at a time. The numpy path stays the reference: ``tests/test_clearance_kernel.py``
checks both against each other and against closed forms.

What the compiled loop saves is the numpy call overhead and the temporary arrays of a batch of
a few thousand items; the arithmetic is the same, in double precision throughout (the numpy path
evaluates the coarse grid in single precision, so a coarse near-tie may pick a neighbouring basin;
both results are reached distances within their error estimates).

The superellipse distance is bound by the latency of the powers in its Newton steps, so work that
does not depend on other work is laid side by side: the coarse samples of a steer slice in passes,
the two trials of a refinement step together (:func:`superellipse_distance_pair`). Shortcuts leave
every result as it is: the chart of the superellipse distance that cannot give the minimum is not
run, a Newton chart stops at its fixed point, and a steer trial clipped onto the current steer is
the current point.

Also here: the slot root finder and the inside levels of a polygon section (:func:`root`,
:func:`levels`, on the section's edges interpolated once, :func:`edges_distance`).

Item data are packed in one array ``q`` of shape (n_items, N_COLUMNS), columns named below.
"""
from __future__ import annotations

import math

import numba
import numpy as np

# columns of the item array q; the steer range is DMID +- DMAX (rad): the search runs over the offset
# from DMID (the middle of a linkage's steer range, 0 for a symmetric envelope)
CX, CY, CZ, PX, PY, PZ, EX, EY, EZ, SG, CG, RHO, R, DMAX, ARM, TY, TZ, CL, SL, DMID = range(20)
N_COLUMNS = 20

# what the item's clearance is measured to
SHELL_SUPERELLIPSE, SHELL_POLYGON, MEMBERS = 0, 1, 2

_NEWTON_ITERATIONS = 5      # as tiltopt.kinematics.shell
_CHART_LIMIT = 0.9
_CHART_LOW = 0.0999         # < 1 - _CHART_LIMIT: where the other chart's arc ends, with room to spare


# ------------------------------------------------------------------ superellipse
@numba.njit(cache=True)
def _newton(Z, u, v, a, b, n, inv_n, zmax, ab, ab_b):
    """One step of tiltopt.kinematics.shell._chart's Newton iteration on the arc Y = a (1 - (Z/b)^n)^(1/n).

    ab = a / b and ab_b = ab / b are the chart's constants (the same values numpy computes).
    """
    t = Z / b
    p2 = t ** (n - 2.0)
    w = p2 * t * t
    om = 1.0 - w
    q = om ** (inv_n - 1.0)
    Y = a * q * om
    dY = -ab * p2 * t * q
    d2Y = -ab_b * (n - 1.0) * p2 * q / om
    e = Y - u
    g1 = e * dY + (Z - v)
    g2 = dY * dY + e * d2Y + 1.0
    g2 = max(g2, 0.25 * (1.0 + dY * dY))
    return min(max(Z - g1 / g2, 0.0), zmax)


@numba.njit(cache=True)
def _box2(u, v, u0, u1, v0, v1):
    """Squared distance of (u, v) to the box [u0, u1] x [v0, v1]."""
    du = max(u0 - u, 0.0, u - u1)
    dv = max(v0 - v, 0.0, v - v1)
    return du * du + dv * dv


@numba.njit(cache=True)
def _chart_pair(c1, on1, c2, on2):
    """tiltopt.kinematics.shell._chart of two points side by side (their Newton steps interleave).

    c1, c2 : (u, v, a, b, n, inv_n, G, lim) of each chart, G the gauge^(1/n) and lim = 0.9^(1/n)
    (shared by the two charts of a point). Returns the squared distances, inf where not ``on``.
    A chart whose step leaves Z unchanged has reached the fixed point of its iteration: its
    remaining steps would change nothing, so they are skipped.
    """
    u1, v1, a1, b1, n1, i1, G1, l1 = c1
    u2, v2, a2, b2, n2, i2, G2, l2 = c2
    zm1, zm2 = b1 * l1, b2 * l2
    Z1 = min(max(min(v1, v1 / max(G1, 1e-12)), 0.0), zm1)
    Z2 = min(max(min(v2, v2 / max(G2, 1e-12)), 0.0), zm2)
    ab1, ab2 = a1 / b1, a2 / b2
    abb1, abb2 = ab1 / b1, ab2 / b2
    done1, done2 = not on1, not on2
    for _ in range(_NEWTON_ITERATIONS):
        if not done1:
            Zn = _newton(Z1, u1, v1, a1, b1, n1, i1, zm1, ab1, abb1)
            done1 = Zn == Z1
            Z1 = Zn
        if not done2:
            Zn = _newton(Z2, u2, v2, a2, b2, n2, i2, zm2, ab2, abb2)
            done2 = Zn == Z2
            Z2 = Zn
        if done1 and done2:
            break
    d1 = d2 = np.inf
    if on1:
        t = Z1 / b1
        d1 = (a1 * (1.0 - t ** n1) ** i1 - u1) ** 2 + (Z1 - v1) ** 2
    if on2:
        t = Z2 / b2
        d2 = (a2 * (1.0 - t ** n2) ** i2 - u2) ** 2 + (Z2 - v2) ** 2
    return d1, d2


@numba.njit(cache=True)
def _chart(c):
    """tiltopt.kinematics.shell._chart for one point: (u, v, a, b, n, inv_n, G, lim) -> squared distance."""
    return _chart_pair(c, True, c, False)[0]


@numba.njit(cache=True)
def _charts_of(y, z, a, b, n):
    """The two charts of one point, likelier first, and the box test data (see superellipse_distance)."""
    u, v = abs(y), abs(z)
    inv_n = 1.0 / n
    gauge = (u / a) ** n + (v / b) ** n
    G = max(gauge, 1e-300) ** inv_n
    lim = _CHART_LIMIT ** inv_n
    low = _CHART_LOW ** inv_n
    side = (u, v, a, b, n, inv_n, G, lim)
    top = (v, u, b, a, n, inv_n, G, lim)
    if v * a <= u * b:
        return side, top, (0.0, a * lim, b * low, b), gauge
    return top, side, (a * low, a, 0.0, b * lim), gauge


@numba.njit(cache=True)
def superellipse_distance_pair(y1, z1, a1, b1, n1, y2, z2, a2, b2, n2):
    """superellipse_distance of two points, their Newton steps side by side (the same values)."""
    f1, o1, box1, g1 = _charts_of(y1, z1, a1, b1, n1)
    f2, o2, box2, g2 = _charts_of(y2, z2, a2, b2, n2)
    d1, d2 = _chart_pair(f1, True, f2, True)
    need1 = _box2(abs(y1), abs(z1), box1[0], box1[1], box1[2], box1[3]) < d1
    need2 = _box2(abs(y2), abs(z2), box2[0], box2[1], box2[2], box2[3]) < d2
    if need1 or need2:
        e1, e2 = _chart_pair(o1, need1, o2, need2)
        d1, d2 = min(d1, e1), min(d2, e2)
    d1, d2 = math.sqrt(d1), math.sqrt(d2)
    return -d1 if g1 < 1.0 else d1, -d2 if g2 < 1.0 else d2


@numba.njit(cache=True)
def superellipse_distance(y, z, a, b, n):
    """tiltopt.kinematics.shell.superellipse_distance for one point.

    The same two Newton charts; the likelier one first. The other chart's arc lies in a box (its
    free coordinate within the chart limit, the other between the two charts' ends): when that box
    is no nearer than the first chart's point, the other chart cannot give the minimum and is not
    run, which leaves the result as it is.
    """
    first, other, box, gauge = _charts_of(y, z, a, b, n)
    d = _chart(first)
    if _box2(abs(y), abs(z), box[0], box[1], box[2], box[3]) < d:
        d = min(d, _chart(other))
    d = math.sqrt(d)
    return -d if gauge < 1.0 else d


@numba.njit(cache=True)
def superellipse_lower_bound(y, z, a, b, n):
    """tiltopt.kinematics.shell.superellipse_distance_lower_bound for one point."""
    u, v = abs(y) / a, abs(z) / b
    pu, pv = u ** n, v ** n
    S = max(pu + pv, 1e-30)
    G = S ** (1.0 / n)
    gy = pu / max(u, 1e-30) / a
    gz = pv / max(v, 1e-30) / b
    grad = (G / S) * math.sqrt(gy * gy + gz * gz)
    return (G - 1.0) / max(grad, 1e-30)


@numba.njit(cache=True)
def _segment(xs, x):
    """Bay index and fraction of x between the stations xs (x clamped), as tiltopt.kinematics.shell."""
    m = len(xs)
    xc = min(max(x, xs[0]), xs[m - 1])
    i = 0
    while i < m - 2 and xs[i + 1] <= xc:          # searchsorted(xs, xc, 'right') - 1, clipped
        i += 1
    return i, (xc - xs[i]) / (xs[i + 1] - xs[i])


@numba.njit(cache=True)
def _with_caps(d, x, x0, x1):
    """tiltopt.kinematics.shell.signed_distance_yz: the section distance d with the flat end caps."""
    beyond = max(x0 - x, x - x1)
    if beyond > 0:
        return math.hypot(beyond, d) if d > 0 else beyond
    to_cap = min(x - x0, x1 - x)
    return -min(-d, max(to_cap, 0.0)) if d < 0 else d


@numba.njit(cache=True)
def _params(tab, x):
    """Superellipse section (a, b, zc, n) at x, as tiltopt.kinematics.shell.superellipse_params."""
    i, t = _segment(tab[:, 0], x)
    return (tab[i, 1] + (tab[i + 1, 1] - tab[i, 1]) * t, tab[i, 2] + (tab[i + 1, 2] - tab[i, 2]) * t,
            tab[i, 3] + (tab[i + 1, 3] - tab[i, 3]) * t, tab[i, 4] + (tab[i + 1, 4] - tab[i, 4]) * t)


@numba.njit(cache=True)
def superellipse_shell_distance(tab, y, z, x, lower_bound):
    """Signed distance (chassis frame) to a superellipse shell, caps included.

    tab : ndarray of shape (n_stations, 5): x, half width, half height, centre z, exponent.
    """
    a, b, zc, n = _params(tab, x)
    if lower_bound:
        d = superellipse_lower_bound(y, z - zc, a, b, n)
    else:
        d = superellipse_distance(y, z - zc, a, b, n)
    return _with_caps(d, x, tab[0, 0], tab[len(tab) - 1, 0])


# ------------------------------------------------------------------ polygons
@numba.njit(cache=True)
def polygon_section_distance(xs, outlines, y, z, x):
    """tiltopt.kinematics.shell.polygon_distance of the section interpolated at x (clamped to the stations)."""
    i, t = _segment(xs, x)
    V = outlines.shape[1]
    best = np.inf
    crossings = 0
    s0 = 1.0 - t
    y1 = outlines[i, 0, 0] * s0 + outlines[i + 1, 0, 0] * t
    z1 = outlines[i, 0, 1] * s0 + outlines[i + 1, 0, 1] * t
    for k in range(V):
        y0, z0 = y1, z1                             # edge from vertex k to vertex k + 1, as in numpy
        kn = k + 1 if k + 1 < V else 0
        y1 = outlines[i, kn, 0] * s0 + outlines[i + 1, kn, 0] * t
        z1 = outlines[i, kn, 1] * s0 + outlines[i + 1, kn, 1] * t
        ey, ez = y1 - y0, z1 - z0
        wy, wz = y - y0, z - z0
        L2 = max(ey * ey + ez * ez, 1e-300)
        s = min(max((wy * ey + wz * ez) / L2, 0.0), 1.0)
        dy, dz = wy - s * ey, wz - s * ez
        d2 = dy * dy + dz * dz
        if d2 < best:
            best = d2
        if (z0 > z) != (z1 > z):
            if y < y0 + (z - z0) * ey / (ez if ez != 0 else 1.0):
                crossings += 1
    d = math.sqrt(best)
    return -d if crossings % 2 == 1 else d


@numba.njit(cache=True)
def polygon_shell_distance(xs, outlines, y, z, x, offset):
    """Signed distance (chassis frame) to a polygon shell (sections linear in x), caps included.

    The section distance less ``offset`` (the thinned outline's error bound when ``outlines`` are
    the coarse ones), then the end caps, as tiltopt.kinematics.shell.signed_distance_yz.
    """
    return _with_caps(polygon_section_distance(xs, outlines, y, z, x) - offset, x, xs[0], xs[len(xs) - 1])


@numba.njit(cache=True)
def edges_distance(E, y, z):
    """Signed distance (positive outside) of (y, z) to a closed polygon given by its edges.

    E : ndarray of shape (n_edges, 6)
        Per edge: start (y, z), direction (end - start), 1 / max(squared length, 1e-300) and the
        end's z, as
        tiltopt.kinematics.shell.polygon_section_edges gives them for one section: the section is
        interpolated once, not at every point. The same sums as tiltopt.kinematics.shell.polygon_distance,
        with the division by the squared length done as a product.
    """
    best = np.inf
    crossings = 0
    for k in range(E.shape[0]):
        y0, z0, ey, ez = E[k, 0], E[k, 1], E[k, 2], E[k, 3]
        wy, wz = y - y0, z - z0
        s = min(max((wy * ey + wz * ez) * E[k, 4], 0.0), 1.0)
        dy, dz = wy - s * ey, wz - s * ez
        d2 = dy * dy + dz * dz
        if d2 < best:
            best = d2
        if (z0 > z) != (E[k, 5] > z):
            if y < y0 + (z - z0) * ey / (ez if ez != 0 else 1.0):
                crossings += 1
    d = math.sqrt(best)
    return -d if crossings % 2 == 1 else d


@numba.njit(cache=True)
def levels(E, p, out):
    """edges_distance of points p (N, 2) into out (N,): the inside level of a polygon section."""
    for j in range(len(out)):
        out[j] = edges_distance(E, p[j, 0], p[j, 1])


@numba.njit(cache=True)
def root(E, a, b, ha, hb, iterations, out):
    """tiltopt.kinematics.clearance._root (Illinois regula falsi) on a polygon section, the entries in lockstep.

    E : ndarray of shape (n_edges, 6)
        The section (see edges_distance).
    a, b : ndarray of shape (N, 2)
        Tube ends in the chassis frame; ha, hb (N,) their inside levels.
    out : ndarray of shape (N,)
        Written: the crossing parameter in [0, 1] (arbitrary where ha, hb have no sign change).
    """
    N = len(ha)
    lo, hi = np.zeros(N), np.ones(N)
    flo, fhi, side = np.empty(N), np.empty(N), np.zeros(N)
    for j in range(N):
        bad = not (ha[j] * hb[j] < 0)
        flo[j] = -1.0 if bad else ha[j]
        fhi[j] = 1.0 if bad else hb[j]
    for _ in range(iterations):
        for j in range(N):
            den = fhi[j] - flo[j]
            m = hi[j] - fhi[j] * (hi[j] - lo[j]) / (1.0 if den == 0 else den)
            if den == 0 or not math.isfinite(m):
                m = 0.5 * (lo[j] + hi[j])
            else:
                m = min(max(m, lo[j]), hi[j])
            fm = edges_distance(E, a[j, 0] + (b[j, 0] - a[j, 0]) * m, a[j, 1] + (b[j, 1] - a[j, 1]) * m)
            if not math.isfinite(fm):
                fm = 0.0
            same = fm * fhi[j] > 0                   # m replaces hi
            if same and side[j] > 0:
                flo[j] *= 0.5
            if not same and side[j] < 0:
                fhi[j] *= 0.5
            if same:
                hi[j], fhi[j] = m, fm
            else:
                lo[j], flo[j] = m, fm
            side[j] = 1.0 if same else -1.0
    for j in range(N):
        out[j] = lo[j] if abs(flo[j]) < abs(fhi[j]) else hi[j]


# ------------------------------------------------------------------ one point of one item
@numba.njit(cache=True)
def _chassis(q, i, y, z):
    """World (y, z) of item i in the chassis frame (tiltopt.kinematics.shell.to_chassis_frame)."""
    dy, dz = y - q[i, TY], z - q[i, TZ]
    c, s = q[i, CL], q[i, SL]
    return c * dy - s * dz, s * dy + c * dz


@numba.njit(cache=True)
def _members_value(mem, mem_ex, i, x, y, z, xs):
    """Least distance of point (x, y, z) to the capsules of item i (tiltopt.kinematics.clearance._segment_distance)."""
    best = np.inf
    for m in range(mem.shape[1]):
        if mem_ex[i, m]:
            continue
        ay, az, ey, ez = mem[i, m, 0], mem[i, m, 1], mem[i, m, 2], mem[i, m, 3]
        wy, wz = y - ay, z - az
        s = min(max((wy * ey + wz * ez) * mem[i, m, 4], 0.0), 1.0)
        wy -= s * ey
        wz -= s * ez
        dx = x - xs
        d = math.sqrt(wy * wy + wz * wz + dx * dx) - mem[i, m, 5]
        if d < best:
            best = d
    return best


@numba.njit(cache=True)
def _value(mode, exact, q, i, x, y, z, tab, outlines, coarse, coarse_err, mem, mem_ex, xs):
    """Clearance (distance minus crown radius) of world crown point (x, y, z) of item i."""
    if mode == MEMBERS:
        return _members_value(mem, mem_ex, i, x, y, z, xs) - q[i, R]
    yc, zc = _chassis(q, i, y, z)
    if mode == SHELL_SUPERELLIPSE:
        d = superellipse_shell_distance(tab, yc, zc, x, not exact)
    elif exact:
        d = polygon_shell_distance(tab[:, 0], outlines, yc, zc, x, 0.0)
    else:
        d = polygon_shell_distance(tab[:, 0], coarse, yc, zc, x, coarse_err)
    return d - q[i, R]


@numba.njit(cache=True)
def _pair(mode, exact, q, i, p1, p2, tab, outlines, coarse, coarse_err, mem, mem_ex, xs):
    """_value of two world points of item i; exact superellipse distances side by side."""
    if mode == SHELL_SUPERELLIPSE and exact:
        y1, z1 = _chassis(q, i, p1[1], p1[2])
        y2, z2 = _chassis(q, i, p2[1], p2[2])
        a1, b1, c1, n1 = _params(tab, p1[0])
        a2, b2, c2, n2 = _params(tab, p2[0])
        d1, d2 = superellipse_distance_pair(y1, z1 - c1, a1, b1, n1, y2, z2 - c2, a2, b2, n2)
        x0, x1 = tab[0, 0], tab[len(tab) - 1, 0]
        return _with_caps(d1, p1[0], x0, x1) - q[i, R], _with_caps(d2, p2[0], x0, x1) - q[i, R]
    return (_value(mode, exact, q, i, p1[0], p1[1], p1[2], tab, outlines, coarse, coarse_err, mem, mem_ex, xs),
            _value(mode, exact, q, i, p2[0], p2[1], p2[2], tab, outlines, coarse, coarse_err, mem, mem_ex, xs))


@numba.njit(cache=True)
def _rotate(vx, vy, vz, ex, ey, ez, c, s):
    """tiltopt.kinematics.clearance._rotate for one vector."""
    dot = (ex * vx + ey * vy + ez * vz) * (1.0 - c)
    cx = ey * vz - ez * vy
    cy = ez * vx - ex * vz
    cz = ex * vy - ey * vx
    return vx * c + cx * s + ex * dot, vy * c + cy * s + ey * dot, vz * c + cz * s + ez * dot


@numba.njit(cache=True)
def _frame(q, i, delta):
    """Steered crown frame of item i at the steer offset delta from DMID: centre (from the axis
    point), forward and up unit vectors."""
    cd, sd = math.cos(delta + q[i, DMID]), math.sin(delta + q[i, DMID])
    ex, ey, ez = q[i, EX], q[i, EY], q[i, EZ]
    c = _rotate(q[i, CX] - q[i, PX], q[i, CY] - q[i, PY], q[i, CZ] - q[i, PZ], ex, ey, ez, cd, sd)
    f = _rotate(1.0, 0.0, 0.0, ex, ey, ez, cd, sd)
    u = _rotate(0.0, q[i, SG], q[i, CG], ex, ey, ez, cd, sd)
    return c, f, u


@numba.njit(cache=True)
def _point(q, i, fr, theta):
    return _point_cs(q, i, fr, math.cos(theta), math.sin(theta))


@numba.njit(cache=True)
def _point_cs(q, i, fr, ct, st):
    """World crown point of item i at the crown angle with cosine ct and sine st, in frame fr."""
    c, f, u = fr
    rc = q[i, RHO] * ct
    rs = q[i, RHO] * st
    return (c[0] + q[i, PX] + f[0] * rc + u[0] * rs, c[1] + q[i, PY] + f[1] * rc + u[1] * rs,
            c[2] + q[i, PZ] + f[2] * rc + u[2] * rs)


@numba.njit(cache=True)
def _eval(mode, exact, q, i, delta, theta, tab, outlines, coarse, coarse_err, mem, mem_ex, xs):
    x, y, z = _point(q, i, _frame(q, i, delta), theta)
    return _value(mode, exact, q, i, x, y, z, tab, outlines, coarse, coarse_err, mem, mem_ex, xs)


@numba.njit(cache=True)
def _coarse_superellipse(q, i, fr, ct, st, tab, F, off, w):
    """Coarse lower bounds of one steer slice of item i: F[off + k] = _value(SHELL_SUPERELLIPSE, False, ...).

    The same arithmetic as superellipse_shell_distance(..., lower_bound=True), in passes over the
    slice's samples, so that the powers of different samples need not wait for one another.
    w : scratch of shape (8, K).
    """
    K = len(ct)
    r = q[i, R]
    xs = tab[:, 0]
    for k in range(K):
        x, y, z = _point_cs(q, i, fr, ct[k], st[k])
        yc, zc = _chassis(q, i, y, z)
        a, b, z0, n = _params(tab, x)
        w[0, k] = abs(yc) / a
        w[1, k] = abs(zc - z0) / b
        w[2, k], w[3, k], w[4, k], w[5, k] = n, x, a, b
    for k in range(K):
        w[6, k] = w[0, k] ** w[2, k]
        w[7, k] = w[1, k] ** w[2, k]
    x0, x1 = xs[0], xs[len(xs) - 1]
    for k in range(K):
        u, v, n, pu, pv = w[0, k], w[1, k], w[2, k], w[6, k], w[7, k]
        S = max(pu + pv, 1e-30)
        G = S ** (1.0 / n)
        gy = pu / max(u, 1e-30) / w[4, k]
        gz = pv / max(v, 1e-30) / w[5, k]
        grad = (G / S) * math.sqrt(gy * gy + gz * gz)
        val = _with_caps((G - 1.0) / max(grad, 1e-30), w[3, k], x0, x1) - r
        F[off + k] = np.inf if math.isnan(val) else val


@numba.njit(cache=True)
def _coarse_members(q, i, fr, ct, st, mem, mem_ex, xs, F, off):
    """Coarse member clearances of one steer slice of item i: F[off + k] = _value(MEMBERS, True, ...)."""
    r = q[i, R]
    for k in range(len(ct)):
        x, y, z = _point_cs(q, i, fr, ct[k], st[k])
        v = _members_value(mem, mem_ex, i, x, y, z, xs) - r
        F[off + k] = np.inf if math.isnan(v) else v


@numba.njit(cache=True)
def _lower(D, rho, arm, h_t, h_d):
    """tiltopt.kinematics.clearance._lower for one sample."""
    s_lip = rho * h_t + arm * h_d
    Dm = max(D + s_lip, 0.0)
    A = 2 * (rho * h_t) ** 2 + 2 * (arm * h_d) ** 2 + Dm * (rho * h_t ** 2 + arm * h_d ** 2)
    semi = math.sqrt(max(D * D - A, 0.0)) if (D > 0 and D * D > A) else -np.inf
    return max(semi, D - s_lip)


@numba.njit(cache=True)
def _better(f1, f2, fb):
    """The numpy step rule: index (0, 1) of the first smaller of two trials if it beats fb, else -1.

    A NaN trial is never taken (numpy's argmin picks it, and NaN < fb is False).
    """
    if math.isnan(f1) or math.isnan(f2):
        return -1
    if f2 < f1:
        return 1 if f2 < fb else -1
    return 0 if f1 < fb else -1


@numba.njit(cache=True)
def search(mode, q, sg, K, refine_iterations, any_steer, reach, tab, outlines, coarse, coarse_err,
           mem, mem_ex, xs, out):
    """Minimise the clearance over the crown circle x steer range of every item.

    Parameters
    ----------
    mode : {SHELL_SUPERELLIPSE, SHELL_POLYGON, MEMBERS}
    q : ndarray of shape (n, N_COLUMNS)
        Item data (columns named at the top of the module).
    sg : ndarray of shape (S,)
        Coarse steer samples as fractions of the item's largest steer.
    K : int
        Coarse samples round the crown circle.
    refine_iterations : int
    any_steer : bool
        Whether any item of the batch steers (the numpy path then makes steer moves for all).
    reach : int
        Initial local step in coarse half-spacings (``tiltopt.kinematics.clearance._REACH``).
    tab : ndarray of shape (n_stations, 5)
        Shell stations: x, then the superellipse a, b, zc, n (only x is used for polygons).
    outlines, coarse : ndarray of shape (n_stations, n_vertices, 2)
        Polygon sections and their thinned version (dummies for other modes).
    coarse_err : float
        Error bound of the thinned outlines.
    mem : ndarray of shape (n, k, 6)
        Members nearest each item (MEMBERS mode): first end (ay, az), axis (by - ay, bz - az), the
        reciprocal of its squared length (as tiltopt.kinematics.clearance._segment_distance), tube radius.
    mem_ex : ndarray of shape (n, k) of bool
        Members left out (they carry the wheel).
    xs : float
        x of the linkage plane.
    out : ndarray of shape (n, 4)
        Written: reached minimum, its steer (rad), its crown angle (rad), error estimate.
    """
    n = q.shape[0]
    S = len(sg)
    cells = reach // 2
    hth0 = math.pi / K
    n_exact = min(3, refine_iterations)
    nfin = max(refine_iterations - 1, 0)
    F = np.empty(S * K)
    scratch = np.empty((8, K))
    theta, ct, st = np.empty(K), np.empty(K), np.empty(K)
    for k in range(K):
        theta[k] = 2 * math.pi * k / K
        ct[k], st[k] = math.cos(theta[k]), math.sin(theta[k])
    for i in range(n):
        dmax = q[i, DMAX]
        # coarse grid: lower bounds of the shell distance, exact member distances
        best = np.inf
        si, ki = 0, 0
        for s in range(S):
            fr = _frame(q, i, dmax * sg[s])
            if mode == SHELL_SUPERELLIPSE:
                _coarse_superellipse(q, i, fr, ct, st, tab, F, s * K, scratch)
            elif mode == MEMBERS:
                _coarse_members(q, i, fr, ct, st, mem, mem_ex, xs, F, s * K)
            else:
                for k in range(K):
                    x, y, z = _point_cs(q, i, fr, ct[k], st[k])
                    v = _value(mode, mode == MEMBERS, q, i, x, y, z, tab, outlines, coarse, coarse_err, mem,
                               mem_ex, xs)
                    F[s * K + k] = np.inf if math.isnan(v) else v
            for k in range(K):
                if F[s * K + k] < best:
                    best = F[s * K + k]
                    si, ki = s, k
        hd0 = dmax / max(S - 1, 1) if dmax > 0 else 0.0
        db = dmax * sg[si]
        tb = theta[ki]
        exact = mode == MEMBERS or refine_iterations <= n_exact
        fb = _eval(mode, exact, q, i, db, tb, tab, outlines, coarse, coarse_err, mem, mem_ex, xs)
        hth, hd = reach * hth0, reach * hd0
        for it in range(refine_iterations):
            if it == refine_iterations - n_exact and not exact:
                exact = True                                  # the last rounds: exact distances
                fb = _eval(mode, exact, q, i, db, tb, tab, outlines, coarse, coarse_err, mem, mem_ex, xs)
            fr = _frame(q, i, db)
            f1, f2 = _pair(mode, exact, q, i, _point(q, i, fr, tb - hth), _point(q, i, fr, tb + hth), tab,
                           outlines, coarse, coarse_err, mem, mem_ex, xs)
            j = _better(f1, f2, fb)
            if j >= 0:
                tb = tb - hth if j == 0 else tb + hth
                fb = f1 if j == 0 else f2
            if any_steer:
                d1 = min(max(db - hd, -dmax), dmax)
                d2 = min(max(db + hd, -dmax), dmax)
                # a trial clipped onto the current steer is the current point: its value is fb
                ctb, stb = math.cos(tb), math.sin(tb)           # the crown angle both trials share
                if d1 != db and d2 != db:
                    f1, f2 = _pair(mode, exact, q, i, _point_cs(q, i, _frame(q, i, d1), ctb, stb),
                                   _point_cs(q, i, _frame(q, i, d2), ctb, stb), tab, outlines, coarse, coarse_err,
                                   mem, mem_ex, xs)
                else:
                    f1, f2 = fb, fb
                    if d1 != db:
                        x, y, z = _point_cs(q, i, _frame(q, i, d1), ctb, stb)
                        f1 = _value(mode, exact, q, i, x, y, z, tab, outlines, coarse, coarse_err, mem, mem_ex, xs)
                    if d2 != db:
                        x, y, z = _point_cs(q, i, _frame(q, i, d2), ctb, stb)
                        f2 = _value(mode, exact, q, i, x, y, z, tab, outlines, coarse, coarse_err, mem, mem_ex, xs)
                j = _better(f1, f2, fb)
                if j >= 0:
                    db = d1 if j == 0 else d2
                    fb = f1 if j == 0 else f2
            hth, hd = hth / 2, hd / 2
        # error estimate (tiltopt.kinematics.clearance._estimate)
        r, rho, arm = q[i, R], q[i, RHO], q[i, ARM]
        Db = fb + r
        s_lip = rho * hth0 + arm * hd0
        lb = np.inf
        for s in range(S):
            near_s = abs(s - si) <= cells
            for k in range(K):
                dk = abs(k - ki)
                if near_s and min(dk, K - dk) <= cells:       # circular distance in crown samples
                    continue
                Dc = F[s * K + k] + r
                if math.isfinite(Dc) and Dc - s_lip < Db:
                    lb = min(lb, _lower(Dc, rho, arm, hth0, hd0))
        lb = min(lb, _lower(Db, rho, arm, reach * hth0 / 2 ** nfin, reach * hd0 / 2 ** nfin))
        out[i, 0] = fb
        out[i, 1] = db + q[i, DMID]
        out[i, 2] = tb
        out[i, 3] = max(Db - lb, 0.0) if math.isfinite(fb) else np.nan
