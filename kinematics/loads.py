"""Vehicle and load-case input: the loads file, materials and the tube catalogue.

A loads file (TOML, our own format; a run config embeds the same tables, so
:func:`parse_loads` is a function of a dict) holds::

    [vehicle]
    total_mass_kg = 185.0        # vehicle + rider + load, kg
    com_height_mm = 600.0        # centre of mass above ground, design position, mm
    front_share = 0.5            # share of the static weight on the front (linkage) axle
    wheelbase_mm = 1400.0        # for the braking load transfer
    lean_limit_deg = 30.0        # cornering case lean
    parked_lean_deg = 30.0       # optional, default = lean_limit_deg

    [sizing]
    safety_factor = 2.0          # on the allowable stress and on the buckling load
    pivot_allowance_g = 60.0     # bearings, bolts and lugs per pivot
    material = "4130"            # default tube material of every member
    default_pivot_base_mm = 50.0 # chassis pivots without a base_mm in the mechanism
    catalogue = "tubes.csv"      # optional, relative to this file
    materials = "materials.toml" # optional, relative to this file

    [members.upper_beam]         # optional, per member (a body or a link name)
    material = "6061-T6"

    [tilt_lock]                  # optional
    body = "upper_beam"          # the body the lock holds the chassis to (default: the first pinned to it)
    effective_radius_mm = 80.0   # disc-and-caliper lock: pad centre radius (default 80)
    friction = 0.4               # pad-on-disc friction coefficient (default 0.4)
    faces = 2                    # friction faces (a caliper clamps both faces of the disc: 2)

    [springs]                    # optional: the spring setup (sprung linkages)
    sag_mm = 30.0                # static sag: wheel travel from top-out to the design position
                                 # (default: the droop limit of travel_mm)
    travel_mm = [-30.0, 30.0]    # droop and bump limits the springs are checked over (tiltopt loads)

    [fatigue]                    # optional: the fatigue screening of welded joints
    cycles = 1000000             # bump cycles over the vehicle's life
    peak_g = 1.5                 # each cycle: from the static load (1 g) to this factor and back
    partial_factor = 1.35        # on the stress range

    [[cases]]                    # optional; without any, one of each kind (kinematics/cases.py)
    name = "bump"
    kind = "bump"                # static | bump | one_wheel_bump | kerb_strike | cornering | braking | parked
    vertical_g = 3.0             # bump factor (bump: both wheels; one_wheel_bump: one wheel's static load)
    lateral_g = 1.0              # kerb_strike: lateral force / front axle static load
    wheel = "left"               # one_wheel_bump, kerb_strike: the wheel hit (the mirror hits the other)
    slope_deg = 5.7              # parked: cross slope, > 0 when the vehicle leans downhill
    travel_mm = 0.0
    lean_deg = 0.0
    brake_g = 0.0
    tilt_locked = false          # default true for one_wheel_bump and parked
    mirror = true                # also evaluate the mirrored case (other lean, slope or wheel)
    source = "..."               # where the figures come from (shown beside the case)

The kinds, their defaults and sources are in :mod:`tiltopt.kinematics.cases`.
A braking transfer the quasi-static formula cannot carry (rear load below
zero) is an error naming the key.

Front-view load model (see :mod:`tiltopt.kinematics.forces`): the front axle's
vertical load ``W_f = m g (front_share n_z + brake_g h / wheelbase)`` acts at
the centre of mass (a chassis point ``(0, com_height_mm)`` in the design
position, leaning with the chassis). The rear of the vehicle is one wheel on
the chassis centre line: its load ``W_r = m g (1 - front_share - brake_g h /
wheelbase)`` acts at the centre of mass too and is reacted at the chassis datum
O, so the roll moment of the rear share also goes through the linkage (a
single rear tyre cannot resist roll). Set ``front_share = 1`` to put the whole
vehicle on the linkage (then no braking case: nothing is left to transfer).
"""
from __future__ import annotations

import csv
import io
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from tiltopt.base import inputs
from tiltopt.base.errors import InputError, check_keys, read_text, read_toml
from tiltopt.base.limits import (
    MAX_COORD_MM,
    MAX_FATIGUE_CYCLES,
    MAX_FRICTION_FACES,
    MAX_LEAN_LIMIT_DEG,
    MAX_MASS_KG,
    MAX_SAFETY_FACTOR,
    MAX_SN_EXPONENT,
    MAX_TRAVEL_MM,
)
from tiltopt.base.resources import data_path

from .cases import (  # noqa: F401 (re-exported)
    DEFAULT_BRAKE_G,
    DEFAULT_BUMP_G,
    KINDS,
    G,
    LoadCase,
    LoadState,
    case_states,
    default_cases,
    extra_states,
    parse_cases,
)

DEFAULT_SAFETY_FACTOR = 2.0
DEFAULT_PIVOT_ALLOWANCE_G = 60.0
DEFAULT_PIVOT_BASE_MM = 50.0
DEFAULT_LOCK_RADIUS_MM = 80.0    # pad centre of a 180 mm disc (common practice, no source)
DEFAULT_LOCK_FRICTION = 0.4      # brake pad on a steel disc, about 0.35-0.5 (common practice, no source)
DEFAULT_SPRING_TRAVEL_MM = (-30.0, 30.0)   # the optimiser's default travel envelope of sprung templates
DEFAULT_FATIGUE_CYCLES = 1.0e6   # our estimate: one marked bump every 20 m over 20 000 km (no source)
DEFAULT_FATIGUE_PEAK_G = 1.5     # a 0.5 g range per cycle (our estimate, no source)
DEFAULT_FATIGUE_PARTIAL = 1.35   # EN 1993-1-9 Table 3.1: safe life, high consequence (from memory)
from tiltopt.base.safety import SAFETY_CAUTION  # noqa: E402,F401  (re-exported: loads output carries it)


@dataclass(frozen=True)
class Vehicle:
    total_mass_kg: float
    com_height_mm: float
    front_share: float
    wheelbase_mm: float
    lean_limit_deg: float
    parked_lean_deg: float


@dataclass(frozen=True)
class TiltLock:
    """A disc-and-caliper tilt lock: ``T = faces x friction x F_clamp x r_eff``.

    ``body``: the body the lock holds the chassis to (None: the first body pinned to the chassis).
    """

    body: str | None = None
    effective_radius_mm: float = DEFAULT_LOCK_RADIUS_MM
    friction: float = DEFAULT_LOCK_FRICTION
    faces: int = 2
    friction_source: str = "pad on a steel disc, about 0.35 to 0.5 (common practice, no source)"


@dataclass(frozen=True)
class SpringSetup:
    """How the springs are set up and over which travel they are checked (see kinematics/springs.py).

    sag_mm : None means the droop limit of the travel envelope (top-out at full droop).
    travel_mm : (droop, bump) limits for ``tiltopt loads`` (the optimiser uses its own envelope).
    """

    sag_mm: float | None = None
    travel_mm: tuple[float, float] = DEFAULT_SPRING_TRAVEL_MM


@dataclass(frozen=True)
class FatigueSpec:
    """The fatigue screening: ``cycles`` of a load change from 1 g to ``peak_g`` on the front axle."""

    cycles: float = DEFAULT_FATIGUE_CYCLES
    peak_g: float = DEFAULT_FATIGUE_PEAK_G
    partial_factor: float = DEFAULT_FATIGUE_PARTIAL

@dataclass(frozen=True)
class Material:
    name: str
    density_g_cm3: float
    elastic_modulus_gpa: float
    yield_mpa: float
    allowable_mpa: float
    source: str
    fatigue_fat_mpa: float | None = None     # stress range at 2e6 cycles of its welded joints
    fatigue_slope: float = 3.0               # S-N exponent m
    fatigue_source: str = ""


@dataclass
class Catalogue:
    """Round tubes, one row each.

    Attributes
    ----------
    material : list of str, length n_tubes
    outer_diameter_mm, wall_mm : ndarray of shape (n_tubes,)
    source : str
        The file the catalogue was read from.
    """

    material: list[str]
    outer_diameter_mm: np.ndarray
    wall_mm: np.ndarray
    source: str = "<memory>"

    def labels(self) -> list[str]:
        return [f"{d:g} x {t:g}" for d, t in zip(self.outer_diameter_mm, self.wall_mm)]


@dataclass
class LoadsSpec:
    """A parsed loads file."""

    vehicle: Vehicle
    cases: tuple[LoadCase, ...]
    safety_factor: float = DEFAULT_SAFETY_FACTOR
    pivot_allowance_g: float = DEFAULT_PIVOT_ALLOWANCE_G
    default_pivot_base_mm: float = DEFAULT_PIVOT_BASE_MM
    material: str = "4130"
    member_material: dict[str, str] = field(default_factory=dict)
    tilt_lock: TiltLock = field(default_factory=TiltLock)
    springs: SpringSetup = field(default_factory=SpringSetup)
    fatigue: FatigueSpec = field(default_factory=FatigueSpec)
    materials: dict[str, Material] = field(default_factory=dict)
    catalogue: Catalogue | None = None
    source: str = "<memory>"

    @property
    def tilt_lock_body(self) -> str | None:
        return self.tilt_lock.body

    def states(self) -> list[LoadState]:
        """Every evaluated state: the cases in order (mirrors right after their case), then the
        reference and fatigue states (``role`` says which is which)."""
        out = [st for c in self.cases for st in case_states(c, self.vehicle)]
        return out + extra_states(self.cases, self.vehicle, self.fatigue.peak_g)


# ------------------------------------------------------------------ helpers
def _num(t: dict, key: str, src: str, where: str, default: Any = None, *, lo: float | None = None,
         hi: float | None = None, lo_open: bool = False, hi_open: bool = False) -> float:
    full = f"{where}.{key}" if where else key
    if key not in t:
        if default is None:
            raise InputError("this key is required but missing.", src, full)
        return float(default)
    v = t[key]
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise InputError(f"expected a finite number. Got {v!r} instead.", src, full)
    v = float(v)
    if lo is not None and (v < lo or (lo_open and v == lo)):
        raise InputError(f"must be {'greater than' if lo_open else 'at least'} {lo:g}. Got {v:g} instead.",
                         src, full)
    if hi is not None and (v > hi or (hi_open and v == hi)):
        raise InputError(f"must be {'less than' if hi_open else 'at most'} {hi:g}. Got {v:g} instead.",
                         src, full)
    return v


_keys = check_keys


def _str(t: dict, key: str, src: str, where: str, default: str | None = None) -> str:
    full = f"{where}.{key}" if where else key
    if key not in t:
        if default is None:
            raise InputError("this key is required but missing.", src, full)
        return default
    v = t[key]
    if not isinstance(v, str) or not v:
        raise InputError(f"expected a non-empty string. Got {v!r} instead.", src, full)
    return v


def _read_toml(path: Path, what: str) -> dict:
    return read_toml(path, f"{what} .toml")


# ----------------------------------------------------------------- materials
def load_materials(path: str | Path | None = None) -> dict[str, Material]:
    """Read a materials TOML file (default: the built-in ``kinematics/data/materials.toml``)."""
    path = Path(path) if path else data_path("materials.toml")
    return parse_materials(_read_toml(path, "materials"), str(path))


def parse_materials(data: dict, src: str = "<memory>") -> dict[str, Material]:
    _keys(data, {"materials"}, src, "", ["materials"])
    mats = data["materials"]
    if not isinstance(mats, dict) or not mats:
        raise InputError("expected at least one [materials.\"NAME\"] table.", src, "materials")
    out = {}
    for name, t in mats.items():
        w = f"materials.{name}"
        _keys(t, {"density_g_cm3", "elastic_modulus_gpa", "yield_mpa", "allowable_mpa", "source", "fatigue_fat_mpa",
                  "fatigue_slope", "fatigue_source"}, src, w,
              ["density_g_cm3", "elastic_modulus_gpa", "yield_mpa", "allowable_mpa", "source"])
        y = _num(t, "yield_mpa", src, w, lo=0, lo_open=True)
        a = _num(t, "allowable_mpa", src, w, lo=0, lo_open=True)
        if a > y:
            raise InputError(f"allowable_mpa ({a:g}) cannot exceed yield_mpa ({y:g}).", src, w + ".allowable_mpa")
        # a stress range stays elastic up to twice the yield (from -yield to +yield)
        fat = _num(t, "fatigue_fat_mpa", src, w, lo=0, lo_open=True, hi=2.0 * y) if "fatigue_fat_mpa" in t else None
        out[name] = Material(name, _num(t, "density_g_cm3", src, w, lo=0, lo_open=True),
                             _num(t, "elastic_modulus_gpa", src, w, lo=0, lo_open=True), y, a,
                             _str(t, "source", src, w), fat,
                             _num(t, "fatigue_slope", src, w, 3.0, lo=1, hi=MAX_SN_EXPONENT),
                             _str(t, "fatigue_source", src, w, ""))
        if out[name].fatigue_fat_mpa is not None and not out[name].fatigue_source:
            raise InputError("a fatigue class needs its source (fatigue_source).", src, w + ".fatigue_source")
    return out


def load_catalogue(path: str | Path | None = None) -> Catalogue:
    """Read a tube catalogue CSV (default: the built-in ``kinematics/data/tubes.csv``).

    Columns ``material, outer_diameter_mm, wall_mm``; lines starting with ``#`` are comments.
    """
    path = Path(path) if path else data_path("tubes.csv")
    src = str(path)
    text = read_text(path, "tube catalogue .csv")
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    reader = csv.DictReader(io.StringIO("\n".join(lines)))
    need = ["material", "outer_diameter_mm", "wall_mm"]
    if reader.fieldnames is None or any(k not in reader.fieldnames for k in need):
        raise InputError(f"expected the columns {', '.join(need)}. Got {reader.fieldnames}.", src)
    mats, D, t = [], [], []
    for i, row in enumerate(reader):
        key = f"row {i + 1}"
        try:
            d, w = float(row["outer_diameter_mm"]), float(row["wall_mm"])
        except (TypeError, ValueError):
            raise InputError(f"expected numbers for outer_diameter_mm and wall_mm. Got {row}.", src, key) from None
        if not (math.isfinite(d) and math.isfinite(w) and 0 < d <= MAX_COORD_MM and 0 < w < d / 2):
            raise InputError(f"need outer_diameter_mm > 0 and 0 < wall_mm < outer_diameter_mm / 2. "
                             f"Got {d:g} x {w:g}.", src, key)
        mats.append(row["material"].strip())
        D.append(d)
        t.append(w)
    if not mats:
        raise InputError("the catalogue has no tubes.", src)
    return Catalogue(mats, np.array(D), np.array(t), src)


# ---------------------------------------------------------------------- loads
def load_loads(path: str | Path) -> LoadsSpec:
    """Read and validate a loads TOML file (see module docs).

    Raises
    ------
    InputError
        Naming the file and the key.
    """
    path = Path(path)
    return parse_loads(_read_toml(path, "loads"), str(path), base_dir=path.parent)


def parse_loads(data: dict, src: str = "<memory>", base_dir: str | Path | None = None) -> LoadsSpec:
    """Validate loads given as a TOML-like dict (see module docs).

    Parameters
    ----------
    data : dict
        The tables ``vehicle``, ``sizing``, ``members``, ``tilt_lock``, ``springs``, ``fatigue``, ``cases``.
    src : str
        Name of the file (or config) for messages.
    base_dir : path, optional
        Folder that relative ``sizing.catalogue`` / ``sizing.materials`` paths start from.
    """
    _keys(data, {"vehicle", "sizing", "members", "tilt_lock", "springs", "fatigue", "cases"}, src, "", ["vehicle"])
    vt = data["vehicle"]
    _keys(vt, {"total_mass_kg", "com_height_mm", "front_share", "wheelbase_mm", "lean_limit_deg",
               "parked_lean_deg"}, src, "vehicle",
          ["total_mass_kg", "com_height_mm", "front_share", "wheelbase_mm", "lean_limit_deg"])
    lean = _num(vt, "lean_limit_deg", src, "vehicle", lo=0, hi=MAX_LEAN_LIMIT_DEG)
    vehicle = Vehicle(
        total_mass_kg=_num(vt, "total_mass_kg", src, "vehicle", lo=0, lo_open=True, hi=MAX_MASS_KG),
        com_height_mm=_num(vt, "com_height_mm", src, "vehicle", lo=0, lo_open=True, hi=MAX_COORD_MM),
        front_share=_num(vt, "front_share", src, "vehicle", lo=0, hi=1, lo_open=True),
        wheelbase_mm=_num(vt, "wheelbase_mm", src, "vehicle", lo=0, lo_open=True, hi=MAX_COORD_MM),
        lean_limit_deg=lean,
        parked_lean_deg=_num(vt, "parked_lean_deg", src, "vehicle", lean, lo=0, hi=MAX_LEAN_LIMIT_DEG),
    )

    st = data.get("sizing", {})
    _keys(st, {"safety_factor", "pivot_allowance_g", "material", "default_pivot_base_mm", "catalogue",
               "materials"}, src, "sizing")
    base = Path(base_dir) if base_dir is not None else Path(".")

    def rel(key):
        p = Path(_str(st, key, src, "sizing"))
        return inputs.resolve(p if p.is_absolute() else base / p, f"sizing.{key}")   # a run folder's copy

    materials = load_materials(rel("materials") if "materials" in st else None)
    catalogue = load_catalogue(rel("catalogue") if "catalogue" in st else None)
    material = _str(st, "material", src, "sizing", "4130")

    def check_material(name, key):
        if name not in materials:
            raise InputError(f"unknown material {name!r}. Materials: {', '.join(materials)}.", src, key)
        if name not in catalogue.material:
            raise InputError(f"the tube catalogue {catalogue.source} has no tubes of {name!r}. Add rows for it "
                             f"or choose one of: {', '.join(sorted(set(catalogue.material)))}.", src, key)

    check_material(material, "sizing.material")
    spec = LoadsSpec(
        vehicle=vehicle, cases=(),
        safety_factor=_num(st, "safety_factor", src, "sizing", DEFAULT_SAFETY_FACTOR, lo=1.0, hi=MAX_SAFETY_FACTOR),
        pivot_allowance_g=_num(st, "pivot_allowance_g", src, "sizing", DEFAULT_PIVOT_ALLOWANCE_G, lo=0,
                               hi=1000.0 * MAX_MASS_KG),
        default_pivot_base_mm=_num(st, "default_pivot_base_mm", src, "sizing", DEFAULT_PIVOT_BASE_MM, lo=0,
                                   lo_open=True, hi=MAX_COORD_MM),
        material=material, materials=materials, catalogue=catalogue, source=src)

    members = data.get("members", {})
    _keys(members, set(members) if isinstance(members, dict) else set(), src, "members")
    for name, t in members.items():
        w = f"members.{name}"
        _keys(t, {"material"}, src, w, ["material"])
        m = _str(t, "material", src, w)
        check_material(m, w + ".material")
        spec.member_material[name] = m

    spec.tilt_lock = _parse_lock(data.get("tilt_lock", {}), src)
    spec.springs = _parse_springs(data.get("springs", {}), src)
    spec.fatigue = _parse_fatigue(data.get("fatigue", {}), src)
    cases = parse_cases(data.get("cases"), vehicle, src)
    spec.cases = cases
    return spec


def _parse_lock(t: Any, src: str) -> TiltLock:
    _keys(t, {"body", "effective_radius_mm", "friction", "faces"}, src, "tilt_lock")
    faces = t.get("faces", 2)
    if isinstance(faces, bool) or not isinstance(faces, int) or not 1 <= faces <= MAX_FRICTION_FACES:
        raise InputError(f"expected a whole number of friction faces from 1 to {MAX_FRICTION_FACES} (2 for a caliper "
                         f"on a disc). Got {faces!r}.", src, "tilt_lock.faces")
    mu = _num(t, "friction", src, "tilt_lock", DEFAULT_LOCK_FRICTION, lo=0, lo_open=True, hi=2)
    return TiltLock(
        body=_str(t, "body", src, "tilt_lock") if "body" in t else None,
        effective_radius_mm=_num(t, "effective_radius_mm", src, "tilt_lock", DEFAULT_LOCK_RADIUS_MM, lo=0,
                                 lo_open=True, hi=MAX_COORD_MM),
        friction=mu, faces=faces,
        friction_source=TiltLock.friction_source if "friction" not in t else "loads file")


def _parse_springs(t: Any, src: str) -> SpringSetup:
    _keys(t, {"sag_mm", "travel_mm"}, src, "springs")
    tr = t.get("travel_mm", list(DEFAULT_SPRING_TRAVEL_MM))
    if not isinstance(tr, list) or len(tr) != 2:
        raise InputError(f"expected [droop, bump] in mm, e.g. [-30.0, 30.0]. Got {tr!r} instead.", src,
                         "springs.travel_mm")
    lo = _num({"v": tr[0]}, "v", src, "springs.travel_mm[0]", lo=-MAX_TRAVEL_MM, hi=0)
    hi = _num({"v": tr[1]}, "v", src, "springs.travel_mm[1]", lo=0, hi=MAX_TRAVEL_MM)
    sag = _num(t, "sag_mm", src, "springs", lo=0, lo_open=True, hi=MAX_TRAVEL_MM) if "sag_mm" in t else None
    return SpringSetup(sag, (lo, hi))


def _parse_fatigue(t: Any, src: str) -> FatigueSpec:
    _keys(t, {"cycles", "peak_g", "partial_factor"}, src, "fatigue")
    return FatigueSpec(cycles=_num(t, "cycles", src, "fatigue", DEFAULT_FATIGUE_CYCLES, lo=1, hi=MAX_FATIGUE_CYCLES),
                       peak_g=_num(t, "peak_g", src, "fatigue", DEFAULT_FATIGUE_PEAK_G, lo=1, lo_open=True, hi=10),
                       partial_factor=_num(t, "partial_factor", src, "fatigue", DEFAULT_FATIGUE_PARTIAL, lo=1,
                                           hi=MAX_SAFETY_FACTOR))


def check_loads_for(spec: LoadsSpec, mech) -> None:
    """Check the names a loads file uses against a mechanism (members, tilt-lock body).

    Raises
    ------
    InputError
        Naming the loads file and the key.
    """
    bodies = [b for b in mech.bodies if b != mech.chassis]
    members = bodies + [l.name for l in mech.links]
    for name in spec.member_material:
        if name not in members:
            raise InputError(f"no member {name!r} in mechanism '{mech.name}'. Members (bodies other than the "
                             f"chassis, and links): {', '.join(members)}.", spec.source, f"members.{name}")
    lock = spec.tilt_lock.body
    if lock is not None:
        pinned = [b for p in mech.pins for b in (p.a.split(".")[0], p.b.split(".")[0])
                  if mech.chassis in (p.a.split(".")[0], p.b.split(".")[0]) and b != mech.chassis]
        if lock not in pinned:
            raise InputError(f"the tilt lock must hold a body pinned to the chassis. Got {lock!r}; bodies pinned "
                             f"to '{mech.chassis}': {', '.join(pinned) or 'none'}.", spec.source, "tilt_lock.body")
