"""What the explorer and the sheet show about designs: one batched sweep, the front-view clearance
marks (:mod:`tiltopt.reports.marks`), the 3-D clearance over the steer range and the optional sizing.

Every optional part degrades to a note that the pages show; nothing here is
an estimate of our own standing in for those parts' figures.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from tiltopt.kinematics.model import Geometry, Model
from tiltopt.kinematics.sweep import SweepResult, sweep
from tiltopt.problems.spec import envelope_leans

from .drawing import drawing_spec, shell_outline
from .marks import FrontMarks, front_marks


@dataclass
class Analysis:
    """Sweep and derived data of a batch of candidates of one topology.

    Attributes
    ----------
    sweep : SweepResult
        Arrays (C, T, L, ...).
    pose : ndarray of shape (C, T, L, 3)
        Chassis pose (y_O mm, z_O mm, lean rad).
    marks : FrontMarks
        Front-view clearance marks of every state (wheels straight ahead: :mod:`tiltopt.reports.marks`).
    clearance : dict of ndarray of shape (C,) or None
        ``ClearanceResult.summary()`` when the clearance part and a shell are present.
    sizing : object or None
        ``SizingResult`` when the sizing part and loads are present.
    notes : list of str
        Why a part is missing, shown on the pages.
    """

    model: Model
    geom: Geometry
    sweep: SweepResult
    spec: dict
    pose: np.ndarray
    marks: FrontMarks
    shell_poly: np.ndarray | None = None
    clearance: dict | None = None
    clearance_result: object | None = None
    sizing: object | None = None
    notes: list[str] = field(default_factory=list)


def lean_grid(lean_limit_deg: float, lean_step_deg: float | None = None, finest_deg: float = 2.5,
              both_sides: bool = False) -> np.ndarray:
    """Leans for drawings and curves: the envelope's leans (:func:`tiltopt.problems.spec.envelope_leans`),
    each interval split to at most ``finest_deg``."""
    nodes = envelope_leans(lean_limit_deg, lean_step_deg, both_sides)
    out = [float(nodes[0])]
    for a, b in zip(nodes[:-1], nodes[1:]):
        n = max(1, int(math.ceil((b - a) / finest_deg - 1e-9)))
        out += list(a + (b - a) * np.arange(1, n + 1) / n)
    return np.array(out, float)


def envelope_mask(lean_deg, lean_limit_deg: float, lean_step_deg: float | None = None,
                  both_sides: bool = False) -> np.ndarray:
    """True for the leans of ``lean_deg`` that are envelope states."""
    nodes = envelope_leans(lean_limit_deg, lean_step_deg, both_sides)
    return np.any(np.abs(np.asarray(lean_deg)[:, None] - nodes[None, :]) < 1e-9, axis=1)


def analyse(model: Model, geom: Geometry, lean_deg, travel_mm, *, shell=None, loads=None,
            station_x_mm: float | None = None, want_sizing: bool = True, want_clearance: bool = True) -> Analysis:
    """Sweep every candidate of ``geom`` over lean x travel in one batch, with the optional parts."""
    res = sweep(model, geom, lean_deg, travel_mm)
    C, T, L = res.status.shape
    pose = np.concatenate([res.q[..., :2], np.broadcast_to(np.radians(res.lean_deg), (C, T, L))[..., None]], -1)
    pose = np.where(res.converged[..., None], pose, np.nan)
    spec = drawing_spec(model, geom, 0)
    notes: list[str] = []
    shell_poly = None
    x_mm = model.mech.station_x_mm if station_x_mm is None else station_x_mm
    if shell is not None:
        shell_poly = shell_outline(shell, x_mm)
        if shell_poly is None:
            notes.append(f"The body shell has no section at the linkage station x = {x_mm:g} mm.")
    else:
        notes.append("No body shell given: the drawing has no shell section and the shell clearances are absent.")
    marks = front_marks(model, geom, res)
    clearance = clearance_result = None
    if not want_clearance:
        notes.append("The 3-D clearances over the steer range are not computed here; the clearance figures are "
                     "those of the wheels straight ahead (front view). The build sheet gives the 3-D figures.")
    else:   # the wheel solids, members and widths are checked with or without a shell
        from tiltopt.kinematics.clearance import evaluate_clearance

        clearance_result = evaluate_clearance(model, geom, res, shell)
        clearance = {k: np.asarray(v, float) for k, v in clearance_result.summary().items()
                     if not k.endswith("_state")}
    sizing = None
    if want_sizing:
        if loads is None:
            notes.append("No loads given: member sizes, masses, utilisation and tilt-lock torque are absent.")
        else:
            from tiltopt.kinematics.sizing import size_linkage

            sizing = size_linkage(model, geom, loads)
    return Analysis(model=model, geom=geom, sweep=res, spec=spec, pose=pose, marks=marks, shell_poly=shell_poly,
                    clearance=clearance, clearance_result=clearance_result, sizing=sizing, notes=notes)


CLEARANCE_3D = "smallest clearance to the shell and other members, 3-D over the steer range"
CLEARANCE_FRONT = "smallest clearance to other members, wheels straight ahead (front view)"


def state_clearance(an: Analysis) -> tuple[np.ndarray, str]:
    """Smallest clearance of each state (C, T, L) and what it is.

    The 3-D clearance of the wheel solids to the shell and to the members that do not carry them over
    the steer range (what the run's ``min_clearance_mm`` is the smallest of) when the clearance part
    ran; otherwise the front-view marks' clearance to the other members, wheels straight ahead.
    """
    cr = an.clearance_result
    if cr is not None:
        a = np.concatenate([np.asarray(cr.wheel_shell_mm, float), np.asarray(cr.wheel_link_mm, float)], axis=-1)
        with np.errstate(all="ignore"):
            m = np.min(np.where(np.isnan(a), np.inf, a), axis=-1)
        bad = np.any(np.isnan(a), axis=-1) | ~np.isfinite(m)
        return np.where(bad, np.nan, m), CLEARANCE_3D
    a = an.marks.other_mm
    with np.errstate(all="ignore"):
        m = np.min(np.where(np.isnan(a), np.inf, a), axis=-1)
    return np.where(np.any(np.isnan(a), axis=-1) | ~np.isfinite(m), np.nan, m), CLEARANCE_FRONT
