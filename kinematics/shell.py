"""The body shell: cross-sections along x, signed distance, leaning with the chassis.

A shell is a closed body described by cross-sections (front view, ``(y, z)``
in mm, chassis frame in the design position) at stations along x (mm, x
forward). Between two stations the section is interpolated linearly; before
the first and after the last station there is no shell (the shell is closed
there by flat end caps). The shell is fixed to the chassis: a state's world
coordinates map to the chassis frame by :func:`to_chassis_frame`.

Two file forms:

* TOML, superellipse stations::

      name = "..."                 # optional
      description = "..."          # optional
      [[stations]]                 # at least two, distinct x_mm (any order)
      x_mm = -300.0
      half_width_mm = 280.0        # a
      half_height_mm = 320.0       # b
      centre_z_mm = 470.0          # zc
      exponent = 2.5               # n >= 2 (optional, default 2): |y/a|^n + |(z-zc)/b|^n = 1

  Between stations a, b, zc and n are interpolated linearly.

* CSV of polygon sections from CAD: a header ``x_mm,y_mm,z_mm`` then one
  row per vertex, each section one block of rows with the same x (one closed
  outline per x; repeating the first vertex at the end is allowed). Sections
  are oriented counter-clockwise in (y, z) and start at their topmost vertex;
  when all sections have the same vertex count they are interpolated vertex by
  vertex, otherwise every section is first resampled by arc length to
  ``2 x`` the largest count (stated in :attr:`Shell.notes`).

Distances: :func:`shell_signed_distance` is the signed distance (positive
outside) measured in the point's own cross-section, with the end caps. It is
the exact 3-D distance for a shell whose section does not change along x
(a prism) and a close, slightly high estimate where the section changes
slowly (the 3-D distance is smaller by about the factor cos(atan(slope)) of
the section's change along x).
"""
from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from tiltopt.base.errors import InputError, decode_toml, read_text
from tiltopt.base.limits import MAX_SHELL_VERTICES, check_coord, check_count

_NEWTON_ITERATIONS = 5
_CHART_LIMIT = 0.9     # each Newton chart covers |t|^n <= 0.9 of its free coordinate
_OUTLINE_TABLE = 4096  # points of the outline table used for arc-length positions (slots)


@dataclass(frozen=True)
class Shell:
    """A body shell (see module docs).

    Attributes
    ----------
    kind : {'superellipse', 'polygon'}
    x : ndarray of shape (n_stations,)
        Station positions, mm, ascending.
    half_width, half_height, centre_z, exponent : ndarray of shape (n_stations,)
        Superellipse sections (kind 'superellipse'), mm.
    outlines : ndarray of shape (n_stations, n_vertices, 2)
        Polygon sections (kind 'polygon'), (y, z) mm, counter-clockwise.
    """

    kind: str
    x: np.ndarray
    half_width: np.ndarray | None = None
    half_height: np.ndarray | None = None
    centre_z: np.ndarray | None = None
    exponent: np.ndarray | None = None
    outlines: np.ndarray | None = None
    coarse_outlines: np.ndarray | None = None   # polygon: every m-th vertex, for cheap lower bounds
    coarse_error_mm: float = 0.0                # polygon: bound of |distance to outline - to coarse outline|
    name: str = "shell"
    description: str = ""
    notes: str = ""
    source: str = field(default="<memory>", compare=False)

    @property
    def x_range(self) -> tuple[float, float]:
        return float(self.x[0]), float(self.x[-1])


# ------------------------------------------------------------------ building
def superellipse_shell(x_mm, half_width_mm, half_height_mm, centre_z_mm, exponent=2.0, name="shell",
                       description="", source="<memory>") -> Shell:
    """A superellipse shell from station arrays (mm); checks them like a file."""
    x = np.atleast_1d(np.asarray(x_mm, float))
    n = len(x)
    arr = [np.broadcast_to(np.asarray(v, float), (n,)).copy()
           for v in (half_width_mm, half_height_mm, centre_z_mm, exponent)]
    data = {"name": name, "stations": [
        {"x_mm": float(x[i]), "half_width_mm": float(arr[0][i]), "half_height_mm": float(arr[1][i]),
         "centre_z_mm": float(arr[2][i]), "exponent": float(arr[3][i])} for i in range(n)]}
    if description:
        data["description"] = description
    return parse_shell(data, source)


def load_shell(path: str | Path) -> Shell:
    """Read a shell file: ``.toml`` (superellipse stations) or ``.csv`` (polygon sections).

    Raises
    ------
    InputError
        Naming the file and the key (or row) at fault.
    """
    path = Path(path)
    src = str(path)
    text = read_text(path, "shell .toml or .csv")
    if path.suffix.lower() == ".csv":
        return parse_polygon_csv(text, src)
    return parse_shell(decode_toml(text, src), src)


def _num(v, src, key, *, positive=False, minimum=None) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise InputError(f"expected a finite number. Got {v!r} instead.", src, key)
    v = float(v)
    if positive and v <= 0:
        raise InputError(f"must be positive. Got {v} instead.", src, key)
    if minimum is None:   # a length or coordinate (the exponent has a minimum, and its own maximum)
        check_coord(v, src, key)
    if minimum is not None and v < minimum:
        raise InputError(f"must be at least {minimum}. Got {v} instead.", src, key)
    return v


def parse_shell(data: dict, src: str = "<memory>") -> Shell:
    """Validate a superellipse shell given as a TOML-like dict (see module docs)."""
    allowed = {"name", "description", "stations"}
    for k in data:
        if k not in allowed:
            raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(sorted(allowed))}.", src, k)
    if "stations" not in data:
        raise InputError("this key is required but missing: give at least two [[stations]] tables.", src,
                         "stations")
    name = data.get("name", "shell")
    desc = data.get("description", "")
    for k, v in (("name", name), ("description", desc)):
        if not isinstance(v, str):
            raise InputError(f"expected a string. Got {v!r} instead.", src, k)
    st = data["stations"]
    if not isinstance(st, list) or not all(isinstance(t, dict) for t in st):
        raise InputError("expected an array of tables ([[stations]]).", src, "stations")
    if len(st) < 2:
        raise InputError(f"expected at least two [[stations]]. Got {len(st)}.", src, "stations")
    keys = ["x_mm", "half_width_mm", "half_height_mm", "centre_z_mm", "exponent"]
    rows = []
    xs_seen: set[float] = set()
    for i, t in enumerate(st):
        w = f"stations[{i}]"
        for k in t:
            if k not in keys:
                raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(keys)}.", src, f"{w}.{k}")
        for k in keys[:4]:
            if k not in t:
                raise InputError("this key is required but missing.", src, f"{w}.{k}")
        rows.append([
            _num(t["x_mm"], src, w + ".x_mm"),
            _num(t["half_width_mm"], src, w + ".half_width_mm", positive=True),
            _num(t["half_height_mm"], src, w + ".half_height_mm", positive=True),
            _num(t["centre_z_mm"], src, w + ".centre_z_mm"),
            _num(t.get("exponent", 2.0), src, w + ".exponent", minimum=2.0),
        ])
        if rows[-1][4] > 50:
            raise InputError(f"exponent must be at most 50 (a box-like section). Got {rows[-1][4]}.", src,
                             w + ".exponent")
        if rows[-1][0] in xs_seen:
            raise InputError(f"two stations have x_mm = {rows[-1][0]}; each station needs its own x.", src,
                             w + ".x_mm")
        xs_seen.add(rows[-1][0])
    a = np.array(sorted(rows))
    return Shell("superellipse", a[:, 0], a[:, 1], a[:, 2], a[:, 3], a[:, 4], name=name, description=desc,
                 source=src)


def parse_polygon_csv(text: str, src: str = "<memory>") -> Shell:
    """Polygon sections from CSV text (see module docs)."""
    reader = csv.reader(text.splitlines())
    try:
        header = [h.strip() for h in next(reader)]
    except StopIteration:
        raise InputError("the file is empty. Expected a header x_mm,y_mm,z_mm and vertex rows.", src) from None
    if header != ["x_mm", "y_mm", "z_mm"]:
        raise InputError(f"expected the header x_mm,y_mm,z_mm. Got {','.join(header)!r}.", src, "row 1")
    blocks: list[tuple[float, list]] = []
    seen: set[float] = set()
    for lineno, row in enumerate(reader, start=2):
        if not row or all(not c.strip() for c in row):
            continue
        if len(row) != 3:
            raise InputError(f"expected three numbers x_mm,y_mm,z_mm. Got {row!r}.", src, f"row {lineno}")
        try:
            x, y, z = (float(c) for c in row)
        except ValueError:
            raise InputError(f"expected three numbers x_mm,y_mm,z_mm. Got {row!r}.", src, f"row {lineno}") from None
        for v in (x, y, z):
            check_coord(v, src, f"row {lineno}")
        if blocks and blocks[-1][0] == x:
            blocks[-1][1].append((y, z))
        else:
            if x in seen:
                raise InputError(f"x_mm = {x} starts a second block; give each section's rows together.", src,
                                 f"row {lineno}")
            seen.add(x)
            blocks.append((x, [(y, z)]))
    if len(blocks) < 2:
        raise InputError(f"expected at least two sections (blocks of rows with the same x_mm). Got {len(blocks)}.",
                         src)
    blocks.sort(key=lambda b: b[0])
    outlines = []
    for x, verts in blocks:
        v = np.array(verts)
        if len(v) > 1 and np.allclose(v[0], v[-1]):
            v = v[:-1]
        if len(v) < 3:
            raise InputError(f"the section at x_mm = {x} needs at least three distinct vertices. Got {len(v)}.", src)
        area = 0.5 * np.sum(v[:, 0] * np.roll(v[:, 1], -1) - np.roll(v[:, 0], -1) * v[:, 1])
        if abs(area) < 1.0:
            raise InputError(f"the section at x_mm = {x} encloses no area.", src)
        if area < 0:
            v = v[::-1]
        start = int(np.argmax(v[:, 1] - 1e-9 * np.abs(v[:, 0])))
        outlines.append(np.roll(v, -start, axis=0))
    counts = {len(o) for o in outlines}
    notes = ""
    check_count(len(outlines) * (2 * max(counts) if len(counts) > 1 else max(counts)), MAX_SHELL_VERTICES,
                f"section vertices ({len(outlines)} sections of up to {max(counts)} vertices"
                f"{', resampled to twice that' if len(counts) > 1 else ''})",
                "Give fewer sections or vertices (or the same vertex count in every section).", src)
    if len(counts) > 1:
        m = 2 * max(counts)
        outlines = [_resample(o, m) for o in outlines]
        notes = (f"sections have different vertex counts ({sorted(counts)}); each was resampled by arc length "
                 f"to {m} vertices from its topmost vertex before interpolating along x")
    outlines = np.array(outlines)
    coarse, err = _decimate(outlines)
    return Shell("polygon", np.array([b[0] for b in blocks]), outlines=outlines, coarse_outlines=coarse,
                 coarse_error_mm=err, name=Path(src).stem if src != "<memory>" else "shell", notes=notes, source=src)


def polygon_sections(shell: Shell, vertices) -> Shell:
    """A superellipse shell's station sections as polygons (what a CAD export of it would give).

    vertices : int or sequence of int, one per station: outline points, at equal steps of the
    superellipse's angle parameter. Between stations the polygon shell interpolates its vertices,
    not the superellipse parameters, so it differs from the original between stations by a little.
    """
    counts = np.broadcast_to(np.asarray(vertices, int), shell.x.shape)
    rows = ["x_mm,y_mm,z_mm"]
    for x, V in zip(shell.x, counts):
        a, b, zc, n = (float(v) for v in superellipse_params(shell, np.array(x)))
        pts = _superellipse_points(a, b, zc, n, np.linspace(0.0, 2 * math.pi, int(V), endpoint=False))
        rows += [f"{float(x)!r},{float(y)!r},{float(z)!r}" for y, z in pts]
    return parse_polygon_csv("\n".join(rows) + "\n", f"{shell.name} as polygons")


def _superellipse_points(a, b, zc, n, psi):
    """Points (m, 2) of the outline |y/a|^n + |(z-zc)/b|^n = 1 at parameters psi (m,)."""
    c, s = np.cos(psi), np.sin(psi)
    return np.stack([a * np.sign(c) * np.abs(c) ** (2.0 / n), zc + b * np.sign(s) * np.abs(s) ** (2.0 / n)], -1)


_COARSE_VERTICES = 48


def _decimate(outlines: np.ndarray):
    """Every m-th vertex of each section (about 48 left) and a bound of the change in distance.

    Each dropped chain of vertices is replaced by the chord between its kept ends; the largest
    distance of a dropped vertex from its chord (at the stations and at quarter points between
    them, where sections are interpolated) bounds the Hausdorff distance h of the two outlines, so
    unsigned distances differ by at most h and signed ones by at most 2 h (returned).
    """
    S, K, _ = outlines.shape
    m = max(1, K // _COARSE_VERTICES)
    if m == 1:
        return outlines, 0.0
    keep = np.arange(0, K, m)
    t = np.array([0.0, 0.25, 0.5, 0.75])
    secs = (outlines[:-1, None] * (1 - t)[None, :, None, None] + outlines[1:, None] * t[None, :, None, None])
    secs = np.concatenate([secs.reshape(-1, K, 2), outlines[-1:]], 0)
    v = np.arange(K)
    j = np.searchsorted(keep, v, side="right") - 1
    a = secs[:, keep[j]]
    b = secs[:, keep[(j + 1) % len(keep)]]
    e = b - a
    w = secs - a
    tt = np.clip(np.sum(w * e, -1) / np.maximum(np.sum(e * e, -1), 1e-30), 0.0, 1.0)
    h = float(np.max(np.linalg.norm(w - tt[..., None] * e, axis=-1)))
    return outlines[:, keep].copy(), 2.0 * h


def _resample(v: np.ndarray, m: int) -> np.ndarray:
    closed = np.vstack([v, v[:1]])
    seg = np.linalg.norm(np.diff(closed, axis=0), axis=1)
    s = np.r_[0.0, np.cumsum(seg)]
    t = np.linspace(0.0, s[-1], m, endpoint=False)
    return np.stack([np.interp(t, s, closed[:, 0]), np.interp(t, s, closed[:, 1])], -1)


# ----------------------------------------------------------------- frames
def to_chassis_frame(yz: np.ndarray, translation: np.ndarray, lean: np.ndarray) -> np.ndarray:
    """World front-view points to the chassis frame (design position).

    Parameters
    ----------
    yz : ndarray of shape (..., 2)
        World (y, z), mm.
    translation : ndarray of shape (..., 2)
        World position of the chassis datum, broadcastable to ``yz``.
    lean : ndarray of shape (...)
        Chassis lean, radians (docs/domain.md sign).
    """
    c, s = np.cos(lean), np.sin(lean)
    dy = yz[..., 0] - translation[..., 0]
    dz = yz[..., 1] - translation[..., 1]
    return np.stack([c * dy - s * dz, s * dy + c * dz], -1)


# ------------------------------------------------------------ sections at x
def _segment_of(shell: Shell, x: np.ndarray):
    xs = shell.x
    xc = np.clip(x, xs[0], xs[-1])
    i = np.clip(np.searchsorted(xs, xc, side="right") - 1, 0, len(xs) - 2)
    t = (xc - xs[i]) / (xs[i + 1] - xs[i])
    return xc, i, t


def superellipse_params(shell: Shell, x: np.ndarray):
    """(a, b, zc, n) of the section at each x (clamped to the station range)."""
    xs = shell.x
    x = np.asarray(x)
    if len(xs) == 2:
        t = np.clip((x - xs[0]) / (xs[1] - xs[0]), 0.0, 1.0)
        i = 0
    else:
        xc = np.clip(x, xs[0], xs[-1])
        i = np.clip(np.searchsorted(xs, xc, side="right") - 1, 0, len(xs) - 2)
        t = (xc - xs[i]) / (xs[i + 1] - xs[i])
    out = []
    for p in (shell.half_width, shell.half_height, shell.centre_z, shell.exponent):
        p0 = p[i]
        out.append(p0 + (p[i + 1] - p0) * t)
    return tuple(out)


def _chart(u, v, a, b, n, inv_n):
    """Closest point on the first-quadrant arc Y = a (1 - (Z/b)^n)^(1/n), Z in [0, b*0.9^(1/n)].

    Newton on g(Z) = |(Y(Z), Z) - (u, v)|^2 / 2; returns the squared distance.
    """
    zmax = b * _CHART_LIMIT ** inv_n
    G = np.maximum((u / a) ** n + (v / b) ** n, 1e-300) ** inv_n
    Z = np.clip(np.minimum(v, v / np.maximum(G, 1e-12)), 0.0, zmax)
    ab = a / b
    for _ in range(_NEWTON_ITERATIONS):
        t = Z / b
        p2 = t ** (n - 2.0)                       # t^(n-2)
        w = p2 * t * t                            # t^n
        om = 1.0 - w
        q = om ** (inv_n - 1.0)                   # (1 - t^n)^(1/n - 1)
        Y = a * q * om
        dY = -ab * p2 * t * q
        d2Y = -(ab / b) * (n - 1.0) * p2 * q / om
        e = Y - u
        g1 = e * dY + (Z - v)
        g2 = dY * dY + e * d2Y + 1.0
        g2 = np.maximum(g2, 0.25 * (1.0 + dY * dY))
        Z = np.clip(Z - g1 / g2, 0.0, zmax)
    t = Z / b
    Y = a * (1.0 - t ** n) ** inv_n
    return (Y - u) ** 2 + (Z - v) ** 2


def superellipse_distance(y, z, a, b, n):
    """Signed distance (positive outside) from (y, z) to the outline |y/a|^n + |z/b|^n = 1.

    Exact to about 1e-6 mm: Newton on two overlapping charts of the quarter
    arc (one with z as the free coordinate, one with y), the nearer kept.

    Parameters
    ----------
    y, z, a, b, n : ndarray, broadcastable
        Point relative to the section centre, half-axes (mm) and exponent (>= 2).
    """
    u, v = np.abs(y), np.abs(z)
    inv_n = 1.0 / n
    d_side = _chart(u, v, a, b, n, inv_n)
    d_top = _chart(v, u, b, a, n, inv_n)
    d = np.sqrt(np.minimum(d_side, d_top))
    inside = (u / a) ** n + (v / b) ** n < 1.0
    return np.where(inside, -d, d)


def superellipse_distance_lower_bound(y, z, a, b, n):
    """A cheap lower bound of :func:`superellipse_distance` outside the outline.

    ``(G - 1) / |grad G|`` with the gauge ``G = (|y/a|^n + |z/b|^n)^(1/n)``:
    because G is convex, this never exceeds the true distance of an outside
    point (and equals it for a circle).
    """
    u, v = np.abs(y) / a, np.abs(z) / b
    pu, pv = u ** n, v ** n
    S = np.maximum(pu + pv, 1e-30)
    G = S ** (1.0 / n)
    # dG/dy = G^(1-n) u^(n-1) / a
    gy = pu / np.maximum(u, 1e-30) / a
    gz = pv / np.maximum(v, 1e-30) / b
    grad = (G / S) * np.sqrt(gy * gy + gz * gz)
    return (G - 1.0) / np.maximum(grad, 1e-30)


def _polygon_at(shell: Shell, x: np.ndarray, coarse: bool = False):
    _, i, t = _segment_of(shell, x)
    O = shell.coarse_outlines if coarse else shell.outlines
    return O[i] * (1.0 - t)[..., None, None] + O[i + 1] * t[..., None, None]


def polygon_distance(y, z, verts):
    """Signed distance (positive outside) of points to closed polygons.

    Parameters
    ----------
    y, z : ndarray of shape (n,)
    verts : ndarray of shape (n, n_vertices, 2) or (n_vertices, 2)
    """
    v0 = verts
    v1 = np.roll(verts, -1, axis=-2)
    py, pz = y[..., None], z[..., None]
    ey, ez = v1[..., 0] - v0[..., 0], v1[..., 1] - v0[..., 1]
    wy, wz = py - v0[..., 0], pz - v0[..., 1]
    L2 = np.maximum(ey * ey + ez * ez, 1e-300)
    s = np.clip((wy * ey + wz * ez) / L2, 0.0, 1.0)
    dy, dz = wy - s * ey, wz - s * ez
    d = np.sqrt(np.min(dy * dy + dz * dz, axis=-1))
    cross = (v0[..., 1] > pz) != (v1[..., 1] > pz)
    with np.errstate(divide="ignore", invalid="ignore"):
        yint = v0[..., 0] + (pz - v0[..., 1]) * ey / np.where(ez == 0, 1.0, ez)
    inside = (np.count_nonzero(cross & (py < yint), axis=-1) % 2) == 1
    return np.where(inside, -d, d)


def polygon_section_edges(shell: Shell, x_mm: float) -> np.ndarray:
    """The polygon section at x (clamped to the stations) as edges, for repeated distance queries.

    Returns
    -------
    ndarray of shape (n_vertices, 6)
        Per edge (vertex k to k + 1): start (y, z), direction, 1 / max(squared length, 1e-300) and
        the end's z.
    """
    v0 = _polygon_at(shell, np.array(float(x_mm)))
    v1 = np.roll(v0, -1, axis=0)
    e = v1 - v0
    inv = 1.0 / np.maximum(e[:, 0] * e[:, 0] + e[:, 1] * e[:, 1], 1e-300)
    return np.ascontiguousarray(np.concatenate([v0, e, inv[:, None], v1[:, 1:]], 1))


def section_distance(shell: Shell, yz: np.ndarray, x_mm, *, lower_bound: bool = False) -> np.ndarray:
    """Signed distance within the cross-section at x (no end caps; x clamped to the stations).

    ``lower_bound=True`` returns a cheap lower bound: the gauge bound for
    superellipse sections, the distance to the thinned polygon minus its error
    bound for polygon sections.
    """
    yz = np.asarray(yz, float)
    x = np.broadcast_to(np.asarray(x_mm, float), yz.shape[:-1])
    if shell.kind == "superellipse":
        a, b, zc, n = superellipse_params(shell, x)
        f = superellipse_distance_lower_bound if lower_bound else superellipse_distance
        return f(yz[..., 0], yz[..., 1] - zc, a, b, n)
    shape = yz.shape[:-1]
    yf, zf, xf = yz[..., 0].ravel(), yz[..., 1].ravel(), x.ravel()
    out = np.empty(yf.shape)
    coarse = lower_bound and shell.coarse_outlines is not None
    k = (shell.coarse_outlines if coarse else shell.outlines).shape[1]
    chunk = max(1, 2_000_000 // k)
    one = len(xf) > 0 and bool(np.all(xf == xf[0]))     # one section for all points (tubes in the linkage plane)
    poly = _polygon_at(shell, xf[:1], coarse)[0] if one else None
    for s0 in range(0, len(yf), chunk):   # chunks bound the memory, not a loop over states
        sl = slice(s0, s0 + chunk)
        out[sl] = polygon_distance(yf[sl], zf[sl], poly if one else _polygon_at(shell, xf[sl], coarse))
    if coarse:
        out -= shell.coarse_error_mm
    return out.reshape(shape).astype(yz.dtype, copy=False)


def shell_signed_distance(shell: Shell, yz, x_mm, *, lower_bound: bool = False) -> np.ndarray:
    """Signed distance (mm, positive outside) of chassis-frame points to the shell, end caps included.

    Parameters
    ----------
    shell : Shell
    yz : ndarray of shape (..., 2)
        (y, z) in the chassis frame (design position), mm. For points of a
        leaned state, convert with :func:`to_chassis_frame` first.
    x_mm : float or ndarray broadcastable to ``yz.shape[:-1]``
        x of each point, mm.

    Returns
    -------
    ndarray of shape yz.shape[:-1]
        Use it as an optimizer limit: a pivot inside the shell by a margin m
        has ``shell_signed_distance <= -m``; a wheel point outside by m has
        ``>= m``.
    """
    yz = np.asarray(yz, float)
    return signed_distance_yz(shell, yz[..., 0], yz[..., 1], x_mm, lower_bound=lower_bound)


def signed_distance_yz(shell: Shell, y, z, x_mm, *, lower_bound: bool = False) -> np.ndarray:
    """:func:`shell_signed_distance` with y and z as separate arrays (no stacking, for hot loops)."""
    y = np.asarray(y)
    if y.dtype not in (np.float32, np.float64):
        y = y.astype(float)
    x = np.broadcast_to(np.asarray(x_mm, y.dtype), y.shape)
    if shell.kind == "superellipse":
        a, b, zc, n = (p.astype(y.dtype) for p in superellipse_params(shell, x))
        f = superellipse_distance_lower_bound if lower_bound else superellipse_distance
        d = f(y, z - zc, a, b, n)
    else:
        d = section_distance(shell, np.stack([y, z], -1), x, lower_bound=lower_bound)
    x0, x1 = shell.x_range
    beyond = np.maximum(x0 - x, x - x1)          # > 0 outside the station range
    to_cap = np.minimum(x - x0, x1 - x)          # >= 0 inside the range
    out = np.where(beyond > 0,
                   np.where(d > 0, np.hypot(np.maximum(beyond, 0.0), d), np.maximum(beyond, 0.0)),
                   np.where(d < 0, -np.minimum(-d, np.maximum(to_cap, 0.0)), d))
    return out


def inside_level(shell: Shell, yz: np.ndarray, x_mm) -> np.ndarray:
    """A function with the same zero set and sign as the section distance, cheap (for root finding)."""
    yz = np.asarray(yz, float)
    x = np.asarray(x_mm, float)
    if shell.kind == "superellipse":
        a, b, zc, n = superellipse_params(shell, x)    # once when x is one value (tubes in the linkage plane)
        return np.abs(yz[..., 0] / a) ** n + np.abs((yz[..., 1] - zc) / b) ** n - 1.0
    return section_distance(shell, yz, np.broadcast_to(x, yz.shape[:-1]))


# ------------------------------------------------------------ extents
def _station_grid(shell: Shell, per_segment: int = 16) -> np.ndarray:
    if shell.kind == "polygon":
        return shell.x.copy()   # vertex coordinates are linear in x: extremes sit at stations
    xs = shell.x
    t = np.linspace(0.0, 1.0, per_segment + 1)[:-1]
    return np.r_[(xs[:-1, None] + (xs[1:] - xs[:-1])[:, None] * t).ravel(), xs[-1]]


def support(shell: Shell, direction: np.ndarray) -> np.ndarray:
    """Largest ``direction . (y, z)`` over the whole shell (chassis frame), mm.

    Parameters
    ----------
    direction : ndarray of shape (..., 2)
        Unit vectors in the chassis frame.

    Returns
    -------
    ndarray of shape (...)
        Exact for polygon shells; for superellipse shells the maximum over
        the stations and 16 interpolated sections per bay (the support of a
        superellipse is ``(|a u|^m + |b v|^m)^(1/m)``, ``m = n / (n - 1)``).
    """
    direction = np.asarray(direction, float)
    if shell.kind == "polygon":
        v = shell.outlines.reshape(-1, 2)
        return np.max(direction[..., None, 0] * v[:, 0] + direction[..., None, 1] * v[:, 1], axis=-1)
    xg = _station_grid(shell)
    a, b, zc, n = superellipse_params(shell, xg)
    m = n / (n - 1.0)
    u, w = direction[..., None, 0], direction[..., None, 1]
    h = (np.abs(a * u) ** m + np.abs(b * w) ** m) ** (1.0 / m) + w * zc
    return np.max(h, axis=-1)


# ---------------------------------------------------------- outline positions
def outline_table(shell: Shell, x_mm: float):
    """The outline at x as a dense closed polyline with its arc length.

    Returns
    -------
    centre : ndarray of shape (2,)
        The point polar angles are measured about (section centre or centroid).
    angle : ndarray of shape (m,)
        Polar angle of each table point, ascending from -pi.
    arc : ndarray of shape (m,)
        Arc length along the outline at each table point, mm.
    perimeter : float
    """
    if shell.kind == "superellipse":
        a, b, zc, n = (float(v) for v in superellipse_params(shell, np.array(x_mm)))
        pts = _superellipse_points(a, b, zc, n, np.linspace(-math.pi, math.pi, _OUTLINE_TABLE, endpoint=False))
        centre = np.array([0.0, zc])
    else:
        poly = _polygon_at(shell, np.array(float(x_mm)))
        area_w = poly[:, 0] * np.roll(poly[:, 1], -1) - np.roll(poly[:, 0], -1) * poly[:, 1]
        A = 0.5 * area_w.sum()
        centre = np.array([np.sum((poly[:, 0] + np.roll(poly[:, 0], -1)) * area_w),
                           np.sum((poly[:, 1] + np.roll(poly[:, 1], -1)) * area_w)]) / (6.0 * A)
        pts = _resample(poly, max(_OUTLINE_TABLE, 8 * len(poly)))
    ang = np.arctan2(pts[:, 1] - centre[1], pts[:, 0] - centre[0])
    closed = np.vstack([pts, pts[:1]])
    seg = np.linalg.norm(np.diff(closed, axis=0), axis=1)
    arc = np.r_[0.0, np.cumsum(seg)[:-1]]
    perimeter = float(seg.sum())
    k = int(np.argmin(ang))
    ang, arc = np.roll(ang, -k), np.roll(arc, -k)
    arc = np.mod(arc - arc[0], perimeter)
    ang = np.maximum.accumulate(ang)   # star-shaped outlines only: keep the table monotone
    return centre, ang, arc, perimeter


def outline_position(shell: Shell, x_mm: float, yz: np.ndarray):
    """Arc-length position (mm, in [0, perimeter)) of points on the outline at x, and the perimeter.

    Points are located by their polar angle about the section centre
    (superellipse) or centroid (polygon): the outline must be star-shaped
    about it.
    """
    centre, ang, arc, perimeter = outline_table(shell, x_mm)
    yz = np.asarray(yz, float)
    pa = np.arctan2(yz[..., 1] - centre[1], yz[..., 0] - centre[0])
    pa = np.where(pa < ang[0], pa + 2 * math.pi, pa)
    pos = np.interp(pa, np.r_[ang, ang[0] + 2 * math.pi], np.r_[arc, perimeter])
    return np.mod(pos, perimeter), perimeter
