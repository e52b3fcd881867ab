"""The optimisation problem: X -> geometry -> one batched sweep (+ clearance, sizing) -> F, G.

:class:`TiltProblem` is a vectorized pymoo ``Problem`` (``elementwise=False``).
Each call maps the whole population to geometry with the template, checks it
(:meth:`Template.check_geometry`), runs :func:`tiltopt.kinematics.sweep.sweep` once over
all valid candidates x travels x leans, then, when the spec asks for them,
:func:`tiltopt.kinematics.clearance.evaluate_clearance` and
:func:`tiltopt.kinematics.sizing.size_linkage` once each, and writes ``out["F"]``
(minimised) and ``out["G"]`` (feasible where ``G <= 0``).

Failures are data: a candidate whose geometry is invalid, or that fails to
converge at any envelope state, gets ``G[converged] > 0`` and a reason, and
penalty objectives (finite, fixed per problem, worse than any real design:
multiples of the template's extent ``size_mm``); F and G never hold inf or NaN.

Definitions (see also docs/domain.md):

- ``overall_width_mm``: the largest, over every envelope state, lateral extent
  of the two tyres' front-view outlines. A tyre (torus R, r) seen from the
  front is the band of half-width r around its wheel-plane segment of
  half-length R - r through the hub, so wheel k reaches
  ``y_hub ± ((R - r)|sin camber| + r)``; with a body shell, the larger of that
  and the clearance part's ``max_overall_width_mm`` (the leaning shell).
  ``design_width_mm`` is the same figure at rest (lean 0, travel 0).
- ``max_scrub_mm``, ``max_heave_mm``: max |scrub|, max |heave| over the envelope.
- ``max_camber_error_deg``: max |camber - lean| of either wheel over the envelope.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np
from pymoo.core.problem import Problem

from tiltopt.kinematics.solver import SKIPPED, STATUS_TEXT
from tiltopt.kinematics.sweep import SweepSettings, sweep

from .registry import CONSTRAINTS, OBJECTIVES
from .spec import ProblemSpec

#: penalty objective per name, as (multiple of the template size in mm) or a fixed value
PENALTY_SIZE_FACTOR = {"overall_width": 4.0, "max_scrub": 2.0, "max_heave": 2.0, "min_clearance": 1.0,
                       "slot_length": 10.0}
PENALTY_FIXED = {"max_camber_error": 90.0, "linkage_mass": 1000.0}

METRIC_UNITS = {
    "overall_width_mm": "mm", "tyre_envelope_width_mm": "mm", "design_width_mm": "mm", "design_track_mm": "mm",
    "max_scrub_mm": "mm", "max_heave_mm": "mm", "max_camber_error_deg": "deg", "max_track_change_mm": "mm",
    "max_lean_point_offset_mm": "mm", "failed_state_share": "1", "max_bump_track_change_mm": "mm",
    "max_bump_camber_change_deg": "deg", "motion_ratio": "1",
    "min_wheel_shell_mm": "mm", "min_wheel_link_mm": "mm", "min_clearance_mm": "mm", "min_ground_mm": "mm",
    "max_overall_width_mm": "mm", "total_slot_length_mm": "mm", "inside_violation_mm": "mm",
    "outside_violation_mm": "mm", "pivot_shell_distance_mm": "mm",
    "linkage_mass_kg": "kg", "max_utilisation": "1", "tilt_lock_torque_nm": "N*m",
    "max_spring_force_n": "N", "spring_stroke_mm": "mm", "spring_bottoming_margin_mm": "mm",
}
CLEARANCE_KEYS = ("min_wheel_shell_mm", "min_wheel_link_mm", "min_clearance_mm", "min_ground_mm",
                  "max_overall_width_mm", "total_slot_length_mm", "inside_violation_mm", "outside_violation_mm")


@dataclass
class Evaluation:
    """Everything known about a batch of evaluated designs.

    Attributes
    ----------
    X : ndarray of shape (n, n_var)
    F : ndarray of shape (n, n_obj)
        Objectives as minimised; finite (penalties where a design failed).
    G : ndarray of shape (n, n_constr)
        Feasible where every column <= 0; finite.
    feasible : ndarray of shape (n,), bool
    violation : ndarray of shape (n,)
        Sum of the positive parts of G.
    reason : list of str
        "" where feasible, else why not.
    metrics : dict of str -> ndarray of shape (n,)
        Names end in their unit (see :data:`METRIC_UNITS`); NaN where unknown
        (a failed design's figures are never reported as numbers) or where
        there is nothing to measure (``min_wheel_link_mm`` of a linkage
        without links).
    """

    X: np.ndarray
    F: np.ndarray
    G: np.ndarray
    feasible: np.ndarray
    violation: np.ndarray
    reason: list[str]
    metrics: dict[str, np.ndarray]
    objective_names: list[str]
    constraint_names: list[str]
    units: dict[str, str] = field(default_factory=dict)


class TiltProblem(Problem):
    """The pymoo problem of a :class:`~tiltopt.problems.spec.ProblemSpec` (see module docs).

    Parameters
    ----------
    spec : ProblemSpec
    sweep_settings : tiltopt.kinematics.sweep.SweepSettings, optional

    Attributes
    ----------
    last_evaluation : Evaluation or None
        The most recent batch.
    on_evaluation : callable(Evaluation) or None
        Called after every batch (the optimiser's evaluation log hooks in here).
    """

    def __init__(self, spec: ProblemSpec, sweep_settings: SweepSettings | None = None):
        self.spec = spec
        self.template = spec.template
        self.model = spec.template.model
        self.objective_names = list(spec.objectives)
        self.constraint_names = list(spec.constraints)
        self.sweep_settings = sweep_settings
        self.size_mm = self.template.size_mm()
        self.penalty = np.array([PENALTY_SIZE_FACTOR[o] * self.size_mm if o in PENALTY_SIZE_FACTOR
                                 else PENALTY_FIXED[o] for o in self.objective_names])
        self.last_evaluation: Evaluation | None = None
        self.on_evaluation: Callable[[Evaluation], None] | None = None
        mech = self.template.mechanism
        ch = mech.chassis
        joint_refs = ([p.a for p in mech.pins] + [p.b for p in mech.pins] + [l.a for l in mech.links]
                      + [l.b for l in mech.links] + [s.a for s in mech.springs] + [s.b for s in mech.springs]
                      + [s.a_from for s in mech.sliders] + [s.a_to for s in mech.sliders])
        refs = sorted({r for r in joint_refs if r.split(".")[0] == ch}, key=self.model.point_index.get)
        self._chassis_joints = np.array([self.model.point_index[r] for r in refs], dtype=int)
        self._chassis_joint_refs = refs
        super().__init__(n_var=self.template.n_var, n_obj=len(self.objective_names),
                         n_ieq_constr=len(self.constraint_names), xl=self.template.xl, xu=self.template.xu,
                         elementwise=False)

    # ---------------------------------------------------------------- pymoo
    def _evaluate(self, x, out, *args, **kwargs):
        ev = self.evaluate_designs(x)
        out["F"] = ev.F
        out["G"] = ev.G

    # ---------------------------------------------------------------- main
    def evaluate_designs(self, X) -> Evaluation:
        """Evaluate a batch of design vectors (one batched call of each kernel).

        Parameters
        ----------
        X : ndarray of shape (n, n_var)

        Returns
        -------
        Evaluation
        """
        X = np.atleast_2d(np.asarray(X, dtype=float))
        n = len(X)
        spec, tpl, model = self.spec, self.template, self.model
        env = spec.envelope
        nan = lambda: np.full(n, np.nan)  # noqa: E731
        metrics: dict[str, np.ndarray] = {}
        geom = tpl.geometry(X)
        geom_ok, geom_reason = tpl.check_geometry(geom)
        reasons: list[list[str]] = [[r] if r else [] for r in geom_reason]
        failed_share = np.ones(n)
        all_conv = np.zeros(n, dtype=bool)

        # design-position figures (no solve needed)
        R, r, g0 = geom.outer_radius, geom.crown_radius, geom.static_camber
        hub = geom.points[:, model.wheel_centre]                       # (n, 2, 2)
        reach = (R - r) * np.abs(np.sin(g0)) + r
        metrics["design_width_mm"] = np.where(geom_ok, np.max(hub[..., 0] + reach, 1) - np.min(hub[..., 0] - reach, 1),
                                              np.nan)
        cy = hub[..., 0] - (R - r) * np.sin(g0)
        metrics["design_track_mm"] = np.where(geom_ok, cy[:, 1] - cy[:, 0], np.nan)
        for k in ("overall_width_mm", "tyre_envelope_width_mm", "max_scrub_mm", "max_heave_mm",
                  "max_camber_error_deg", "max_track_change_mm", "max_lean_point_offset_mm"):
            metrics[k] = nan()
        sprung = bool(len(model.spring_names))
        if sprung:
            for k in ("max_bump_track_change_mm", "max_bump_camber_change_deg", "motion_ratio", "spring_stroke_mm"):
                metrics[k] = nan()
            if spec.needs_sizing:
                for k in ("max_spring_force_n", "spring_bottoming_margin_mm"):
                    metrics[k] = nan()
        if spec.needs_clearance:
            for k in CLEARANCE_KEYS + ("pivot_shell_distance_mm",):
                metrics[k] = nan()
        if spec.needs_sizing:
            for k in ("linkage_mass_kg", "max_utilisation", "tilt_lock_torque_nm"):
                metrics[k] = nan()
        sizing_feasible = np.zeros(n, dtype=bool)

        idx = np.flatnonzero(geom_ok)
        if len(idx):
            g = geom.take(idx)
            sr = sweep(model, g, env.lean_deg, env.travel_mm, self.sweep_settings)
            conv = sr.converged                                           # (m, T, L)
            ok = conv.all(axis=(1, 2))
            all_conv[idx] = ok
            failed_share[idx] = 1.0 - conv.mean(axis=(1, 2))
            okc = ok[:, None, None]

            def worst(a, scale=1.0):
                a = np.abs(a).reshape(len(idx), -1)
                v = np.max(np.where(np.isfinite(a), a, -np.inf), axis=1) * scale
                return np.where(ok, v, np.nan)

            metrics["max_scrub_mm"][idx] = worst(sr.scrub)
            metrics["max_heave_mm"][idx] = worst(sr.heave)
            metrics["max_camber_error_deg"][idx] = worst(sr.camber_error, 180.0 / math.pi)
            metrics["max_track_change_mm"][idx] = worst(sr.track_change)
            metrics["max_lean_point_offset_mm"][idx] = worst(sr.lean_point_offset)
            # tyre outlines over the envelope
            hy = sr.points[..., model.wheel_centre, 0]                    # (m, T, L, 2)
            gR, gr = g.outer_radius[:, None, None, :], g.crown_radius[:, None, None, :]
            e = (gR - gr) * np.abs(np.sin(sr.camber)) + gr
            w = np.max(hy + e, -1) - np.min(hy - e, -1)                   # (m, T, L)
            tw = np.where(ok, np.max(np.where(okc, w, -np.inf).reshape(len(idx), -1), 1), np.nan)
            metrics["tyre_envelope_width_mm"][idx] = tw
            metrics["overall_width_mm"][idx] = tw
            if sprung:
                tok = np.all(np.isfinite(sr.bump_track_change), axis=1) & ok
                metrics["max_bump_track_change_mm"][idx] = np.where(
                    tok, np.max(np.abs(np.nan_to_num(sr.bump_track_change)), 1), np.nan)
                metrics["max_bump_camber_change_deg"][idx] = np.where(
                    tok, np.degrees(np.max(np.abs(np.nan_to_num(sr.bump_camber_change)).reshape(len(idx), -1), 1)),
                    np.nan)
                t0 = int(np.argmin(np.abs(env.travel_mm)))
                metrics["motion_ratio"][idx] = np.where(ok, np.mean(sr.motion_ratio[:, t0], axis=-1), np.nan)
                sl = np.where(okc[..., None], sr.spring_length, np.nan).reshape(len(idx), -1, len(model.spring_names))
                stroke = np.max(np.nan_to_num(sl.max(1) - sl.min(1), nan=-np.inf), 1)
                metrics["spring_stroke_mm"][idx] = np.where(ok, stroke, np.nan)
            # first failed state of each non-converged candidate
            for j in np.flatnonzero(~ok):
                bad_tl = np.argwhere(~conv[j])
                tried = bad_tl[sr.status[j][~conv[j]] != SKIPPED]   # prefer a state that was tried
                t, l = (tried if len(tried) else bad_tl)[0]
                k = int((~conv[j]).sum())
                reasons[idx[j]].append(
                    f"not converged: {k} of {conv[j].size} envelope states failed (first: lean "
                    f"{env.lean_deg[l]:g} deg, travel {env.travel_mm[t]:g} mm: {STATUS_TEXT[int(sr.status[j, t, l])]})")

            if spec.needs_clearance:
                from tiltopt.kinematics.clearance import evaluate_clearance
                from tiltopt.kinematics.shell import shell_signed_distance
                summ = evaluate_clearance(model, g, sr, spec.shell).summary()
                for k in CLEARANCE_KEYS:
                    if k in summ:   # +-inf (nothing to measure, e.g. no links) is reported as NaN
                        v = np.asarray(summ[k], float)
                        metrics[k][idx] = np.where(ok & np.isfinite(v), v, np.nan)
                shell_w = metrics["max_overall_width_mm"][idx]
                metrics["overall_width_mm"][idx] = np.where(np.isfinite(shell_w), np.fmax(tw, shell_w), np.nan)
                if len(self._chassis_joints):
                    d = shell_signed_distance(spec.shell, g.points[:, self._chassis_joints],
                                              tpl.mechanism.station_x_mm)
                    metrics["pivot_shell_distance_mm"][idx] = np.max(d, axis=1)
            if spec.needs_sizing:
                from tiltopt.kinematics.sizing import size_linkage
                sz = size_linkage(model, g, spec.loads)
                metrics["linkage_mass_kg"][idx] = np.where(ok, sz.linkage_mass_kg, np.nan)
                metrics["max_utilisation"][idx] = np.where(ok, sz.max_utilisation, np.nan)
                metrics["tilt_lock_torque_nm"][idx] = np.where(ok, sz.tilt_lock_torque_nm, np.nan)
                sizing_feasible[idx] = np.asarray(sz.feasible, bool) & ok
                for j in np.flatnonzero(ok & ~np.asarray(sz.feasible, bool)):
                    if "stress" in self.constraint_names or "linkage_mass" in self.objective_names:
                        reasons[idx[j]].append(f"stress: {sz.reason[j] or 'sizing failed'}")
                if sprung:
                    from tiltopt.kinematics.springs import analyse_springs

                    sp = analyse_springs(model, g, sz, spec.loads.springs, sweep_result=sr)
                    metrics["max_spring_force_n"][idx] = np.where(ok, np.max(sz.spring_max_n, 1), np.nan)
                    margin = np.where(np.isfinite(sp.bottoming_margin_mm), sp.bottoming_margin_mm, np.inf).min(1)
                    metrics["spring_bottoming_margin_mm"][idx] = np.where(ok & np.isfinite(margin), margin, np.nan)

        # -------------------------------------------------------- objectives
        base_ok = geom_ok & all_conv
        V = np.column_stack([OBJECTIVES[o].sign * metrics[OBJECTIVES[o].metric] for o in self.objective_names])
        finite = np.isfinite(V)
        bad_obj = base_ok & ~finite.all(axis=1)   # a design whose objectives are unknown is failed, not scored
        for j in np.flatnonzero(bad_obj):
            reasons[j].append("could not evaluate " + ", ".join(
                o for o, f in zip(self.objective_names, finite[j]) if not f))
        scored = base_ok & ~bad_obj
        F = np.where(scored[:, None], np.minimum(np.nan_to_num(V, nan=0.0), self.penalty[None]), self.penalty[None])

        # -------------------------------------------------------- constraints
        G = np.zeros((n, len(self.constraint_names)))
        lim = spec.limits
        size = self.size_mm
        fail = ~(geom_ok & all_conv) | bad_obj
        for k, name in enumerate(self.constraint_names):
            if name == "converged":
                G[:, k] = np.where(fail, size * (1.0 + np.where(bad_obj, 1.0, failed_share)), 0.0)
                continue
            if name == "max_width":
                val, msg = metrics["overall_width_mm"] - lim.max_width_mm, "overall width {v:.1f} mm over the limit"
            elif name == "max_scrub":
                val, msg = metrics["max_scrub_mm"] - lim.max_scrub_mm, "max scrub {v:.2f} mm over the limit"
            elif name == "max_heave":
                val, msg = metrics["max_heave_mm"] - lim.max_heave_mm, "max heave {v:.2f} mm over the limit"
            elif name == "max_camber_error":
                val, msg = (metrics["max_camber_error_deg"] - lim.max_camber_error_deg,
                            "max camber error {v:.2f} deg over the limit")
            elif name == "clearance":
                val, msg = (lim.clearance_margin_mm - metrics["min_clearance_mm"],
                            "min clearance {v:.1f} mm short of the margin")
            elif name == "wheel_shell":
                val, msg = (lim.wheel_shell_margin_mm - metrics["min_wheel_shell_mm"],
                            "wheel-shell clearance {v:.1f} mm short of the margin")
            elif name == "ground_clearance":
                val, msg = (lim.ground_clearance_mm - metrics["min_ground_mm"],
                            "ground clearance {v:.1f} mm short of the limit")
            elif name == "shell_roles":
                val = np.fmax(metrics["inside_violation_mm"], 0) + np.fmax(metrics["outside_violation_mm"], 0)
                msg = "tubes outside their allowed side of the shell by {v:.1f} mm"
            elif name == "pivots_inside_shell":
                val, msg = (metrics["pivot_shell_distance_mm"] + lim.pivot_margin_mm,
                            "a chassis pivot is {v:.1f} mm short of being inside the shell by the margin")
            elif name == "spring_force":
                val, msg = (metrics["max_spring_force_n"] - lim.max_spring_force_n,
                            "spring force {v:.0f} N over the limit")
            elif name == "spring_stroke":
                val, msg = (metrics["spring_stroke_mm"] - lim.max_spring_stroke_mm,
                            "spring stroke {v:.1f} mm over the limit")
            elif name == "spring_bottoming":
                val, msg = -metrics["spring_bottoming_margin_mm"], "a spring is solid {v:.1f} mm before full bump"
            elif name == "stress":
                u = metrics["max_utilisation"]
                val = np.where(sizing_feasible, np.minimum(u - 1.0, 0.0),
                               np.where(np.isfinite(u), np.maximum(u - 1.0, 0.01), 1.0))
                msg = None   # its reason comes from the sizing part
            else:  # pragma: no cover - the registry and this table are kept together
                raise KeyError(name)
            val = np.where(fail, 0.0, np.nan_to_num(val, nan=0.0, posinf=size, neginf=-size))
            G[:, k] = val
            if msg:
                for j in np.flatnonzero(val > 0):
                    reasons[j].append(f"{name}: " + msg.format(v=val[j]))
        violation = np.sum(np.maximum(G, 0.0), axis=1)
        feasible = violation <= 0.0
        reason = ["; ".join(rs) if not feasible[j] else "" for j, rs in enumerate(reasons)]
        for j in np.flatnonzero(~feasible):
            if not reason[j]:
                reason[j] = "infeasible: " + ", ".join(
                    c for c, gv in zip(self.constraint_names, G[j]) if gv > 0)
        units = {k: METRIC_UNITS.get(k, "") for k in metrics}
        ev = Evaluation(X=X, F=F, G=G, feasible=feasible, violation=violation, reason=reason, metrics=metrics,
                        objective_names=list(self.objective_names), constraint_names=list(self.constraint_names),
                        units=units)
        self.last_evaluation = ev
        if self.on_evaluation is not None:
            self.on_evaluation(ev)
        return ev

    # ---------------------------------------------------------------- info
    @property
    def objective_units(self) -> dict[str, str]:
        return {o: OBJECTIVES[o].unit for o in self.objective_names}

    @property
    def constraint_units(self) -> dict[str, str]:
        return {c: CONSTRAINTS[c].unit for c in self.constraint_names}
