"""Front-view drawing of a mechanism state, shared by the explorer and the build sheet.

The drawing is described once, per topology, by a :func:`drawing_spec` (a
JSON-able dict: which points make each body, the links, springs, sliders,
pivots and wheels, and the colour of each body). The explorer's JavaScript
draws states from that spec and the precomputed point positions; this module
renders the same spec to SVG in Python for the build sheet, with dimensions.

Front view, looking from ahead: y to the right, z up, ground z = 0, mm.
SVG user units are mm with ``svg_x = y`` and ``svg_y = -z``.

Wheels are drawn as the front-view outline of a toroidal tyre (outer radius
R, crown radius r): a band 2 r wide and 2 R tall whose ends are the crown
half-circles of radius r, tilted by the wheel's camber.
"""
from __future__ import annotations

import html
import math
from typing import Sequence

import numba
import numpy as np

# Our own palette ("harbour"): bodies take these in order, the chassis is slate.
CHASSIS_COLOUR = "#3b4a5a"
BODY_COLOURS = ["#0d7c86", "#c8553d", "#6a4c93", "#d4a017", "#2f8f4e", "#b0417a", "#4d7ea8", "#8a6d3b"]
SPRING_COLOUR = "#b8860b"
LINK_COLOUR = "#264653"
SHELL_COLOUR = "#7d9cb3"
TYRE_FILL = "#2b2b2b"
GAP_COLOUR = "#d62839"
GROUND_COLOUR = "#6b5b4b"


# ---------------------------------------------------------------- geometry
def _hull(points: np.ndarray) -> list[int]:
    """Convex hull (monotone chain), counter-clockwise indices; collinear sets give their two ends."""
    idx = sorted(range(len(points)), key=lambda i: (points[i][0], points[i][1]))
    if len(idx) <= 2:
        return idx

    def cross(o, a, b):
        return (points[a][0] - points[o][0]) * (points[b][1] - points[o][1]) - \
            (points[a][1] - points[o][1]) * (points[b][0] - points[o][0])

    lower: list[int] = []
    for i in idx:
        while len(lower) >= 2 and cross(lower[-2], lower[-1], i) <= 1e-9:
            lower.pop()
        lower.append(i)
    upper: list[int] = []
    for i in reversed(idx):
        while len(upper) >= 2 and cross(upper[-2], upper[-1], i) <= 1e-9:
            upper.pop()
        upper.append(i)
    hull = lower[:-1] + upper[:-1]
    return hull if len(hull) >= 2 else idx[:1] + idx[-1:]


def drawing_spec(model, geom=None, candidate: int = 0) -> dict:
    """The topology-level description of the drawing (JSON-able).

    Parameters
    ----------
    model : kinematics.Model
    geom : kinematics.Geometry, optional
        Used for the tyre radii and the hull order (design position of ``candidate``).

    Returns
    -------
    dict with keys ``point_refs``, ``bodies`` (name, colour, hull: point
    indices, chassis: bool), ``links``/``springs`` ([i, j, name]),
    ``sliders`` ([from, to, runner, name]), ``pivots`` ([i, name]),
    ``wheels`` (name, centre, R, r, body), ``datum`` (index or -1),
    ``lower_z`` (per point, unused by JS).
    """
    mech = model.mech
    geom = geom if geom is not None else model.default_geometry
    P = np.asarray(geom.points[candidate])
    pidx = model.point_index
    joint_pts: set[int] = set()
    for p in mech.pins:
        joint_pts |= {pidx[p.a], pidx[p.b]}
    for j in list(mech.links) + list(mech.springs):
        joint_pts |= {pidx[j.a], pidx[j.b]}
    for s in mech.sliders:
        joint_pts |= {pidx[s.a_from], pidx[s.a_to], pidx[s.b]}
    bodies = []
    k = 0
    for bi, name in enumerate(model.body_names):
        members = [i for i, r in enumerate(model.point_refs) if model.point_body[i] == bi]
        if bi == model.chassis:
            members = [i for i in members if i in joint_pts] or members
        hull = [members[i] for i in _hull(P[members])]
        if bi == model.chassis:
            colour = CHASSIS_COLOUR
        else:
            colour = BODY_COLOURS[k % len(BODY_COLOURS)]
            k += 1
        bodies.append({"name": name, "colour": colour, "hull": hull, "chassis": bi == model.chassis})
    pivots = []
    seen = set()
    for p in mech.pins:
        i = pidx[p.a]
        if i not in seen:
            pivots.append([i, p.name])
            seen.add(i)
    datum = -1
    for i, r in enumerate(model.point_refs):
        if model.point_body[i] == model.chassis and np.allclose(P[i], 0.0, atol=1e-6):
            datum = i
            break
    wheels = []
    for w_i, w in enumerate(mech.wheels):
        wheels.append({"name": w.name, "centre": pidx[w.centre],
                       "R": float(geom.outer_radius[candidate, w_i]), "r": float(geom.crown_radius[candidate, w_i]),
                       "body": model.body_names.index(w.upright)})
    return {
        "point_refs": list(model.point_refs),
        "bodies": bodies,
        "links": [[pidx[l.a], pidx[l.b], l.name] for l in mech.links],
        "springs": [[pidx[s.a], pidx[s.b], s.name] for s in mech.springs],
        "sliders": [[pidx[s.a_from], pidx[s.a_to], pidx[s.b], s.name] for s in mech.sliders],
        "pivots": pivots,
        "wheels": wheels,
        "datum": datum,
    }


def tyre_outline(centre, camber, outer_radius, crown_radius, n_arc: int = 12) -> np.ndarray:
    """Front-view outline of a toroidal tyre.

    Parameters
    ----------
    centre : ndarray of shape (..., 2)
        Wheel centre (y, z), mm.
    camber : ndarray of shape (...)
        Wheel camber, rad (positive = top toward +y).
    outer_radius, crown_radius : float or ndarray of shape (...)
    n_arc : int
        Points per crown half-circle.

    Returns
    -------
    ndarray of shape (..., 2 * n_arc, 2)
        Closed outline (first point not repeated), mm.
    """
    centre = np.asarray(centre, float)
    g = np.asarray(camber, float)[..., None]
    R = np.asarray(outer_radius, float)[..., None]
    r = np.asarray(crown_radius, float)[..., None]
    # local frame: u along the axle (+y when upright), w up the wheel plane
    t = np.linspace(0.0, math.pi, n_arc)
    # top crown: centre at w = R - r, half-circle from u = +r over the top to u = -r
    u_top, w_top = r * np.cos(t), (R - r) + r * np.sin(t)
    u_bot, w_bot = -r * np.cos(t), -(R - r) - r * np.sin(t)
    u = np.concatenate([u_top, u_bot], axis=-1)
    w = np.concatenate([w_top, w_bot], axis=-1)
    c, s = np.cos(g), np.sin(g)
    # wheel plane direction for camber g is (sin g, cos g); axle direction (cos g, -sin g)
    y = centre[..., 0:1] + u * c + w * s
    z = centre[..., 1:2] - u * s + w * c
    return np.stack([y, z], axis=-1)


def chassis_transform(yz, pose) -> np.ndarray:
    """Chassis-frame points to global: ``x = t + R(phi) p``.

    Parameters
    ----------
    yz : ndarray of shape (n, 2)
    pose : (y_O, z_O, phi_rad)
    """
    yz = np.asarray(yz, float)
    y0, z0, phi = pose
    c, s = math.cos(phi), math.sin(phi)
    return np.stack([y0 + c * yz[:, 0] + s * yz[:, 1], z0 - s * yz[:, 0] + c * yz[:, 1]], axis=-1)


def shell_outline(shell, x_mm: float, n_rays: int = 96, reach_mm: float = 4000.0):
    """Section outline of a body shell at station ``x_mm``, chassis frame, design position.

    Works with any shell through ``tiltopt.kinematics.shell.shell_signed_distance``
    (positive outside): rays from an inside point, bisected to the surface.
    Returns an ndarray of shape (n_rays, 2) in mm, or None when the section is
    empty at that station.
    """
    from tiltopt.kinematics.shell import shell_signed_distance

    probe = np.stack([np.zeros(81), np.linspace(0.0, 3000.0, 81)], -1)
    d = np.asarray(shell_signed_distance(shell, probe, x_mm), float).reshape(-1)
    if not np.any(d < 0):
        return None
    centre = probe[int(np.nanargmin(d))]
    ang = np.linspace(0.0, 2 * math.pi, n_rays, endpoint=False)
    dirs = np.stack([np.sin(ang), np.cos(ang)], -1)
    lo = np.zeros(n_rays)
    hi = np.full(n_rays, reach_mm)
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        dm = np.asarray(shell_signed_distance(shell, centre + dirs * mid[:, None], x_mm), float).reshape(-1)
        inside = dm < 0
        lo = np.where(inside, mid, lo)
        hi = np.where(inside, hi, mid)
    return centre + dirs * (0.5 * (lo + hi))[:, None]


# ------------------------------------------------------------------ gaps
def _seg_dist(p, a, b):
    """Distance of points p (..., 2) to segments a-b (..., 2); returns (dist, closest point)."""
    ab = b - a
    L2 = np.maximum(np.sum(ab * ab, -1), 1e-12)
    t = np.clip(np.sum((p - a) * ab, -1) / L2, 0.0, 1.0)
    q = a + ab * t[..., None]
    return np.linalg.norm(p - q, axis=-1), q


def _poly_seg_gap(poly, a, b):
    """Smallest distance between closed polylines ``poly`` (..., k, 2) and segments a-b (..., s, 2), both ways.

    Returns (..., ) distances. Two polylines that do not cross are nearest at a vertex of one of them.
    """
    d1, _ = _seg_dist(poly[..., :, None, :], a[..., None, :, :], b[..., None, :, :])
    pa, pb = poly, np.roll(poly, -1, axis=-2)
    ends = np.concatenate([a, b], axis=-2)
    d2, _ = _seg_dist(ends[..., :, None, :], pa[..., None, :, :], pb[..., None, :, :])
    return np.minimum(np.min(d1, axis=(-1, -2)), np.min(d2, axis=(-1, -2)))


def poly_seg_gap(poly, a, b) -> np.ndarray:
    """Smallest distance between closed polylines and sets of segments, compiled, over any leading axes.

    poly (..., k, 2), a and b (..., s, 2) with broadcastable leading axes; returns (...): the
    distance between the outline and the segments (as :func:`_poly_seg_gap`, the numpy
    reference), 0 where a segment crosses the outline.
    """
    lead = np.broadcast_shapes(poly.shape[:-2], a.shape[:-2], b.shape[:-2])

    def flat(x):
        return np.ascontiguousarray(np.broadcast_to(x, lead + x.shape[-2:]).reshape((-1,) + x.shape[-2:]),
                                    dtype=float)

    P, A, B = flat(poly), flat(a), flat(b)
    out = np.empty(P.shape[0])
    _poly_seg_gap_kernel(P, A, B, out)
    return out.reshape(lead)


@numba.njit(cache=True, error_model="numpy")
def _seg_dist1(py, pz, ay, az, by, bz):
    """Distance of a point to a segment (as :func:`_seg_dist`)."""
    aby, abz = by - ay, bz - az
    L2 = max(aby * aby + abz * abz, 1e-12)
    t = min(max(((py - ay) * aby + (pz - az) * abz) / L2, 0.0), 1.0)
    dy, dz = py - (ay + aby * t), pz - (az + abz * t)
    return np.sqrt(dy * dy + dz * dz)


@numba.njit(cache=True, error_model="numpy")
def _cross(p1, p2, q1, q2):
    """Whether segments p1-p2 and q1-q2 cross (each one's ends strictly on both sides of the other)."""
    ry, rz = p2[0] - p1[0], p2[1] - p1[1]
    sy, sz = q2[0] - q1[0], q2[1] - q1[1]
    d1 = sy * (p1[1] - q1[1]) - sz * (p1[0] - q1[0])
    d2 = sy * (p2[1] - q1[1]) - sz * (p2[0] - q1[0])
    d3 = ry * (q1[1] - p1[1]) - rz * (q1[0] - p1[0])
    d4 = ry * (q2[1] - p1[1]) - rz * (q2[0] - p1[0])
    return d1 * d2 < 0.0 and d3 * d4 < 0.0


@numba.njit(cache=True, error_model="numpy")
def _poly_seg_gap_kernel(P, A, B, out):
    n, k, s = P.shape[0], P.shape[1], A.shape[1]
    for i in range(n):
        best = np.inf
        for p in range(k):                  # polyline vertices to the segments
            for j in range(s):
                best = min(best, _seg_dist1(P[i, p, 0], P[i, p, 1], A[i, j, 0], A[i, j, 1], B[i, j, 0], B[i, j, 1]))
        for j in range(s):                  # segment ends to the polyline's edges
            for p in range(k):              # a segment crossing an edge: no gap
                q = (p + 1) % k
                if _cross(P[i, p], P[i, q], A[i, j], B[i, j]):
                    best = 0.0
            for e in range(2):
                ey = A[i, j, 0] if e == 0 else B[i, j, 0]
                ez = A[i, j, 1] if e == 0 else B[i, j, 1]
                for p in range(k):
                    q = (p + 1) % k
                    best = min(best, _seg_dist1(ey, ez, P[i, p, 0], P[i, p, 1], P[i, q, 0], P[i, q, 1]))
        out[i] = best


def _by_chunks(fn, *arrays, budget: int = 1 << 18):
    """``fn(*arrays)`` over the leading axes in chunks of about ``budget`` point pairs.

    Each array is (..., n_i, 2) with broadcastable leading axes; ``fn`` returns (n_lead, ...)
    for flattened inputs. The pairwise temporaries of ``fn`` (lead x n_i x n_j) stay small
    enough for the cache, instead of gigabytes for a whole front's states.
    """
    lead = np.broadcast_shapes(*(a.shape[:-2] for a in arrays))
    flat = [np.broadcast_to(a, lead + a.shape[-2:]).reshape((-1,) + a.shape[-2:]) for a in arrays]
    n = flat[0].shape[0]
    pairs = max(1, int(np.prod([a.shape[-2] for a in flat[:2]])))
    step = max(1, budget // pairs)
    parts = [fn(*(a[i:i + step] for a in flat)) for i in range(0, n, step)] or [fn(*flat)]
    out = np.concatenate(parts)
    return out.reshape(lead + out.shape[1:])


def _closest_pair(poly, A, B):
    """Closest pair (distance, point on poly, point on segments) for one state; poly (k, 2), A/B (s, 2)."""
    d1, q1 = _seg_dist(poly[:, None, :], A[None], B[None])
    k1 = np.unravel_index(np.argmin(d1), d1.shape)
    best = (float(d1[k1]), poly[k1[0]], q1[k1])
    ends = np.concatenate([A, B])
    pa, pb = poly, np.roll(poly, -1, axis=0)
    d2, q2 = _seg_dist(ends[:, None, :], pa[None], pb[None])
    k2 = np.unravel_index(np.argmin(d2), d2.shape)
    if d2[k2] < best[0]:
        best = (float(d2[k2]), q2[k2], ends[k2[0]])
    return best


def front_view_gaps(spec: dict, points, camber, pose=None, shell_poly=None) -> dict:
    """Front-view (2-D, in the linkage plane) gaps of every state, batched.

    These are drawing measurements at the linkage station, not the 3-D
    clearance of :mod:`tiltopt.kinematics.clearance`; the pages label them so.

    Parameters
    ----------
    points : ndarray of shape (..., n_points, 2)
    camber : ndarray of shape (..., 2), rad
    pose : ndarray of shape (..., 3), optional
        Chassis pose (y_O, z_O, phi) for the shell.
    shell_poly : ndarray of shape (m, 2), optional
        Shell section, chassis frame.

    Returns
    -------
    dict of ndarray of shape (...): ``wheel_link_mm`` (tyre to links, springs
    and bodies not carrying it), ``wheel_shell_mm`` (positive = tyre outside
    the section; NaN without a shell), ``ground_mm`` (lowest link/body point).
    """
    P = np.asarray(points, float)
    lead = P.shape[:-2]
    out = {}
    tyres = []
    for w_i, w in enumerate(spec["wheels"]):
        tyres.append(tyre_outline(P[..., w["centre"], :], np.asarray(camber)[..., w_i], w["R"], w["r"], 10))
    segs, owner = [], []
    for b_i, b in enumerate(spec["bodies"]):
        h = b["hull"]
        for k in range(len(h) if len(h) > 2 else 1):
            segs.append((h[k], h[(k + 1) % len(h)]))
            owner.append(b_i)
    for i, j, _ in spec["links"] + spec["springs"]:
        segs.append((i, j))
        owner.append(-1)
    gaps = []
    for w_i, w in enumerate(spec["wheels"]):
        sel = [s for s, o in zip(segs, owner) if o != w["body"]]
        if not sel:
            continue
        a = P[..., [s[0] for s in sel], :]
        b = P[..., [s[1] for s in sel], :]
        gaps.append(poly_seg_gap(tyres[w_i], a, b))
    out["wheel_link_mm"] = np.min(np.stack(gaps), 0) if gaps else np.full(lead, np.nan)
    if shell_poly is not None and pose is not None:
        pose = np.asarray(pose, float)
        y0, z0, phi = pose[..., 0:1], pose[..., 1:2], pose[..., 2:3]
        sp = np.asarray(shell_poly, float)
        c, s = np.cos(phi), np.sin(phi)
        gy = y0 + c * sp[:, 0] + s * sp[:, 1]
        gz = z0 - s * sp[:, 0] + c * sp[:, 1]
        G = np.stack([gy, gz], -1)                                   # (..., m, 2)
        A, B = G, np.roll(G, -1, axis=-2)
        best = np.full(lead, np.inf)
        for tyre in tyres:
            dmin = poly_seg_gap(tyre, A, B)
            inside = _by_chunks(_inside, tyre, G)
            best = np.minimum(best, np.where(np.any(inside, -1), -dmin, dmin))
        out["wheel_shell_mm"] = best
    else:
        out["wheel_shell_mm"] = np.full(lead, np.nan)
    used = sorted({i for s in segs for i in s})
    out["ground_mm"] = np.min(P[..., used, 1], axis=-1)
    return out


def _inside(pts, poly):
    """Even-odd point-in-polygon, batched: pts (..., k, 2), poly (..., m, 2) -> (..., k) bool."""
    x, y = pts[..., :, None, 0], pts[..., :, None, 1]
    ax, ay = poly[..., None, :, 0], poly[..., None, :, 1]
    bx, by = np.roll(poly, -1, axis=-2)[..., None, :, 0], np.roll(poly, -1, axis=-2)[..., None, :, 1]
    cond = (ay > y) != (by > y)
    with np.errstate(divide="ignore", invalid="ignore"):
        xint = ax + (y - ay) * (bx - ax) / (by - ay)
    return (np.sum(cond & (x < xint), -1) % 2) == 1


# -------------------------------------------------------------------- SVG
def _f(v: float) -> str:
    return f"{v:.2f}".rstrip("0").rstrip(".") if math.isfinite(v) else "0"


def _pts(a) -> str:
    return " ".join(f"{_f(p[0])},{_f(-p[1])}" for p in a)


def front_view_svg(spec: dict, points, camber, pose=(0.0, 0.0, 0.0), shell_poly=None, *,
                   dimensions: bool = False, labels: Sequence[str] | None = None, title: str = "",
                   width: str = "100%", show_gaps: bool = True, jig_datum=None) -> str:
    """SVG of one state.

    Parameters
    ----------
    spec : dict from :func:`drawing_spec`
    points : ndarray of shape (n_points, 2)
        mm, model.point_refs order.
    camber : ndarray of shape (2,)
        rad, [left, right].
    pose : (y_O, z_O, phi_rad)
        Chassis pose, for the shell section.
    shell_poly : ndarray of shape (m, 2), optional
        Shell section, chassis frame.
    dimensions : bool
        Add dimension lines (track, overall width, pivot heights) and pivot tags.
    labels : list of str, optional
        Tag per pivot of ``spec['pivots']`` (e.g. "P1").
    """
    P = np.asarray(points, float)
    cam = np.asarray(camber, float)
    parts: list[str] = []
    tyres = [tyre_outline(P[w["centre"]], cam[i], w["R"], w["r"], 16) for i, w in enumerate(spec["wheels"])]
    shell_g = chassis_transform(shell_poly, pose) if shell_poly is not None else None
    allp = [P[[i for b in spec["bodies"] for i in b["hull"]]]] + tyres + ([shell_g] if shell_g is not None else [])
    allp = np.concatenate(allp)
    allp = allp[np.all(np.isfinite(allp), axis=1)]
    ymin, ymax = float(allp[:, 0].min()), float(allp[:, 0].max())
    zmin, zmax = min(0.0, float(allp[:, 1].min())), float(allp[:, 1].max())
    span = max(ymax - ymin, zmax - zmin, 100.0)
    pad = 0.06 * span
    pad_b = pad + (0.16 * span if dimensions else 0.02 * span)
    pad_l = pad + (0.14 * span if dimensions else 0.0)
    vb = (ymin - pad_l, -(zmax + pad), (ymax - ymin) + pad_l + pad, (zmax - zmin) + pad + pad_b)
    lw = span / 260.0
    fs = span / (40.0 if dimensions else 48.0)
    parts.append(f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="{_f(vb[0])} {_f(vb[1])} {_f(vb[2])} {_f(vb[3])}" '
                 f'width="{width}" class="frontview" font-family="Helvetica, Arial, sans-serif">')
    if title:
        parts.append(f"<title>{html.escape(title)}</title>")
    # ground
    parts.append(f'<rect x="{_f(vb[0] - 2 * span)}" y="0" width="{_f(vb[2] + 4 * span)}" height="{_f(vb[3] + vb[1])}" '
                 f'fill="#efe9e1"/>')
    parts.append(f'<line x1="{_f(vb[0] - 2 * span)}" y1="0" x2="{_f(vb[0] + vb[2] + 2 * span)}" y2="0" '
                 f'stroke="{GROUND_COLOUR}" stroke-width="{_f(lw * 1.2)}"/>')
    if shell_g is not None:
        parts.append(f'<polygon points="{_pts(shell_g)}" fill="{SHELL_COLOUR}" fill-opacity="0.12" '
                     f'stroke="{SHELL_COLOUR}" stroke-width="{_f(lw)}" stroke-dasharray="{_f(lw * 6)},{_f(lw * 3)}"/>')
    for t in tyres:
        parts.append(f'<polygon points="{_pts(t)}" fill="{TYRE_FILL}" fill-opacity="0.18" stroke="{TYRE_FILL}" '
                     f'stroke-width="{_f(lw)}"/>')
    for b in spec["bodies"]:
        h = P[b["hull"]]
        if len(h) > 2:
            parts.append(f'<polygon points="{_pts(h)}" fill="{b["colour"]}" fill-opacity="0.22" stroke="{b["colour"]}" '
                         f'stroke-width="{_f(lw * 2.2)}" stroke-linejoin="round"><title>{html.escape(b["name"])}'
                         f'</title></polygon>')
        elif len(h) == 2:
            parts.append(f'<polyline points="{_pts(h)}" stroke="{b["colour"]}" stroke-width="{_f(lw * 3)}" '
                         f'stroke-linecap="round"><title>{html.escape(b["name"])}</title></polyline>')
    for i, j, name in spec["links"]:
        parts.append(f'<polyline points="{_pts(P[[i, j]])}" stroke="{LINK_COLOUR}" stroke-width="{_f(lw * 2.4)}" '
                     f'stroke-linecap="round"><title>{html.escape(name)}</title></polyline>')
    for i, j, name in spec["springs"]:
        parts.append(f'<polyline points="{_pts(_coil(P[i], P[j], lw * 9))}" fill="none" stroke="{SPRING_COLOUR}" '
                     f'stroke-width="{_f(lw * 1.6)}" stroke-linejoin="round"><title>{html.escape(name)}</title>'
                     f'</polyline>')
    for a, b, r_, name in spec["sliders"]:
        parts.append(f'<polyline points="{_pts(P[[a, b]])}" stroke="#555" stroke-width="{_f(lw * 1.2)}" '
                     f'stroke-dasharray="{_f(lw * 3)},{_f(lw * 2)}"/>')
    for w in spec["wheels"]:
        c = P[w["centre"]]
        parts.append(f'<circle cx="{_f(c[0])}" cy="{_f(-c[1])}" r="{_f(lw * 2.5)}" fill="{TYRE_FILL}" '
                     f'stroke="{TYRE_FILL}" stroke-width="{_f(lw)}"/>')
    for k, (i, name) in enumerate(spec["pivots"]):
        c = P[i]
        parts.append(f'<circle cx="{_f(c[0])}" cy="{_f(-c[1])}" r="{_f(lw * 3.2)}" fill="#fff" stroke="#111" '
                     f'stroke-width="{_f(lw * 1.1)}"><title>{html.escape(name)}</title></circle>')
        if labels:
            parts.append(f'<text x="{_f(c[0] + lw * 5)}" y="{_f(-c[1] - lw * 5)}" font-size="{_f(fs)}" '
                         f'fill="#111">{html.escape(labels[k])}</text>')
    if spec.get("datum", -1) >= 0:
        c = P[spec["datum"]]
        d = lw * 6
        parts.append(f'<path d="M{_f(c[0] - d)},{_f(-c[1])}H{_f(c[0] + d)}M{_f(c[0])},{_f(-c[1] + d)}V{_f(-c[1] - d)}" '
                     f'stroke="#111" stroke-width="{_f(lw)}"/>')
    if jig_datum is not None:
        jy, jz = float(jig_datum[0]), float(jig_datum[1])
        d = lw * 7
        parts.append(f'<g stroke="#c8553d" stroke-width="{_f(lw)}" fill="none"><circle cx="{_f(jy)}" cy="{_f(-jz)}" '
                     f'r="{_f(d * 0.6)}"/><path d="M{_f(jy - d)},{_f(-jz)}H{_f(jy + d)}M{_f(jy)},{_f(-jz + d)}'
                     f'V{_f(-jz - d)}"/></g><text x="{_f(jy + d)}" y="{_f(-jz + fs)}" font-size="{_f(fs)}" '
                     f'fill="#c8553d">J</text>')
    if show_gaps:
        parts += _gap_marks(spec, P, tyres, shell_g, lw, fs)
    if dimensions:
        parts += _dimensions(spec, P, tyres, lw, fs, span, vb)
    parts.append("</svg>")
    return "\n".join(parts)


def _coil(a, b, amp, n=8):
    a, b = np.asarray(a, float), np.asarray(b, float)
    d = b - a
    L = float(np.hypot(*d)) or 1.0
    u = d / L
    nrm = np.array([-u[1], u[0]])
    amp = min(amp, 0.12 * L)
    pts = [a, a + d * 0.15]
    for k in range(1, 2 * n):
        f = 0.15 + 0.7 * k / (2 * n)
        pts.append(a + d * f + nrm * amp * (1 if k % 2 else -1))
    pts += [a + d * 0.85, b]
    return np.array(pts)


def _gap_marks(spec, P, tyres, shell_g, lw, fs):
    """Mark the smallest front-view gap of each tyre to the links and to the shell."""
    out = []
    segs = []
    for b_i, b in enumerate(spec["bodies"]):
        h = b["hull"]
        for k in range(len(h) if len(h) > 2 else 1):
            segs.append((P[h[k]], P[h[(k + 1) % len(h)]], b_i))
    for i, j, _ in spec["links"] + spec["springs"]:
        segs.append((P[i], P[j], -1))
    for w_i, w in enumerate(spec["wheels"]):
        t = tyres[w_i]
        cands = []
        sel = [s for s in segs if s[2] != w["body"]]
        if sel:
            A = np.array([s[0] for s in sel])
            B = np.array([s[1] for s in sel])
            cands.append(_closest_pair(t, A, B))
        if shell_g is not None:
            cands.append(_closest_pair(t, shell_g, np.roll(shell_g, -1, axis=0)))
        for dist, p, q in cands:
            if not np.all(np.isfinite([dist, *p, *q])):
                continue
            out.append(f'<line x1="{_f(p[0])}" y1="{_f(-p[1])}" x2="{_f(q[0])}" y2="{_f(-q[1])}" stroke="{GAP_COLOUR}" '
                       f'stroke-width="{_f(lw)}"/>')
            m = 0.5 * (p + q)
            out.append(f'<text x="{_f(m[0] + lw * 3)}" y="{_f(-m[1])}" font-size="{_f(fs * 0.8)}" fill="{GAP_COLOUR}">'
                       f'{dist:.0f}</text>')
    return out


def _dim_h(x1, x2, y, text, lw, fs, ext_from=None):
    """Horizontal dimension at SVG y (already flipped), between x1 and x2."""
    a = lw * 4
    s = [f'<g class="dim" stroke="#222" stroke-width="{_f(lw * 0.7)}" fill="none">',
         f'<line x1="{_f(x1)}" y1="{_f(y)}" x2="{_f(x2)}" y2="{_f(y)}"/>',
         f'<path d="M{_f(x1 + a)},{_f(y - a / 2)}L{_f(x1)},{_f(y)}L{_f(x1 + a)},{_f(y + a / 2)}'
         f'M{_f(x2 - a)},{_f(y - a / 2)}L{_f(x2)},{_f(y)}L{_f(x2 - a)},{_f(y + a / 2)}"/>']
    if ext_from is not None:
        for x, y0 in ext_from:
            s.append(f'<line x1="{_f(x)}" y1="{_f(y0)}" x2="{_f(x)}" y2="{_f(y + a)}" '
                     f'stroke-dasharray="{_f(lw * 2)},{_f(lw * 2)}"/>')
    s.append("</g>")
    s.append(f'<text x="{_f(0.5 * (x1 + x2))}" y="{_f(y - lw * 2.5)}" font-size="{_f(fs)}" text-anchor="middle" '
             f'fill="#222">{html.escape(text)}</text>')
    return s


def _dimensions(spec, P, tyres, lw, fs, span, vb):
    out = []
    wl = spec["wheels"][0]
    # contacts: lowest point of each tyre outline
    cl = tyres[0][np.argmin(tyres[0][:, 1])]
    cr = tyres[1][np.argmin(tyres[1][:, 1])]
    y1 = 0.06 * span
    out += _dim_h(cl[0], cr[0], y1, f"track {cr[0] - cl[0]:.1f} mm", lw, fs,
                  ext_from=[(cl[0], 0.0), (cr[0], 0.0)])
    lo = min(t[:, 0].min() for t in tyres)
    hi = max(t[:, 0].max() for t in tyres)
    y2 = 0.13 * span
    out += _dim_h(lo, hi, y2, f"overall tyre width {hi - lo:.1f} mm", lw, fs,
                  ext_from=[(lo, 0.0), (hi, 0.0)])
    # heights of the chassis pivots and the wheel centre, as a chain at the left
    ch = [b for b in spec["bodies"] if b["chassis"]][0]
    chassis_pts = set(ch["hull"])
    heights = sorted({round(float(P[i, 1]), 1) for i, _ in spec["pivots"] if i in chassis_pts} |
                     {round(float(P[wl["centre"], 1]), 1)})
    x = vb[0] + 0.09 * span
    a = lw * 4
    for k, h in enumerate(heights):
        xk = x + (k % 2) * 0.035 * span
        out.append(f'<g class="dim" stroke="#222" stroke-width="{_f(lw * 0.7)}" fill="none">'
                   f'<line x1="{_f(xk)}" y1="0" x2="{_f(xk)}" y2="{_f(-h)}"/>'
                   f'<path d="M{_f(xk - a / 2)},{_f(-h + a)}L{_f(xk)},{_f(-h)}L{_f(xk + a / 2)},{_f(-h + a)}"/>'
                   f'<line x1="{_f(xk - a)}" y1="{_f(-h)}" x2="{_f(xk + 0.03 * span)}" y2="{_f(-h)}" '
                   f'stroke-dasharray="{_f(lw * 2)},{_f(lw * 2)}"/></g>')
        tx, anchor = (xk + lw * 2, "start") if k % 2 else (xk - lw * 2, "end")
        out.append(f'<text x="{_f(tx)}" y="{_f(-h - lw * 2)}" font-size="{_f(fs * 0.85)}" '
                   f'text-anchor="{anchor}" fill="#222">{h:.1f}</text>')
    out.append(f'<text x="{_f(x)}" y="{_f(fs * 1.4)}" font-size="{_f(fs * 0.8)}" fill="#222" text-anchor="middle">'
               f'z, mm</text>')
    return out
