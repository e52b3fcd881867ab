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

Definitions (docs/domain.md):

- ``overall_width_mm``: the width of the upright vehicle (lean 0, wheels straight
  ahead, the largest over the travels): the wheel solids' front-view outlines, or the
  body shell where wider; the figure ``max_width_mm`` limits. ``design_width_mm`` is
  the same at rest (travel 0), from the design geometry alone.
- ``lean_sweep_width_mm``: the lateral extent of the leaning vehicle over the whole
  envelope, wheels through their steer range.
- ``max_scrub_mm``, ``max_heave_mm``: max |scrub|, max |heave| over the envelope.
- ``max_camber_error_deg``: max |camber - lean| of either wheel over the envelope.
- the clearance figures of :meth:`tiltopt.kinematics.clearance.ClearanceResult.summary`
  (the part runs for every design, with or without a shell); margins are met by
  their conservative ``..._lower_mm`` figures.

Each constraint of :data:`tiltopt.problems.registry.CONSTRAINTS` carries its value
(from the metrics), its reason text and a violation scale: ``G`` is the value divided
by its scale, so the violations pymoo sums weigh millimetres, degrees and newtons
fairly; the reason gives the value in its unit.
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
PENALTY_SIZE_FACTOR = {"overall_width": 4.0, "lean_sweep_width": 4.0, "max_scrub": 2.0, "max_heave": 2.0,
                       "min_clearance": 1.0, "slot_length": 10.0}
PENALTY_FIXED = {"max_camber_error": 90.0, "linkage_mass": 1000.0, "max_lean_steer": 90.0, "max_bump_steer": 90.0,
                 "ackermann_error": 90.0}

METRIC_UNITS = {
    "overall_width_mm": "mm", "lean_sweep_width_mm": "mm", "design_width_mm": "mm", "design_track_mm": "mm",
    "max_scrub_mm": "mm", "max_heave_mm": "mm", "max_camber_error_deg": "deg", "max_track_change_mm": "mm",
    "max_lean_point_offset_mm": "mm", "max_bump_track_change_mm": "mm",
    "max_bump_camber_change_deg": "deg", "motion_ratio": "1",
    "min_wheel_shell_mm": "mm", "min_wheel_shell_error_mm": "mm", "min_wheel_shell_lower_mm": "mm",
    "min_wheel_link_mm": "mm", "min_wheel_link_error_mm": "mm", "min_wheel_link_lower_mm": "mm",
    "min_wheel_carrier_mm": "mm", "min_wheel_carrier_error_mm": "mm", "min_wheel_carrier_lower_mm": "mm",
    "min_wheel_pair_mm": "mm", "min_member_gap_mm": "mm", "min_clearance_mm": "mm", "min_clearance_error_mm": "mm",
    "min_clearance_lower_mm": "mm", "min_ground_mm": "mm", "total_slot_length_mm": "mm",
    "inside_violation_mm": "mm", "outside_violation_mm": "mm", "pivot_shell_distance_mm": "mm",
    "linkage_mass_kg": "kg", "max_utilisation": "1", "tilt_lock_torque_nm": "N*m", "min_wheel_load_n": "N",
    "max_spring_force_n": "N", "spring_stroke_mm": "mm", "spring_bottoming_margin_mm": "mm",
    "max_lean_steer_deg": "deg", "max_bump_steer_deg": "deg", "ackermann_error_deg": "deg", "steering_ratio": "1",
    "lock_steer_deg": "deg", "min_trail_mm": "mm", "max_trail_mm": "mm", "design_trail_mm": "mm",
    "design_scrub_radius_mm": "mm", "design_caster_deg": "deg", "design_kpi_deg": "deg",
}
#: scaled violation of a design that fails to assemble or converge, times (1 + share of failed states)
FAILED_G = 1.0e4
#: the clearance part's summary keys a problem keeps as metrics
CLEARANCE_KEYS = ("min_wheel_shell_mm", "min_wheel_shell_error_mm", "min_wheel_shell_lower_mm",
                  "min_wheel_link_mm", "min_wheel_link_error_mm", "min_wheel_link_lower_mm",
                  "min_wheel_carrier_mm", "min_wheel_carrier_error_mm", "min_wheel_carrier_lower_mm",
                  "min_wheel_pair_mm", "min_member_gap_mm", "min_clearance_mm", "min_clearance_error_mm",
                  "min_clearance_lower_mm",
                  "min_ground_mm", "overall_width_mm", "lean_sweep_width_mm", "total_slot_length_mm",
                  "inside_violation_mm", "outside_violation_mm")
SHELL_ONLY_KEYS = ("min_wheel_shell_mm", "min_wheel_shell_error_mm", "min_wheel_shell_lower_mm",
                   "total_slot_length_mm", "inside_violation_mm", "outside_violation_mm")
SIZING_KEYS = ("linkage_mass_kg", "max_utilisation", "tilt_lock_torque_nm", "min_wheel_load_n")
#: the steering part's metrics (a template with a steering linkage)
STEERING_KEYS = ("max_lean_steer_deg", "max_bump_steer_deg", "ackermann_error_deg", "steering_ratio", "lock_steer_deg",
                 "min_trail_mm", "max_trail_mm", "design_trail_mm", "design_scrub_radius_mm", "design_caster_deg",
                 "design_kpi_deg")


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
        self._hub_half = np.array([0.5 * w.hub_width_mm for w in mech.wheels])
        self._chassis_joints = np.array([self.model.point_index[r] for r in refs], dtype=int)
        self._chassis_joint_refs = refs
        super().__init__(n_var=self.template.n_var, n_obj=len(self.objective_names),
                         n_ieq_constr=len(self.constraint_names), xl=self.template.xl, xu=self.template.xu,
                         elementwise=False)

    #: share of the first population seeded round the base design (the rest is random in the bounds)
    SEED_SHARE = 0.25
    #: standard deviation of the seeded perturbations, as a share of each variable's range
    SEED_SPREAD = 0.15

    def initial_designs(self, n: int, seed: int) -> np.ndarray:
        """The first population: the base design (a user's sketch), small perturbations of it, the rest
        uniform in the bounds; the same for the same seed.

        Returns
        -------
        ndarray of shape (n, n_var)
        """
        rng = np.random.default_rng([int(seed), 0x7111])
        lo, hi = self.template.xl, self.template.xu
        x0 = np.clip(self.template.defaults, lo, hi)
        k = max(1, int(round(self.SEED_SHARE * n))) if n > 1 else 1
        near = x0 + rng.normal(0.0, self.SEED_SPREAD, size=(k - 1, len(x0))) * (hi - lo)
        rest = lo + rng.random((n - k, len(x0))) * (hi - lo)
        return np.vstack([x0[None], np.clip(near, lo, hi), rest])

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
        geom = self.template.geometry(X)
        geom_ok, geom_reason = self.template.check_geometry(geom)
        reasons: list[list[str]] = [[r] if r else [] for r in geom_reason]
        metrics = {k: np.full(n, np.nan) for k in self._metric_names()}
        state = {"failed_share": np.ones(n), "all_conv": np.zeros(n, dtype=bool),
                 "sizing_feasible": np.zeros(n, dtype=bool)}
        self._design_metrics(geom, geom_ok, metrics)
        idx = np.flatnonzero(geom_ok)
        if len(idx):
            g = geom.take(idx)
            sr = sweep(self.model, g, self.spec.envelope.lean_deg, self.spec.envelope.travel_mm, self.sweep_settings)
            ok = self._sweep_metrics(sr, idx, metrics, state, reasons)
            steer = None
            if self.spec.needs_steering:
                steer = self._steering_metrics(g, sr, idx, ok, metrics, state, reasons)
            ok = state["all_conv"][idx]
            self._clearance_metrics(g, sr, idx, ok, metrics, steer)
            if self.spec.needs_sizing:
                self._sizing_metrics(g, idx, ok, metrics, state, reasons, sr)

        base_ok = geom_ok & state["all_conv"]
        F, bad_obj = self._objectives(metrics, base_ok, reasons)
        G = self._constraints(metrics, ~base_ok | bad_obj, state, bad_obj, reasons)
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

    # ---------------------------------------------------------------- steps
    def _metric_names(self) -> list[str]:
        names = ["design_width_mm", "design_track_mm", "max_scrub_mm", "max_heave_mm", "max_camber_error_deg",
                 "max_track_change_mm", "max_lean_point_offset_mm"]
        sprung = bool(len(self.model.spring_names))
        if sprung:
            names += ["max_bump_track_change_mm", "max_bump_camber_change_deg", "motion_ratio", "spring_stroke_mm"]
        names += [k for k in CLEARANCE_KEYS if self.spec.shell is not None or k not in SHELL_ONLY_KEYS]
        if self.spec.shell is not None:
            names.append("pivot_shell_distance_mm")
        if self.spec.needs_sizing:
            names += list(SIZING_KEYS)
            if sprung:
                names += ["max_spring_force_n", "spring_bottoming_margin_mm"]
        if self.spec.needs_steering:
            names += list(STEERING_KEYS)
        return names

    def _design_metrics(self, geom, geom_ok, metrics):
        """Figures of the design position (no solve needed): width and track at rest."""
        from tiltopt.kinematics.wheel_solid import lateral_reach

        R, r, g0 = geom.outer_radius, geom.crown_radius, geom.static_camber
        hub = geom.points[:, self.model.wheel_centre]                      # (n, 2, 2)
        reach = lateral_reach(R, r, self._hub_half[None, :], g0)
        metrics["design_width_mm"] = np.where(geom_ok, np.max(hub[..., 0] + reach, 1) - np.min(hub[..., 0] - reach, 1),
                                              np.nan)
        cy = hub[..., 0] - (R - r) * np.sin(g0)
        metrics["design_track_mm"] = np.where(geom_ok, cy[:, 1] - cy[:, 0], np.nan)

    def _sweep_metrics(self, sr, idx, metrics, state, reasons) -> np.ndarray:
        """Kinematic figures over the envelope; returns which of ``idx`` reached every state."""
        env = self.spec.envelope
        conv = sr.converged                                               # (m, T, L)
        ok = conv.all(axis=(1, 2))
        state["all_conv"][idx] = ok
        state["failed_share"][idx] = 1.0 - conv.mean(axis=(1, 2))

        def worst(a, scale=1.0):
            a = np.abs(a).reshape(len(idx), -1)
            v = np.max(np.where(np.isfinite(a), a, -np.inf), axis=1) * scale
            return np.where(ok, v, np.nan)

        metrics["max_scrub_mm"][idx] = worst(sr.scrub)
        metrics["max_heave_mm"][idx] = worst(sr.heave)
        metrics["max_camber_error_deg"][idx] = worst(sr.camber_error, 180.0 / math.pi)
        metrics["max_track_change_mm"][idx] = worst(sr.track_change)
        metrics["max_lean_point_offset_mm"][idx] = worst(sr.lean_point_offset)
        if "motion_ratio" in metrics:
            tok = np.all(np.isfinite(sr.bump_track_change), axis=1) & ok
            metrics["max_bump_track_change_mm"][idx] = np.where(
                tok, np.max(np.abs(np.nan_to_num(sr.bump_track_change)), 1), np.nan)
            metrics["max_bump_camber_change_deg"][idx] = np.where(
                tok, np.degrees(np.max(np.abs(np.nan_to_num(sr.bump_camber_change)).reshape(len(idx), -1), 1)),
                np.nan)
            t0 = int(np.argmin(np.abs(env.travel_mm)))
            metrics["motion_ratio"][idx] = np.where(ok, np.mean(sr.motion_ratio[:, t0], axis=-1), np.nan)
            okc = ok[:, None, None, None]
            sl = np.where(okc, sr.spring_length, np.nan).reshape(len(idx), -1, len(self.model.spring_names))
            stroke = np.max(np.nan_to_num(sl.max(1) - sl.min(1), nan=-np.inf), 1)
            metrics["spring_stroke_mm"][idx] = np.where(ok, stroke, np.nan)
        for j in np.flatnonzero(~ok):          # the first failed state of each design that did not converge
            bad_tl = np.argwhere(~conv[j])
            tried = bad_tl[sr.status[j][~conv[j]] != SKIPPED]   # prefer a state that was tried
            t, l = (tried if len(tried) else bad_tl)[0]
            k = int((~conv[j]).sum())
            reasons[idx[j]].append(
                f"not converged: {k} of {conv[j].size} envelope states failed (first: lean "
                f"{env.lean_deg[l]:g} deg, travel {env.travel_mm[t]:g} mm: {STATUS_TEXT[int(sr.status[j, t, l])]})")
        return ok

    def _steering_metrics(self, g, sr, idx, ok, metrics, state, reasons):
        """Lean steer, bump steer, Ackermann error, ratio, trail, caster (docs/domain.md, "Steering").

        A design whose steering does not reach every state of its envelope (a rod past its toggle)
        does not converge: it fails with the first such state as its reason. Returns the
        :class:`tiltopt.kinematics.steering.SteerResult`.
        """
        from tiltopt.kinematics import steering as S

        env = self.spec.envelope
        st = S.steer_envelope(self.model, g, sr, every_input=False)
        ds = S.design_steer(self.model, g, np.array(self.model.mech.steering.input_range_deg))
        good = ok & st.reached
        n = len(idx)
        deg = 180.0 / math.pi

        def worst(a):
            a = np.abs(a).reshape(n, -1)
            return np.where(good, np.max(np.where(np.isfinite(a), a, -np.inf), axis=1), np.nan)

        metrics["max_lean_steer_deg"][idx] = worst(st.lean_steer) * deg
        metrics["max_bump_steer_deg"][idx] = worst(st.bump_steer) * deg
        with np.errstate(invalid="ignore"):
            ack = np.max(np.abs(ds.ackermann_error), axis=1) * deg
        metrics["ackermann_error_deg"][idx] = np.where(good, ack, np.nan)
        metrics["steering_ratio"][idx] = np.where(good, ds.ratio, np.nan)
        metrics["lock_steer_deg"][idx] = np.where(good, np.max(np.abs(ds.steer).reshape(n, -1), axis=1) * deg, np.nan)
        tr = st.trail.reshape(n, -1)
        metrics["min_trail_mm"][idx] = np.where(good, np.min(tr, axis=1), np.nan)
        metrics["max_trail_mm"][idx] = np.where(good, np.max(tr, axis=1), np.nan)
        t0 = int(np.argmin(np.abs(env.travel_mm)))
        l0 = int(np.argmin(np.abs(env.lean_deg)))
        for key, a, f in (("design_trail_mm", st.trail, 1.0), ("design_scrub_radius_mm", st.scrub_radius, 1.0),
                          ("design_caster_deg", st.caster, deg), ("design_kpi_deg", st.kpi, deg)):
            metrics[key][idx] = np.where(good, np.mean(a[:, t0, l0], axis=-1) * f, np.nan)
        bad = np.flatnonzero(ok & ~st.reached)
        state["all_conv"][idx[bad]] = False
        for j in bad:
            t, l, u, w, code = st.first_failure(j)
            k = int((st.status[j] != S.REACHED).any(axis=(-1, -2)).sum())
            state["failed_share"][idx[j]] = max(state["failed_share"][idx[j]], k / sr.status[j].size)
            reasons[idx[j]].append(
                f"not converged: the steering of the {('left', 'right')[w]} wheel does not reach {k} of "
                f"{sr.status[j].size} envelope states (first: input {st.input_deg[l, u]:g} deg at lean "
                f"{env.lean_deg[l]:g} deg, travel {env.travel_mm[t]:g} mm: {S.STATUS_TEXT[code]})")
        return st

    def _clearance_metrics(self, g, sr, idx, ok, metrics, steer=None):
        """Wheel solids, members, the two wheels, widths (and with a shell: shell, slots, pivots)."""
        from tiltopt.kinematics.clearance import evaluate_clearance
        from tiltopt.kinematics.shell import shell_signed_distance

        summ = evaluate_clearance(self.model, g, sr, self.spec.shell, steer=steer).summary()
        for k in CLEARANCE_KEYS:
            if k in metrics:   # +-inf (nothing to measure, e.g. no members) is reported as NaN
                v = np.asarray(summ[k], float)
                metrics[k][idx] = np.where(ok & np.isfinite(v), v, np.nan)
        if self.spec.shell is not None and len(self._chassis_joints):
            d = shell_signed_distance(self.spec.shell, g.points[:, self._chassis_joints],
                                      self.template.mechanism.station_x_mm)
            metrics["pivot_shell_distance_mm"][idx] = np.max(d, axis=1)

    def _sizing_metrics(self, g, idx, ok, metrics, state, reasons, sr=None):
        from tiltopt.kinematics.sizing import size_linkage

        sz = size_linkage(self.model, g, self.spec.loads)
        for k in SIZING_KEYS:
            metrics[k][idx] = np.where(ok, np.asarray(getattr(sz, k), float), np.nan)
        state["sizing_feasible"][idx] = np.asarray(sz.feasible, bool) & ok
        for j in np.flatnonzero(ok & ~np.asarray(sz.feasible, bool)):
            if "stress" in self.constraint_names or "linkage_mass" in self.objective_names:
                reasons[idx[j]].append(f"stress: {sz.reason[j] or 'sizing failed'}")
        if "max_spring_force_n" in metrics:
            from tiltopt.kinematics.springs import analyse_springs

            sp = analyse_springs(self.model, g, sz, self.spec.loads.springs, sweep_result=sr)
            metrics["max_spring_force_n"][idx] = np.where(ok, np.max(sz.spring_max_n, 1), np.nan)
            margin = np.where(np.isfinite(sp.bottoming_margin_mm), sp.bottoming_margin_mm, np.inf).min(1)
            metrics["spring_bottoming_margin_mm"][idx] = np.where(ok & np.isfinite(margin), margin, np.nan)

    def _objectives(self, metrics, base_ok, reasons):
        V = np.column_stack([OBJECTIVES[o].sign * metrics[OBJECTIVES[o].metric] for o in self.objective_names])
        finite = np.isfinite(V)
        bad_obj = base_ok & ~finite.all(axis=1)   # a design whose objectives are unknown is failed, not scored
        for j in np.flatnonzero(bad_obj):
            reasons[j].append("could not evaluate " + ", ".join(
                o for o, f in zip(self.objective_names, finite[j]) if not f))
        scored = base_ok & ~bad_obj
        F = np.where(scored[:, None], np.minimum(np.nan_to_num(V, nan=0.0), self.penalty[None]), self.penalty[None])
        return F, bad_obj

    def _constraints(self, metrics, fail, state, bad_obj, reasons) -> np.ndarray:
        """G (n, n_constr): each constraint's value divided by its scale (registry), feasible where <= 0."""
        n = len(fail)
        G = np.zeros((n, len(self.constraint_names)))
        lim = self.spec.limits
        for k, name in enumerate(self.constraint_names):
            c = CONSTRAINTS[name]
            if name == "converged":
                # far above any scaled violation of a design that assembles: a failed design never
                # outranks one that only misses a margin
                G[:, k] = np.where(fail, FAILED_G * (1.0 + np.where(bad_obj, 1.0, state["failed_share"])), 0.0)
                continue
            if name == "stress":    # its value comes with the sizing part's own reason
                u = metrics["max_utilisation"]
                val = np.where(state["sizing_feasible"], np.minimum(u - 1.0, 0.0),
                               np.where(np.isfinite(u), np.maximum(u - 1.0, 0.01), 1.0))
            else:
                val = c.value(metrics, getattr(lim, c.key) if c.key else None)
            # unknown (NaN: nothing to measure) is no violation; a failed design is judged by `converged`
            val = np.where(fail, 0.0, np.nan_to_num(val, nan=0.0, posinf=1e6, neginf=-1e6))
            G[:, k] = val / c.scale
            if c.message:
                for j in np.flatnonzero(val > 0):
                    reasons[j].append(f"{name}: " + c.message.format(v=val[j]))
        return G

    # ---------------------------------------------------------------- info
    @property
    def objective_units(self) -> dict[str, str]:
        return {o: OBJECTIVES[o].unit for o in self.objective_names}

    @property
    def constraint_units(self) -> dict[str, str]:
        """Unit of each ``G`` column: the constraint's value divided by its scale."""
        return {c: f"1 (per {CONSTRAINTS[c].scale:g} {CONSTRAINTS[c].unit})" if CONSTRAINTS[c].unit != "1"
                else f"1 (per {CONSTRAINTS[c].scale:g})" for c in self.constraint_names}
