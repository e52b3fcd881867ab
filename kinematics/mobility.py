"""Mobility of a mechanism: Gruebler-Kutzbach count and Jacobian rank.

All ranks are taken at the design position with an SVD and a relative
tolerance, so "redundant" and "free" mean: to first order at that pose.
The numeric lean and travel attempts in :func:`analyse` show what the
mechanism really does away from it.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .model import TRANSLATION, Model
from .solver import Batch, residual, row_names
from .sweep import sweep

RANK_RTOL = 1e-9


@dataclass
class Mobility:
    n_bodies: int
    n_pins: int
    n_links: int
    n_springs: int
    n_sliders: int
    gruebler_held: int        # DOF relative to the chassis, springs held at length
    gruebler_free: int        # DOF relative to the chassis, springs removed
    rank_held: int            # DOF relative to the chassis from the Jacobian rank
    rank_free: int
    redundant: list[list[str]] = field(default_factory=list)   # groups of constraints redundant together
    unwanted: list[list[str]] = field(default_factory=list)    # groups of bodies that move without leaning
    leans_first_order: bool = False
    max_lean_deg: float | None = None
    lean_stop_reason: str = ""
    travel_dof: int = 0
    travel_reached_mm: tuple[float, float] | None = None

    @property
    def can_lean(self) -> bool:
        return bool(self.leans_first_order and self.max_lean_deg and self.max_lean_deg > 0)

    @property
    def has_travel(self) -> bool:
        return self.travel_dof > 0 and self.travel_reached_mm is not None


def _rank(A: np.ndarray) -> tuple[int, np.ndarray, np.ndarray]:
    if A.size == 0:
        return 0, np.zeros((A.shape[0], 0)), np.eye(A.shape[1])
    u, s, vt = np.linalg.svd(A)
    tol = RANK_RTOL * max(s.max() if s.size else 0.0, 1.0)
    r = int(np.sum(s > tol))
    return r, u[:, r:], vt[r:].T


def _groups(vectors: np.ndarray, names: list[str], thresh: float = 1e-6) -> list[list[str]]:
    out = []
    for k in range(vectors.shape[1]):
        v = vectors[:, k]
        v = v / max(np.abs(v).max(), 1e-300)
        g = [names[i] for i in np.flatnonzero(np.abs(v) > thresh)]
        if g and g not in out:
            out.append(g)
    return out


def analyse(model: Model, lean_limit_deg: float = 45.0, lean_step_deg: float = 5.0,
            travel_probe_mm: float = 10.0) -> Mobility:
    """Count and rank-check the mobility, then try to lean and to move in travel."""
    m = model.mech
    nb = len(model.body_names)
    g_held = 3 * (nb - 1) - 2 * (len(m.pins) + len(m.sliders)) - len(m.links) - len(m.springs)
    g_free = g_held + len(m.springs)
    geom = model.default_geometry
    b = Batch(model, geom, np.zeros(1, dtype=int))
    q0 = model.design_q(1)
    zero = np.zeros(1)
    spring0 = b.L_spring0
    F, J = residual(model, b, q0, zero, spring0, "lean")
    dF = J[0, :, model.n_q]              # derivative with respect to the lean
    J = J[0, :, :model.n_q]
    names = row_names(model, "lean")
    nk = model.n_loop_rows + len(model.eq_link)
    ns = len(model.eq_spring)
    # relative to the chassis: drop the chassis translation columns and the ground rows
    cols = [i for i in range(model.n_q)
            if not (model.coord_kind[i] == TRANSLATION and model.coord_body[i] == model.chassis)]
    Jkin_held = J[:nk + ns][:, cols] * _col_scale(model, b)[cols]
    Jkin_free = J[:nk][:, cols] * _col_scale(model, b)[cols]
    r_held, left_held, _ = _rank(Jkin_held)
    r_free, _, _ = _rank(Jkin_free)
    res = Mobility(nb, len(m.pins), len(m.links), len(m.springs), len(m.sliders), g_held, g_free,
                   len(cols) - r_held, len(cols) - r_free)
    res.redundant = _groups(left_held, names[:nk + ns])
    res.travel_dof = res.rank_free - res.rank_held
    # on the ground, springs held: lean is the one wanted freedom
    Js = J * _col_scale(model, b)
    r_full, left_full, null_full = _rank(Js)
    sol, *_ = np.linalg.lstsq(Js, -dF, rcond=None)
    res.leans_first_order = bool(np.linalg.norm(Js @ sol + dF) <= 1e-6 * max(np.linalg.norm(dF), 1.0))
    if null_full.shape[1]:
        bodies = [model.body_names[model.coord_body[i]] for i in range(model.n_q)]
        groups = []
        for k in range(null_full.shape[1]):
            v = null_full[:, k]
            v = v / max(np.abs(v).max(), 1e-300)
            g = sorted({bodies[i] for i in np.flatnonzero(np.abs(v) > 1e-6)})
            if g not in groups:
                groups.append(g)
        res.unwanted = groups
    # numeric attempts
    leans = np.arange(0.0, lean_limit_deg + 1e-9, lean_step_deg)
    sw = sweep(model, lean_deg=leans, travel_mm=[0.0])
    ok = sw.converged[0, 0]
    bad = np.flatnonzero(~ok)
    if len(bad) == 0:
        res.max_lean_deg = float(leans[-1])
    else:
        first = int(bad[0])
        res.max_lean_deg = float(leans[first - 1]) if first > 0 else None
        res.lean_stop_reason = (f"stops before {leans[first]:g} deg: {sw.status_text(0, 0, first)} "
                                f"(residual {sw.residual_mm[0, 0, first]:.3g} mm)")
    if res.travel_dof > 0:
        tw = sweep(model, lean_deg=[0.0], travel_mm=[-travel_probe_mm, travel_probe_mm])
        if bool(np.all(tw.travel_status[0] == 0)):
            res.travel_reached_mm = (-travel_probe_mm, travel_probe_mm)
    return res


def _col_scale(model: Model, b: Batch) -> np.ndarray:
    return b.col_scale[0]


def describe(model: Model, mob: Mobility) -> list[str]:
    """Human-readable lines for ``tiltopt check``."""
    m = model.mech
    lines = [
        f"mechanism '{m.name}': {mob.n_bodies} bodies ({', '.join(model.body_names)}), chassis '{m.chassis}'",
        f"joints: {mob.n_pins} pins, {mob.n_links} links, {mob.n_springs} springs, {mob.n_sliders} sliders; "
        f"wheels: " + ", ".join(f"{w.name} on {w.upright} (R {w.outer_radius_mm:g} mm, r {w.crown_radius_mm:g} mm)"
                                for w in m.wheels),
        f"solver: {model.n_q} unknowns ({len(model.loop_pins)} loop-closing pins, "
        f"{len(model.loop_sliders)} loop-closing sliders)",
        f"degrees of freedom relative to the chassis, springs held: Gruebler-Kutzbach {mob.gruebler_held}, "
        f"Jacobian rank {mob.rank_held}",
        f"degrees of freedom relative to the chassis, springs free:  Gruebler-Kutzbach {mob.gruebler_free}, "
        f"Jacobian rank {mob.rank_free}",
    ]
    if mob.redundant:
        for g in mob.redundant:
            lines.append("redundant (over-constrained): one of these constraints adds nothing at the design "
                         "position: " + "; ".join(g))
        lines.append("  internal forces of an over-constrained linkage are statically indeterminate.")
    else:
        lines.append("redundant constraints: none")
    if mob.can_lean:
        lines.append(f"leans: yes, reached {mob.max_lean_deg:g} deg with the springs held"
                     + (f"; {mob.lean_stop_reason}" if mob.lean_stop_reason else ""))
    else:
        why = mob.lean_stop_reason or "no lean freedom at the design position"
        lines.append(f"leans: NO (locked): {why}")
    if mob.travel_dof > 0:
        lines.append(f"suspension travel: yes, {mob.travel_dof} degree(s) of freedom from the springs"
                     + ("" if mob.has_travel else " (but travel of +-10 mm could not be reached)"))
    else:
        lines.append("suspension travel: none (no springs, or springs that do not move the wheels)")
    extra = [g for g in mob.unwanted]
    if extra:
        for g in extra:
            lines.append("unwanted freedom on the ground with springs held (moves without leaning): bodies "
                         + ", ".join(g))
    return lines
