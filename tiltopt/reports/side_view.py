"""Side view of a steered wheel: the wheel, its steering axis to the ground, the trail, the
steering arm and the rod (build sheet and DXF; docs/domain.md "Steering").

Looking along +y (from the left of the vehicle), forward (+x) to the right, up (+z) up, at one
state of a sweep (lean, travel) with zero steering input. The figures come from
:mod:`tiltopt.kinematics.steering` (:func:`~tiltopt.kinematics.steering.frames` and
:func:`~tiltopt.kinematics.steering.ground_geometry`), so the drawn trail is the one the metrics
report. Returns None for a state not reached: nothing is drawn from an unsolved pose.
"""
from __future__ import annotations

import math

import numpy as np

from tiltopt.kinematics import steering as S

#: the DXF layer of the side view
SIDE_LAYER = "SIDE_VIEW"


def side_view(model, geom, sweep, ti: int, li: int, wheel: int = 0, c: int = 0) -> dict | None:
    """Side-view geometry of one wheel at state (travel ti, lean li) of ``sweep``, zero steer input.

    Returns a dict of (x, z) points, mm: ``centre``, ``axis_top`` / ``axis_ground`` (the axis from
    its upper point to where it meets the ground), ``contact`` (the tyre's contact point), ``arm``
    and ``rod_end`` (steering arm point and the rod's other end; None without a linkage), and the
    scalars ``radius`` (outer, mm), ``ratio`` (the wheel outline's height over its length, the
    cosine of its inclination), ``trail_mm``, ``caster_deg``, ``lean_deg``, ``travel_mm``.
    """
    if not bool(sweep.converged[c, ti, li]):
        return None
    sm = S.steering_model(model)
    fr = S.frames(sm, geom, sweep)
    sl = (c, ti, li, wheel)
    delta = np.zeros(fr.gamma.shape)
    gg = S.ground_geometry(sm, fr, None, delta, geom)
    A, e, C = fr.A[sl], fr.e[sl], fr.C[sl]
    R = float(geom.outer_radius[c, wheel])
    if not all(np.isfinite(v).all() for v in (A, e, C)) or abs(e[2]) < 1e-9:
        return None
    ground = A + e * (-A[2] / e[2])
    top = A if A[2] > C[2] else A + e * (C[2] + 0.6 * R - A[2]) / e[2]
    trail = float(gg["trail"][sl])
    xz = lambda p: (float(p[0]), float(p[2]))                                          # noqa: E731
    steered = bool(sm.steered[wheel])
    return {
        "wheel": ("left", "right")[wheel], "centre": xz(C), "radius": R,
        "ratio": abs(math.cos(float(fr.gamma[sl]))),   # the leaning wheel seen from the side: an ellipse
        "axis_top": xz(top), "axis_ground": xz(ground),
        "contact": (float(ground[0]) - trail, 0.0),   # trail: the axis' ground point ahead of the contact
        "arm": xz(fr.S0[sl]) if steered else None, "rod_end": xz(fr.I0[sl]) if steered else None,
        "trail_mm": trail, "caster_deg": math.degrees(float(gg["caster"][sl])),
        "lean_deg": float(sweep.lean_deg[li]), "travel_mm": float(sweep.travel_mm[ti]),
    }


def side_view_svg(d: dict, *, title: str = "", width: float = 360.0, height: float = 300.0) -> str:
    """An SVG drawing of :func:`side_view`'s dict (forward to the right)."""
    cx, cz = d["centre"]
    R = d["radius"]
    pts = [d["axis_top"], d["axis_ground"], d["contact"], (cx - R, 0.0), (cx + R, 2 * cz)]
    pts += [p for p in (d["arm"], d["rod_end"]) if p is not None]
    xs, zs = [p[0] for p in pts], [p[1] for p in pts]
    pad = 40.0
    x0, x1, z0, z1 = min(xs) - pad, max(xs) + pad, min(min(zs), 0.0) - pad, max(zs) + pad
    k = min((width - 20) / (x1 - x0), (height - 40) / (z1 - z0))
    X = lambda x: 10 + (x - x0) * k                                                     # noqa: E731
    Z = lambda z: height - 10 - (z - z0) * k                                            # noqa: E731
    out = [f'<svg class="sideview" xmlns="http://www.w3.org/2000/svg" width="{width:.0f}" height="{height:.0f}" '
           f'viewBox="0 0 {width:.0f} {height:.0f}">']
    if title:
        out.append(f'<text x="10" y="16" font-size="12">{title}</text>')
    out.append(f'<line x1="{X(x0):.1f}" y1="{Z(0):.1f}" x2="{X(x1):.1f}" y2="{Z(0):.1f}" stroke="#555"/>')
    out.append(f'<ellipse cx="{X(cx):.1f}" cy="{Z(cz):.1f}" rx="{R * k:.1f}" ry="{R * d["ratio"] * k:.1f}" fill="none" '
               f'stroke="#222" stroke-width="2"/>')
    (ax, az), (gx, gz) = d["axis_top"], d["axis_ground"]
    out.append(f'<line x1="{X(ax):.1f}" y1="{Z(az):.1f}" x2="{X(gx):.1f}" y2="{Z(gz):.1f}" stroke="#b03a2e" '
               f'stroke-width="1.5" stroke-dasharray="6 3"/>')
    px = d["contact"][0]
    out.append(f'<line x1="{X(px):.1f}" y1="{Z(0) + 8:.1f}" x2="{X(gx):.1f}" y2="{Z(0) + 8:.1f}" stroke="#1f618d" '
               f'stroke-width="3"/>')
    out.append(f'<circle cx="{X(px):.1f}" cy="{Z(0):.1f}" r="3" fill="#1f618d"/>')
    out.append(f'<text x="{X(min(px, gx)):.1f}" y="{Z(0) + 24:.1f}" font-size="11">trail {d["trail_mm"]:.1f} mm, '
               f'caster {d["caster_deg"]:.1f} deg</text>')
    if d["arm"] is not None:
        (sx, sz), (ix, iz) = d["arm"], d["rod_end"]
        out.append(f'<line x1="{X(cx):.1f}" y1="{Z(cz):.1f}" x2="{X(sx):.1f}" y2="{Z(sz):.1f}" stroke="#7d3c98" '
                   f'stroke-width="2"/>')
        out.append(f'<line x1="{X(sx):.1f}" y1="{Z(sz):.1f}" x2="{X(ix):.1f}" y2="{Z(iz):.1f}" stroke="#117a65" '
                   f'stroke-width="2"/>')
        for x, z in ((sx, sz), (ix, iz)):
            out.append(f'<circle cx="{X(x):.1f}" cy="{Z(z):.1f}" r="3" fill="#fff" stroke="#000"/>')
    out.append(f'<text x="{width - 10:.0f}" y="{height - 14:.0f}" font-size="10" text-anchor="end">forward &#8594;'
               f'</text></svg>')
    return "".join(out)


def add_side_view_dxf(doc, msp, d: dict, offset: float) -> None:
    """Draw :func:`side_view`'s dict on layer SIDE_VIEW, x forward along the drawing's first axis,
    shifted by ``offset`` mm (clear of the front view)."""
    if SIDE_LAYER not in doc.layers:
        doc.layers.add(SIDE_LAYER, color=6)
    at = {"layer": SIDE_LAYER}
    P = lambda p: (offset + p[0], p[1])                                                 # noqa: E731
    msp.add_ellipse(P(d["centre"]), major_axis=(d["radius"], 0.0), ratio=max(d["ratio"], 1e-6), dxfattribs=at)
    msp.add_line(P(d["axis_top"]), P(d["axis_ground"]), dxfattribs=at)
    msp.add_line(P((d["contact"][0] - d["radius"], 0.0)), P((d["contact"][0] + d["radius"], 0.0)), dxfattribs=at)
    msp.add_line(P(d["contact"]), P(d["axis_ground"]), dxfattribs=at)
    if d["arm"] is not None:
        msp.add_line(P(d["centre"]), P(d["arm"]), dxfattribs=at)
        msp.add_line(P(d["arm"]), P(d["rod_end"]), dxfattribs=at)
    msp.add_text(f"side view, {d['wheel']} wheel, lean {d['lean_deg']:g} deg: trail {d['trail_mm']:.1f} mm, "
                 f"caster {d['caster_deg']:.1f} deg", height=8.0,
                 dxfattribs=at).set_placement(P((d["contact"][0] - d["radius"], -30.0)))


def steering_points(model, geom, c: int = 0) -> list[tuple[str, float, float, float]]:
    """(point, x, y, z) mm at the design position of every point the steering uses (each wheel's
    axis points, steering arm point, rod end and drive axis points), each once."""
    sm = S.steering_model(model)
    X = geom.points3[c]
    idx = []
    for k in range(2):
        for i in (sm.axis_a[k], sm.axis_b[k], sm.arm[k], sm.end[k], sm.drive_a[k], sm.drive_b[k]):
            if int(i) not in idx and (sm.steered[k] or i in (sm.axis_a[k], sm.axis_b[k])):
                idx.append(int(i))
    out = []
    for i in idx:
        out.append((model.point_refs[i], *(float(v) for v in X[i])))
    return out


def steering_html(model, geom, sweep, line_chart, table, esc) -> str:
    """The build sheet's steering section: side view at lean 0 and at the lean limit, the points
    the steering uses with x, and toe against lean at each travel (zero input; lean steer is its
    change from lean 0). Empty for a mechanism without a steering linkage."""
    sm = S.steering_model(model)
    if not sm.has_linkage:
        return ""
    ti = int(np.argmin(np.abs(np.asarray(sweep.travel_mm))))
    views = []
    for li, label in ((0, "lean 0"), (len(sweep.lean_deg) - 1, "at the lean limit")):
        d = side_view(model, geom, sweep, ti, li, 0)
        views.append(side_view_svg(d, title=f"left wheel, side view, {label} ({d['lean_deg']:g} deg)")
                     if d is not None else f'<p class="bad">Side view {esc(label)}: state not reached.</p>')
    rows = [[esc(r), f"{x:.1f}", f"{y:.1f}", f"{z:.1f}"] for r, x, y, z in steering_points(model, geom)]
    st = S.steer_envelope(model, geom, sweep, every_input=False)
    deg = 180.0 / math.pi
    series = []
    palette = ("#1f618d", "#b03a2e", "#117a65", "#7d3c98", "#af601a")
    for t, tr in enumerate(sweep.travel_mm):
        for w in range(2):
            if sm.steered[w]:
                series.append((f"{tr:g} mm", st.toe[0, t, :, w] * deg, palette[t % len(palette)], w == 1))
    chart = line_chart(sweep.lean_deg, series, xlabel="lean [deg]", ylabel="toe at zero input [deg]",
                       title="toe against lean (L solid, R dashed; one line per travel)")
    legend = " ".join(f'<span style="color:{palette[t % len(palette)]}">&#9644; travel {tr:g} mm</span>'
                      for t, tr in enumerate(sweep.travel_mm))
    bump = ", ".join(f"{tr:g} mm: {np.degrees(st.bump_steer[0, t, 0]):.3f}" for t, tr in enumerate(sweep.travel_mm))
    return (f'<div class="charts">{"".join(f"<div class=chartbox>{v}</div>" for v in views)}'
            f'<div class="chartbox">{chart}</div></div>'
            f'<p class="note">{legend}</p><p class="note">Left wheel bump steer (lean 0, zero input) against '
            f'travel, deg: {esc(bump)}. '
            f'Dashed red: the steering axis to the ground; blue bar: the trail; purple: centre to steering arm '
            f'point; green: the rod. Trail is the axis\' ground point ahead of the contact point.</p>'
            f'<h3>Steering points at the design position</h3>'
            + table(["point", "x [mm]", "y [mm]", "z [mm]"], rows))
