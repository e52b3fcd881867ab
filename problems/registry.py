"""The one registry of names a user can type: templates, objectives, constraints, algorithms.

The CLI, the config checker and the docs list these same dicts, so they
never disagree. Each entry says its unit and which part of the evaluation it
needs: ``"sweep"`` (kinematics only), ``"clearance"`` (a body shell and
:mod:`tiltopt.kinematics.clearance`), ``"sizing"`` (loads and
:mod:`tiltopt.kinematics.sizing`) or ``"steering"`` (a template with a steering linkage,
:mod:`tiltopt.kinematics.steering`).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .templates import TEMPLATES as _TEMPLATE_ENTRIES

SWEEP, CLEARANCE, SIZING, STEERING = "sweep", "clearance", "sizing", "steering"


@dataclass(frozen=True)
class ObjectiveSpec:
    """An objective a run config may pick (all are minimised).

    Attributes
    ----------
    name : str
    unit : str
    description : str
    needs : {'sweep', 'clearance', 'sizing', 'steering'}
    metric : str
        The :attr:`Evaluation.metrics` column it comes from.
    sign : float
        ``F = sign * metric`` (``-1`` for ``min_clearance``, which is maximised).
    """

    name: str
    unit: str
    description: str
    needs: str
    metric: str
    sign: float = 1.0


@dataclass(frozen=True)
class ConstraintSpec:
    """A constraint (feasible where its G <= 0).

    Attributes
    ----------
    name : str
        The constraint's name in results (``con.<name>`` columns, reasons).
    unit : str
        Unit of the constraint's value (its G before scaling).
    description : str
    needs : {'sweep', 'clearance', 'sizing', 'steering'}
        ``steering`` entries need a template with a steering linkage; ``clearance`` entries need the clearance
        part (always run: wheels, members, widths) and, where
        ``shell_only``, a body shell.
    key : str or None
        The ``[constraints]`` key of a run config that sets its margin or limit (None: always on,
        or on whenever its part is).
    value : callable(metrics, limit) -> ndarray, or None
        The constraint's value in ``unit`` (feasible where <= 0) from the evaluation's metrics and
        the limit; None for the two the problem computes itself (``converged``, ``stress``).
    message : str
        The reason of a violation, formatted with ``v`` (the value in ``unit``).
    scale : float
        The violation is divided by this (in ``unit``) before violations are summed, so that
        millimetres, degrees, newtons and ratios weigh fairly (our choices).
    default : float or None
        The limit or margin every run gets when its config does not set the key; None: off unless set.
    source : str
        Where the default comes from.
    shell_only : bool
        The constraint needs a body shell.
    """

    name: str
    unit: str
    description: str
    needs: str
    key: str | None
    value: Callable | None = None
    message: str = ""
    scale: float = 1.0
    default: float | None = None
    source: str = ""
    shell_only: bool = False


def _m(name):
    return lambda m, lim: m[name] - lim


def _margin(name):
    return lambda m, lim: lim - m[name]


LEAN_STEER_SOURCE = ("our choice: a vehicle that steers itself as it leans cannot be ridden; the balanced steer at "
                     "30 deg of lean and 10 m/s on a 1.65 m wheelbase is about 5 deg (L g tan(lean) / v^2), so "
                     "0.5 deg of lean steer is a tenth of it (common practice, no source)")

CAMBER_SOURCE = ("our choice: the wheels must lean with the body; a camber error of 1 deg changes the "
                 "balanced lean by about as much on tyres whose camber thrust follows their camber (common "
                 "practice, no source)")

OBJECTIVES: dict[str, ObjectiveSpec] = {o.name: o for o in [
    ObjectiveSpec("overall_width", "mm",
                  "width of the upright vehicle (lean 0, wheels straight ahead, largest over the travels): the "
                  "wheels' front-view outlines, or the body shell where wider; the figure a width limit applies "
                  "to", SWEEP, "overall_width_mm"),
    ObjectiveSpec("lean_sweep_width", "mm",
                  "lateral extent of the leaning vehicle over the whole envelope (wheels through their steer "
                  "range, the leaning shell): the room it sweeps while leaning", SWEEP, "lean_sweep_width_mm"),
    ObjectiveSpec("max_scrub", "mm", "largest |tyre scrub| over the envelope (docs/domain.md scrub)", SWEEP,
                  "max_scrub_mm"),
    ObjectiveSpec("max_heave", "mm", "largest |heave| of the chassis datum over the envelope", SWEEP,
                  "max_heave_mm"),
    ObjectiveSpec("min_clearance", "mm",
                  "smallest clearance of the wheel solids to the shell and to the members that do not carry them "
                  "over the envelope, negated in the files (so larger is better)", CLEARANCE, "min_clearance_mm",
                  -1.0),
    ObjectiveSpec("linkage_mass", "kg", "mass of the sized linkage members plus pivot allowances", SIZING,
                  "linkage_mass_kg"),
    ObjectiveSpec("slot_length", "mm", "total length of the slots links cut in the shell over the envelope",
                  CLEARANCE, "total_slot_length_mm"),
    ObjectiveSpec("max_camber_error", "deg", "largest |camber - lean| of either wheel over the envelope", SWEEP,
                  "max_camber_error_deg"),
    ObjectiveSpec("max_lean_steer", "deg", "largest |lean steer| of either wheel over the envelope: how far the "
                  "wheels steer themselves, at zero steering input, as the body leans", STEERING,
                  "max_lean_steer_deg"),
    ObjectiveSpec("max_bump_steer", "deg", "largest |bump steer| of either wheel over the travels: how far the "
                  "wheels steer themselves, at zero steering input and lean 0, in bump and droop", STEERING,
                  "max_bump_steer_deg"),
    ObjectiveSpec("ackermann_error", "deg", "largest |Ackermann error| at the steering's Ackermann inputs: the "
                  "outer wheel's steer against the ideal for the inner one's (needs the wheelbase)", STEERING,
                  "ackermann_error_deg"),
]}

CONSTRAINTS: dict[str, ConstraintSpec] = {c.name: c for c in [
    ConstraintSpec("converged", "1",
                   "the design is valid geometry, assembles and reaches every envelope state (G = 0); otherwise "
                   "G = 1e4 x (1 + share of failed states) (2e4 for invalid geometry)", SWEEP, None,
                   source="always on: a design that cannot reach a state of its envelope cannot be built to it"),
    ConstraintSpec("max_width", "mm", "width of the upright vehicle at most the limit (G = width - limit)", SWEEP,
                   "max_width_mm", _m("overall_width_mm"), "width {v:.1f} mm over the limit", 10.0),
    ConstraintSpec("max_scrub", "mm", "max |scrub| at most the limit", SWEEP, "max_scrub_mm", _m("max_scrub_mm"),
                   "max scrub {v:.2f} mm over the limit", 10.0),
    ConstraintSpec("max_heave", "mm", "max |heave| at most the limit", SWEEP, "max_heave_mm", _m("max_heave_mm"),
                   "max heave {v:.2f} mm over the limit", 10.0),
    ConstraintSpec("max_camber_error", "deg", "the wheels lean with the body: max |camber error| at most the limit",
                   SWEEP, "max_camber_error_deg", _m("max_camber_error_deg"),
                   "max camber error {v:.2f} deg over the limit", 1.0, 1.0, CAMBER_SOURCE),
    ConstraintSpec("clearance", "mm", "every wheel solid clear of the shell and of the members that do not carry "
                   "it by at least the margin (conservative: clearance minus its error bound)", CLEARANCE,
                   "clearance_margin_mm", _margin("min_clearance_lower_mm"),
                   "clearance {v:.1f} mm short of the margin (conservative figure)", 10.0, 10.0,
                   "our choice: a working gap for tyre growth, flex and fixings"),
    ConstraintSpec("carrier_clearance", "mm", "every wheel solid clear of its own upright and the arms that carry it "
                   "by at least the margin (conservative); only the stub axle enters the hub", CLEARANCE,
                   "carrier_margin_mm", _margin("min_wheel_carrier_lower_mm"),
                   "a member that carries the wheel is {v:.1f} mm short of the margin (through the wheel where "
                   "the clearance is negative)", 10.0, 3.0,
                   "our choice: a member moving rigidly with the wheel needs room only for spoke and tyre flex "
                   "(common practice, no source)"),
    ConstraintSpec("wheel_gap", "mm", "the two wheel solids apart by at least the margin over the envelope",
                   CLEARANCE, "wheel_gap_mm", _margin("min_wheel_pair_mm"),
                   "the wheels are {v:.1f} mm short of the gap between them", 10.0, 10.0,
                   "our choice: as the clearance margin"),
    ConstraintSpec("member_gap", "mm", "the tubes of two members (other than those joined at a pin, and the "
                   "chassis frame) never overlap over the envelope: at least this far apart", CLEARANCE,
                   "member_gap_mm", _margin("min_member_gap_mm"), "two member tubes are {v:.1f} mm short of the gap",
                   10.0, 5.0, "our choice: tubes cannot pass through each other, and need room for their "
                   "fixings and flex (common practice, no source)"),
    ConstraintSpec("wheel_shell", "mm", "wheels outside the shell by at least the margin (conservative min "
                   "wheel-shell clearance)", CLEARANCE, "wheel_shell_margin_mm", _margin("min_wheel_shell_lower_mm"),
                   "wheel-shell clearance {v:.1f} mm short of the margin", 10.0, shell_only=True),
    ConstraintSpec("ground_clearance", "mm", "lowest point of the shell and of every member at least this high",
                   CLEARANCE, "ground_clearance_mm", _margin("min_ground_mm"),
                   "ground clearance {v:.1f} mm short of the limit", 10.0),
    ConstraintSpec("shell_roles", "mm", "tubes marked inside/outside the shell stay there (violation depth)",
                   CLEARANCE, None, lambda m, lim: np.fmax(m["inside_violation_mm"], 0)
                   + np.fmax(m["outside_violation_mm"], 0),
                   "tubes outside their allowed side of the shell by {v:.1f} mm", 10.0, shell_only=True,
                   source="on with a shell"),
    ConstraintSpec("pivots_inside_shell", "mm",
                   "every chassis joint point inside the shell section by at least the margin (design position)",
                   CLEARANCE, "pivot_margin_mm", lambda m, lim: m["pivot_shell_distance_mm"] + lim,
                   "a chassis pivot is {v:.1f} mm short of being inside the shell by the margin", 10.0, 0.0,
                   "our choice: the pivots are fixed to the chassis inside its body", shell_only=True),
    ConstraintSpec("wheel_loads", "N", "every tyre keeps a vertical load of at least this in every load case "
                   "(a wheel that lifts would tip the vehicle)", SIZING, "min_wheel_load_n",
                   _margin("min_wheel_load_n"), "a tyre's load is {v:.1f} N short of the minimum", 100.0, 0.0,
                   "physics: a negative tyre load means the wheel lifts"),
    ConstraintSpec("stress", "1", "every member within its allowable stress and buckling load "
                   "(G = max utilisation - 1)", SIZING, "stress", None, "", 0.1,
                   source="on with loads: members sized for the load cases with the safety factor"),
    ConstraintSpec("spring_force", "N", "largest spring force over the load cases at most the limit (the spring "
                   "unit's rating; G = force - limit)", SIZING, "max_spring_force_n", _m("max_spring_force_n"),
                   "spring force {v:.0f} N over the limit", 100.0),
    ConstraintSpec("spring_stroke", "mm", "spring stroke over the envelope (longest - shortest length) at most "
                   "the limit (G = stroke - limit)", SWEEP, "max_spring_stroke_mm", _m("spring_stroke_mm"),
                   "spring stroke {v:.1f} mm over the limit", 10.0),
    ConstraintSpec("spring_bottoming", "mm", "no spring solid over the envelope: its compression at full bump, "
                   "carrying the static load at the design position, within its max deflection (G = -margin)",
                   SIZING, "spring_bottoming", lambda m, lim: -m["spring_bottoming_margin_mm"],
                   "a spring is solid {v:.1f} mm before full bump", 10.0,
                   source="on with loads when a spring says where it is solid: a spring solid within the "
                          "travel cannot reach the envelope"),
    ConstraintSpec("max_lean_steer", "deg", "the wheels do not steer themselves as the body leans: max |lean steer| "
                   "at most the limit", STEERING, "max_lean_steer_deg", _m("max_lean_steer_deg"),
                   "max lean steer {v:.2f} deg over the limit", 1.0, 0.5, LEAN_STEER_SOURCE),
    ConstraintSpec("max_bump_steer", "deg", "max |bump steer| over the travels at most the limit", STEERING,
                   "max_bump_steer_deg", _m("max_bump_steer_deg"), "max bump steer {v:.2f} deg over the limit", 1.0),
    ConstraintSpec("ackermann_error", "deg", "max |Ackermann error| at the Ackermann inputs at most the limit "
                   "(needs the steering's wheelbase_mm)", STEERING, "max_ackermann_error_deg",
                   _m("ackermann_error_deg"), "Ackermann error {v:.2f} deg over the limit", 1.0),
    ConstraintSpec("trail_min", "mm", "mechanical trail at least the limit over the envelope (the lower end of "
                   "the trail band; G = limit - smallest trail)", STEERING, "min_trail_mm", _margin("min_trail_mm"),
                   "trail {v:.1f} mm short of the band", 10.0),
    ConstraintSpec("trail_max", "mm", "mechanical trail at most the limit over the envelope (the upper end of "
                   "the trail band; G = largest trail - limit)", STEERING, "max_trail_mm", _m("max_trail_mm"),
                   "trail {v:.1f} mm over the band", 10.0),
]}

#: constraint keys that are switches (true / false) rather than limits
SWITCH_KEYS = ("stress", "spring_bottoming")

ALGORITHMS: dict[str, str] = {
    "nsga2": "NSGA-II (default): fast non-dominated sorting with crowding distance; 2 or 3 objectives",
    "nsga3": "NSGA-III: reference directions; for runs with many (4 or more) objectives",
}

TEMPLATES: dict[str, str] = {name: e.description for name, e in _TEMPLATE_ENTRIES.items()}


def names() -> dict[str, list[str]]:
    """Every typed name by kind: ``{"templates": [...], "objectives": [...], ...}``."""
    return {"templates": list(TEMPLATES), "objectives": list(OBJECTIVES), "constraints": list(CONSTRAINTS),
            "algorithms": list(ALGORITHMS)}
