"""Load cases: what each one means, where its default comes from, and the states it gives.

A loads file's ``[[cases]]`` (see :mod:`tiltopt.kinematics.loads`) lists cases
of these kinds; without any, :func:`default_cases` gives one of each. A case
with a lean, a slope or one wheel is asymmetric and, unless ``mirror = false``,
is also evaluated mirrored (``<name>_mirror``: the other lean, slope or wheel).

Kinds (the front-view load model is in :mod:`tiltopt.kinematics.forces`; W_f
is the front axle's static load ``m g front_share``, ``n_s = W_f / 2`` the
static load of one front wheel):

- ``static``: 1 g at rest on level ground, lean 0.
- ``bump``: ``vertical_g`` x the front axle load on both wheels.
- ``one_wheel_bump``: one wheel (``wheel``, default left) carries
  ``vertical_g x n_s``, the other ``n_s``. The chassis's roll inertia reacts
  the unequal wheel loads (a d'Alembert couple on the chassis, solved so the
  wheel loads come out as stated) and the tilt lock holds the linkage to the
  chassis. Statics of a freely tilting linkage (no lock) shares any wheel load
  equally between the wheels (its pivots carry no moment), so a one-wheel bump
  with the tilt free is a two-wheel load of ``(vertical_g + 1) / 2``, which the
  ``bump`` case covers; the asymmetric load is carried only while something
  holds the lean (lock, damper, actuator).
- ``kerb_strike``: a lateral force ``lateral_g x W_f`` at one contact patch
  (``wheel``), toward the vehicle's centre, the vertical loads static; the
  vehicle's lateral inertia (a d'Alembert force at the centre of mass) and the
  rider's balance moment react it, the tilt free.
- ``cornering``: balanced cornering at the lean: each tyre's side force is its
  vertical load times tan(lean), toward the inside of the turn.
- ``braking``: ``brake_g`` deceleration with the load transfer ``m a h /
  wheelbase`` onto the front axle. The quasi-static transfer holds while the
  rear wheel keeps a load: ``front_share + brake_g h / wheelbase <= 1``;
  beyond it the vehicle pitches over its front wheels and the case is refused
  with an error naming the key.
- ``parked``: at the parked lean on a cross slope of ``slope_deg``, the tilt
  lock holding the chassis; the vehicle leans downhill (gravity acts at lean +
  slope to the chassis, the worst case for the lock). Gravity's component
  across the slope is held by the tyres in proportion to their loads.

Two more states are always evaluated for the other checks and never govern a
member: ``static (reference)`` (when no ``static`` case is given; the spring
setup uses it) and ``fatigue range`` (the load change of one fatigue cycle,
see :mod:`tiltopt.kinematics.sizing`).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from tiltopt.base.errors import InputError
from tiltopt.base.limits import MAX_LEAN_LIMIT_DEG, MAX_LOAD_FACTOR_G, MAX_TRAVEL_MM

G = 9.80665  # standard gravity, m/s^2 (CGPM 1901)
KINDS = ("static", "bump", "one_wheel_bump", "kerb_strike", "cornering", "braking", "parked")
LOCKED_KINDS = ("one_wheel_bump", "parked")

DEFAULT_BUMP_G = 3.0
DEFAULT_ONE_WHEEL_G = 3.0
DEFAULT_KERB_G = 1.0
DEFAULT_BRAKE_G = 0.7
DEFAULT_SLOPE_DEG = 5.7   # a 10 % cross slope

#: the source of each default case, listed with the case in every output
SOURCES = {
    "static": "definition: the laden vehicle at rest on level ground",
    "bump": "3 g on the front axle: peak off-road front-wheel loads approach three times body weight (De Lorenzo "
            "& Hull, 'Quantification of structural loading during off-road cycling', J. Biomech. Eng. 1999)",
    "one_wheel_bump": "3 x the static load of one wheel, the other static, tilt held: the factor De Lorenzo & "
                      "Hull (J. Biomech. Eng. 1999) measured on a single front wheel, applied to one wheel",
    "kerb_strike": "lateral 1 g of the front axle load at one contact patch, inward (common practice, no source)",
    "cornering": "balanced cornering at the lean limit: side force = vertical load x tan(lean) (statics of a "
                 "leaning vehicle in a steady turn)",
    "braking": "0.7 g, a good tyre-limited stop on dry asphalt (common practice, no source), with the m a h / "
               "wheelbase load transfer",
    "parked": "tilt lock at the parked lean on a 10 % (5.7 deg) cross slope, leaning downhill: steeper than the "
              "2 to 3 % cross-fall of most roads (common practice, no source)",
}


@dataclass(frozen=True)
class LoadCase:
    """One load case as written (before mirroring).

    ``vertical_g``: the bump factor (1 for the others); ``lateral_g``: the kerb
    strike's lateral factor; ``wheel``: the wheel a one-wheel case acts on.
    """

    name: str
    kind: str
    lean_deg: float = 0.0
    travel_mm: float = 0.0
    vertical_g: float = 1.0
    brake_g: float = 0.0
    mirror: bool = True
    wheel: str = "left"
    lateral_g: float = 0.0
    slope_deg: float = 0.0
    locked: bool = False
    source: str = ""

    @property
    def asymmetric(self) -> bool:
        return self.lean_deg != 0.0 or self.slope_deg != 0.0 or self.kind in ("one_wheel_bump", "kerb_strike")


@dataclass(frozen=True)
class LoadState:
    """One evaluated state of a load case (an asymmetric case gives two: it and its mirror).

    front_load_n : vertical front-axle load W_f, N (acts at the centre of mass).
    rear_load_n : rear load W_r, N (at the centre of mass, reacted at the chassis datum O).
    side_ratio : tyre side force / vertical load (tan lean in balanced cornering, the slope when parked).
    locked : the tilt lock holds the chassis; otherwise the rider balances.
    wheel_load_n : (left, right) prescribed tyre vertical loads, N, or None (they follow from equilibrium).
    kerb_force_n : (left, right) lateral forces applied at the contact patches, +y, N.
    role : "case" (sized for), "reference" (the static state of the spring setup) or "fatigue"
        (the load change of one fatigue cycle).
    """

    name: str
    case: str
    kind: str
    lean_deg: float
    travel_mm: float
    front_load_n: float
    rear_load_n: float
    side_ratio: float
    brake_g: float
    locked: bool
    wheel_load_n: tuple[float, float] | None = None
    kerb_force_n: tuple[float, float] = (0.0, 0.0)
    slope_deg: float = 0.0
    source: str = ""
    role: str = "case"


def default_cases(vehicle) -> tuple[LoadCase, ...]:
    """One case of each kind (the module docs and :data:`SOURCES` give the sources)."""
    return (
        LoadCase("static", "static", source=SOURCES["static"], mirror=False),
        LoadCase("bump", "bump", vertical_g=DEFAULT_BUMP_G, source=SOURCES["bump"], mirror=False),
        LoadCase("one_wheel_bump", "one_wheel_bump", vertical_g=DEFAULT_ONE_WHEEL_G, locked=True,
                 source=SOURCES["one_wheel_bump"]),
        LoadCase("kerb_strike", "kerb_strike", lateral_g=DEFAULT_KERB_G, source=SOURCES["kerb_strike"]),
        LoadCase("cornering", "cornering", lean_deg=vehicle.lean_limit_deg, source=SOURCES["cornering"]),
        LoadCase("braking", "braking", brake_g=DEFAULT_BRAKE_G, source=SOURCES["braking"], mirror=False),
        LoadCase("parked", "parked", lean_deg=vehicle.parked_lean_deg, slope_deg=DEFAULT_SLOPE_DEG, locked=True,
                 source=SOURCES["parked"]),
    )


def check_braking(case: LoadCase, vehicle, src: str, key: str) -> None:
    """Refuse a braking transfer the quasi-static formula cannot carry (the rear wheel would lift).

    Raises
    ------
    InputError
        Naming ``key`` (the case's brake_g, or vehicle.front_share for a default case).
    """
    if case.brake_g <= 0.0:
        return
    transfer = case.brake_g * vehicle.com_height_mm / vehicle.wheelbase_mm
    rear = 1.0 - vehicle.front_share - transfer
    if rear < -1e-12:
        limit = (1.0 - vehicle.front_share) * vehicle.wheelbase_mm / vehicle.com_height_mm
        wg = vehicle.total_mass_kg * G
        raise InputError(
            f"the braking case {case.name!r} ({case.brake_g:g} g) with front_share {vehicle.front_share:g}, "
            f"com_height_mm {vehicle.com_height_mm:g} and wheelbase_mm {vehicle.wheelbase_mm:g} gives a rear load "
            f"of {rear * wg:.1f} N: the rear wheel would lift and the vehicle pitch over its front wheels, where "
            f"the load-transfer formula no longer holds. Use brake_g <= (1 - front_share) x wheelbase / "
            f"com_height = {limit:.3g} g, a front_share below 1 (the share of the weight the linkage carries), or "
            f"no braking case.", src, key)


def case_states(case: LoadCase, vehicle) -> list[LoadState]:
    """The state(s) of one case, in order (the mirror right after it)."""
    wg = vehicle.total_mass_kg * G
    share = vehicle.front_share
    transfer = case.brake_g * vehicle.com_height_mm / vehicle.wheelbase_mm
    wf_static = wg * share
    n_s = wf_static / 2.0
    out = []
    signs = (1.0, -1.0) if (case.mirror and case.asymmetric) else (1.0,)
    for sg in signs:
        lean = sg * case.lean_deg
        wf, wr = wg * (share * case.vertical_g + transfer), wg * (1.0 - share - transfer)
        side, wheels, kerb = 0.0, None, (0.0, 0.0)
        hit = case.wheel if sg > 0 else ("right" if case.wheel == "left" else "left")
        if case.kind == "cornering":
            side = math.tan(math.radians(lean))
        elif case.kind == "one_wheel_bump":
            k = case.vertical_g
            wheels = (k * n_s, n_s) if hit == "left" else (n_s, k * n_s)
            wf = wheels[0] + wheels[1]
        elif case.kind == "kerb_strike":
            f = case.lateral_g * wf_static
            kerb = (f, 0.0) if hit == "left" else (0.0, -f)     # toward the vehicle's centre
        elif case.kind == "parked" and case.slope_deg != 0.0:
            beta = math.radians(case.slope_deg)           # > 0: the ground falls toward the lean
            down = math.copysign(1.0, lean) if lean != 0.0 else sg
            side = -down * math.tan(beta)     # the tyres hold gravity's cross-slope part, uphill
            wf, wr = wf * math.cos(beta), wr * math.cos(beta)
        out.append(LoadState(
            name=case.name if sg > 0 else f"{case.name}_mirror", case=case.name, kind=case.kind, lean_deg=lean,
            travel_mm=case.travel_mm, front_load_n=wf, rear_load_n=wr, side_ratio=side, brake_g=case.brake_g,
            locked=case.locked, wheel_load_n=wheels, kerb_force_n=kerb, slope_deg=case.slope_deg,
            source=case.source))
    return out


def extra_states(cases, vehicle, fatigue_peak_g: float) -> list[LoadState]:
    """The reference static state (when no static case is given) and the fatigue-range state."""
    wg = vehicle.total_mass_kg * G
    out = []
    if not any(c.kind == "static" and c.lean_deg == 0.0 and c.travel_mm == 0.0 for c in cases):
        out.append(LoadState("static (reference)", "static (reference)", "static", 0.0, 0.0, wg * vehicle.front_share,
                             wg * (1.0 - vehicle.front_share), 0.0, 0.0, False, source=SOURCES["static"],
                             role="reference"))
    out.append(LoadState("fatigue range", "fatigue range", "bump", 0.0, 0.0,
                         wg * vehicle.front_share * (fatigue_peak_g - 1.0), 0.0, 0.0, 0.0, False,
                         source="the load change of one fatigue cycle: static to the fatigue peak", role="fatigue"))
    return out


def parse_cases(raw, vehicle, src: str) -> tuple[LoadCase, ...]:
    """Validate the ``[[cases]]`` tables (None: the defaults).

    Raises
    ------
    InputError
        Naming the case's key.
    """
    from tiltopt.base.errors import check_keys

    from .loads import _num, _str  # the loads file's number and string readers

    if raw is None:
        cases = default_cases(vehicle)
        for c in cases:
            check_braking(c, vehicle, src, "vehicle.front_share")
        return cases
    if not isinstance(raw, list) or not raw or not all(isinstance(t, dict) for t in raw):
        raise InputError("expected one or more [[cases]] tables.", src, "cases")
    cases, names = [], set()
    for i, t in enumerate(raw):
        w = f"cases[{i}]"
        check_keys(t, {"name", "kind", "lean_deg", "travel_mm", "vertical_g", "brake_g", "mirror", "wheel",
                       "lateral_g", "slope_deg", "tilt_locked", "source"}, src, w, ["name", "kind"])
        name = _str(t, "name", src, w)
        if name in names:
            raise InputError(f"the case name {name!r} is used twice.", src, w + ".name")
        names.add(name)
        kind = _str(t, "kind", src, w)
        if kind not in KINDS:
            raise InputError(f"unknown kind {kind!r}. Expected one of: {', '.join(KINDS)}.", src, w + ".kind")
        flags = {}
        for k, default in (("mirror", True), ("tilt_locked", kind in LOCKED_KINDS)):
            v = t.get(k, default)
            if not isinstance(v, bool):
                raise InputError(f"expected true or false. Got {v!r} instead.", src, f"{w}.{k}")
            flags[k] = v
        wheel = _str(t, "wheel", src, w, "left")
        if wheel not in ("left", "right"):
            raise InputError(f"expected 'left' or 'right'. Got {wheel!r} instead.", src, w + ".wheel")
        lean_default = {"cornering": vehicle.lean_limit_deg, "parked": vehicle.parked_lean_deg}.get(kind, 0.0)
        vg_default = {"bump": DEFAULT_BUMP_G, "one_wheel_bump": DEFAULT_ONE_WHEEL_G}.get(kind, 1.0)
        case = LoadCase(
            name=name, kind=kind,
            lean_deg=_num(t, "lean_deg", src, w, lean_default, lo=-MAX_LEAN_LIMIT_DEG, hi=MAX_LEAN_LIMIT_DEG),
            travel_mm=_num(t, "travel_mm", src, w, 0.0, lo=-MAX_TRAVEL_MM, hi=MAX_TRAVEL_MM),
            vertical_g=_num(t, "vertical_g", src, w, vg_default, lo=0, hi=MAX_LOAD_FACTOR_G),
            brake_g=_num(t, "brake_g", src, w, DEFAULT_BRAKE_G if kind == "braking" else 0.0, lo=0, hi=2),
            mirror=flags["mirror"], wheel=wheel,
            lateral_g=_num(t, "lateral_g", src, w, DEFAULT_KERB_G if kind == "kerb_strike" else 0.0, lo=0, hi=5),
            slope_deg=_num(t, "slope_deg", src, w, DEFAULT_SLOPE_DEG if kind == "parked" else 0.0, lo=-45, hi=45),
            locked=flags["tilt_locked"],
            source=_str(t, "source", src, w, "loads file"))
        if kind == "one_wheel_bump" and not case.locked:
            raise InputError("a one-wheel bump needs the tilt held (tilt_locked = true): with the tilt free the "
                             "linkage shares the load between the wheels, which a 'bump' case covers.", src,
                             w + ".tilt_locked")
        check_braking(case, vehicle, src, w + ".brake_g")
        cases.append(case)
    return tuple(cases)
