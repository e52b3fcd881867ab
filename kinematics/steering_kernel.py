"""Compiled per-item kernel of the steering solve (numba).

:func:`envelope` runs, for each (state, wheel) item in one compiled loop, the closed form of
:mod:`tiltopt.kinematics.steering` (the numpy reference: :func:`tiltopt.kinematics.steering.coefficients`,
:func:`~tiltopt.kinematics.steering.solve`, the reach along the inputs and
:func:`~tiltopt.kinematics.steering.ground_geometry`), with the same arithmetic written for one item at
a time; ``tests/test_steering.py`` holds the two together. What it saves is numpy's call overhead
and temporaries over the (states x inputs x wheels) arrays.

Item data: the six points of each wheel (axis point, steering arm point, rod end, the drive's
two axis points, wheel centre) as ``P0`` (n_candidates, 6, 2, 2), their design (y, z), and ``x``
(n_candidates, 6, 2), their x; the kernel places them in each state from the state's poses:
a chassis point (``cls`` 0) from the datum's position ``O`` and the lean, a point of the wheel's
upright (``cls`` 1) from the wheel centre (its ``contact`` point and camber) and the upright's
angle, any other (``cls`` 2) taken from ``yzg`` (n_states, 6, 2, 2). ``F`` (n_lean, n_inputs, 2, 3)
holds the input functions of each lean and wheel (:func:`tiltopt.kinematics.steering.input_functions`).
"""
from __future__ import annotations

import math

import numba
import numpy as np

LEVER = 1       # as tiltopt.kinematics.steering.LEVER


@numba.njit(cache=True, error_model="numpy")
def envelope(P0, cls, yzg, O, contact, x, beta, gamma, e0, lean, cand, lidx, conv, F, kind, R, r, length, sigma,
             steered, inboard, u0, full, steer, ok, geo, rng):
    """Steer angles of every (state, wheel, input) and the ground geometry at zero input.

    Writes ``steer`` (n, U, 2) rad (NaN where not reached; with ``full`` false only the zero input's
    column is computed, the rest is left NaN), ``ok`` (n, U, 2), ``geo`` (n, 2, 4) (caster, kingpin
    inclination, trail, scrub radius at the zero-input steer; NaN where that is not reached) and
    ``rng`` (n, 2, 2) (the smallest and largest reached steer).

    Each steer is ``atan2(Y, X)`` with ``X = P K - Q rt``, ``Y = Q K + P rt`` (``rt = sigma
    sqrt(disc)``). Without ``full`` the range is found from ``Y / X`` (monotone in the angle while
    ``X > 0``, |steer| < 90 deg), with ``atan2`` only at its two ends and at zero input; an item
    with a steer beyond 90 deg takes ``atan2`` at every input.
    """
    n = beta.shape[0]
    U = F.shape[1]
    tq = np.empty(U)
    xy = np.empty((U, 2))
    yz = np.empty((6, 2))
    for s in range(n):
        c = cand[s]
        li = lidx[s]
        cl, sl = math.cos(lean[s]), math.sin(lean[s])
        for w in range(2):
            if not conv[s]:
                for j in range(U):
                    steer[s, j, w] = np.nan
                    ok[s, j, w] = False
                for k in range(4):
                    geo[s, w, k] = np.nan
                rng[s, w, 0] = np.nan
                rng[s, w, 1] = np.nan
                continue
            cb, sb = math.cos(beta[s, w]), math.sin(beta[s, w])
            # the six points in this state (module docs of tiltopt.kinematics.steering._envelope_compiled)
            g = gamma[s, w]
            rho = R[c, w] - r[c, w]
            cy = contact[s, w, 0] + rho * math.sin(g)
            cz = contact[s, w, 1] + rho * math.cos(g) + r[c, w]
            for k in range(6):
                py, pz = P0[c, k, w, 0], P0[c, k, w, 1]
                if cls[k, w] == 0:
                    yz[k, 0] = O[s, 0] + cl * py + sl * pz
                    yz[k, 1] = O[s, 1] - sl * py + cl * pz
                elif cls[k, w] == 1:
                    vy, vz = py - P0[c, 5, w, 0], pz - P0[c, 5, w, 1]
                    yz[k, 0] = cy + cb * vy + sb * vz
                    yz[k, 1] = cz - sb * vy + cb * vz
                else:
                    yz[k, 0], yz[k, 1] = yzg[s, k, w, 0], yzg[s, k, w, 1]
            Ax, Ay, Az = x[c, 0, w], yz[0, 0], yz[0, 1]
            ex = e0[c, w, 0]
            ey = cb * e0[c, w, 1] + sb * e0[c, w, 2]
            ez = -sb * e0[c, w, 1] + cb * e0[c, w, 2]
            d0 = 0.0
            if steered[w]:
                Sx, Sy, Sz = x[c, 1, w], yz[1, 0], yz[1, 1]
                Ix, Iy, Iz = x[c, 2, w], yz[2, 0], yz[2, 1]
                Px, Py, Pz = x[c, 3, w], yz[3, 0], yz[3, 1]
                ax, ay, az = x[c, 4, w] - Px, yz[4, 0] - Py, yz[4, 1] - Pz
                an = math.sqrt(ax * ax + ay * ay + az * az)
                ax, ay, az = ax / an, ay / an, az / an
                ev = ex * (Sx - Ax) + ey * (Sy - Ay) + ez * (Sz - Az)
                cx, cy, cz = Ax + ex * ev, Ay + ey * ev, Az + ez * ev
                rx, ry, rz = Sx - cx, Sy - cy, Sz - cz
                bx, by, bz = ey * rz - ez * ry, ez * rx - ex * rz, ex * ry - ey * rx
                rho2 = rx * rx + ry * ry + rz * rz
                if kind[w] == LEVER:
                    qx, qy, qz = Ix - Px, Iy - Py, Iz - Pz
                    aq = ax * qx + ay * qy + az * qz
                    ppx, ppy, ppz = qx - ax * aq, qy - ay * aq, qz - az * aq
                    kx, ky, kz = ay * qz - az * qy, az * qx - ax * qz, ax * qy - ay * qx
                    gx, gy, gz = cx - Px - ax * aq, cy - Py - ay * aq, cz - Pz - az * aq
                    mr = gx * rx + gy * ry + gz * rz
                    mb = gx * bx + gy * by + gz * bz
                    p1 = -(ppx * rx + ppy * ry + ppz * rz)
                    q1 = -(ppx * bx + ppy * by + ppz * bz)
                    p2 = -(kx * rx + ky * ry + kz * rz)
                    q2 = -(kx * bx + ky * by + kz * bz)
                    mm = gx * gx + gy * gy + gz * gz + ppx * ppx + ppy * ppy + ppz * ppz
                    n1 = -2.0 * (gx * ppx + gy * ppy + gz * ppz)
                    n2 = -2.0 * (gx * kx + gy * ky + gz * kz)
                    n3 = 0.0
                else:
                    mx, my, mz = cx - Ix, cy - Iy, cz - Iz
                    mr = mx * rx + my * ry + mz * rz
                    mb = mx * bx + my * by + mz * bz
                    p1 = -(ax * rx + ay * ry + az * rz)
                    q1 = -(ax * bx + ay * by + az * bz)
                    p2 = 0.0
                    q2 = 0.0
                    mm = mx * mx + my * my + mz * mz
                    n1 = -2.0 * (mx * ax + my * ay + mz * az)
                    n2 = 0.0
                    n3 = 1.0
                k0 = length[c, w] * length[c, w] - mm - rho2
                sg = sigma[c, w]
                wide = full
                for j in range(U):
                    f1, f2, f3 = F[li, j, w, 0], F[li, j, w, 1], F[li, j, w, 2]
                    P = 2.0 * (mr + p1 * f1 + p2 * f2)
                    Q = 2.0 * (mb + q1 * f1 + q2 * f2)
                    K = k0 - n1 * f1 - n2 * f2 - n3 * f3
                    disc = P * P + Q * Q - K * K
                    if disc >= 0.0 and sg != 0.0:
                        # delta = atan2(Q, P) + sg atan2(sqrt(disc), K), as one angle: atan2(Y, X)
                        rt = sg * math.sqrt(disc)
                        X, Y = P * K - Q * rt, Q * K + P * rt
                        ok[s, j, w] = True
                        if wide or j == u0:
                            steer[s, j, w] = math.atan2(Y, X)
                        if X > 0.0:
                            tq[j] = Y / X
                        else:
                            wide = True
                            tq[j] = np.nan
                        xy[j, 0], xy[j, 1] = X, Y
                    else:
                        steer[s, j, w] = np.nan
                        ok[s, j, w] = False
                # a path from zero input outward: a toggle on the way stops it
                for j in range(u0 + 1, U):
                    if not ok[s, j - 1, w]:
                        ok[s, j, w] = False
                for j in range(u0 - 1, -1, -1):
                    if not ok[s, j + 1, w]:
                        ok[s, j, w] = False
                lo, hi = np.inf, -np.inf
                if wide:           # full, or a steer beyond 90 deg: atan2 at every reached input
                    for j in range(U):
                        if ok[s, j, w]:
                            d = math.atan2(xy[j, 1], xy[j, 0])
                            lo, hi = min(lo, d), max(hi, d)
                            steer[s, j, w] = d if (full or j == u0) else np.nan
                        else:
                            steer[s, j, w] = np.nan
                elif ok[s, u0, w]:   # the range's ends by Y / X, then their angles
                    jl, jh = u0, u0
                    for j in range(U):
                        if ok[s, j, w]:
                            if tq[j] < tq[jl]:
                                jl = j
                            if tq[j] > tq[jh]:
                                jh = j
                        if j != u0:
                            steer[s, j, w] = np.nan
                    lo = math.atan2(xy[jl, 1], xy[jl, 0])
                    hi = math.atan2(xy[jh, 1], xy[jh, 0])
                if not ok[s, u0, w]:
                    for k in range(4):
                        geo[s, w, k] = np.nan
                    rng[s, w, 0] = np.nan
                    rng[s, w, 1] = np.nan
                    continue
                rng[s, w, 0], rng[s, w, 1] = lo, hi
                d0 = steer[s, u0, w]
            else:
                for j in range(U):
                    steer[s, j, w] = 0.0
                    ok[s, j, w] = True
                rng[s, w, 0] = 0.0
                rng[s, w, 1] = 0.0
            # ground geometry at the zero-input steer (tiltopt.kinematics.steering.ground_geometry)
            cd, sd = math.cos(d0), math.sin(d0)
            nx, ny, nz = _turn(0.0, math.cos(g), -math.sin(g), ex, ey, ez, cd, sd)
            wx, wy, wz = _turn(x[c, 5, w] - Ax, yz[5, 0] - Ay, yz[5, 1] - Az, ex, ey, ez, cd, sd)
            dvx, dvy, dvz = -nx * nz, -ny * nz, 1.0 - nz * nz
            dn = math.sqrt(dvx * dvx + dvy * dvy + dvz * dvz)
            px, py = Ax + wx - rho * dvx / dn, Ay + wy - rho * dvy / dn
            hn = math.sqrt(ny * ny + nx * nx)
            hx, hy = ny / hn, -nx / hn
            t = -Az / ez
            dgx, dgy = Ax + ex * t - px, Ay + ey * t - py
            ecy, ecz = cl * ey - sl * ez, sl * ey + cl * ez
            geo[s, w, 0] = math.atan2(-ex, ecz)
            geo[s, w, 1] = math.atan2(inboard[w] * ecy, ecz)
            geo[s, w, 2] = dgx * hx + dgy * hy
            geo[s, w, 3] = inboard[w] * (-dgx * hy + dgy * hx)


@numba.njit(cache=True)
def _turn(vx, vy, vz, ex, ey, ez, c, s):
    """Rodrigues rotation of v about unit e by the angle with cosine c and sine s."""
    dot = (ex * vx + ey * vy + ez * vz) * (1.0 - c)
    return (vx * c + (ey * vz - ez * vy) * s + ex * dot, vy * c + (ez * vx - ex * vz) * s + ey * dot,
            vz * c + (ex * vy - ey * vx) * s + ez * dot)
