"""Springs as a builder fits them: force-deflection curves, the setup for a stated sag, bottoming, stroke.

The kinematics holds each spring's length at every state (the sweep procedure
of docs/domain.md) and the force analysis gives the force each spring must
carry; this module joins the two with the spring's own characteristic ``F(x)``,
``x`` the compression from the free length (mm), ``F`` compression positive (N):

- a coil without a curve: ``F = k x`` (``rate_n_per_mm``);
- any spring with ``curve`` points (a progressive coil, a rubber or elastomer
  block): linear between the points; past the last point the last segment's
  rate goes on (there the spring is solid, which the bottoming check reports);
- an elastomer without a curve: the default progressive shape from its initial
  rate ``k0`` and ``max_deflection_mm`` ``x_b``: the points ``(0, 0)``,
  ``(x_b/2, k0 x_b/2)``, ``(3 x_b/4, k0 x_b)``, ``(x_b, 2 k0 x_b)``, that is
  the initial rate to half the usable deflection, then twice and four times it
  (rubber stiffens as it is compressed: common practice, no source).

The setup (per candidate and spring), with the sag stated as the wheel travel
from top-out to the design position (top-out at travel ``-sag``):

- static force ``F_s``: the spring force of the static state;
- static deflection ``x_s = F^-1(F_s)``: the spring carries the static load at
  the design position;
- suggested preload: the spring force at top-out, ``F(x_s - (L_top - L_0))``,
  with ``L_0``, ``L_top`` the spring lengths at travel 0 and ``-sag`` at lean
  0; a negative pre-compression means the spring is too stiff for this sag (it
  sags less even with no preload), and the preload is reported as 0 with a
  note; for a coil, the rate that gives the sag with no preload is ``F_s /
  (L_top - L_0)``;
- the deflection at full bump ``x_s + (L_0 - L_min)`` over the envelope (the
  spring lengths do not change with lean: the sweep holds them), and the
  bottoming margin ``max_deflection - that``; the travel at which the spring
  becomes solid, from the spring length against travel at lean 0 (linear
  between the envelope's travels, and beyond them along the end interval);
- the stroke: longest minus shortest spring length over the envelope;
- a setup given in the file (``free_length_mm``, or ``preload_n`` at top-out)
  is compared: the force it gives at the design position against ``F_s``.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

DEFAULT_SHAPE = ((0.0, 0.0), (0.5, 0.5), (0.75, 1.0), (1.0, 2.0))   # (x / x_b, F / (k0 x_b)); no source
DEFAULT_SHAPE_SOURCE = ("default progressive elastomer curve from the initial rate and the usable deflection "
                        "(common practice, no source)")


@dataclass(frozen=True)
class Characteristic:
    """One spring's force-deflection curve (points, linear between them and past the last one).

    Attributes
    ----------
    x_mm, f_n : ndarray of shape (n_points,)
        Rising, from (0, 0).
    max_deflection_mm : float
        Where the spring is solid (NaN: not given).
    source : str
        Where the curve comes from.
    """

    name: str
    kind: str
    x_mm: np.ndarray
    f_n: np.ndarray
    max_deflection_mm: float
    source: str

    def force(self, x):
        """F(x), N; x in mm (any shape); 0 for x <= 0 (a loose spring carries nothing)."""
        x = np.asarray(x, float)
        slope = (self.f_n[-1] - self.f_n[-2]) / (self.x_mm[-1] - self.x_mm[-2])
        f = np.interp(x, self.x_mm, self.f_n)
        f = np.where(x > self.x_mm[-1], self.f_n[-1] + slope * (x - self.x_mm[-1]), f)
        return np.where(x > 0.0, f, 0.0)

    def deflection(self, f):
        """x(F), mm; the inverse of :meth:`force` for F >= 0 (NaN for F < 0)."""
        f = np.asarray(f, float)
        slope = (self.f_n[-1] - self.f_n[-2]) / (self.x_mm[-1] - self.x_mm[-2])
        x = np.interp(f, self.f_n, self.x_mm)
        x = np.where(f > self.f_n[-1], self.x_mm[-1] + (f - self.f_n[-1]) / slope, x)
        return np.where(f >= 0.0, x, np.nan)


def characteristic(spring) -> Characteristic | None:
    """The curve of a mechanism-file spring, or None (a coil without a rate: no curve known)."""
    xb = spring.max_deflection_mm
    if spring.curve is not None:
        pts = np.array(spring.curve, float)
        return Characteristic(spring.name, spring.kind, pts[:, 0], pts[:, 1],
                              float(xb) if xb is not None else (float(pts[-1, 0]) if spring.kind == "elastomer"
                                                                else np.nan),
                              "force-deflection points in the mechanism file")
    k = spring.rate_n_per_mm
    if k is None:
        return None
    if spring.kind == "elastomer":
        shape = np.array(DEFAULT_SHAPE)
        return Characteristic(spring.name, spring.kind, shape[:, 0] * xb, shape[:, 1] * k * xb, float(xb),
                              DEFAULT_SHAPE_SOURCE)
    return Characteristic(spring.name, spring.kind, np.array([0.0, 1.0]), np.array([0.0, k]),
                          float(xb) if xb is not None else np.nan, f"linear coil, {k:g} N/mm (mechanism file)")


def interp_travel(travel, length, t):
    """Spring length at travel ``t`` (scalar): linear between the grid travels, along the end interval beyond.

    travel : (T,) ascending; length : (..., T)
    """
    travel = np.asarray(travel, float)
    if len(travel) == 1:
        return length[..., 0]
    i = int(np.clip(np.searchsorted(travel, t) - 1, 0, len(travel) - 2))
    w = (t - travel[i]) / (travel[i + 1] - travel[i])
    return length[..., i] + w * (length[..., i + 1] - length[..., i])


def travel_at_length(travel, length, target):
    """The travel where the spring length reaches ``target`` (its first crossing in bump), extrapolated
    along the end interval past the last travel; NaN where the length does not fall with travel.

    travel : (T,); length : (..., T); target : (...)
    """
    travel = np.asarray(travel, float)
    out = np.full(target.shape, np.nan)
    T = len(travel)
    if T < 2:
        return out
    for i in range(T - 1):
        a, b = length[..., i], length[..., i + 1]
        last = i == T - 2
        falls = b < a
        w = (a - target) / np.where(falls, a - b, 1.0)
        hit = falls & ((w >= 0.0) | (i == 0)) & ((w <= 1.0) | last) & np.isnan(out)
        out = np.where(hit, travel[i] + w * (travel[i + 1] - travel[i]), out)
    return out


@dataclass
class SpringResult:
    """The springs of C candidates (arrays of shape (C, n_springs); see module docs).

    ``preload_deflection_mm`` < 0: too stiff for the sag (``preload_n`` is then 0).
    ``bottoming_margin_mm``: spring compression left at full bump (negative: bottoms); NaN
    without a max deflection. ``bottoming_travel_mm``: wheel travel at which it is solid.
    """

    names: list[str]
    curves: list[Characteristic | None]
    sag_mm: float
    travel_mm: np.ndarray
    static_force_n: np.ndarray
    static_deflection_mm: np.ndarray
    design_length_mm: np.ndarray
    topout_length_mm: np.ndarray
    min_length_mm: np.ndarray
    max_length_mm: np.ndarray
    stroke_mm: np.ndarray
    preload_deflection_mm: np.ndarray
    preload_n: np.ndarray
    suggested_rate_n_per_mm: np.ndarray
    full_bump_deflection_mm: np.ndarray
    full_bump_force_n: np.ndarray
    bottoming_margin_mm: np.ndarray
    bottoming_travel_mm: np.ndarray
    given_setup_force_n: np.ndarray

    @property
    def bottoms(self) -> np.ndarray:
        return self.bottoming_margin_mm < 0.0


def spring_setup(mech, travel_mm, length_mm, static_force_n, sag_mm: float | None = None,
                 envelope_min_mm=None, envelope_max_mm=None) -> SpringResult:
    """Set up and check the springs of C candidates.

    Parameters
    ----------
    mech : Mechanism
        Its springs give the characteristics (the same for every candidate of a topology).
    travel_mm : ndarray of shape (T,)
        Ascending travels of the envelope.
    length_mm : ndarray of shape (C, T, n_springs)
        Spring lengths at lean 0 (NaN where not reached); the design position is travel 0.
    static_force_n : ndarray of shape (C, n_springs)
        Spring forces of the static state (compression +).
    sag_mm : float, optional
        Wheel travel from top-out to the design position (default: the envelope's droop, top-out at
        full droop).
    envelope_min_mm, envelope_max_mm : ndarray of shape (C, n_springs), optional
        Shortest and longest length over the whole envelope (default: over ``length_mm``).
    """
    travel = np.asarray(travel_mm, float)
    L = np.moveaxis(np.asarray(length_mm, float), 1, -1)                   # (C, n, T)
    sag = float(sag_mm) if sag_mm is not None else max(0.0, -float(travel.min()))
    L0 = interp_travel(travel, L, 0.0)
    Ltop = interp_travel(travel, L, -sag)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)       # a candidate with no state reached: NaN
        Lmin = np.nanmin(L, -1) if envelope_min_mm is None else np.asarray(envelope_min_mm, float)
        Lmax = np.nanmax(L, -1) if envelope_max_mm is None else np.asarray(envelope_max_mm, float)
    Fs = np.asarray(static_force_n, float)
    shape = Fs.shape
    nan = lambda: np.full(shape, np.nan)  # noqa: E731
    xs, xp, pre, rate, xfb, ffb, margin, tb, given = (nan() for _ in range(9))
    curves = [characteristic(s) for s in mech.springs]
    sag_stroke = Ltop - L0
    for k, (s, cv) in enumerate(zip(mech.springs, curves)):
        if s.kind == "coil" and s.curve is None:
            rate[:, k] = np.where(sag_stroke[:, k] > 0, Fs[:, k] / np.where(sag_stroke[:, k] > 0, sag_stroke[:, k],
                                                                            1.0), np.nan)
        if cv is None:
            continue
        xs[:, k] = cv.deflection(Fs[:, k])
        xp[:, k] = xs[:, k] - sag_stroke[:, k]
        pre[:, k] = np.where(xp[:, k] >= 0.0, cv.force(xp[:, k]), np.where(np.isfinite(xp[:, k]), 0.0, np.nan))
        xfb[:, k] = xs[:, k] + (L0[:, k] - Lmin[:, k])
        ffb[:, k] = cv.force(xfb[:, k])
        margin[:, k] = cv.max_deflection_mm - xfb[:, k]
        if np.isfinite(cv.max_deflection_mm):
            tb[:, k] = travel_at_length(travel, L[:, k], L0[:, k] - (cv.max_deflection_mm - xs[:, k]))
        if s.free_length_mm is not None:
            given[:, k] = cv.force(s.free_length_mm - L0[:, k])
        elif s.preload_n is not None:
            given[:, k] = cv.force(cv.deflection(s.preload_n) + sag_stroke[:, k])
    return SpringResult(names=[s.name for s in mech.springs], curves=curves, sag_mm=sag, travel_mm=travel,
                        static_force_n=Fs, static_deflection_mm=xs, design_length_mm=L0, topout_length_mm=Ltop,
                        min_length_mm=Lmin, max_length_mm=Lmax, stroke_mm=Lmax - Lmin, preload_deflection_mm=xp,
                        preload_n=pre, suggested_rate_n_per_mm=rate, full_bump_deflection_mm=xfb,
                        full_bump_force_n=ffb, bottoming_margin_mm=margin, bottoming_travel_mm=tb,
                        given_setup_force_n=given)


def analyse_springs(model, geom, sizing, setup, sweep_result=None) -> SpringResult | None:
    """:func:`spring_setup` of a sized batch over the travel envelope of the loads file's ``[springs]``.

    Parameters
    ----------
    sizing : tiltopt.kinematics.sizing.SizingResult
        Gives the static spring forces.
    setup : tiltopt.kinematics.loads.SpringSetup
    sweep_result : SweepResult, optional
        Its lean-0 column over its travels is used when given; otherwise one sweep at lean 0 over the
        droop, the top-out (-sag), 0 and the bump travel.

    Returns None for a mechanism without springs.
    """
    if not model.mech.springs:
        return None
    geom = geom or model.default_geometry
    if sweep_result is None:
        from .sweep import sweep

        lo, hi = setup.travel_mm
        sag = setup.sag_mm if setup.sag_mm is not None else -lo
        travels = sorted({lo, -sag, 0.0, hi})
        sweep_result = sweep(model, geom, lean_deg=[0.0], travel_mm=travels)
        sag_used = sag
    else:
        tr = np.asarray(sweep_result.travel_mm, float)
        sag_used = setup.sag_mm if setup.sag_mm is not None else max(0.0, -float(tr.min()))
    r = sweep_result
    i0 = int(np.argmin(np.abs(np.asarray(r.lean_deg, float))))
    order = np.argsort(np.asarray(r.travel_mm, float))
    lengths = r.spring_length[:, order, i0]                                 # (C, T, n)
    full = np.where(r.converged[..., None], r.spring_length, np.nan)
    flat = full.reshape(full.shape[0], -1, full.shape[-1])
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)       # a candidate with no state reached: NaN
        lo_len, hi_len = np.nanmin(flat, 1), np.nanmax(flat, 1)
    return spring_setup(model.mech, np.asarray(r.travel_mm, float)[order], lengths, sizing.spring_static_n, sag_used,
                        lo_len, hi_len)
