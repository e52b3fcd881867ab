"""Front-view layout of a mechanism at its design position as DXF (ezdxf), for a jig plate.

Drawing units are mm ($INSUNITS = 4), DXF x = vehicle y (right), DXF y = z (up),
origin at the chassis datum O. Layers:

- one layer per body (``BODY_<name>``): its outline through its points and a
  POINT entity at every one of its points (exact coordinates);
- ``PIVOTS``: a circle at every pin (diameter ``hole_diameter_mm``) and at
  every link/spring end;
- ``LINKS``, ``SPRINGS``: centre lines of links and springs;
- ``WHEELS``: tyre outlines (toroidal crown shape) and ground line;
- ``DATUMS``: chassis datum cross and, if set, the jig datum cross;
- ``NOTES``: labels, provenance and the safety caution;
- ``SIDE_VIEW`` (a mechanism with a steering linkage, on the build sheet's DXF): the left
  wheel seen from the side right of the front view (DXF x = offset + vehicle x, forward):
  wheel outline, steering axis to the ground, trail, steering arm and rod.
"""
from __future__ import annotations

import io
from pathlib import Path

import numpy as np

from .common import SAFETY, atomic_write_bytes, safe_name
from .drawing import drawing_spec, tyre_outline

_BODY_ACI = [4, 1, 6, 2, 3, 5, 30, 140]


def body_layer(name: str) -> str:
    return "BODY_" + safe_name(name)


def write_dxf(path: str | Path, model, *, candidate: int = 0, geom=None, jig_datum=(0.0, 0.0),
              hole_diameter_mm: float = 10.0, provenance: str = "", side_view: dict | None = None) -> Path:
    """Write the design-position layout of one candidate.

    Parameters
    ----------
    model : kinematics.Model
    geom : kinematics.Geometry, optional
        Default: the model's own mechanism.
    jig_datum : (y_mm, z_mm)
        Marked on layer DATUMS when not the chassis datum.
    side_view : dict, optional
        A wheel's side view (:func:`tiltopt.reports.side_view.side_view`), drawn on layer
        SIDE_VIEW right of the front view, forward (x) along the drawing's first axis.
    """
    import ezdxf

    geom = geom if geom is not None else model.default_geometry
    P = np.asarray(geom.points[candidate], float)
    spec = drawing_spec(model, geom, candidate)
    doc = ezdxf.new("R2010", setup=True)
    doc.units = ezdxf.units.MM
    doc.header["$MEASUREMENT"] = 1
    msp = doc.modelspace()
    for k, b in enumerate(spec["bodies"]):
        doc.layers.add(body_layer(b["name"]), color=8 if b["chassis"] else _BODY_ACI[k % len(_BODY_ACI)])
    for name, colour in (("PIVOTS", 7), ("LINKS", 5), ("SPRINGS", 2), ("WHEELS", 8), ("DATUMS", 1), ("NOTES", 7)):
        doc.layers.add(name, color=colour)
    r_hole = hole_diameter_mm / 2.0

    for i, ref in enumerate(model.point_refs):
        b = model.body_names[model.point_body[i]]
        msp.add_point((float(P[i, 0]), float(P[i, 1])), dxfattribs={"layer": body_layer(b)})
    for b in spec["bodies"]:
        h = [(float(P[i, 0]), float(P[i, 1])) for i in b["hull"]]
        if len(h) >= 2:
            msp.add_lwpolyline(h, close=len(h) > 2, dxfattribs={"layer": body_layer(b["name"])})
    tags = []
    for k, (i, name) in enumerate(spec["pivots"]):
        c = (float(P[i, 0]), float(P[i, 1]))
        msp.add_circle(c, r_hole, dxfattribs={"layer": "PIVOTS"})
        tag = f"P{k + 1}"
        tags.append(tag)
        msp.add_text(tag, height=8.0, dxfattribs={"layer": "NOTES"}).set_placement((c[0] + r_hole + 2,
                                                                                  c[1] + r_hole + 2))
    ends = set()
    for kind, items in (("LINKS", spec["links"]), ("SPRINGS", spec["springs"])):
        for a, b, _name in items:
            msp.add_line(tuple(map(float, P[a])), tuple(map(float, P[b])), dxfattribs={"layer": kind})
            ends |= {a, b}
    pivot_pts = {i for i, _ in spec["pivots"]}
    for i in sorted(ends - pivot_pts):
        msp.add_circle((float(P[i, 0]), float(P[i, 1])), r_hole, dxfattribs={"layer": "PIVOTS"})
    for w_i, w in enumerate(spec["wheels"]):
        t = tyre_outline(P[w["centre"]], geom.static_camber[candidate, w_i], w["R"], w["r"], 24)
        msp.add_lwpolyline([tuple(map(float, p)) for p in t], close=True, dxfattribs={"layer": "WHEELS"})
    ys = P[:, 0]
    msp.add_line((float(ys.min()) - 400.0, 0.0), (float(ys.max()) + 400.0, 0.0), dxfattribs={"layer": "WHEELS"})
    for (y, z), label in (((0.0, 0.0), "O chassis datum"), (tuple(map(float, jig_datum)), "J jig datum")):
        if label.startswith("J") and abs(y) < 1e-9 and abs(z) < 1e-9:
            continue
        msp.add_line((y - 20, z), (y + 20, z), dxfattribs={"layer": "DATUMS"})
        msp.add_line((y, z - 20), (y, z + 20), dxfattribs={"layer": "DATUMS"})
        msp.add_text(label, height=8.0, dxfattribs={"layer": "DATUMS"}).set_placement((y + 6, z - 16))
    if side_view is not None:
        from .side_view import add_side_view_dxf
        add_side_view_dxf(doc, msp, side_view, float(ys.max()) + 400.0 + 2.0 * side_view["radius"])
    note = (f"{provenance}\\PFront view at the design position, mm, origin at the chassis datum O; "
            f"x = lateral (right), y = height.\\P{SAFETY}")
    msp.add_mtext(note, dxfattribs={"layer": "NOTES", "char_height": 7.0, "width": 600.0}).set_location(
        (float(ys.min()), -40.0))
    buf = io.StringIO()
    doc.write(buf)
    return atomic_write_bytes(path, buf.getvalue().encode("utf-8"))


def read_dxf_points(path: str | Path) -> dict[str, list[tuple[float, float]]]:
    """The POINT entities of each ``BODY_`` layer (used by the tests and for checking a file)."""
    import ezdxf

    doc = ezdxf.readfile(str(path))
    out: dict[str, list[tuple[float, float]]] = {}
    for e in doc.modelspace().query("POINT"):
        out.setdefault(e.dxf.layer, []).append((e.dxf.location.x, e.dxf.location.y))
    return out
