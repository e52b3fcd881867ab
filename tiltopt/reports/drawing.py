"""Front-view drawing of a mechanism state, shared by the explorer and the build sheet.

The drawing is described once, per topology, by a :func:`drawing_spec` (a
JSON-able dict: which points make each body, its tubes, the links, springs,
sliders, pivots and wheels, and the colour of each body). The explorer's
JavaScript draws states from that spec and the point positions of each state;
this module renders the same spec to SVG in Python for the build sheet.

Front view, looking from ahead: y to the right, z up, ground z = 0, mm.
SVG user units are mm with ``svg_x = y`` and ``svg_y = -z``.

What is drawn is what the clearance checks see (docs/domain.md, "Body shell and
clearance"): each wheel as its solid (:func:`wheel_outline`: the tyre, and the
rim-and-spoke disc as wide as the hub at the axle), every member as its tube at
its outside diameter, the body shell's section at the linkage station. The
clearance marks (:mod:`tiltopt.reports.marks`) are drawn as leaders labelled in
mm; every drawing carries a scale bar and a legend of its colours.
"""
from __future__ import annotations

import html
import math
from typing import Sequence

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


def _side_free(name: str) -> str:
    """A body name with its side taken out (``upper_arm_left`` -> ``upper arm``): mirror bodies share a colour."""
    words = [w for w in name.replace("-", "_").split("_") if w not in ("left", "right", "l", "r")]
    return " ".join(words) or name


def drawing_spec(model, geom=None, candidate: int = 0) -> dict:
    """The topology-level description of the drawing (JSON-able).

    Parameters
    ----------
    model : kinematics.Model
    geom : kinematics.Geometry, optional
        Used for the tyre radii and the hull order (design position of ``candidate``).

    Returns
    -------
    dict with keys ``point_refs``, ``bodies`` (name, colour, hull: point indices, chassis: bool, kind:
    the name without its side, shared by mirror bodies and by their colour), ``tubes`` ([i, j,
    radius_mm, body index or -1 for a link, name]: every member as the clearance checks see it,
    :func:`tiltopt.kinematics.clearance.members_of`), ``links``/``springs`` ([i, j, name]),
    ``sliders`` ([from, to, runner, name]), ``pivots`` ([i, name]), ``wheels`` (name, centre, R, r,
    hub_half: half the hub width, hub_radius, body), ``datum`` (index or -1), ``station_x_mm``.
    """
    from tiltopt.kinematics.clearance import members_of

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
    colour_of: dict[str, str] = {}
    for bi, name in enumerate(model.body_names):
        members = [i for i, r in enumerate(model.point_refs) if model.point_body[i] == bi]
        if bi == model.chassis:
            members = [i for i in members if i in joint_pts] or members
        hull = [members[i] for i in _hull(P[members])]
        kind = "chassis" if bi == model.chassis else _side_free(name)
        if bi == model.chassis:
            colour = CHASSIS_COLOUR
        else:
            colour = colour_of.setdefault(kind, BODY_COLOURS[len(colour_of) % len(BODY_COLOURS)])
        bodies.append({"name": name, "colour": colour, "hull": hull, "chassis": bi == model.chassis, "kind": kind})
    mem = members_of(model)
    link_names = {l.name for l in mech.links}
    tubes = []
    for k, name in enumerate(mem.names):
        body = -1 if name in link_names else int(model.point_body[mem.ia[k]])
        tubes.append([int(mem.ia[k]), int(mem.ib[k]), float(mem.radius[k]), body, name])
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
                       "hub_half": 0.5 * float(w.hub_width_mm), "hub_radius": float(w.hub_radius_mm),
                       "body": model.body_names.index(w.upright)})
    return {
        "point_refs": list(model.point_refs),
        "bodies": bodies,
        "tubes": tubes,
        "links": [[pidx[l.a], pidx[l.b], l.name] for l in mech.links],
        "springs": [[pidx[s.a], pidx[s.b], s.name] for s in mech.springs],
        "sliders": [[pidx[s.a_from], pidx[s.a_to], pidx[s.b], s.name] for s in mech.sliders],
        "pivots": pivots,
        "wheels": wheels,
        "datum": datum,
        "station_x_mm": float(mech.station_x_mm),
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


def wheel_outline(centre, camber, outer_radius, crown_radius, hub_half, n_arc: int = 16) -> np.ndarray:
    """Front-view outline of a wheel solid, unsteered (docs/domain.md): the tyre (torus R, r) and the
    rim-and-spoke disc, as wide as the hub at the axle (``hub_half`` either side) and tapering to the
    tyre's width at the crown circle. It is also the solid's section by the plane of its axle (the
    linkage plane), which :mod:`tiltopt.reports.marks` measures to.

    Returns
    -------
    ndarray of shape (2 * n_arc + 2, 2)
        Closed outline (first point not repeated), mm.
    """
    cy, cz = (float(v) for v in np.asarray(centre, float)[:2])
    g, R, r = float(camber), float(outer_radius), float(crown_radius)
    h = max(float(hub_half), r)            # a hub narrower than the tyre is hidden behind it
    rc = R - r
    ny, nz, uy, uz = math.cos(g), -math.sin(g), math.sin(g), math.cos(g)
    t = np.linspace(0.0, math.pi, n_arc)
    s_top, u_top = r * np.cos(t), rc + r * np.sin(t)          # over the top, +s to -s
    s = np.concatenate([[h], s_top, [-h], -s_top])
    u = np.concatenate([[0.0], u_top, [0.0], -u_top])
    return np.stack([cy + s * ny + u * uy, cz + s * nz + u * uz], -1)


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


# -------------------------------------------------------------------- SVG
def _f(v: float) -> str:
    return f"{v:.2f}".rstrip("0").rstrip(".") if math.isfinite(v) else "0"


def _pts(a) -> str:
    return " ".join(f"{_f(p[0])},{_f(-p[1])}" for p in a)


#: what each mark kind is called in a drawing's legend and labels (tiltopt.reports.marks.KIND_TEXT)
MARK_SHORT = {"other": "to members", "carrier": "to own upright/arms", "pair": "between wheels",
              "tubes": "between tubes", "ground": "ground"}


def mark_label(mark: dict) -> str:
    """The text of a mark's label: its value in mm with one decimal, or the overlap."""
    v = float(mark["mm"])
    return f"{v:.1f} mm" if v >= 0 else f"overlap {-v:.1f} mm"


def nice_length(span_mm: float) -> float:
    """A round scale-bar length (1, 2, 2.5 or 5 times a power of ten) of about a fifth of ``span_mm``."""
    raw = max(span_mm, 1.0) / 5.0
    mag = 10 ** math.floor(math.log10(raw))
    return max(m * mag for m in (1, 2, 2.5, 5) if m * mag <= raw) if raw >= mag else mag


def legend_items(spec: dict, has_shell: bool, has_marks: bool) -> list[tuple[str, str, str]]:
    """(kind, colour, text) of a drawing's legend: body kinds, links, springs, wheels, shell, marks."""
    items, seen = [], set()
    for b in spec["bodies"]:
        if b["kind"] not in seen:
            seen.add(b["kind"])
            items.append(("body", b["colour"], b["kind"]))
    if spec["links"]:
        items.append(("body", LINK_COLOUR, "links"))
    if spec["springs"]:
        items.append(("spring", SPRING_COLOUR, "springs"))
    items.append(("wheel", TYRE_FILL, "wheel solid (tyre, rim, hub)"))
    if has_shell:
        items.append(("shell", SHELL_COLOUR, f"shell section at x = {spec.get('station_x_mm', 0.0):g} mm"))
    if has_marks:
        items.append(("mark", GAP_COLOUR, "clearance, wheels straight ahead, mm"))
    return items


def front_view_svg(spec: dict, points, camber, pose=(0.0, 0.0, 0.0), shell_poly=None, *,
                   marks: Sequence[dict] | None = None, dimensions: bool = False, labels: Sequence[str] | None = None,
                   title: str = "", width: str = "100%", jig_datum=None, wheels: Sequence | None = None) -> str:
    """SVG of one state, with a scale bar and a legend.

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
    marks : list of dict, optional
        Clearance marks of the state (:meth:`tiltopt.reports.marks.FrontMarks.state`), drawn as
        leaders labelled with :func:`mark_label`.
    dimensions : bool
        Add dimension lines (track, outer width of the wheels, pivot heights) and pivot tags.
    labels : list of str, optional
        Tag per pivot of ``spec['pivots']`` (e.g. "P1").
    wheels : list of (R, r, hub_half), optional
        The wheels of this design (default: the spec's).
    """
    P = np.asarray(points, float)
    cam = np.asarray(camber, float)
    parts: list[str] = []
    wh = wheels or [(w["R"], w["r"], w["hub_half"]) for w in spec["wheels"]]
    outlines = [wheel_outline(P[w["centre"]], cam[i], *wh[i], 16) for i, w in enumerate(spec["wheels"])]
    shell_g = chassis_transform(shell_poly, pose) if shell_poly is not None else None
    tube_pts = [P[[t[0], t[1]]] + np.array([[0.0, t[2]], [0.0, -t[2]]]) for t in spec["tubes"]]
    allp = [P[[i for b in spec["bodies"] for i in b["hull"]]]] + outlines + tube_pts + \
        ([shell_g] if shell_g is not None else [])
    allp = np.concatenate(allp)
    allp = allp[np.all(np.isfinite(allp), axis=1)]
    ymin, ymax = float(allp[:, 0].min()), float(allp[:, 0].max())
    zmin, zmax = min(0.0, float(allp[:, 1].min())), float(allp[:, 1].max())
    span = max(ymax - ymin, zmax - zmin, 100.0)
    lw = span / 260.0
    fs = span / (40.0 if dimensions else 44.0)
    items = legend_items(spec, shell_g is not None, bool(marks))
    leg_rows, leg_h = _legend_layout(items, fs, (ymax - ymin) + 0.12 * span)
    pad = 0.06 * span
    pad_b = pad + (0.16 * span if dimensions else 0.02 * span) + 2.2 * fs
    pad_l = pad + (0.14 * span if dimensions else 0.0)
    pad_t = pad + leg_h
    vb = (ymin - pad_l, -(zmax + pad_t), (ymax - ymin) + pad_l + pad, (zmax - zmin) + pad_t + pad_b)
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
        parts.append(f'<polygon class="shell" points="{_pts(shell_g)}" fill="{SHELL_COLOUR}" fill-opacity="0.12" '
                     f'stroke="{SHELL_COLOUR}" stroke-width="{_f(lw)}" stroke-dasharray="{_f(lw * 6)},{_f(lw * 3)}"/>')
    for o in outlines:
        parts.append(f'<polygon class="wheel" points="{_pts(o)}" fill="{TYRE_FILL}" fill-opacity="0.18" '
                     f'stroke="{TYRE_FILL}" stroke-width="{_f(lw)}" stroke-linejoin="round"/>')
    for b in spec["bodies"]:
        h = P[b["hull"]]
        if len(h) > 2:
            parts.append(f'<polygon class="body" points="{_pts(h)}" fill="{b["colour"]}" fill-opacity="0.10" '
                         f'stroke="none"><title>{html.escape(b["name"])}</title></polygon>')
    colour = {bi: b["colour"] for bi, b in enumerate(spec["bodies"])}
    for ia, ib, rad, body, name in spec["tubes"]:
        parts.append(f'<polyline class="tube" points="{_pts(P[[ia, ib]])}" stroke="{colour.get(body, LINK_COLOUR)}" '
                     f'stroke-opacity="0.85" stroke-width="{_f(2 * rad)}" stroke-linecap="round">'
                     f'<title>{html.escape(name)} (tube {2 * rad:g} mm)</title></polyline>')
    for i, j, name in spec["springs"]:
        parts.append(f'<polyline class="spring" points="{_pts(_coil(P[i], P[j], lw * 9))}" fill="none" '
                     f'stroke="{SPRING_COLOUR}" stroke-width="{_f(lw * 1.6)}" stroke-linejoin="round">'
                     f'<title>{html.escape(name)}</title></polyline>')
    for a, b, r_, name in spec["sliders"]:
        parts.append(f'<polyline points="{_pts(P[[a, b]])}" stroke="#555" stroke-width="{_f(lw * 1.2)}" '
                     f'stroke-dasharray="{_f(lw * 3)},{_f(lw * 2)}"/>')
    for w in spec["wheels"]:
        c = P[w["centre"]]
        parts.append(f'<circle cx="{_f(c[0])}" cy="{_f(-c[1])}" r="{_f(lw * 2.5)}" fill="{TYRE_FILL}" '
                     f'stroke="{TYRE_FILL}" stroke-width="{_f(lw)}"/>')
    for k, (i, name) in enumerate(spec["pivots"]):
        c = P[i]
        parts.append(f'<circle class="pivot" cx="{_f(c[0])}" cy="{_f(-c[1])}" r="{_f(lw * 3.2)}" fill="#fff" '
                     f'stroke="#111" stroke-width="{_f(lw * 1.1)}"><title>{html.escape(name)}</title></circle>')
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
    from .marks import drawn

    for m in drawn(list(marks or ())):
        parts += _mark_svg(m, lw, fs)
    if dimensions:
        parts += _dimensions(spec, P, cam, wh, lw, fs, span, vb)
    parts += _scale_bar(vb, span, lw, fs)
    parts += _legend_svg(leg_rows, vb, lw, fs)
    parts.append("</svg>")
    return "\n".join(parts)


def _mark_svg(m: dict, lw: float, fs: float) -> list[str]:
    """A clearance mark: a leader between its two points and its label (class ``mark``, data attributes
    for its kind, wheel and value)."""
    p, q = np.asarray(m["p"], float), np.asarray(m["q"], float)
    text = mark_label(m)
    wheel = "" if m.get("wheel") is None else f' data-wheel="{int(m["wheel"])}"'
    d = q - p
    L = float(np.hypot(*d))
    nrm = np.array([-d[1], d[0]]) / L if L > 1e-9 else np.array([0.0, 1.0])
    mid = 0.5 * (p + q) + nrm * fs * 0.6
    out = [f'<g class="mark" data-kind="{m["kind"]}"{wheel} data-mm="{m["mm"]}"><title>'
           f'{html.escape(MARK_SHORT.get(m["kind"], m["kind"]))}: {html.escape(text)} '
           f'({html.escape(str(m.get("to", "")))})'
           f'</title>']
    if L > 1e-9:
        out.append(f'<line x1="{_f(p[0])}" y1="{_f(-p[1])}" x2="{_f(q[0])}" y2="{_f(-q[1])}" stroke="{GAP_COLOUR}" '
                   f'stroke-width="{_f(lw)}"/>')
        for e in (p, q):
            out.append(f'<circle cx="{_f(e[0])}" cy="{_f(-e[1])}" r="{_f(lw * 1.4)}" fill="{GAP_COLOUR}"/>')
    out.append(f'<text x="{_f(mid[0])}" y="{_f(-mid[1])}" font-size="{_f(fs * 0.9)}" fill="{GAP_COLOUR}" '
               f'text-anchor="middle" stroke="#ffffff" stroke-width="{_f(fs * 0.22)}" paint-order="stroke">'
               f'{html.escape(text)}</text></g>')
    return out


def _legend_layout(items, fs: float, width: float):
    """Rows of legend items that fit ``width`` (text widths estimated at 0.55 em a character)."""
    rows, row, x = [], [], 0.0
    for it in items:
        w = fs * (1.6 + 0.52 * len(it[2])) + fs * 1.2
        if row and x + w > width:
            rows.append(row)
            row, x = [], 0.0
        row.append((it, x))
        x += w
    if row:
        rows.append(row)
    return rows, len(rows) * fs * 1.35 + fs * 0.6


def _legend_svg(rows, vb, lw: float, fs: float) -> list[str]:
    out = [f'<g class="legend" font-size="{_f(fs)}" fill="#1d2733">']
    y0 = vb[1] + fs * 1.2
    for k, row in enumerate(rows):
        y = y0 + k * fs * 1.35
        for (kind, colour, text), x in row:
            x0 = vb[0] + fs * 0.6 + x
            if kind == "shell":
                sw = (f'<line x1="{_f(x0)}" y1="{_f(y - fs * 0.3)}" x2="{_f(x0 + fs * 1.2)}" y2="{_f(y - fs * 0.3)}" '
                      f'stroke="{colour}" stroke-width="{_f(lw * 1.5)}" stroke-dasharray="{_f(lw * 4)},{_f(lw * 2)}"/>')
            elif kind in ("spring", "mark"):
                sw = (f'<line x1="{_f(x0)}" y1="{_f(y - fs * 0.3)}" x2="{_f(x0 + fs * 1.2)}" y2="{_f(y - fs * 0.3)}" '
                      f'stroke="{colour}" stroke-width="{_f(lw * 2)}"/>')
            else:
                op = "0.35" if kind == "wheel" else "0.85"
                sw = (f'<rect x="{_f(x0)}" y="{_f(y - fs * 0.75)}" width="{_f(fs * 1.2)}" height="{_f(fs * 0.8)}" '
                      f'fill="{colour}" fill-opacity="{op}" rx="{_f(fs * 0.15)}"/>')
            out.append(f'<g class="key">{sw}<text x="{_f(x0 + fs * 1.6)}" y="{_f(y)}">{html.escape(text)}</text></g>')
    out.append("</g>")
    return out


def _scale_bar(vb, span: float, lw: float, fs: float) -> list[str]:
    """A scale bar in the bottom right corner: a round length in mm."""
    L = nice_length(vb[2])
    x1 = vb[0] + vb[2] - fs * 0.8
    x0 = x1 - L
    y = vb[1] + vb[3] - fs * 0.9
    t = fs * 0.35
    return [f'<g class="scalebar" data-mm="{L:g}" stroke="#1d2733" stroke-width="{_f(lw * 1.2)}" fill="none">'
            f'<path d="M{_f(x0)},{_f(y - t)}V{_f(y)}H{_f(x1)}V{_f(y - t)}'
            f'M{_f((x0 + x1) / 2)},{_f(y)}V{_f(y - t * 0.6)}"/>'
            f'</g><text x="{_f((x0 + x1) / 2)}" y="{_f(y - t - fs * 0.25)}" font-size="{_f(fs * 0.8)}" '
            f'text-anchor="middle" fill="#1d2733">{L:g} mm</text>']


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


def _dimensions(spec, P, cam, wh, lw, fs, span, vb):
    from tiltopt.kinematics.wheel_solid import lateral_reach

    out = []
    wl = spec["wheels"][0]
    # contacts (docs/domain.md): the lowest point of each tyre, (R - r) sin(camber) inboard of the centre
    cts, reach = [], []
    for k, w in enumerate(spec["wheels"]):
        R, r, h = wh[k]
        c = P[w["centre"]]
        cts.append(np.array([c[0] - (R - r) * math.sin(cam[k]), 0.0]))
        e = float(lateral_reach(R, r, h, cam[k]))
        reach.append((c[0] - e, c[0] + e))
    cl, cr = cts
    y1 = 0.06 * span
    out += _dim_h(cl[0], cr[0], y1, f"track {cr[0] - cl[0]:.1f} mm", lw, fs,
                  ext_from=[(cl[0], 0.0), (cr[0], 0.0)])
    lo = min(a for a, _ in reach)
    hi = max(b for _, b in reach)
    y2 = 0.13 * span
    out += _dim_h(lo, hi, y2, f"outer width of the wheels {hi - lo:.1f} mm", lw, fs,
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
