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

    [tilt_lock]
    body = "upper_beam"          # optional: the body the lock holds the chassis to

    [[cases]]                    # optional; without any, the five defaults below
    name = "bump"
    kind = "bump"                # static | bump | cornering | braking | parked
    vertical_g = 3.0
    travel_mm = 0.0
    lean_deg = 0.0
    brake_g = 0.0
    mirror = true                # also evaluate the mirrored lean (-lean_deg)

Default load cases and their sources:

- ``static``: 1 g at lean 0, travel 0.
- ``bump``: 3 g vertical on the front axle load. Peak off-road front-wheel
  loads approach three times body weight (De Lorenzo & Hull, "Quantification
  of structural loading during off-road cycling", J. Biomech. Eng. 1999).
- ``cornering``: balanced cornering at the lean limit: the side force at each
  tyre is its vertical load times tan(lean), toward the inside of the turn;
  the centrifugal load acts at the centre of mass.
- ``braking``: 0.7 g deceleration (common practice, no source: a good
  tyre-limited stop on dry asphalt), with the load transfer
  ``m a h / wheelbase`` onto the front axle.
- ``parked``: 1 g at the parked lean, the tilt lock holding the chassis.

Front-view load model (see :mod:`tiltopt.kinematics.forces`): the front axle's
vertical load ``W_f = m g (front_share n_z + brake_g h / wheelbase)`` acts at
the centre of mass (a chassis point ``(0, com_height_mm)`` in the design
position, leaning with the chassis). The rear of the vehicle is one wheel on
the chassis centre line: its load ``W_r = m g (1 - front_share - brake_g h /
wheelbase)`` acts at the centre of mass too and is reacted at the chassis datum
O, so the roll moment of the rear share also goes through the linkage (a
single rear tyre cannot resist roll). Set ``front_share = 1`` to put the whole
vehicle on the linkage.
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
from tiltopt.base.limits import MAX_COORD_MM, MAX_LEAN_LIMIT_DEG, MAX_MASS_KG, MAX_TRAVEL_MM
from tiltopt.base.resources import data_path

G = 9.80665  # standard gravity, m/s^2
KINDS = ("static", "bump", "cornering", "braking", "parked")
DEFAULT_SAFETY_FACTOR = 2.0
DEFAULT_PIVOT_ALLOWANCE_G = 60.0
DEFAULT_PIVOT_BASE_MM = 50.0
DEFAULT_BUMP_G = 3.0       # De Lorenzo & Hull (see module docs)
DEFAULT_BRAKE_G = 0.7      # common practice, no source
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
class LoadCase:
    """One load case as written (before mirroring)."""

    name: str
    kind: str
    lean_deg: float
    travel_mm: float
    vertical_g: float
    brake_g: float
    mirror: bool


@dataclass(frozen=True)
class LoadState:
    """One evaluated state of a load case (a case with a lean gives two: +lean and its mirror).

    front_load_n : vertical front-axle load W_f, N (acts at the centre of mass).
    rear_load_n : rear load W_r, N (at the centre of mass, reacted at the chassis datum O).
    side_ratio : tyre side force / vertical load (tan lean in balanced cornering, else 0).
    locked : the tilt lock holds the chassis (parked); otherwise the rider balances.
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


@dataclass(frozen=True)
class Material:
    name: str
    density_g_cm3: float
    elastic_modulus_gpa: float
    yield_mpa: float
    allowable_mpa: float
    source: str


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
    tilt_lock_body: str | None = None
    materials: dict[str, Material] = field(default_factory=dict)
    catalogue: Catalogue | None = None
    source: str = "<memory>"

    def states(self) -> list[LoadState]:
        """Every evaluated state, in case order (mirrors right after their case)."""
        v = self.vehicle
        out = []
        wg = v.total_mass_kg * G
        for c in self.cases:
            transfer = c.brake_g * v.com_height_mm / v.wheelbase_mm
            wf = wg * (v.front_share * c.vertical_g + transfer)
            wr = wg * (1.0 - v.front_share - transfer)
            side = math.tan(math.radians(c.lean_deg)) if c.kind == "cornering" else 0.0
            signs = (1.0, -1.0) if (c.mirror and c.lean_deg != 0.0) else (1.0,)
            for sg in signs:
                out.append(LoadState(
                    name=c.name if sg > 0 else f"{c.name}_mirror", case=c.name, kind=c.kind,
                    lean_deg=sg * c.lean_deg, travel_mm=c.travel_mm, front_load_n=wf, rear_load_n=wr,
                    side_ratio=sg * side, brake_g=c.brake_g, locked=c.kind == "parked"))
        return out


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
        _keys(t, {"density_g_cm3", "elastic_modulus_gpa", "yield_mpa", "allowable_mpa", "source"}, src, w,
              ["density_g_cm3", "elastic_modulus_gpa", "yield_mpa", "allowable_mpa", "source"])
        y = _num(t, "yield_mpa", src, w, lo=0, lo_open=True)
        a = _num(t, "allowable_mpa", src, w, lo=0, lo_open=True)
        if a > y:
            raise InputError(f"allowable_mpa ({a:g}) cannot exceed yield_mpa ({y:g}).", src, w + ".allowable_mpa")
        out[name] = Material(name, _num(t, "density_g_cm3", src, w, lo=0, lo_open=True),
                             _num(t, "elastic_modulus_gpa", src, w, lo=0, lo_open=True), y, a,
                             _str(t, "source", src, w))
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


def default_cases(v: Vehicle) -> tuple[LoadCase, ...]:
    """The five default cases (module docs give the sources)."""
    return (
        LoadCase("static", "static", 0.0, 0.0, 1.0, 0.0, False),
        LoadCase("bump", "bump", 0.0, 0.0, DEFAULT_BUMP_G, 0.0, False),
        LoadCase("cornering", "cornering", v.lean_limit_deg, 0.0, 1.0, 0.0, True),
        LoadCase("braking", "braking", 0.0, 0.0, 1.0, DEFAULT_BRAKE_G, False),
        LoadCase("parked", "parked", v.parked_lean_deg, 0.0, 1.0, 0.0, True),
    )


def parse_loads(data: dict, src: str = "<memory>", base_dir: str | Path | None = None) -> LoadsSpec:
    """Validate loads given as a TOML-like dict (see module docs).

    Parameters
    ----------
    data : dict
        The tables ``vehicle``, ``sizing``, ``members``, ``tilt_lock``, ``cases``.
    src : str
        Name of the file (or config) for messages.
    base_dir : path, optional
        Folder that relative ``sizing.catalogue`` / ``sizing.materials`` paths start from.
    """
    _keys(data, {"vehicle", "sizing", "members", "tilt_lock", "cases"}, src, "", ["vehicle"])
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
        safety_factor=_num(st, "safety_factor", src, "sizing", DEFAULT_SAFETY_FACTOR, lo=1.0, hi=100.0),
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

    lock = data.get("tilt_lock", {})
    _keys(lock, {"body"}, src, "tilt_lock")
    if "body" in lock:
        spec.tilt_lock_body = _str(lock, "body", src, "tilt_lock")

    raw = data.get("cases")
    if raw is None:
        cases = default_cases(vehicle)
    else:
        if not isinstance(raw, list) or not raw or not all(isinstance(t, dict) for t in raw):
            raise InputError("expected one or more [[cases]] tables.", src, "cases")
        cases, names = [], set()
        for i, t in enumerate(raw):
            w = f"cases[{i}]"
            _keys(t, {"name", "kind", "lean_deg", "travel_mm", "vertical_g", "brake_g", "mirror"}, src, w,
                  ["name", "kind"])
            name = _str(t, "name", src, w)
            if name in names:
                raise InputError(f"the case name {name!r} is used twice.", src, w + ".name")
            names.add(name)
            kind = _str(t, "kind", src, w)
            if kind not in KINDS:
                raise InputError(f"unknown kind {kind!r}. Expected one of: {', '.join(KINDS)}.", src, w + ".kind")
            lean_default = {"cornering": vehicle.lean_limit_deg, "parked": vehicle.parked_lean_deg}.get(kind, 0.0)
            mirror = t.get("mirror", True)
            if not isinstance(mirror, bool):
                raise InputError(f"expected true or false. Got {mirror!r} instead.", src, w + ".mirror")
            cases.append(LoadCase(
                name=name, kind=kind,
                lean_deg=_num(t, "lean_deg", src, w, lean_default, lo=-MAX_LEAN_LIMIT_DEG, hi=MAX_LEAN_LIMIT_DEG),
                travel_mm=_num(t, "travel_mm", src, w, 0.0, lo=-MAX_TRAVEL_MM, hi=MAX_TRAVEL_MM),
                vertical_g=_num(t, "vertical_g", src, w, DEFAULT_BUMP_G if kind == "bump" else 1.0, lo=0, hi=100.0),
                brake_g=_num(t, "brake_g", src, w, DEFAULT_BRAKE_G if kind == "braking" else 0.0, lo=0, hi=2),
                mirror=mirror))
        cases = tuple(cases)
    spec.cases = cases
    return spec


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
    lock = spec.tilt_lock_body
    if lock is not None:
        pinned = [b for p in mech.pins for b in (p.a.split(".")[0], p.b.split(".")[0])
                  if mech.chassis in (p.a.split(".")[0], p.b.split(".")[0]) and b != mech.chassis]
        if lock not in pinned:
            raise InputError(f"the tilt lock must hold a body pinned to the chassis. Got {lock!r}; bodies pinned "
                             f"to '{mech.chassis}': {', '.join(pinned) or 'none'}.", spec.source, "tilt_lock.body")
