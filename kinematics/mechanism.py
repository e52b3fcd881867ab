"""The mechanism file: a frozen description of a planar tilting linkage.

A mechanism is bodies with named points (``[y, z]`` in mm, or ``[x, y, z]`` where the forward
position matters; design position, global coordinates), joined by pins, links, springs and
sliders, with exactly two wheels, and optionally a steering linkage. This module reads and writes
the TOML file and checks it; it never solves anything (see :mod:`tiltopt.kinematics.model` and
:mod:`tiltopt.kinematics.steering`).

The tilting linkage is planar: every pin's axis runs along x, so a pin's two points coincide
(in x too), and every link, spring and slider lies in one plane ``x = const`` (its points share
their x). The bodies move in y and z only; a point's x never changes. A point given as ``[y, z]``
lies in the linkage plane, ``x = station_x_mm``. Points off that plane matter to the steering
(the steering axis through two upright points: their x difference is the caster) and to the
side view.

File format (all lengths mm, angles degrees)::

    name = "example"
    chassis = "chassis"
    description = "free text"          # optional
    station_x_mm = 0.0                 # optional: x of the linkage plane
    [bodies.chassis]
    datum = [0.0, 0.0]
    [[pins]]    a = "body.point"  b = "body.point"  name = "..." (optional)
                base_mm (optional): bearing spacing of the pivot along x, for
                the out-of-plane (braking) load model of tiltopt.kinematics.forces
    [[links]]   a, b, name (optional)
    [[springs]] name, a, b; optional: kind = "coil" | "elastomer" (default
                coil), rate_n_per_mm (coil rate; elastomer: initial rate of
                the default curve), curve = [[deflection_mm, force_n], ...]
                (force-deflection points from the free length, rising; a
                progressive coil or a rubber block), max_deflection_mm (the
                compression at which the spring is solid: coil bind, bump
                stop, a fully compressed block; default for a curve: its last
                point), free_length_mm, preload_n (your setup, compared with
                the suggested one; see tiltopt.kinematics.springs)
    [[sliders]] name (optional), a_from, a_to (a line on one body), b (a point
                of another body that runs on that line; the two bodies keep
                their relative angle)
    [[wheels]]  name = "left" | "right", upright, centre, outer_radius_mm,
                crown_radius_mm, static_camber_deg

The steering linkage (optional; see :mod:`tiltopt.kinematics.steering`)::

    [steering]
    input_range_deg = [-40.0, 40.0]   # the lock of the steering input (the steering column's
                                      # angle, deg): the input is a state variable of this range
    wheelbase_mm = 1650.0             # optional: for the Ackermann error
    ackermann_inputs_deg = [20.0, 40.0]   # optional: inputs of the Ackermann error
                                      # (default: half and full lock each way)
    [[steering.drives]]   name (optional), kind = "slide" | "lever", body, axis = ["body.a",
                "body.b"] (the line a rack slides along, a -> b for a positive input, or the
                axis a lever turns about, right hand, through a), gain (slide: mm per input
                degree, e.g. a pinion's pitch radius x pi / 180; lever: degrees per input
                degree), points = ["body.p", ...] (the points the drive moves: tie rod ends)
    [[steering.rods]]     wheel = "left" | "right", arm = "upright.point" (the steering arm:
                a point of the steered part, turning with the wheel about its steering axis: the
                wheel's upright, or the guide a slider joins it to),
                end = "body.point" (a point a drive moves), name (optional); the rod's length
                is fixed at its design-position length

Keys for the 3-D clearance check (all optional; see :mod:`tiltopt.kinematics.clearance`)::

    tube_od_mm = 25.4                           # top level: tube diameter of every link and body
                                                # tube that gives none (default 25.4, a 1 in tube)
    [[wheels]]  kingpin_inclination_deg = 0.0   # front view, top of the axis inboard
                caster_deg = 0.0                # side view, top of the axis rearward
                steer_axis_point = "upright.hub"   # point of the upright on the axis
                                                # (default: the wheel centre)
                steer_axis = ["upright.top", "upright.bottom"]   # or: the axis through two points
                                                # of the upright (front view; replaces the two above
                                                # in the front view, caster_deg still tilts it)
                steered = true                  # false: the wheel does not steer
                hub_width_mm = 70.0             # the wheel solid: hub width at the axle, tapering
                hub_radius_mm = 35.0            # to the tyre width at the crown circle; the hub
                                                # zone (radius) where the members that carry the
                                                # wheel hold its stub axle
    [[links]]   tube_od_mm                      # tube diameter (default: the top-level one; 0 = a line)
                shell = "through"               # "inside" | "outside" | "through"
    [[segments]] body, a, b (point names of that body), name (optional),
                tube_od_mm, shell = "through"   # a body's tube, as a capsule; a body with
                                                # segments has only those, every other body gets
                                                # default tubes (see body_tubes)
    [steer_envelope]                            # default: DEFAULT_STEER_ENVELOPE when a wheel steers
    lean_deg = [0.0, 20.0, 40.0]                # rows, ascending, >= 0; an empty table: no steer
    max_steer_deg = [30.0, 12.0, 5.0]           # largest steer at that |lean|;
                                                # linear between rows, held beyond

``shell`` says where a tube must run: "inside" the body shell, "outside" it,
or "through" it (the default: the slot it cuts is measured when it crosses
the outline; nothing is required of it).
"""
from __future__ import annotations

import math
import re
import reprlib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Iterable

from tiltopt.base.errors import InputError, check_keys, read_toml
from tiltopt.base.limits import (
    MAX_ABS_LEAN_DEG,
    MAX_FORCE_N,
    MAX_RANGE_VALUES,
    MAX_STEER_GAIN,
    MAX_STEER_INPUT_DEG,
    MAX_STEER_ITEMS,
    check_coord,
    check_count,
)

PIN_TOLERANCE_MM = 0.01
_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
SHELL_ROLES = ("inside", "outside", "through")

#: tube diameter of a member the file gives none for: a 1 in (25.4 mm) tube, a usual size of
#: trike linkage arms (common practice, no source)
DEFAULT_TUBE_OD_MM = 25.4
#: the wheel solid (docs/domain.md): hub width at the axle and the hub zone's radius, for a small
#: stub-axle wheel hub (common practice, no source; a hub motor needs larger values)
DEFAULT_HUB_WIDTH_MM = 70.0
DEFAULT_HUB_RADIUS_MM = 35.0
#: steer envelope of a file that gives none while a wheel steers: (|lean| deg, max steer deg) rows.
#: Full lock 30 deg at walking pace, tapering with lean (common practice, no source); held beyond
#: the last row. It holds the steer of a balanced turn, delta ~ L g tan(lean) / v^2, of a 1.1 m
#: wheelbase at 5 m/s up to 30 deg of lean (4.4, 9.0 and 14.3 deg at 10, 20 and 30 deg).
DEFAULT_STEER_ENVELOPE = ((0.0, 30.0), (15.0, 20.0), (30.0, 15.0))


@dataclass(frozen=True)
class Pin:
    """Revolute joint: point ``a`` of one body and point ``b`` of another coincide."""

    a: str
    b: str
    name: str
    base_mm: float | None = None   # bearing spacing along x (out-of-plane loads); optional


@dataclass(frozen=True)
class Link:
    """Two-force member of fixed length between two body points."""

    a: str
    b: str
    name: str
    tube_od_mm: float = 0.0
    shell: str = "through"


@dataclass(frozen=True)
class Segment:
    """A tube of one body between two of its points (a capsule for clearance checks)."""

    name: str
    body: str
    a: str
    b: str
    tube_od_mm: float = DEFAULT_TUBE_OD_MM
    shell: str = "through"


@dataclass(frozen=True)
class Spring:
    """Suspension element between two body points; its length is a state."""

    name: str
    a: str
    b: str
    rate_n_per_mm: float | None = None
    free_length_mm: float | None = None
    preload_n: float | None = None
    kind: str = "coil"
    curve: tuple[tuple[float, float], ...] | None = None
    max_deflection_mm: float | None = None


@dataclass(frozen=True)
class Slider:
    """Prismatic joint: point ``b`` runs on the line ``a_from -> a_to`` of another body.

    The two bodies keep their design-position relative angle.
    """

    name: str
    a_from: str
    a_to: str
    b: str


@dataclass(frozen=True)
class Wheel:
    """A wheel on an upright body; the tyre is a torus (R, r)."""

    name: str
    upright: str
    centre: str
    outer_radius_mm: float
    crown_radius_mm: float
    static_camber_deg: float = 0.0
    kingpin_inclination_deg: float = 0.0
    caster_deg: float = 0.0
    steer_axis_point: str | None = None   # "upright.point" on the steering axis; None = the wheel centre
    steer_axis: tuple[str, str] | None = None   # two upright points the axis runs through (front view)
    steered: bool = True
    hub_width_mm: float = DEFAULT_HUB_WIDTH_MM
    hub_radius_mm: float = DEFAULT_HUB_RADIUS_MM


STEER_DRIVE_KINDS = ("slide", "lever")


@dataclass(frozen=True)
class SteerDrive:
    """How the steering input moves points: a rack (``slide``) or a lever (``lever``) on a body.

    A slide moves its points by ``gain * u`` mm along the line ``axis[0] -> axis[1]``; a lever
    turns them by ``gain * u`` degrees about the line through ``axis[0]`` and ``axis[1]`` (right
    hand about ``axis[0] -> axis[1]``), u the steering input (deg). The axis points are fixed to
    ``body`` and move with it.
    """

    name: str
    kind: str
    body: str
    axis: tuple[str, str]
    gain: float
    points: tuple[str, ...]


@dataclass(frozen=True)
class TieRod:
    """A rod of fixed length from a steering arm point (on the steered part of ``wheel``) to a point
    a drive moves."""

    name: str
    wheel: str
    arm: str
    end: str


@dataclass(frozen=True)
class Steering:
    """The steering linkage: the input's range (its lock), the drives and one rod per steered wheel."""

    input_range_deg: tuple[float, float]
    drives: tuple[SteerDrive, ...]
    rods: tuple[TieRod, ...]
    wheelbase_mm: float | None = None
    ackermann_inputs_deg: tuple[float, ...] | None = None

    @property
    def ackermann_inputs(self) -> tuple[float, ...]:
        """The inputs the Ackermann error is taken at: the file's, else half and full lock each way."""
        if self.ackermann_inputs_deg is not None:
            return self.ackermann_inputs_deg
        lo, hi = self.input_range_deg
        return (0.5 * lo, lo, 0.5 * hi, hi)

    def drive_of(self, ref: str) -> SteerDrive | None:
        """The drive that moves a point, or None."""
        for d in self.drives:
            if ref in d.points:
                return d
        return None

    def rod_of(self, wheel: str) -> TieRod | None:
        for r in self.rods:
            if r.wheel == wheel:
                return r
        return None

    @property
    def point_refs(self) -> list[str]:
        """Every point the steering uses (axis, moved and arm points), in order, no repeats."""
        out: list[str] = []
        for d in self.drives:
            out += [*d.axis, *d.points]
        for r in self.rods:
            out += [r.arm, r.end]
        return list(dict.fromkeys(out))


@dataclass(frozen=True)
class Mechanism:
    """A planar tilting linkage in its design position.

    Attributes
    ----------
    bodies : dict of str -> dict of str -> (float, float)
        Body name -> point name -> (y_mm, z_mm), design position, global frame.
    """

    name: str
    chassis: str
    bodies: dict[str, dict[str, tuple[float, float]]]
    pins: tuple[Pin, ...] = ()
    links: tuple[Link, ...] = ()
    springs: tuple[Spring, ...] = ()
    sliders: tuple[Slider, ...] = ()
    wheels: tuple[Wheel, ...] = ()
    description: str = ""
    station_x_mm: float = 0.0
    segments: tuple[Segment, ...] = ()
    #: (lean_deg, max_steer_deg) rows; None = not given (DEFAULT_STEER_ENVELOPE where a wheel
    #: steers), () = given empty (no steer)
    steer_envelope: tuple[tuple[float, float], ...] | None = None
    tube_od_mm: float = DEFAULT_TUBE_OD_MM
    #: "body.point" -> x (mm) of the points given as [x, y, z]; any other point lies at station_x_mm
    point_x: dict[str, float] = field(default_factory=dict)
    steering: Steering | None = None
    source: str = field(default="<memory>", compare=False)

    # ------------------------------------------------------------------ lookup
    def point(self, ref: str) -> tuple[float, float]:
        """The front-view position ``(y, z)`` of a point (design position)."""
        body, pt = split_ref(ref)
        return self.bodies[body][pt]

    def x_of(self, ref: str) -> float:
        """The forward position x of a point (mm): its own, or the linkage plane's."""
        return self.point_x.get(ref, self.station_x_mm)

    def point3(self, ref: str) -> tuple[float, float, float]:
        """The point ``(x, y, z)`` in the design position."""
        y, z = self.point(ref)
        return (self.x_of(ref), y, z)

    def body_of(self, ref: str) -> str:
        return split_ref(ref)[0]

    def wheel(self, name: str) -> Wheel:
        for w in self.wheels:
            if w.name == name:
                return w
        raise KeyError(name)

    @property
    def point_refs(self) -> list[str]:
        """Every point as ``body.point``, in file order."""
        return [f"{b}.{p}" for b, pts in self.bodies.items() for p in pts]

    @property
    def steer_rows(self) -> tuple[tuple[float, float], ...]:
        """The steer envelope in force: the file's rows, the default where a wheel steers, else none."""
        if self.steer_envelope is not None:
            return self.steer_envelope
        return DEFAULT_STEER_ENVELOPE if any(w.steered for w in self.wheels) else ()

    def with_points(self, points: dict[str, tuple]) -> "Mechanism":
        """A copy with some points moved (``{"body.point": (y, z)}``, or ``(x, y, z)`` to set x too:
        an x equal to the station is kept as an own x only where the point had one)."""
        bodies = {b: dict(pts) for b, pts in self.bodies.items()}
        px = dict(self.point_x)
        for ref, p_ in points.items():
            b, p = split_ref(ref)
            if len(p_) == 3:
                x = float(p_[0])
                if ref in px or x != self.station_x_mm:
                    px[ref] = x
                p_ = p_[1:]
            bodies[b][p] = (float(p_[0]), float(p_[1]))
        return replace(self, bodies=bodies, point_x=px)


def split_ref(ref: str) -> tuple[str, str]:
    body, _, point = ref.partition(".")
    return body, point


# ---------------------------------------------------------------------- tubes
def spanning_tree(points) -> list[tuple[int, int]]:
    """Edges (i, j) of the Euclidean minimum spanning tree of points (Prim's algorithm), in order."""
    pts = [tuple(map(float, p)) for p in points]
    n = len(pts)
    if n < 2:
        return []
    inside, edges = [0], []
    best = {j: (math.dist(pts[0], pts[j]), 0) for j in range(1, n)}
    while best:
        j = min(best, key=lambda k: (best[k][0], k))
        _, i = best.pop(j)
        edges.append((i, j))
        inside.append(j)
        for k in best:
            d = math.dist(pts[j], pts[k])
            if d < best[k][0]:
                best[k] = (d, j)
    return edges


def joint_points(mech: "Mechanism") -> dict[str, list[str]]:
    """Per body, its points where a pin, link, spring or slider attaches (file order, no repeats)."""
    refs = []
    for p in mech.pins:
        refs += [p.a, p.b]
    for j in (*mech.links, *mech.springs):
        refs += [j.a, j.b]
    for s in mech.sliders:
        refs += [s.a_from, s.a_to, s.b]
    out: dict[str, list[str]] = {b: [] for b in mech.bodies}
    order = {r: k for k, r in enumerate(mech.point_refs)}
    for r in sorted(set(refs), key=order.get):
        body, pt = split_ref(r)
        out[body].append(pt)
    return out


def body_tubes(mech: "Mechanism") -> tuple[Segment, ...]:
    """Every body's tubes for the clearance checks.

    A body with declared ``[[segments]]`` has exactly those. Every other body (the chassis included)
    gets default tubes: the minimum spanning tree of its joint points (:func:`joint_points`; a
    wheel centre is not one: the stub axle from the upright to the hub is not a tube), plus the
    mirror image of each tree edge within the body (names with left and right swapped) so that a
    symmetric body gets symmetric tubes; each of the file's ``tube_od_mm`` and shell role "through",
    named ``body.a~b``. A body with fewer than two joint points has none.
    """
    declared = {g.body for g in mech.segments}
    out = list(mech.segments)
    for body, pts in joint_points(mech).items():
        if body in declared or len(pts) < 2:
            continue
        xy = [mech.bodies[body][p] for p in pts]
        edges = [(pts[i], pts[j]) for i, j in spanning_tree(xy)]
        seen = {frozenset(e) for e in edges}
        for a, b in list(edges):
            m = (_swap_lr(a), _swap_lr(b))
            if m[0] in pts and m[1] in pts and frozenset(m) not in seen:
                seen.add(frozenset(m))
                edges.append(m)
        for a, b in edges:
            if math.dist(mech.bodies[body][a], mech.bodies[body][b]) >= 1.0:
                out.append(Segment(f"{body}.{a}~{b}", body, a, b, mech.tube_od_mm))
    return tuple(out)


# ---------------------------------------------------------------------- reading
def load_mechanism(path: str | Path) -> Mechanism:
    """Read and validate a mechanism TOML file.

    Raises
    ------
    InputError
        On any problem, naming the file and the key.
    """
    data = read_toml(path, "mechanism .toml")
    return parse_mechanism(data, str(path))


def _check_keys(table: dict, allowed: Iterable[str], required: Iterable[str], src: str, where: str):
    check_keys(table, allowed, src, where, required)


def _number(value: Any, src: str, key: str, *, positive: bool = False, nonneg: bool = False,
            length: bool = True, force: bool = False) -> float:
    """A finite number; a length or coordinate (``length``, the default) within +-MAX_COORD_MM, a force
    (``force``, with ``length=False``) within +-MAX_FORCE_N."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError(f"expected a finite number. Got {value!r} instead.", src, key)
    value = check_coord(float(value), src, key, "length or coordinate") if length else float(value)
    if force and abs(value) > MAX_FORCE_N:
        raise InputError(f"a force must be within +-{MAX_FORCE_N:g} N. Got {value!r} instead.", src, key)
    if positive and value <= 0:
        raise InputError(f"must be positive. Got {value} instead.", src, key)
    if nonneg and value < 0:
        raise InputError(f"must not be negative. Got {value} instead.", src, key)
    return value


def _string(value: Any, src: str, key: str) -> str:
    if not isinstance(value, str):
        raise InputError(f"expected a string. Got {value!r} instead.", src, key)
    return value


def _list_of_tables(data: dict, name: str, src: str) -> list[dict]:
    items = data.get(name, [])
    if not isinstance(items, list) or not all(isinstance(t, dict) for t in items):
        raise InputError(f"expected an array of tables ([[{name}]]).", src, name)
    return items


SPRING_KINDS = ("coil", "elastomer")


def _spring_curve(t: dict, opt: dict, src: str, w: str) -> dict:
    """The ``kind`` and ``curve`` keys of a spring (checked against its other keys)."""
    kind = _string(t.get("kind", "coil"), src, w + ".kind")
    if kind not in SPRING_KINDS:
        raise InputError(f"expected one of: {', '.join(SPRING_KINDS)}. Got {kind!r} instead.", src, w + ".kind")
    out: dict = {"kind": kind}
    if "curve" in t:
        pts = t["curve"]
        if not isinstance(pts, list) or len(pts) < 2 or not all(isinstance(p, list) and len(p) == 2 for p in pts):
            raise InputError("expected at least two [deflection_mm, force_n] points, e.g. [[0.0, 0.0], [10.0, "
                             f"500.0]]. Got {reprlib.repr(pts)} instead.", src, w + ".curve")
        check_count(len(pts), MAX_RANGE_VALUES, "curve points", "Give the curve at fewer deflections.", src,
                    w + ".curve")
        xy = [(_number(p[0], src, f"{w}.curve[{i}][0]", nonneg=True),
               _number(p[1], src, f"{w}.curve[{i}][1]", nonneg=True, length=False, force=True))
              for i, p in enumerate(pts)]
        if xy[0][0] > 0.0:
            xy.insert(0, (0.0, 0.0))          # the free length: no deflection, no force
        elif xy[0][1] != 0.0:
            raise InputError(f"at zero deflection the force is zero (the free length). Got {list(xy[0])}.", src,
                             f"{w}.curve[0]")
        for i, (p, q) in enumerate(zip(xy[:-1], xy[1:])):
            if not (q[0] > p[0] and q[1] > p[1]):
                raise InputError(f"deflections and forces must both rise from point to point (the curve starts at "
                                 f"[0, 0]). Got {list(p)} then {list(q)}.", src, f"{w}.curve")
        out["curve"] = tuple(xy)
        if opt.get("max_deflection_mm", 0.0) > xy[-1][0]:
            raise InputError(f"max_deflection_mm ({opt['max_deflection_mm']:g}) lies beyond the curve's last point "
                             f"({xy[-1][0]:g} mm): extend the curve to where the spring is solid.", src,
                             w + ".max_deflection_mm")
    elif kind == "elastomer" and ("rate_n_per_mm" not in opt or "max_deflection_mm" not in opt):
        raise InputError("an elastomer spring needs its force-deflection points (curve), or rate_n_per_mm and "
                         "max_deflection_mm for the default progressive curve.", src, w)
    return out


def _two_points(ax: Any, body: str, ref, src: str, key: str, what: str) -> tuple[str, str]:
    """Two point references of ``body`` that give a line (a steering axis, a drive's axis), each read with
    ``ref(value, key)``; InputError naming ``key`` otherwise."""
    if not (isinstance(ax, list) and len(ax) == 2):
        raise InputError(f"expected two points of body '{body}', [\"{body}.a\", \"{body}.b\"]: the {what}. "
                         f"Got {reprlib.repr(ax)} instead.", src, key)
    refs = tuple(ref(a, f"{key}[{k}]") for k, a in enumerate(ax))
    if any(split_ref(r)[0] != body for r in refs):
        raise InputError(f"the {what} points must be points of body '{body}'. Got {reprlib.repr(ax)}.", src, key)
    return refs


def parse_mechanism(data: dict, src: str = "<memory>") -> Mechanism:
    """Validate a mechanism given as a TOML-like dict (see module docs)."""
    _check_keys(
        data,
        ["name", "chassis", "description", "station_x_mm", "bodies", "pins", "links", "springs",
         "sliders", "wheels", "segments", "steer_envelope", "tube_od_mm", "steering"],
        ["name", "chassis", "bodies", "wheels"], src, "")
    name = _string(data["name"], src, "name")
    chassis = _string(data["chassis"], src, "chassis")
    description = _string(data.get("description", ""), src, "description")
    station_x = _number(data.get("station_x_mm", 0.0), src, "station_x_mm")
    default_od = _number(data.get("tube_od_mm", DEFAULT_TUBE_OD_MM), src, "tube_od_mm", nonneg=True)

    raw_bodies = data["bodies"]
    if not isinstance(raw_bodies, dict) or not raw_bodies:
        raise InputError("expected at least one [bodies.NAME] table.", src, "bodies")
    bodies: dict[str, dict[str, tuple[float, float]]] = {}
    point_x: dict[str, float] = {}
    for bname, pts in raw_bodies.items():
        key = f"bodies.{bname}"
        if not _NAME.match(bname):
            raise InputError("body names must be letters, digits and '_' (not starting with a digit).", src, key)
        if not isinstance(pts, dict) or not pts:
            raise InputError("expected a table of points, name = [y_mm, z_mm] or [x_mm, y_mm, z_mm].", src, key)
        bodies[bname] = {}
        for pname, yz in pts.items():
            pkey = f"{key}.{pname}"
            if not _NAME.match(pname):
                raise InputError("point names must be letters, digits and '_'.", src, pkey)
            if not (isinstance(yz, list) and len(yz) in (2, 3)):
                raise InputError(f"expected a point [y_mm, z_mm] or [x_mm, y_mm, z_mm]. Got {reprlib.repr(yz)} "
                                 f"instead.", src, pkey)
            c = [_number(v, src, f"{pkey}[{k}]") for k, v in enumerate(yz)]
            if len(c) == 3:
                point_x[f"{bname}.{pname}"] = c.pop(0)
            bodies[bname][pname] = (c[0], c[1])
    if chassis not in bodies:
        raise InputError(
            f"the chassis body '{chassis}' is not defined. Add a [bodies.{chassis}] table, or set "
            f"chassis to one of: {', '.join(bodies)}.", src, "chassis")

    def ref(value: Any, key: str) -> str:
        value = _string(value, src, key)
        body, _, pt = value.partition(".")
        if not pt:
            raise InputError(f"expected a point reference 'body.point'. Got {value!r} instead.", src, key)
        if body not in bodies:
            raise InputError(f"unknown body '{body}' in {value!r}. Bodies: {', '.join(bodies)}.", src, key)
        if pt not in bodies[body]:
            raise InputError(
                f"unknown point '{pt}' of body '{body}'. Its points: {', '.join(bodies[body])}.", src, key)
        return value

    def _same_x(refs, why: str, src_: str, where: str):
        xs = [point_x.get(r, station_x) for r in refs]
        if max(xs) - min(xs) > PIN_TOLERANCE_MM:
            raise InputError(f"{why}: the points {', '.join(refs)} must have the same x (within "
                             f"{PIN_TOLERANCE_MM} mm). They are at x = {', '.join(f'{v:g}' for v in xs)} mm.",
                             src_, where)

    used_names: set[str] = set()

    def unique(nm: str, key: str) -> str:
        if not re.match(r"^[A-Za-z_][A-Za-z0-9_.~@-]*$", nm):
            raise InputError(f"invalid name {nm!r}.", src, key)
        if nm in used_names:
            raise InputError(f"the name {nm!r} is used twice; joint, spring and wheel names must be unique.",
                             src, key)
        used_names.add(nm)
        return nm

    pins = []
    for i, t in enumerate(_list_of_tables(data, "pins", src)):
        w = f"pins[{i}]"
        _check_keys(t, ["a", "b", "name", "base_mm"], ["a", "b"], src, w)
        a, b = ref(t["a"], w + ".a"), ref(t["b"], w + ".b")
        base = _number(t["base_mm"], src, w + ".base_mm", positive=True) if "base_mm" in t else None
        if split_ref(a)[0] == split_ref(b)[0]:
            raise InputError("a pin must join two different bodies.", src, w)
        pa, pb = bodies[split_ref(a)[0]][split_ref(a)[1]], bodies[split_ref(b)[0]][split_ref(b)[1]]
        gap = math.hypot(pa[0] - pb[0], pa[1] - pb[1])
        if gap > PIN_TOLERANCE_MM:
            raise InputError(
                f"the points {a} {list(pa)} and {b} {list(pb)} of a pin must coincide in the design "
                f"position (within {PIN_TOLERANCE_MM} mm). They are {gap:.3f} mm apart.", src, w)
        _same_x((a, b), "the two points of a pin coincide: the pin's axis runs along x", src, w)
        pins.append(Pin(a, b, unique(_string(t.get("name", f"{a}~{b}"), src, w + ".name"), w + ".name"), base))

    links = []
    for i, t in enumerate(_list_of_tables(data, "links", src)):
        w = f"links[{i}]"
        _check_keys(t, ["a", "b", "name", "tube_od_mm", "shell"], ["a", "b"], src, w)
        a, b = ref(t["a"], w + ".a"), ref(t["b"], w + ".b")
        _check_length(bodies, a, b, src, w)
        _same_x((a, b), "a link of the tilting linkage lies in a plane x = const", src, w)
        links.append(Link(a, b, unique(_string(t.get("name", f"{a}~{b}"), src, w + ".name"), w + ".name"),
                          *_tube(t, src, w, default_od)))

    segments = []
    for i, t in enumerate(_list_of_tables(data, "segments", src)):
        w = f"segments[{i}]"
        _check_keys(t, ["name", "body", "a", "b", "tube_od_mm", "shell"], ["body", "a", "b"], src, w)
        body = _string(t["body"], src, w + ".body")
        if body not in bodies:
            raise InputError(f"unknown body '{body}'. Bodies: {', '.join(bodies)}.", src, w + ".body")
        for k in ("a", "b"):
            pt = _string(t[k], src, f"{w}.{k}")
            if pt not in bodies[body]:
                raise InputError(f"expected a point name of body '{body}' ({', '.join(bodies[body])}). "
                                 f"Got {pt!r} instead.", src, f"{w}.{k}")
        pa, pb = bodies[body][t["a"]], bodies[body][t["b"]]
        if math.hypot(pa[0] - pb[0], pa[1] - pb[1]) < 1.0:
            raise InputError("the two ends are less than 1 mm apart.", src, w)
        nm = unique(_string(t.get("name", f"{body}.{t['a']}~{t['b']}"), src, w + ".name"), w + ".name")
        segments.append(Segment(nm, body, t["a"], t["b"], *_tube(t, src, w, default_od)))

    springs = []
    for i, t in enumerate(_list_of_tables(data, "springs", src)):
        w = f"springs[{i}]"
        _check_keys(t, ["name", "a", "b", "rate_n_per_mm", "free_length_mm", "preload_n", "kind", "curve",
                        "max_deflection_mm"], ["name", "a", "b"], src, w)
        a, b = ref(t["a"], w + ".a"), ref(t["b"], w + ".b")
        _check_length(bodies, a, b, src, w)
        _same_x((a, b), "a spring of the tilting linkage lies in a plane x = const", src, w)
        opt = {}
        for k, kw in (("rate_n_per_mm", dict(positive=True, length=False)), ("free_length_mm", dict(positive=True)),
                      ("preload_n", dict(nonneg=True, length=False, force=True)),
                      ("max_deflection_mm", dict(positive=True))):
            if k in t:
                opt[k] = _number(t[k], src, f"{w}.{k}", **kw)
        opt.update(_spring_curve(t, opt, src, w))
        springs.append(Spring(unique(_string(t["name"], src, w + ".name"), w + ".name"), a, b, **opt))

    sliders = []
    for i, t in enumerate(_list_of_tables(data, "sliders", src)):
        w = f"sliders[{i}]"
        _check_keys(t, ["name", "a_from", "a_to", "b"], ["a_from", "a_to", "b"], src, w)
        a0, a1, b = ref(t["a_from"], w + ".a_from"), ref(t["a_to"], w + ".a_to"), ref(t["b"], w + ".b")
        if split_ref(a0)[0] != split_ref(a1)[0]:
            raise InputError("a_from and a_to must be points of the same body (the guide).", src, w)
        if split_ref(b)[0] == split_ref(a0)[0]:
            raise InputError("b must be a point of another body than the guide a_from/a_to.", src, w)
        p0, p1, pb = (bodies[split_ref(r)[0]][split_ref(r)[1]] for r in (a0, a1, b))
        length = math.hypot(p1[0] - p0[0], p1[1] - p0[1])
        if length < 1.0:
            raise InputError(f"the guide line a_from -> a_to must be at least 1 mm long. It is {length:.3f} mm.",
                             src, w)
        off = abs((pb[0] - p0[0]) * (p1[1] - p0[1]) - (pb[1] - p0[1]) * (p1[0] - p0[0])) / length
        if off > PIN_TOLERANCE_MM:
            raise InputError(f"the point {b} must lie on the guide line {a0} -> {a1} in the design position "
                             f"(within {PIN_TOLERANCE_MM} mm). It is {off:.3f} mm off.", src, w)
        _same_x((a0, a1, b), "a slider of the tilting linkage lies in a plane x = const (its guide runs in y "
                "and z)", src, w)
        nm = _string(t.get("name", f"{b}@{split_ref(a0)[0]}"), src, w + ".name")
        sliders.append(Slider(unique(nm, w + ".name"), a0, a1, b))

    wheels = []
    raw_wheels = _list_of_tables(data, "wheels", src)
    for i, t in enumerate(raw_wheels):
        w = f"wheels[{i}]"
        _check_keys(t, ["name", "upright", "centre", "outer_radius_mm", "crown_radius_mm", "static_camber_deg",
                        "kingpin_inclination_deg", "caster_deg", "steer_axis_point", "steer_axis", "steered",
                        "hub_width_mm", "hub_radius_mm"],
                    ["name", "upright", "centre", "outer_radius_mm", "crown_radius_mm"], src, w)
        nm = _string(t["name"], src, w + ".name")
        if nm not in ("left", "right"):
            raise InputError(f"wheel names must be 'left' and 'right'. Got {nm!r} instead.", src, w + ".name")
        up = _string(t["upright"], src, w + ".upright")
        if up not in bodies:
            raise InputError(f"unknown body '{up}'. Bodies: {', '.join(bodies)}.", src, w + ".upright")
        if up == chassis:
            raise InputError("a wheel's upright cannot be the chassis.", src, w + ".upright")
        centre = ref(t["centre"], w + ".centre")
        if split_ref(centre)[0] != up:
            raise InputError(f"the wheel centre must be a point of its upright '{up}'. Got {centre!r}.",
                             src, w + ".centre")
        big = _number(t["outer_radius_mm"], src, w + ".outer_radius_mm", positive=True)
        small = _number(t["crown_radius_mm"], src, w + ".crown_radius_mm", nonneg=True)
        if small >= big:
            raise InputError(f"the crown_radius_mm of wheel '{nm}' must be smaller than outer_radius_mm "
                             f"({big}). Got {small} instead.", src, w + ".crown_radius_mm")
        camber = _number(t.get("static_camber_deg", 0.0), src, w + ".static_camber_deg", length=False)
        if abs(camber) >= 45:
            raise InputError(f"static_camber_deg must lie within +-45. Got {camber}.", src, w + ".static_camber_deg")
        zc = bodies[up][split_ref(centre)[1]][1]
        need = (big - small) * math.cos(math.radians(camber)) + small
        if abs(zc - need) > PIN_TOLERANCE_MM:
            raise InputError(
                f"in the design position the tyre of wheel '{nm}' must touch the ground (z = 0): with "
                f"outer_radius_mm {big}, crown_radius_mm {small} and static_camber_deg {camber} its centre "
                f"must be at z = {need:.3f} mm. It is at z = {zc:.3f} mm.", src, w + ".centre")
        steer = {}
        for k in ("kingpin_inclination_deg", "caster_deg"):
            if k in t:
                steer[k] = _number(t[k], src, f"{w}.{k}", length=False)
                if abs(steer[k]) >= 60:
                    raise InputError(f"{k} must lie within +-60. Got {steer[k]}.", src, f"{w}.{k}")
        if "steer_axis_point" in t:
            sp = ref(t["steer_axis_point"], w + ".steer_axis_point")
            if split_ref(sp)[0] != up:
                raise InputError(f"the steering axis point must be a point of the upright '{up}'. Got {sp!r}.",
                                 src, w + ".steer_axis_point")
            steer["steer_axis_point"] = sp
        if "steer_axis" in t:
            refs = _two_points(t["steer_axis"], up, ref, src, w + ".steer_axis", "steering axis")
            pa, pb = (bodies[up][split_ref(r)[1]] for r in refs)
            xa, xb = (point_x.get(r, station_x) for r in refs)
            if math.hypot(xa - xb, pa[0] - pb[0], pa[1] - pb[1]) < 1.0:
                raise InputError("the two steering axis points are less than 1 mm apart.", src, w + ".steer_axis")
            if abs(pa[1] - pb[1]) < 1e-9:
                raise InputError("the steering axis through these points is horizontal; it must rise.", src,
                                 w + ".steer_axis")
            if "steer_axis_point" in t or "kingpin_inclination_deg" in t:
                raise InputError("give either steer_axis (two points) or steer_axis_point / "
                                 "kingpin_inclination_deg, not both.", src, w + ".steer_axis")
            if "caster_deg" in t and abs(xa - xb) > PIN_TOLERANCE_MM:
                raise InputError("the two steering axis points lie at different x, which gives the caster; give "
                                 "either that or caster_deg, not both.", src, w + ".caster_deg")
            steer["steer_axis"] = refs
        if "steered" in t:
            if not isinstance(t["steered"], bool):
                raise InputError(f"expected true or false. Got {t['steered']!r} instead.", src, w + ".steered")
            steer["steered"] = t["steered"]
        hub_w = _number(t.get("hub_width_mm", DEFAULT_HUB_WIDTH_MM), src, w + ".hub_width_mm", positive=True)
        hub_r = _number(t.get("hub_radius_mm", DEFAULT_HUB_RADIUS_MM), src, w + ".hub_radius_mm", nonneg=True)
        if hub_r >= big - small:
            raise InputError(f"hub_radius_mm must be smaller than the crown circle radius (outer_radius_mm - "
                             f"crown_radius_mm = {big - small:g}). Got {hub_r:g} instead.", src, w + ".hub_radius_mm")
        wheels.append(Wheel(nm, up, centre, big, small, camber, hub_width_mm=hub_w, hub_radius_mm=hub_r, **steer))
    names = sorted(w.name for w in wheels)
    if names != ["left", "right"]:
        raise InputError(f"expected exactly two wheels, named 'left' and 'right'. Got {names or 'none'}.",
                         src, "wheels")
    wheels.sort(key=lambda w: w.name)  # left first

    mech = Mechanism(name=name, chassis=chassis, bodies=bodies, pins=tuple(pins), links=tuple(links),
                     springs=tuple(springs), sliders=tuple(sliders), wheels=tuple(wheels),
                     description=description, station_x_mm=station_x, segments=tuple(segments),
                     steer_envelope=_steer_envelope(data, src), tube_od_mm=default_od, point_x=point_x, source=src)
    if "steering" in data:
        mech = replace(mech, steering=_parse_steering(data["steering"], mech, ref, unique, src))
    return mech


def steered_bodies(mech: "Mechanism", wheel: Wheel) -> tuple[str, ...]:
    """The bodies that turn with a wheel about its steering axis: its upright and any body a slider
    joins it to (a telescopic leg turns with its guide: the slider keeps their relative angle)."""
    out = [wheel.upright]
    for s in mech.sliders:
        guide, runner = split_ref(s.a_from)[0], split_ref(s.b)[0]
        if wheel.upright in (guide, runner):
            out.append(runner if guide == wheel.upright else guide)
    return tuple(dict.fromkeys(out))


def axis_refs(mech: "Mechanism", wheel: Wheel) -> tuple[str, str | None]:
    """The points a wheel's steering axis is given by: (the point it runs through, the second point or None)."""
    if wheel.steer_axis is not None:
        return wheel.steer_axis[0], wheel.steer_axis[1]
    return wheel.steer_axis_point or wheel.centre, None


def axis_parts(mech: "Mechanism", wheel: Wheel) -> tuple[float, float, float]:
    """The parts of a wheel's steering axis direction that do not come from its two points.

    Returns ``(tx, ty, two)``: with two points (``two`` = 1) the direction is
    ``(dx / dz + tx, dy / dz, 1)`` from the points' difference (dx, dy, dz) with ``tx = -tan(caster_deg)``
    and ``ty = 0``; with one point (``two`` = 0) it is ``(tx, ty, 1)`` with ``ty`` the kingpin
    inclination toward the vehicle's centre (``+tan`` for the left wheel, whose inboard side is +y).
    Either is normalised; it turns with the upright (docs/domain.md, "Steering").
    """
    tx = -math.tan(math.radians(wheel.caster_deg))
    if wheel.steer_axis is not None:
        return tx, 0.0, 1.0
    inboard = 1.0 if wheel.name == "left" else -1.0
    return tx, inboard * math.tan(math.radians(wheel.kingpin_inclination_deg)), 0.0


def design_axis(mech: "Mechanism", wheel: Wheel) -> tuple[tuple[float, float, float], tuple[float, float, float]]:
    """A point of a wheel's steering axis and its upward unit direction, design position, (x, y, z)."""
    a, b = axis_refs(mech, wheel)
    tx, ty, two = axis_parts(mech, wheel)
    pa = mech.point3(a)
    if b is not None:
        pb = mech.point3(b)
        dz = pb[2] - pa[2]
        d = ((pb[0] - pa[0]) / dz + tx, (pb[1] - pa[1]) / dz, 1.0)
    else:
        d = (tx, ty, 1.0)
    n = math.sqrt(sum(v * v for v in d))
    return pa, tuple(v / n for v in d)


def _rotate3(v, e, ang):
    """Rodrigues rotation of v about the unit vector e by ang (rad)."""
    c, s_ = math.cos(ang), math.sin(ang)
    dot = sum(a * b for a, b in zip(e, v)) * (1.0 - c)
    cr = (e[1] * v[2] - e[2] * v[1], e[2] * v[0] - e[0] * v[2], e[0] * v[1] - e[1] * v[0])
    return tuple(v[k] * c + cr[k] * s_ + e[k] * dot for k in range(3))


def _sub(a, b):
    return tuple(x - y for x, y in zip(a, b))


def _dot(a, b):
    return sum(x * y for x, y in zip(a, b))


def _cross(a, b):
    return (a[1] * b[2] - a[2] * b[1], a[2] * b[0] - a[0] * b[2], a[0] * b[1] - a[1] * b[0])


def _norm(a):
    return math.sqrt(_dot(a, a))


#: |sin| of the angle between a tie rod and the path of its steering arm point below which the
#: design position counts as a toggle (about 1 deg: the rod would barely turn the wheel)
TOGGLE_SIN = 0.02


def _parse_steering(raw: Any, mech: "Mechanism", ref, unique, src: str) -> Steering:
    """The ``[steering]`` table (see module docs and docs/formats.md)."""
    k0 = "steering"
    if not isinstance(raw, dict):
        raise InputError("expected a table [steering] with input_range_deg, [[steering.drives]] and "
                         "[[steering.rods]].", src, k0)
    _check_keys(raw, ["input_range_deg", "wheelbase_mm", "ackermann_inputs_deg", "drives", "rods"],
                ["input_range_deg", "drives", "rods"], src, k0)
    rng = raw["input_range_deg"]
    if not (isinstance(rng, list) and len(rng) == 2):
        raise InputError(f"expected [lower, upper] in degrees, e.g. [-40.0, 40.0]. Got {reprlib.repr(rng)} instead.",
                         src, k0 + ".input_range_deg")
    lo, hi = (_number(v, src, f"{k0}.input_range_deg[{i}]", length=False) for i, v in enumerate(rng))
    if not (lo < 0.0 < hi) or max(-lo, hi) > MAX_STEER_INPUT_DEG:
        raise InputError(f"the input range must hold 0 (straight ahead) strictly inside, within "
                         f"+-{MAX_STEER_INPUT_DEG:g} deg. Got [{lo:g}, {hi:g}] instead.", src, k0 + ".input_range_deg")
    wb = None
    if "wheelbase_mm" in raw:
        wb = _number(raw["wheelbase_mm"], src, k0 + ".wheelbase_mm", positive=True)
    ack = None
    if "ackermann_inputs_deg" in raw:
        v = raw["ackermann_inputs_deg"]
        if not isinstance(v, list) or not v:
            raise InputError(f"expected a non-empty list of inputs in degrees. Got {reprlib.repr(v)} instead.", src,
                             k0 + ".ackermann_inputs_deg")
        check_count(len(v), MAX_STEER_ITEMS, "Ackermann inputs", "Give fewer inputs.", src,
                    k0 + ".ackermann_inputs_deg")
        ack = tuple(_number(x, src, f"{k0}.ackermann_inputs_deg[{i}]", length=False) for i, x in enumerate(v))
        for i, x in enumerate(ack):
            if x == 0.0 or not lo <= x <= hi:
                raise InputError(f"an Ackermann input must be non-zero and within the input range [{lo:g}, "
                                 f"{hi:g}]. Got {x:g}.", src, f"{k0}.ackermann_inputs_deg[{i}]")
    joints = set()
    for p_ in mech.pins:
        joints |= {p_.a, p_.b}
    for j in (*mech.links, *mech.springs):
        joints |= {j.a, j.b}
    for sl in mech.sliders:
        joints |= {sl.a_from, sl.a_to, sl.b}
    centres = {w.centre for w in mech.wheels}

    drives, moved = [], {}
    raw_d = raw["drives"]
    if not isinstance(raw_d, list) or not all(isinstance(t, dict) for t in raw_d):
        raise InputError("expected an array of tables [[steering.drives]].", src, k0 + ".drives")
    check_count(len(raw_d), MAX_STEER_ITEMS, "steering drives", "Give fewer drives.", src, k0 + ".drives")
    if not raw_d:
        raise InputError("expected at least one [[steering.drives]] table (a rack or a lever).", src, k0 + ".drives")
    for i, t in enumerate(raw_d):
        w = f"{k0}.drives[{i}]"
        _check_keys(t, ["name", "kind", "body", "axis", "gain", "points"], ["kind", "body", "axis", "points"], src, w)
        kind = _string(t["kind"], src, w + ".kind")
        if kind not in STEER_DRIVE_KINDS:
            raise InputError(f"expected one of {', '.join(STEER_DRIVE_KINDS)}. Got {kind!r} instead.", src, w + ".kind")
        body = _string(t["body"], src, w + ".body")
        if body not in mech.bodies:
            raise InputError(f"unknown body '{body}'. Bodies: {', '.join(mech.bodies)}.", src, w + ".body")
        axis = _two_points(t["axis"], body, ref, src, w + ".axis", "drive axis")
        if _norm(_sub(mech.point3(axis[1]), mech.point3(axis[0]))) < 1.0:
            raise InputError("the two axis points are less than 1 mm apart.", src, w + ".axis")
        gain = _number(t.get("gain", 1.0), src, w + ".gain", length=False)
        if gain == 0.0 or abs(gain) > MAX_STEER_GAIN:
            raise InputError(f"the gain must be non-zero and within +-{MAX_STEER_GAIN:g} (mm or deg per input "
                             f"degree). Got {gain:g}.", src, w + ".gain")
        pts = t["points"]
        if not isinstance(pts, list) or not pts:
            raise InputError(f"expected a non-empty list of points of body '{body}' the drive moves. Got "
                             f"{reprlib.repr(pts)} instead.", src, w + ".points")
        check_count(len(pts), MAX_STEER_ITEMS, "points of a drive", "Give fewer points.", src, w + ".points")
        prefs = []
        for k, pr in enumerate(pts):
            r_ = ref(pr, f"{w}.points[{k}]")
            if split_ref(r_)[0] != body:
                raise InputError(f"a drive moves points of its own body '{body}'. Got {r_!r}.", src, f"{w}.points[{k}]")
            if r_ in joints or r_ in centres or r_ in axis:
                raise InputError(f"{r_} is a joint of the tilting linkage, a wheel centre or an axis point: a "
                                 f"point a drive moves must be a point of its own.", src, f"{w}.points[{k}]")
            if r_ in moved:
                raise InputError(f"{r_} is moved by two drives.", src, f"{w}.points[{k}]")
            moved[r_] = i
            prefs.append(r_)
        nm = unique(_string(t.get("name", f"{kind}_{body}"), src, w + ".name"), w + ".name")
        drives.append(SteerDrive(nm, kind, body, axis, gain, tuple(prefs)))

    rods = []
    raw_r = raw["rods"]
    if not isinstance(raw_r, list) or not all(isinstance(t, dict) for t in raw_r):
        raise InputError("expected an array of tables [[steering.rods]].", src, k0 + ".rods")
    if not raw_r:
        raise InputError("expected a [[steering.rods]] table per steered wheel.", src, k0 + ".rods")
    arms = set()
    for i, t in enumerate(raw_r):
        w = f"{k0}.rods[{i}]"
        _check_keys(t, ["name", "wheel", "arm", "end"], ["wheel", "arm", "end"], src, w)
        wn = _string(t["wheel"], src, w + ".wheel")
        if wn not in ("left", "right"):
            raise InputError(f"expected 'left' or 'right'. Got {wn!r} instead.", src, w + ".wheel")
        wheel = mech.wheel(wn)
        if not wheel.steered:
            raise InputError(f"wheel '{wn}' does not steer (steered = false); it has no rod.", src, w + ".wheel")
        if any(r.wheel == wn for r in rods):
            raise InputError(f"wheel '{wn}' has two rods; give one per steered wheel.", src, w + ".wheel")
        arm = ref(t["arm"], w + ".arm")
        turning = steered_bodies(mech, wheel)
        if split_ref(arm)[0] not in turning:
            raise InputError(f"the steering arm point must be a point of the part that steers with the wheel (the "
                             f"wheel's upright '{wheel.upright}', or the guide a slider joins it to: "
                             f"{', '.join(turning)}). Got {arm!r}.", src, w + ".arm")
        a_ref, b_ref = axis_refs(mech, wheel)
        if arm in joints or arm in centres or arm in (a_ref, b_ref) or arm in moved or arm in arms:
            raise InputError(f"{arm} is a joint of the tilting linkage, a wheel centre, a steering axis point or "
                             f"used twice: the steering arm point must be a point of its own.", src, w + ".arm")
        arms.add(arm)
        end = ref(t["end"], w + ".end")
        if end not in moved:
            raise InputError(f"the rod's end {end} is not a point a drive moves (the points of "
                             f"[[steering.drives]]), so the input would not steer the wheel.", src, w + ".end")
        pa, e = design_axis(mech, wheel)
        S, I = mech.point3(arm), mech.point3(end)
        rel = _sub(S, pa)
        rad = _sub(rel, tuple(_dot(rel, e) * c for c in e))
        if _norm(rad) < 1.0:
            raise InputError(f"the steering arm point {arm} lies on the steering axis (within 1 mm): it cannot "
                             f"turn the wheel.", src, w + ".arm")
        rod = _sub(S, I)
        if _norm(rod) < 1.0:
            raise InputError("the rod's two ends are less than 1 mm apart in the design position.", src, w)
        path = _cross(e, rel)                         # how the arm point moves as the wheel steers
        if abs(_dot(rod, path)) < TOGGLE_SIN * _norm(rod) * _norm(path):
            raise InputError(f"the rod of wheel '{wn}' is at its toggle in the design position: it runs square to "
                             f"the path of the steering arm point {arm}, so it cannot turn the wheel. Move the "
                             f"arm point or the rod's end.", src, w)
        nm = unique(_string(t.get("name", f"rod_{wn}"), src, w + ".name"), w + ".name")
        rods.append(TieRod(nm, wn, arm, end))
    missing = [w.name for w in mech.wheels if w.steered and all(r.wheel != w.name for r in rods)]
    if missing:
        raise InputError(f"wheel '{missing[0]}' steers but has no rod: give a [[steering.rods]] table for it, or "
                         f"set steered = false.", src, k0 + ".rods")
    return Steering((lo, hi), tuple(drives), tuple(rods), wb, ack)


def _tube(t: dict, src: str, where: str, default_od: float = DEFAULT_TUBE_OD_MM) -> tuple[float, str]:
    od = _number(t.get("tube_od_mm", default_od), src, where + ".tube_od_mm", nonneg=True)
    role = _string(t.get("shell", "through"), src, where + ".shell")
    if role not in SHELL_ROLES:
        raise InputError(f"expected one of {', '.join(SHELL_ROLES)}. Got {role!r} instead.", src, where + ".shell")
    return od, role


def _steer_envelope(data: dict, src: str) -> tuple[tuple[float, float], ...] | None:
    if "steer_envelope" not in data:
        return None
    env = data["steer_envelope"]
    if not isinstance(env, dict):
        raise InputError("expected a table [steer_envelope] with lean_deg and max_steer_deg lists.", src,
                         "steer_envelope")
    if not env or (env.get("lean_deg") == [] and env.get("max_steer_deg") == [] and len(env) == 2):
        return ()   # an explicit empty envelope: no steer
    _check_keys(env, ["lean_deg", "max_steer_deg"], ["lean_deg", "max_steer_deg"], src, "steer_envelope")
    rows = []
    for k in ("lean_deg", "max_steer_deg"):
        v = env[k]
        if not isinstance(v, list) or not v:
            raise InputError(f"expected a non-empty list of numbers. Got {v!r} instead.", src, f"steer_envelope.{k}")
        rows.append([_number(x, src, f"steer_envelope.{k}[{i}]", nonneg=True, length=False) for i, x in enumerate(v)])
    lean, steer = rows
    if len(lean) != len(steer):
        raise InputError(f"lean_deg and max_steer_deg must have the same length. Got {len(lean)} and "
                         f"{len(steer)}.", src, "steer_envelope")
    if any(b <= a for a, b in zip(lean, lean[1:])):
        raise InputError(f"lean_deg must be strictly ascending. Got {lean}.", src, "steer_envelope.lean_deg")
    if any(s >= 90 for s in steer):
        raise InputError(f"max_steer_deg must be below 90. Got {steer}.", src, "steer_envelope.max_steer_deg")
    if any(a >= MAX_ABS_LEAN_DEG for a in lean):
        raise InputError(f"lean_deg must be below {MAX_ABS_LEAN_DEG:g}. Got {lean}.", src, "steer_envelope.lean_deg")
    return tuple(zip(lean, steer))


def _check_length(bodies, a, b, src, where):
    if split_ref(a)[0] == split_ref(b)[0]:
        raise InputError("the two ends must be points of two different bodies.", src, where)
    pa, pb = bodies[split_ref(a)[0]][split_ref(a)[1]], bodies[split_ref(b)[0]][split_ref(b)[1]]
    if math.hypot(pa[0] - pb[0], pa[1] - pb[1]) < 1.0:
        raise InputError("the two ends are less than 1 mm apart in the design position.", src, where)


# ---------------------------------------------------------------------- writing
def _fmt(x: float) -> str:
    return repr(float(x))


def _q(s: str) -> str:
    """A TOML basic string: backslash, quote and control characters escaped (TOML 1.0)."""
    out = []
    for ch in s:
        if ch == "\\":
            out.append("\\\\")
        elif ch == '"':
            out.append('\\"')
        elif ch == "\n":
            out.append("\\n")
        elif ch == "\t":
            out.append("\\t")
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def mechanism_to_toml(mech: Mechanism, header: str = "") -> str:
    """Serialise a mechanism to the TOML file format (round-trips exactly)."""
    out = []
    if header:
        out += ["# " + line if line else "#" for line in header.splitlines()]
        out.append("")
    out.append(f"name = {_q(mech.name)}")
    out.append(f"chassis = {_q(mech.chassis)}")
    if mech.description:
        out.append(f"description = {_q(mech.description)}")
    out.append(f"station_x_mm = {_fmt(mech.station_x_mm)}")
    if mech.tube_od_mm != DEFAULT_TUBE_OD_MM:
        out.append(f"tube_od_mm = {_fmt(mech.tube_od_mm)}")
    for b, pts in mech.bodies.items():
        out += ["", f"[bodies.{b}]"]
        out += [f"{p} = [{_fmt(mech.point_x[f'{b}.{p}'])}, {_fmt(y)}, {_fmt(z)}]" if f"{b}.{p}" in mech.point_x
                else f"{p} = [{_fmt(y)}, {_fmt(z)}]" for p, (y, z) in pts.items()]
    for p in mech.pins:
        out += ["", "[[pins]]", f"name = {_q(p.name)}", f"a = {_q(p.a)}", f"b = {_q(p.b)}"]
        if p.base_mm is not None:
            out.append(f"base_mm = {_fmt(p.base_mm)}")
    for l in mech.links:
        out += ["", "[[links]]", f"name = {_q(l.name)}", f"a = {_q(l.a)}", f"b = {_q(l.b)}"] + _tube_lines(l, mech)
    for g in mech.segments:
        out += ["", "[[segments]]", f"name = {_q(g.name)}", f"body = {_q(g.body)}", f"a = {_q(g.a)}",
                f"b = {_q(g.b)}"] + _tube_lines(g, mech)
    for s in mech.springs:
        out += ["", "[[springs]]", f"name = {_q(s.name)}", f"a = {_q(s.a)}", f"b = {_q(s.b)}"]
        if s.kind != "coil":
            out.append(f"kind = {_q(s.kind)}")
        for k in ("rate_n_per_mm", "free_length_mm", "preload_n", "max_deflection_mm"):
            v = getattr(s, k)
            if v is not None:
                out.append(f"{k} = {_fmt(v)}")
        if s.curve is not None:
            out.append("curve = [" + ", ".join(f"[{_fmt(x)}, {_fmt(f)}]" for x, f in s.curve) + "]")
    for s in mech.sliders:
        out += ["", "[[sliders]]", f"name = {_q(s.name)}", f"a_from = {_q(s.a_from)}", f"a_to = {_q(s.a_to)}",
                f"b = {_q(s.b)}"]
    for w in mech.wheels:
        out += ["", "[[wheels]]", f"name = {_q(w.name)}", f"upright = {_q(w.upright)}", f"centre = {_q(w.centre)}",
                f"outer_radius_mm = {_fmt(w.outer_radius_mm)}", f"crown_radius_mm = {_fmt(w.crown_radius_mm)}",
                f"static_camber_deg = {_fmt(w.static_camber_deg)}"]
        for k in ("kingpin_inclination_deg", "caster_deg"):
            if getattr(w, k) != 0.0:
                out.append(f"{k} = {_fmt(getattr(w, k))}")
        if w.steer_axis_point is not None:
            out.append(f"steer_axis_point = {_q(w.steer_axis_point)}")
        if w.steer_axis is not None:
            out.append(f"steer_axis = [{_q(w.steer_axis[0])}, {_q(w.steer_axis[1])}]")
        if not w.steered:
            out.append("steered = false")
        if w.hub_width_mm != DEFAULT_HUB_WIDTH_MM:
            out.append(f"hub_width_mm = {_fmt(w.hub_width_mm)}")
        if w.hub_radius_mm != DEFAULT_HUB_RADIUS_MM:
            out.append(f"hub_radius_mm = {_fmt(w.hub_radius_mm)}")
    if mech.steer_envelope is not None:
        out += ["", "[steer_envelope]"]
        if mech.steer_envelope:
            out += ["lean_deg = [" + ", ".join(_fmt(r[0]) for r in mech.steer_envelope) + "]",
                    "max_steer_deg = [" + ", ".join(_fmt(r[1]) for r in mech.steer_envelope) + "]"]
    if mech.steering is not None:
        st = mech.steering
        out += ["", "[steering]", f"input_range_deg = [{_fmt(st.input_range_deg[0])}, {_fmt(st.input_range_deg[1])}]"]
        if st.wheelbase_mm is not None:
            out.append(f"wheelbase_mm = {_fmt(st.wheelbase_mm)}")
        if st.ackermann_inputs_deg is not None:
            out.append("ackermann_inputs_deg = [" + ", ".join(_fmt(v) for v in st.ackermann_inputs_deg) + "]")
        for d in st.drives:
            out += ["", "[[steering.drives]]", f"name = {_q(d.name)}", f"kind = {_q(d.kind)}", f"body = {_q(d.body)}",
                    f"axis = [{_q(d.axis[0])}, {_q(d.axis[1])}]", f"gain = {_fmt(d.gain)}",
                    "points = [" + ", ".join(_q(r) for r in d.points) + "]"]
        for r in st.rods:
            out += ["", "[[steering.rods]]", f"name = {_q(r.name)}", f"wheel = {_q(r.wheel)}", f"arm = {_q(r.arm)}",
                    f"end = {_q(r.end)}"]
    return "\n".join(out) + "\n"


def _tube_lines(m, mech) -> list[str]:
    out = []
    if m.tube_od_mm != mech.tube_od_mm:
        out.append(f"tube_od_mm = {_fmt(m.tube_od_mm)}")
    if m.shell != "through":
        out.append(f"shell = {_q(m.shell)}")
    return out


# ---------------------------------------------------------------------- mirror
_LR = re.compile(r"(?<![A-Za-z])(left|right)(?![A-Za-z])")


def swap_lr(s: str) -> str:
    """Swap the words left and right (not inside other words: 'upright' stays): a name's mirror partner."""
    return _LR.sub(lambda m: "right" if m.group(1) == "left" else "left", s)


_swap_lr = swap_lr


def mirror(mech: Mechanism) -> Mechanism:
    """The mirror image about the chassis centre plane (y -> -y, left <-> right)."""
    bodies = {_swap_lr(b): {_swap_lr(p): (-y, z) for p, (y, z) in pts.items()} for b, pts in mech.bodies.items()}
    return Mechanism(
        name=mech.name + "_mirrored",
        chassis=_swap_lr(mech.chassis),
        bodies=bodies,
        pins=tuple(Pin(_swap_lr(p.a), _swap_lr(p.b), _swap_lr(p.name), p.base_mm) for p in mech.pins),
        links=tuple(replace(l, a=_swap_lr(l.a), b=_swap_lr(l.b), name=_swap_lr(l.name)) for l in mech.links),
        springs=tuple(replace(s, name=_swap_lr(s.name), a=_swap_lr(s.a), b=_swap_lr(s.b)) for s in mech.springs),
        sliders=tuple(Slider(_swap_lr(s.name), _swap_lr(s.a_from), _swap_lr(s.a_to), _swap_lr(s.b))
                      for s in mech.sliders),
        wheels=tuple(sorted((replace(w, name=_swap_lr(w.name), upright=_swap_lr(w.upright),
                                     centre=_swap_lr(w.centre), static_camber_deg=-w.static_camber_deg,
                                     steer_axis_point=None if w.steer_axis_point is None
                                     else _swap_lr(w.steer_axis_point),
                                     steer_axis=None if w.steer_axis is None
                                     else tuple(_swap_lr(r) for r in w.steer_axis))
                             for w in mech.wheels), key=lambda w: w.name)),
        description=mech.description,
        station_x_mm=mech.station_x_mm,
        segments=tuple(replace(g, name=_swap_lr(g.name), body=_swap_lr(g.body), a=_swap_lr(g.a), b=_swap_lr(g.b))
                       for g in mech.segments),
        steer_envelope=mech.steer_envelope,   # by |lean|, and KPI/caster are inboard/rearward: unchanged
        tube_od_mm=mech.tube_od_mm,
        point_x={_swap_lr(r): x for r, x in mech.point_x.items()},
        steering=None if mech.steering is None else _mirror_steering(mech.steering),
    )


def _mirror_steering(st: Steering) -> Steering:
    """The steering of the mirror image, input for input: a rack moves its points the mirrored way (its
    axis points are mirrored); a lever's turn is mirrored too, so its gain changes sign."""
    drives = tuple(SteerDrive(_swap_lr(d.name), d.kind, _swap_lr(d.body), tuple(_swap_lr(a) for a in d.axis),
                              d.gain if d.kind == "slide" else -d.gain, tuple(_swap_lr(p) for p in d.points))
                   for d in st.drives)
    rods = tuple(sorted((TieRod(_swap_lr(r.name), _swap_lr(r.wheel), _swap_lr(r.arm), _swap_lr(r.end))
                         for r in st.rods), key=lambda r: r.wheel))
    return replace(st, drives=drives, rods=rods)
