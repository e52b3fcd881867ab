"""The mechanism file: a frozen description of a planar tilting linkage.

A mechanism is bodies with named points (front view, ``[y, z]`` in mm, design
position, global coordinates), joined by pins, links, springs and sliders,
with exactly two wheels. This module reads and writes the TOML file and
checks it; it never solves anything (see :mod:`tiltopt.kinematics.model`).

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
from tiltopt.base.limits import MAX_ABS_LEAN_DEG, MAX_FORCE_N, MAX_RANGE_VALUES, check_coord, check_count

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
    source: str = field(default="<memory>", compare=False)

    # ------------------------------------------------------------------ lookup
    def point(self, ref: str) -> tuple[float, float]:
        body, pt = split_ref(ref)
        return self.bodies[body][pt]

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

    def with_points(self, points: dict[str, tuple[float, float]]) -> "Mechanism":
        """A copy with some points moved (``{"body.point": (y, z)}``)."""
        bodies = {b: dict(pts) for b, pts in self.bodies.items()}
        for ref, yz in points.items():
            b, p = split_ref(ref)
            bodies[b][p] = (float(yz[0]), float(yz[1]))
        return replace(self, bodies=bodies)


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


def parse_mechanism(data: dict, src: str = "<memory>") -> Mechanism:
    """Validate a mechanism given as a TOML-like dict (see module docs)."""
    _check_keys(
        data,
        ["name", "chassis", "description", "station_x_mm", "bodies", "pins", "links", "springs",
         "sliders", "wheels", "segments", "steer_envelope", "tube_od_mm"],
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
    for bname, pts in raw_bodies.items():
        key = f"bodies.{bname}"
        if not _NAME.match(bname):
            raise InputError("body names must be letters, digits and '_' (not starting with a digit).", src, key)
        if not isinstance(pts, dict) or not pts:
            raise InputError("expected a table of points, name = [y_mm, z_mm].", src, key)
        bodies[bname] = {}
        for pname, yz in pts.items():
            pkey = f"{key}.{pname}"
            if not _NAME.match(pname):
                raise InputError("point names must be letters, digits and '_'.", src, pkey)
            if not (isinstance(yz, list) and len(yz) == 2):
                raise InputError(f"expected a point [y_mm, z_mm]. Got {yz!r} instead.", src, pkey)
            bodies[bname][pname] = (_number(yz[0], src, pkey + "[0]"), _number(yz[1], src, pkey + "[1]"))
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
        pins.append(Pin(a, b, unique(_string(t.get("name", f"{a}~{b}"), src, w + ".name"), w + ".name"), base))

    links = []
    for i, t in enumerate(_list_of_tables(data, "links", src)):
        w = f"links[{i}]"
        _check_keys(t, ["a", "b", "name", "tube_od_mm", "shell"], ["a", "b"], src, w)
        a, b = ref(t["a"], w + ".a"), ref(t["b"], w + ".b")
        _check_length(bodies, a, b, src, w)
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
            ax = t["steer_axis"]
            if not (isinstance(ax, list) and len(ax) == 2):
                raise InputError(f"expected two point references of the upright, [\"{up}.a\", \"{up}.b\"]. "
                                 f"Got {ax!r} instead.", src, w + ".steer_axis")
            refs = tuple(ref(a, f"{w}.steer_axis[{k}]") for k, a in enumerate(ax))
            if any(split_ref(r)[0] != up for r in refs):
                raise InputError(f"the steering axis points must be points of the upright '{up}'. Got {ax!r}.",
                                 src, w + ".steer_axis")
            pa, pb = (bodies[up][split_ref(r)[1]] for r in refs)
            if math.hypot(pa[0] - pb[0], pa[1] - pb[1]) < 1.0:
                raise InputError("the two steering axis points are less than 1 mm apart.", src, w + ".steer_axis")
            if abs(pa[1] - pb[1]) < 1e-9:
                raise InputError("the steering axis through these points is horizontal; it must rise.", src,
                                 w + ".steer_axis")
            if "steer_axis_point" in t or "kingpin_inclination_deg" in t:
                raise InputError("give either steer_axis (two points) or steer_axis_point / "
                                 "kingpin_inclination_deg, not both.", src, w + ".steer_axis")
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

    return Mechanism(name=name, chassis=chassis, bodies=bodies, pins=tuple(pins), links=tuple(links),
                     springs=tuple(springs), sliders=tuple(sliders), wheels=tuple(wheels),
                     description=description, station_x_mm=station_x, segments=tuple(segments),
                     steer_envelope=_steer_envelope(data, src), tube_od_mm=default_od, source=src)


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
        out += [f"{p} = [{_fmt(y)}, {_fmt(z)}]" for p, (y, z) in pts.items()]
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
    )
