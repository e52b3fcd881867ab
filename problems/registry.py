"""The one registry of names a user can type: templates, objectives, constraints, algorithms.

The CLI, the config checker and the docs list these same dicts, so they
never disagree. Each entry says its unit and which part of the evaluation it
needs: ``"sweep"`` (kinematics only), ``"clearance"`` (a body shell and
:mod:`tiltopt.kinematics.clearance`) or ``"sizing"`` (loads and
:mod:`tiltopt.kinematics.sizing`).
"""
from __future__ import annotations

from dataclasses import dataclass

from .templates import TEMPLATES as _TEMPLATE_ENTRIES

SWEEP, CLEARANCE, SIZING = "sweep", "clearance", "sizing"


@dataclass(frozen=True)
class ObjectiveSpec:
    """An objective a run config may pick (all are minimised).

    Attributes
    ----------
    name : str
    unit : str
    description : str
    needs : {'sweep', 'clearance', 'sizing'}
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
        The constraint's name in results (``G`` columns, reasons).
    unit : str
        Unit of G.
    description : str
    needs : {'sweep', 'clearance', 'sizing'}
    key : str or None
        The ``[constraints]`` key of a run config that switches it on and sets
        its margin or limit (None: always on, or on whenever its part is).
    """

    name: str
    unit: str
    description: str
    needs: str
    key: str | None


OBJECTIVES: dict[str, ObjectiveSpec] = {o.name: o for o in [
    ObjectiveSpec("overall_width", "mm",
                  "largest lateral extent of the vehicle over the envelope: the tyres' front-view outlines "
                  "(and the leaning body shell, when a shell is given)", SWEEP, "overall_width_mm"),
    ObjectiveSpec("max_scrub", "mm", "largest |tyre scrub| over the envelope (docs/domain.md scrub)", SWEEP,
                  "max_scrub_mm"),
    ObjectiveSpec("max_heave", "mm", "largest |heave| of the chassis datum over the envelope", SWEEP,
                  "max_heave_mm"),
    ObjectiveSpec("min_clearance", "mm",
                  "smallest clearance wheel-shell and wheel-link over the envelope, negated (so larger is better)",
                  CLEARANCE, "min_clearance_mm", -1.0),
    ObjectiveSpec("linkage_mass", "kg", "mass of the sized linkage members plus pivot allowances", SIZING,
                  "linkage_mass_kg"),
    ObjectiveSpec("slot_length", "mm", "total length of the slots links cut in the shell over the envelope",
                  CLEARANCE, "total_slot_length_mm"),
    ObjectiveSpec("max_camber_error", "deg", "largest |camber - lean| of either wheel over the envelope", SWEEP,
                  "max_camber_error_deg"),
]}

CONSTRAINTS: dict[str, ConstraintSpec] = {c.name: c for c in [
    ConstraintSpec("converged", "mm",
                   "the design assembles and every envelope state converges (G = 0); otherwise G = size x "
                   "(1 + share of failed states), size = the template's extent", SWEEP, None),
    ConstraintSpec("max_width", "mm", "overall width at most the limit (G = width - limit)", SWEEP, "max_width_mm"),
    ConstraintSpec("max_scrub", "mm", "max |scrub| at most the limit", SWEEP, "max_scrub_mm"),
    ConstraintSpec("max_heave", "mm", "max |heave| at most the limit", SWEEP, "max_heave_mm"),
    ConstraintSpec("max_camber_error", "deg", "max |camber error| at most the limit", SWEEP, "max_camber_error_deg"),
    ConstraintSpec("clearance", "mm", "min clearance (wheel-shell, wheel-link) at least the margin", CLEARANCE,
                   "clearance_margin_mm"),
    ConstraintSpec("wheel_shell", "mm", "wheels outside the shell by at least the margin (min wheel-shell "
                   "clearance)", CLEARANCE, "wheel_shell_margin_mm"),
    ConstraintSpec("ground_clearance", "mm", "lowest point of the shell and of every link at least this high",
                   CLEARANCE, "ground_clearance_mm"),
    ConstraintSpec("shell_roles", "mm", "tubes marked inside/outside the shell stay there (violation depth)",
                   CLEARANCE, None),
    ConstraintSpec("pivots_inside_shell", "mm",
                   "every chassis joint point inside the shell section by at least the margin (design position)",
                   CLEARANCE, "pivot_margin_mm"),
    ConstraintSpec("stress", "1", "every member within its allowable stress and buckling load "
                   "(G = max utilisation - 1)", SIZING, "stress"),
    ConstraintSpec("spring_force", "N", "largest spring force over the load cases at most the limit (the spring "
                   "unit's rating; G = force - limit)", SIZING, "max_spring_force_n"),
    ConstraintSpec("spring_stroke", "mm", "spring stroke over the envelope (longest - shortest length) at most "
                   "the limit (G = stroke - limit)", SWEEP, "max_spring_stroke_mm"),
    ConstraintSpec("spring_bottoming", "mm", "no spring solid over the envelope: its compression at full bump, "
                   "carrying the static load at the design position, within its max deflection (G = -margin)",
                   SIZING, "spring_bottoming"),
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
