"""The problem part of a run config: template, envelope, objectives, constraints, shell, loads.

Tables (TOML, our own format; lengths mm, angles degrees)::

    objectives = ["overall_width", "max_scrub", "max_heave"]   # tiltopt.problems.registry.OBJECTIVES
    shell = "shell.toml"            # optional body shell (relative to the config)
    loads = "loads.toml"            # optional loads file, or embed [vehicle], [sizing],
                                    # [members.*], [tilt_lock], [springs], [fatigue], [[load_cases]]
                                    # (tiltopt.kinematics.loads)

    [template]
    name = "twin_beam"              # a built-in (tiltopt.problems.registry.TEMPLATES), or
    mechanism = "my_linkage.toml"   # any symmetric mechanism file, with [[template.variables]]
    variables = ["outer_pivot_y", "wheel_offset"]   # built-in: the active subset (optional)
    bounds = { outer_pivot_y = [250.0, 400.0] }     # optional bound overrides
    fixed = { wheel_radius = 230.0 }                # optional values of held variables
    allow_crossing = false          # true: members may cross in the front view (they run at different x)

    [[template.variables]]          # only with `mechanism`: see template_from_mechanism
    name = "pivot_y"
    points = ["upper_beam.right_end", "lower_beam.right_end"]
    axis = "y"
    lower = 250.0
    upper = 400.0

    [envelope]
    lean_limit_deg = 30.0           # default: [vehicle] lean_limit_deg, else 30
    lean_step_deg = 5.0             # leans 0, step, ..., limit (limit always included)
    travel_mm = [-30.0, 0.0, 30.0]  # default: this for templates with springs, [0.0] for rigid ones
    both_sides = false              # true: also lean to -limit (a template is symmetric, so the left
                                    # side mirrors the right; set it for an asymmetric shell)
    [envelope.steer]                # optional: replaces the mechanism's [steer_envelope]
    lean_deg = [0.0, 20.0]
    max_steer_deg = [30.0, 10.0]

    [constraints]                   # every key optional; defaults (tiltopt.problems.registry.CONSTRAINTS)
    max_width_mm = 1000.0           # width limit of the upright vehicle
    max_scrub_mm = 5.0              # caps on kinematic figures
    max_heave_mm = 5.0
    max_camber_error_deg = 1.0      # the wheels lean with the body (default 1.0)
    clearance_margin_mm = 10.0      # wheel solids to the shell and non-carrying members (default 10)
    carrier_margin_mm = 3.0         # wheel solids to their own upright and arms (default 3)
    wheel_gap_mm = 10.0             # between the two wheels (default 10)
    member_gap_mm = 5.0             # between two members' tubes (default 5)
    wheel_shell_margin_mm = 15.0    # with a shell: wheels outside the shell by >= margin
    ground_clearance_mm = 60.0      # lowest shell/member point >= this
    pivot_margin_mm = 0.0           # with a shell: chassis joint points inside by >= margin (default 0)
    min_wheel_load_n = 0.0          # with loads: every tyre loaded in every case (default 0)
    stress = true                   # with loads: members within allowables (default true)
    max_spring_force_n = 2500.0     # with loads, sprung: largest spring force over the load cases
    max_spring_stroke_mm = 50.0     # sprung: spring stroke over the envelope
    spring_bottoming = false        # with loads, sprung: no spring solid over the envelope
    max_lean_steer_deg = 0.5        # with a steering linkage: the wheels do not steer as the body leans (default 0.5)
    max_bump_steer_deg = 0.5        # with a steering linkage: nor in bump and droop
    max_ackermann_error_deg = 2.0   # with a steering linkage and its wheelbase_mm
    min_trail_mm = 20.0             # with a steering linkage: the trail band over the envelope
    max_trail_mm = 80.0

The ``[run]`` and ``[targets]`` tables are the optimiser's (:mod:`tiltopt.optimizer.config`) and are
skipped here: targets choose among the designs of a front, they do not change the problem.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np

from tiltopt.base import inputs
from tiltopt.base.errors import InputError, check_keys
from tiltopt.base.limits import (
    MAX_ABS_LEAN_DEG,
    MAX_COORD_MM,
    MAX_FORCE_N,
    MAX_LEAN_LIMIT_DEG,
    MAX_RANGE_VALUES,
    MAX_STATES,
    MAX_TRAVEL_MM,
    check_count,
)
from tiltopt.kinematics.mechanism import load_mechanism

from .registry import CLEARANCE, CONSTRAINTS, OBJECTIVES, SIZING, STEERING, SWITCH_KEYS, TEMPLATES
from .templates import Template, get_template, template_from_mechanism

PROBLEM_KEYS = ("template", "envelope", "objectives", "constraints", "shell", "loads", "vehicle", "sizing",
                "members", "tilt_lock", "load_cases", "springs", "fatigue")
LOADS_TABLES = ("vehicle", "sizing", "members", "tilt_lock", "springs", "fatigue")   # embedded loads tables
SKIPPED_KEYS = ("run", "targets")   # the optimiser's tables (optimizer/config.py)
DEFAULT_LEAN_LIMIT_DEG = 30.0
DEFAULT_LEAN_STEP_DEG = 5.0
DEFAULT_SPRUNG_TRAVEL_MM = (-30.0, 0.0, 30.0)
_CONSTRAINT_KEYS = tuple(c.key for c in CONSTRAINTS.values() if c.key is not None)
_CONSTRAINT_MAX = {"max_spring_force_n": MAX_FORCE_N, "max_spring_stroke_mm": MAX_COORD_MM,   # upper input limits
                   "max_lean_steer_deg": 90.0, "max_bump_steer_deg": 90.0, "max_ackermann_error_deg": 90.0,
                   "min_trail_mm": MAX_COORD_MM, "max_trail_mm": MAX_COORD_MM}
_CONSTRAINT_NO_LOWER = ("pivot_margin_mm", "clearance_margin_mm", "wheel_shell_margin_mm", "carrier_margin_mm",
                        "wheel_gap_mm", "min_wheel_load_n", "member_gap_mm")


@dataclass(frozen=True)
class Envelope:
    """States every candidate is swept through.

    Attributes
    ----------
    lean_deg : ndarray of shape (n_lean,)
    travel_mm : ndarray of shape (n_travel,)
    steer : tuple of (lean_deg, max_steer_deg) rows, or None (the mechanism's own)
    """

    lean_limit_deg: float
    lean_step_deg: float
    lean_deg: np.ndarray
    travel_mm: np.ndarray
    steer: tuple[tuple[float, float], ...] | None = None
    both_sides: bool = False

    @property
    def n_states(self) -> int:
        return len(self.lean_deg) * len(self.travel_mm)


@dataclass(frozen=True)
class Limits:
    """Margins and limits of the ``[constraints]`` table, defaults filled in (None = off).

    ``given`` names the keys the config set itself (the rest are defaults, see
    :data:`tiltopt.problems.registry.CONSTRAINTS`).
    """

    max_width_mm: float | None = None
    max_scrub_mm: float | None = None
    max_heave_mm: float | None = None
    max_camber_error_deg: float | None = None
    clearance_margin_mm: float | None = None
    carrier_margin_mm: float | None = None
    wheel_gap_mm: float | None = None
    member_gap_mm: float | None = None
    wheel_shell_margin_mm: float | None = None
    ground_clearance_mm: float | None = None
    pivot_margin_mm: float | None = None
    min_wheel_load_n: float | None = None
    stress: bool = False
    max_spring_force_n: float | None = None
    max_spring_stroke_mm: float | None = None
    spring_bottoming: bool = False
    max_lean_steer_deg: float | None = None
    max_bump_steer_deg: float | None = None
    max_ackermann_error_deg: float | None = None
    min_trail_mm: float | None = None
    max_trail_mm: float | None = None
    given: tuple[str, ...] = ()

    def requirements(self, constraints) -> list[dict]:
        """Each constraint in force with its limit and where it comes from (``tiltopt check``)."""
        out = []
        for name in constraints:
            c = CONSTRAINTS[name]
            limit = getattr(self, c.key) if c.key else None
            src = ("set in the config" if c.key in self.given else c.source) or "on"
            out.append({"name": name, "key": c.key, "limit": limit, "unit": c.unit, "source": src,
                        "description": c.description})
        return out


@dataclass
class ProblemSpec:
    """A validated problem (see module docs).

    Attributes
    ----------
    template : Template
        With bounds, active subset, fixed values and steer envelope applied.
    envelope : Envelope
    objectives : tuple of str
        Names from :data:`tiltopt.problems.registry.OBJECTIVES`.
    constraints : tuple of str
        Names from :data:`tiltopt.problems.registry.CONSTRAINTS`, in G column order.
    limits : Limits
    shell_path, loads_path : Path or None
    shell : tiltopt.kinematics.shell.Shell or None
    loads : tiltopt.kinematics.loads.LoadsSpec or None
    source : str
    """

    template: Template
    envelope: Envelope
    objectives: tuple[str, ...]
    constraints: tuple[str, ...]
    limits: Limits
    shell_path: Path | None = None
    shell: Any = None
    loads_path: Path | None = None
    loads: Any = None
    source: str = "<memory>"
    raw: dict = field(default_factory=dict, repr=False)

    @property
    def needs_clearance(self) -> bool:
        """The clearance part runs for every problem: wheel solids, members, the two wheels, widths."""
        return True

    @property
    def needs_steering(self) -> bool:
        """The steering part runs whenever the template has a steering linkage."""
        return self.template.mechanism.steering is not None

    @property
    def needs_sizing(self) -> bool:
        return self.loads is not None and ("linkage_mass" in self.objectives or "stress" in self.constraints
                                           or "wheel_loads" in self.constraints
                                           or "spring_force" in self.constraints
                                           or "spring_bottoming" in self.constraints)

    def size(self) -> dict:
        """Problem size for ``tiltopt check``: variables, objectives, constraints, states per candidate."""
        return {"template": self.template.name, "n_var": self.template.n_var, "n_obj": len(self.objectives),
                "n_constr": len(self.constraints), "n_lean": len(self.envelope.lean_deg),
                "n_travel": len(self.envelope.travel_mm), "states_per_candidate": self.envelope.n_states,
                "clearance": self.needs_clearance, "sizing": self.needs_sizing, "steering": self.needs_steering}


# ------------------------------------------------------------------ helpers
_keys = check_keys


def _num(v: Any, src: str, key: str, *, lo: float | None = None, lo_open: bool = False,
         hi: float | None = None, hi_open: bool = False) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise InputError(f"expected a finite number. Got {v!r} instead.", src, key)
    v = float(v)
    if lo is not None and (v < lo or (lo_open and v == lo)):
        raise InputError(f"must be {'greater than' if lo_open else 'at least'} {lo:g}. Got {v:g} instead.", src, key)
    if hi is not None and (v > hi or (hi_open and v == hi)):
        raise InputError(f"must be {'less than' if hi_open else 'at most'} {hi:g}. Got {v:g} instead.", src, key)
    return v


def _path(v: Any, src: str, key: str, base_dir: Path) -> Path:
    if not isinstance(v, str) or not v:
        raise InputError(f"expected a file path (a string, relative to the config). Got {v!r} instead.", src, key)
    p = Path(v)
    p = inputs.resolve(p if p.is_absolute() else base_dir / p, key)   # a run folder's copy, when resuming
    if not p.is_file():
        raise InputError(f"file not found: {p}. Give a path relative to the config's folder.", src, key)
    return p


def lean_grid(limit_deg: float, step_deg: float) -> np.ndarray:
    """Leans 0, step, 2 step, ... up to the limit, the limit always included (degrees)."""
    n = int(math.floor(limit_deg / step_deg + 1e-9))
    vals = list(step_deg * np.arange(n + 1))
    if limit_deg - vals[-1] > 1e-9:
        vals.append(limit_deg)
    return np.array(vals, dtype=float)


def envelope_leans(limit_deg: float, step_deg: float | None = None, both_sides: bool = False) -> np.ndarray:
    """The envelope's leans as the problem sweeps them (degrees, ascending): :func:`lean_grid` of the limit
    and step (no step: 0 and the limit), mirrored to -limit when ``both_sides``. The one source of the
    envelope's leans for the optimiser, the explorer and the sheet."""
    leans = lean_grid(float(limit_deg), float(step_deg) if step_deg else float(limit_deg))
    return np.concatenate([-leans[:0:-1], leans]) if both_sides else leans


# ------------------------------------------------------------------ parts
def _parse_template(t: Any, src: str, base_dir: Path) -> Template:
    _keys(t, {"name", "mechanism", "variables", "bounds", "fixed", "allow_crossing"}, src, "template")
    cross = t.get("allow_crossing", False)
    if not isinstance(cross, bool):
        raise InputError(f"expected true or false. Got {cross!r} instead.", src, "template.allow_crossing")
    tpl = _parse_template_body(t, src, base_dir)
    if cross:
        tpl = Template(tpl.name, tpl.mechanism, tpl.variables, tpl.description, tpl.source, allow_crossing=True)
    return tpl


def _parse_template_body(t: dict, src: str, base_dir: Path) -> Template:
    bounds = t.get("bounds")
    fixed = t.get("fixed")
    for k, v in (("bounds", bounds), ("fixed", fixed)):
        if v is not None and not isinstance(v, dict):
            raise InputError(f"expected a table of variable name = value. Got {v!r} instead.", src, f"template.{k}")
    variables = t.get("variables")
    if "mechanism" in t:
        mpath = _path(t["mechanism"], src, "template.mechanism", base_dir)
        mech = load_mechanism(mpath)
        if not isinstance(variables, list) or not variables or not all(isinstance(v, dict) for v in variables):
            raise InputError("a template from a mechanism file needs [[template.variables]] tables (name, points, "
                             "axis, lower, upper).", src, "template.variables")
        name = t.get("name", mech.name)
        if not isinstance(name, str):
            raise InputError(f"expected a string. Got {name!r} instead.", src, "template.name")
        tpl = template_from_mechanism(mech, variables, name=name, src=src)
        return tpl.with_bounds(bounds, src).subset(None, fixed, src) if fixed else tpl.with_bounds(bounds, src)
    if "name" not in t:
        raise InputError(f"expected a built-in template name ({', '.join(TEMPLATES)}) or a mechanism file "
                         f"(template.mechanism).", src, "template.name")
    name = t["name"]
    if not isinstance(name, str) or name not in TEMPLATES:
        raise InputError(f"unknown template {name!r}. Built-in templates: {', '.join(TEMPLATES)}; or give "
                         f"template.mechanism with [[template.variables]].", src, "template.name")
    if variables is not None and (not isinstance(variables, list) or not all(isinstance(v, str) for v in variables)):
        raise InputError("with a built-in template, variables is a list of the active variable names.", src,
                         "template.variables")
    return get_template(name, bounds=bounds, variables=variables, fixed=fixed, src=src)


def _parse_envelope(e: Any, src: str, template: Template, default_limit: float) -> Envelope:
    e = {} if e is None else e
    _keys(e, {"lean_limit_deg", "lean_step_deg", "travel_mm", "steer", "both_sides"}, src, "envelope")
    both = e.get("both_sides", False)
    if not isinstance(both, bool):
        raise InputError(f"expected true or false. Got {both!r} instead.", src, "envelope.both_sides")
    limit = _num(e.get("lean_limit_deg", default_limit), src, "envelope.lean_limit_deg", lo=0.0, lo_open=True,
                 hi=MAX_LEAN_LIMIT_DEG)
    step = _num(e.get("lean_step_deg", DEFAULT_LEAN_STEP_DEG), src, "envelope.lean_step_deg", lo=0.0, lo_open=True)
    if step > limit:
        raise InputError(f"lean_step_deg ({step:g}) must not exceed lean_limit_deg ({limit:g}).", src,
                         "envelope.lean_step_deg")
    n_lean = check_count(limit / step + 2, MAX_RANGE_VALUES, f"leans (0 to {limit:g} deg by {step:g})",
                         "Use a larger lean_step_deg.", src, "envelope.lean_step_deg")
    sprung = bool(template.mechanism.springs)
    if "travel_mm" in e:
        tr = e["travel_mm"]
        if not isinstance(tr, list) or not tr:
            raise InputError(f"expected a list of travels in mm, e.g. [-30.0, 0.0, 30.0]. Got {tr!r}.", src,
                             "envelope.travel_mm")
        check_count(len(tr), MAX_RANGE_VALUES, "travels", "Give fewer travel_mm values.", src, "envelope.travel_mm")
        travel = np.array([_num(v, src, f"envelope.travel_mm[{i}]", lo=-MAX_TRAVEL_MM, hi=MAX_TRAVEL_MM)
                           for i, v in enumerate(tr)])
        if len(set(travel.tolist())) != len(travel):
            raise InputError("travel values must be distinct.", src, "envelope.travel_mm")
        if not sprung and np.any(travel != 0.0):
            raise InputError(f"template '{template.name}' has no springs, so it cannot move in travel. Use "
                             f"travel_mm = [0.0].", src, "envelope.travel_mm")
    else:
        travel = np.array(DEFAULT_SPRUNG_TRAVEL_MM if sprung else (0.0,))
    steer = None
    if "steer" in e:
        s = e["steer"]
        _keys(s, {"lean_deg", "max_steer_deg"}, src, "envelope.steer", ("lean_deg", "max_steer_deg"))
        ld, ms = s["lean_deg"], s["max_steer_deg"]
        if not (isinstance(ld, list) and isinstance(ms, list) and ld and len(ld) == len(ms)):
            raise InputError("lean_deg and max_steer_deg must be lists of the same, non-zero length.", src,
                             "envelope.steer")
        ld = [_num(v, src, f"envelope.steer.lean_deg[{i}]", lo=0.0, hi=MAX_ABS_LEAN_DEG, hi_open=True)
              for i, v in enumerate(ld)]
        ms = [_num(v, src, f"envelope.steer.max_steer_deg[{i}]", lo=0.0, hi=80.0) for i, v in enumerate(ms)]
        if any(b <= a for a, b in zip(ld, ld[1:])):
            raise InputError(f"lean_deg rows must be strictly ascending. Got {ld}.", src, "envelope.steer.lean_deg")
        steer = tuple(zip(ld, ms))
    check_count(n_lean * (2 if both else 1) * len(travel), MAX_STATES, "lean x travel states per candidate",
                "Use a larger lean_step_deg or fewer travel_mm values.", src, "envelope")
    return Envelope(limit, step, envelope_leans(limit, step, both), travel, steer, both)


def _parse_constraints(c: Any, src: str, has_shell: bool, has_loads: bool, has_steering: bool = False) -> Limits:
    c = {} if c is None else c
    _keys(c, set(_CONSTRAINT_KEYS), src, "constraints")
    vals: dict[str, Any] = {}
    by_key = {spec.key: spec for spec in CONSTRAINTS.values() if spec.key}
    for k in _CONSTRAINT_KEYS:
        if k in SWITCH_KEYS or k not in c:
            continue
        lo = None if k in _CONSTRAINT_NO_LOWER else (-MAX_COORD_MM if k == "min_trail_mm" else 0.0)
        vals[k] = _num(c[k], src, f"constraints.{k}", lo=lo, lo_open=k.startswith("max_"), hi=_CONSTRAINT_MAX.get(k))
    needs_steering = [k for k in vals if by_key[k].needs == STEERING]
    if needs_steering and not has_steering:
        raise InputError(f"{needs_steering[0]} needs a template with a steering linkage ([steering] in its mechanism "
                         f"file). Add one, or remove the key.", src, f"constraints.{needs_steering[0]}")
    if vals.get("min_trail_mm") is not None and vals.get("max_trail_mm") is not None \
            and vals["min_trail_mm"] >= vals["max_trail_mm"]:
        raise InputError(f"the trail band needs min_trail_mm < max_trail_mm. Got {vals['min_trail_mm']:g} and "
                         f"{vals['max_trail_mm']:g}.", src, "constraints.min_trail_mm")
    needs_shell = [k for k in vals if by_key[k].shell_only]
    if needs_shell and not has_shell:
        raise InputError(f"{needs_shell[0]} needs a body shell. Add shell = \"shell.toml\" to the config, or remove "
                         f"the key.", src, f"constraints.{needs_shell[0]}")
    needs_loads = [k for k in vals if by_key[k].needs == SIZING]
    if needs_loads and not has_loads:
        raise InputError(f"{needs_loads[0]} needs loads. Add loads = \"loads.toml\" or a [vehicle] table, or remove "
                         f"the key.", src, f"constraints.{needs_loads[0]}")
    given = tuple(vals)
    for k, spec in by_key.items():          # the defaults every run gets
        if k in vals or k in SWITCH_KEYS or spec.default is None or (spec.shell_only and not has_shell) or (
                spec.needs == SIZING and not has_loads) or (spec.needs == STEERING and not has_steering):
            continue
        vals[k] = spec.default
    switches = {}
    for k in SWITCH_KEYS:
        v = c.get(k, has_loads and k == "stress")
        if not isinstance(v, bool):
            raise InputError(f"expected true or false. Got {v!r} instead.", src, f"constraints.{k}")
        if v and not has_loads:
            raise InputError(f"the {k} constraint needs loads. Add loads = \"loads.toml\" or a [vehicle] table, or "
                             f"set {k} = false.", src, f"constraints.{k}")
        switches[k] = v
    return Limits(**switches, given=given + tuple(k for k in SWITCH_KEYS if k in c), **vals)


def _check_spring_limits(limits: Limits, template: Template, src: str) -> None:
    """Spring constraints need springs (and, for bottoming, a spring that says where it is solid)."""
    keys = [k for k in ("max_spring_force_n", "max_spring_stroke_mm") if getattr(limits, k) is not None]
    keys += ["spring_bottoming"] if limits.spring_bottoming else []
    springs = template.mechanism.springs
    if keys and not springs:
        raise InputError(f"template '{template.name}' has no springs. Remove {keys[0]}.", src, f"constraints.{keys[0]}")
    if limits.spring_bottoming and not any(s.max_deflection_mm is not None or (s.kind == "elastomer" and s.curve)
                                           for s in springs):
        raise InputError("no spring of the template says where it is solid: give max_deflection_mm (or an "
                         "elastomer curve) in the mechanism file, or set spring_bottoming = false.", src,
                         "constraints.spring_bottoming")


def _constraint_names(limits: Limits, has_shell: bool) -> tuple[str, ...]:
    out = ["converged"]
    for name, spec in CONSTRAINTS.items():
        if name == "converged":
            continue
        if spec.key in SWITCH_KEYS:
            if getattr(limits, spec.key):
                out.append(name)
        elif spec.key is not None:
            if getattr(limits, spec.key) is not None:
                out.append(name)
        elif spec.shell_only and has_shell:
            out.append(name)
    return tuple(out)


def _load_shell(path: Path, src: str):
    from tiltopt.kinematics.shell import load_shell

    return load_shell(path)


def _load_loads(data: dict, src: str, base_dir: Path):
    embedded = [k for k in LOADS_TABLES + ("load_cases",) if k in data]
    if "loads" in data and embedded:
        raise InputError(f"give either loads = \"file\" or embedded loads tables, not both (found [{embedded[0]}]).",
                         src, embedded[0])
    if "loads" not in data and not embedded:
        return None, None
    from tiltopt.kinematics.loads import load_loads, parse_loads

    if "loads" in data:
        p = _path(data["loads"], src, "loads", base_dir)
        return load_loads(p), p
    sub = {k: data[k] for k in LOADS_TABLES if k in data}
    if "load_cases" in data:
        sub["cases"] = data["load_cases"]
    if "vehicle" not in sub:
        raise InputError("embedded loads need a [vehicle] table.", src, "vehicle")
    return parse_loads(sub, src, base_dir), None


def parse_problem(data: dict, src: str = "<memory>", base_dir: str | Path | None = None) -> ProblemSpec:
    """Validate the problem tables of a run config (see module docs).

    Parameters
    ----------
    data : dict
        The config as read from TOML (a ``[run]`` table, if any, is skipped).
    src : str
        The config file, for messages.
    base_dir : path, optional
        Folder that relative paths (shell, loads, template mechanism) start
        from; default: the current folder.

    Raises
    ------
    InputError
        Naming the file and the key, for unknown keys, bad values, bounds with
        lower >= upper, unknown objectives, or parts a key needs that are missing.
    """
    base = Path(base_dir) if base_dir is not None else Path(".")
    if not isinstance(data, dict):
        raise InputError("expected the tables of a run config.", src)
    _keys(data, set(PROBLEM_KEYS) | set(SKIPPED_KEYS), src, "", ("template", "objectives"))
    template = _parse_template(data["template"], src, base)

    shell_path = _path(data["shell"], src, "shell", base) if "shell" in data else None
    shell = _load_shell(shell_path, src) if shell_path is not None else None
    loads, loads_path = _load_loads(data, src, base)

    default_limit = float(loads.vehicle.lean_limit_deg) if loads is not None else DEFAULT_LEAN_LIMIT_DEG
    envelope = _parse_envelope(data.get("envelope"), src, template, default_limit)
    if envelope.steer is not None:
        mech = template.mechanism
        if not hasattr(mech, "steer_envelope"):
            raise InputError("a steer envelope needs the clearance keys of the mechanism format, which this "
                             "installation does not have.", src, "envelope.steer")
        template = Template(template.name, replace(mech, steer_envelope=envelope.steer), template.variables,
                            template.description, template.source, template.allow_crossing)

    obj = data["objectives"]
    if not isinstance(obj, list) or not obj or not all(isinstance(o, str) for o in obj):
        raise InputError(f"expected a list of objective names ({', '.join(OBJECTIVES)}). Got {obj!r}.", src,
                         "objectives")
    for i, o in enumerate(obj):
        if o not in OBJECTIVES:
            raise InputError(f"unknown objective {o!r}. Objectives: {', '.join(OBJECTIVES)}.", src, f"objectives[{i}]")
        need = OBJECTIVES[o].needs
        if need == CLEARANCE and shell is None:
            raise InputError(f"objective {o!r} needs a body shell. Add shell = \"shell.toml\" to the config.", src,
                             f"objectives[{i}]")
        if need == SIZING and loads is None:
            raise InputError(f"objective {o!r} needs loads. Add loads = \"loads.toml\" or a [vehicle] table.", src,
                             f"objectives[{i}]")
        if need == STEERING and template.mechanism.steering is None:
            raise InputError(f"objective {o!r} needs a template with a steering linkage ([steering] in its mechanism "
                             f"file).", src, f"objectives[{i}]")
        if o == "ackermann_error" and template.mechanism.steering.wheelbase_mm is None:
            raise InputError("objective 'ackermann_error' needs the steering's wheelbase_mm in the mechanism file.",
                             src, f"objectives[{i}]")
    if len(set(obj)) != len(obj):
        raise InputError(f"each objective may appear once. Got {obj}.", src, "objectives")

    steering = template.mechanism.steering
    limits = _parse_constraints(data.get("constraints"), src, shell is not None, loads is not None,
                                steering is not None)
    if limits.max_ackermann_error_deg is not None and steering.wheelbase_mm is None:
        raise InputError("max_ackermann_error_deg needs the steering's wheelbase_mm in the mechanism file.", src,
                         "constraints.max_ackermann_error_deg")
    if (loads is not None and "spring_bottoming" not in limits.given
            and any(s.max_deflection_mm is not None or (s.kind == "elastomer" and s.curve)
                    for s in template.mechanism.springs)):
        # a spring that says where it is solid must not be solid within the envelope: a state it
        # cannot reach (a default requirement, like the others)
        limits = replace(limits, spring_bottoming=True)
    _check_spring_limits(limits, template, src)
    return ProblemSpec(template=template, envelope=envelope, objectives=tuple(obj),
                       constraints=_constraint_names(limits, shell is not None), limits=limits,
                       shell_path=shell_path, shell=shell, loads_path=loads_path, loads=loads, source=src,
                       raw={k: v for k, v in data.items() if k not in SKIPPED_KEYS})
