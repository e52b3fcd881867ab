"""Design templates: a mechanism topology with named, bounded design variables.

A :class:`Template` is a base mechanism (a :class:`kinematics.Mechanism` in
its design position) plus a list of :class:`DesignVariable`. Every variable
is an affine rule on the design-position point coordinates (and, for a wheel
size variable, on the tyre radius), so the geometry of a whole population is
one matrix product::

    points(X) = P0 + (X - x0) @ A        (A built once from the rules)

Rules (the same for the built-in templates and for
:func:`template_from_mechanism`):

- A point variable names one or more points and an axis (``x``, ``y`` or ``z``).
  Its value is the coordinate of the first named point (mm, global frame,
  design position), unless its definition gives a ``default``: then the
  value is a quantity of its own whose base-mechanism value is that default
  (``wheel_offset = 50`` : the hub 50 mm outboard of the pivots). Changing
  the value by ``d`` moves every named point by ``factor * d`` along the
  axis (factor 1 unless given).
- Symmetric by construction: each moved point's mirror partner (the point
  whose name swaps ``left``/``right``, at ``(x, -y, z)``) moves by the mirrored
  amount (``-d`` in y, ``+d`` in x and z). A point on the centre plane (its own
  partner) may only move in x and z.
- The tilting linkage stays planar: an ``x`` move may not name an end of a link,
  spring or slider (they lie in planes x = const); a pin's points move together.
- A moved point takes its pin partners along (points joined to it by a pin
  coincide in the design position and keep coinciding).
- Points that no variable names keep their design coordinates.
- A wheel centre never moves in z with a point variable: the tyre must touch
  the ground, so the hub height is ``(R - r) cos(static camber) + r``. The
  ``wheel_radius`` variable (kind ``outer_radius``) changes the tyre outer
  radius R of both wheels and moves both hubs in z by ``cos(camber) dR``.

A variable whose rules break a slider (the runner off its guide line) or make
a link shorter than 1 mm is not rejected here: such candidates are invalid
geometry, which :meth:`Template.check_geometry` reports per candidate (the
optimisation problem turns that into a constraint violation with a reason).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable, Iterable, Mapping, Sequence

import numpy as np

from tiltopt.base.errors import InputError, decode_toml, read_toml
from tiltopt.base.limits import MAX_COORD_MM
from tiltopt.base.resources import config_path
from tiltopt.kinematics.disjoint_sets import DisjointSets
from tiltopt.kinematics.mechanism import Mechanism, load_mechanism, mechanism_to_toml, parse_mechanism, split_ref
from tiltopt.kinematics.mechanism import swap_lr as _swap_lr
from tiltopt.kinematics.model import Geometry, Model

SYMMETRY_TOLERANCE_MM = 0.01
MIN_MEMBER_MM = 1.0
TEMPLATE_FORMAT = "tiltopt.template/1"

POINT, OUTER_RADIUS = "point", "outer_radius"


@dataclass(frozen=True)
class Move:
    """One rule of a point variable: ``ref`` moves by ``factor * d`` along ``axis``."""

    ref: str
    axis: str          # "x" | "y" | "z"
    factor: float = 1.0


@dataclass(frozen=True)
class DesignVariable:
    """A named design variable of a template.

    Attributes
    ----------
    name : str
        Name a config or a result column uses (``var.<name>``).
    unit : str
        ``"mm"`` for every built-in variable.
    lower, upper : float
        Bounds, ``lower < upper``.
    default : float
        Value in the base mechanism.
    description : str
    kind : {'point', 'outer_radius'}
    moves : tuple of Move
        The rules of a point variable (see module docs).
    """

    name: str
    unit: str
    lower: float
    upper: float
    default: float
    description: str = ""
    kind: str = POINT
    moves: tuple[Move, ...] = ()

    def to_dict(self) -> dict:
        return {"name": self.name, "unit": self.unit, "lower": float(self.lower), "upper": float(self.upper),
                "default": float(self.default), "description": self.description, "kind": self.kind,
                "moves": [[m.ref, m.axis, float(m.factor)] for m in self.moves]}

    @classmethod
    def from_dict(cls, d: Mapping) -> "DesignVariable":
        return cls(name=d["name"], unit=d.get("unit", "mm"), lower=float(d["lower"]), upper=float(d["upper"]),
                   default=float(d["default"]), description=d.get("description", ""),
                   kind=d.get("kind", POINT), moves=tuple(Move(r, a, float(f)) for r, a, f in d.get("moves", [])))


class Template:
    """A mechanism topology with named design variables (see module docs).

    Parameters
    ----------
    name : str
    mechanism : Mechanism
        The base mechanism; its coordinates are the variables' defaults.
    variables : sequence of DesignVariable
    description : str, optional
    source : str, optional
        Where the template came from (messages).

    Raises
    ------
    InputError
        If the base mechanism is not symmetric, or a rule names an unknown
        point, an unknown axis, a centre-plane point in y, or a wheel centre in z.
    """

    def __init__(self, name: str, mechanism: Mechanism, variables: Sequence[DesignVariable],
                 description: str = "", source: str = "<memory>", allow_crossing: bool = False):
        self.name = name
        self.allow_crossing = bool(allow_crossing)
        self.mechanism = mechanism
        self.variables = list(variables)
        self.description = description or mechanism.description
        self.source = source
        self.model = Model(mechanism)
        names = [v.name for v in self.variables]
        for n in names:
            if not isinstance(n, str) or not n.isidentifier():
                raise InputError(f"design variable names are letters, digits and '_'. Got {n!r} instead.", source,
                                 "template.variables")
        if len(set(names)) != len(names):
            dup = sorted({n for n in names if names.count(n) > 1})
            raise InputError(f"design variable names must be unique. Repeated: {', '.join(dup)}.", source,
                             "template.variables")
        for v in self.variables:
            if not (math.isfinite(v.lower) and math.isfinite(v.upper) and v.lower < v.upper
                    and max(abs(v.lower), abs(v.upper), abs(v.default)) <= MAX_COORD_MM):
                raise InputError(f"the bounds of design variable '{v.name}' must be finite with lower < upper, within "
                                 f"+-{MAX_COORD_MM:g} {v.unit}. Got [{v.lower}, {v.upper}] instead.", source,
                                 f"template.bounds.{v.name}")
        self._compile()
        for v in self.variables:
            if not v.lower <= v.default <= v.upper:
                raise InputError(
                    f"design variable '{v.name}' has the value {v.default:g} {v.unit} in the base mechanism, outside "
                    f"its bounds [{v.lower:g}, {v.upper:g}]. Widen the bounds, or give its `default`: for a relative "
                    f"quantity (an offset, a spacing) the value is not the first point's coordinate.", source,
                    f"template.variables.{v.name}")

    # ------------------------------------------------------------ compile
    def _compile(self):
        mech, model = self.mechanism, self.model
        refs = model.point_refs
        idx = model.point_index
        n_pts, n_var = len(refs), len(self.variables)
        P0 = model.default_geometry.points[0]
        # mirror partner of every point
        partner = np.empty(n_pts, dtype=int)
        for i, r in enumerate(refs):
            b, p = split_ref(r)
            mr = f"{_swap_lr(b)}.{_swap_lr(p)}"
            j = idx.get(mr)
            y, z = P0[i]
            if j is None or abs(P0[j, 0] + y) > SYMMETRY_TOLERANCE_MM or abs(P0[j, 1] - z) > SYMMETRY_TOLERANCE_MM:
                raise InputError(
                    f"a template must be symmetric left/right: point {r} at [{y}, {z}] needs a mirror partner "
                    f"{mr} at [{-y}, {z}]" + (" (no such point)." if j is None else f" (it is at {list(P0[j])}).")
                    + " Make the mechanism symmetric (tiltopt.kinematics.mechanism.mirror helps).", self.source)
            partner[i] = j
        # pin groups: points joined by pins move together
        pins = DisjointSets(n_pts)
        for pin in mech.pins:
            pins.union(idx[pin.a], idx[pin.b])
        group_of = pins.groups()
        hubs = {idx[w.centre]: w for w in mech.wheels}

        A = np.zeros((n_var, n_pts, 2))
        AX = np.zeros((n_var, n_pts))
        AR = np.zeros((n_var, 2))
        planar = {idx[r] for j in (*mech.links, *mech.springs) for r in (j.a, j.b)}
        planar |= {idx[r] for s_ in mech.sliders for r in (s_.a_from, s_.a_to, s_.b)}
        X0 = model.default_geometry.x[0]
        for i, r in enumerate(refs):
            if abs(X0[partner[i]] - X0[i]) > SYMMETRY_TOLERANCE_MM:
                raise InputError(f"a template must be symmetric left/right: point {r} at x = {X0[i]:g} mm needs its "
                                 f"mirror partner {refs[partner[i]]} at the same x (it is at {X0[partner[i]]:g}).",
                                 self.source)
        x0 = np.array([v.default for v in self.variables], dtype=float)
        for k, v in enumerate(self.variables):
            key = f"template.variables.{v.name}"
            if v.kind == OUTER_RADIUS:
                R = [w.outer_radius_mm for w in mech.wheels]
                if abs(R[0] - R[1]) > SYMMETRY_TOLERANCE_MM:
                    raise InputError("a wheel_radius variable needs equal wheels.", self.source, key)
                AR[k] = 1.0
                for w in mech.wheels:
                    for p in group_of[idx[w.centre]]:
                        A[k, p, 1] = math.cos(math.radians(w.static_camber_deg))
                continue
            if v.kind != POINT:
                raise InputError(f"unknown variable kind {v.kind!r}. Expected 'point' or 'outer_radius'.",
                                 self.source, key)
            if not v.moves:
                raise InputError("a point variable must name at least one point.", self.source, key)
            target: dict[tuple[int, int], float] = {}
            for m in v.moves:
                if m.ref not in idx:
                    raise InputError(f"unknown point {m.ref!r}. Points: {', '.join(refs)}.", self.source, key)
                if m.axis not in ("x", "y", "z"):
                    raise InputError(f"expected axis 'x', 'y' or 'z'. Got {m.axis!r} instead.", self.source, key)
                ax = {"y": 0, "z": 1, "x": 2}[m.axis]
                for p in group_of[idx[m.ref]]:
                    q = int(partner[p])
                    if ax == 0 and q == p:
                        raise InputError(
                            f"point {refs[p]} lies on the centre plane; it can only move in x and z (a y move "
                            f"would break the left/right symmetry).", self.source, key)
                    if ax == 2 and (p in planar or q in planar):
                        raise InputError(
                            f"point {refs[p]} is an end of a link, spring or slider, which lie in planes x = const "
                            f"(the tilting linkage is planar): it cannot move in x.", self.source, key)
                    if ax == 1 and (p in hubs or q in hubs):
                        raise InputError(
                            f"point {refs[p]} is a wheel centre: its height follows the tyre "
                            f"((R - r) cos(camber) + r, so the tyre touches the ground). Use a wheel_radius "
                            f"variable instead.", self.source, key)
                    target[(p, ax)] = m.factor
                    for qq in group_of[q]:
                        target[(qq, ax)] = -m.factor if ax == 0 else m.factor
            for (p, ax), f in target.items():
                if ax == 2:
                    AX[k, p] = f
                else:
                    A[k, p, ax] = f
        self._P0 = P0
        self._X0 = X0
        self._AX = AX
        self._R0 = model.default_geometry.outer_radius[0].copy()
        self._x0 = x0
        self._A = A.reshape(n_var, n_pts * 2)
        self._AR = AR
        self._partner = partner
        # geometry checks (index arrays built once)
        m = model
        self._link_ends = np.array([[idx[l.a], idx[l.b]] for l in mech.links] +
                                   [[idx[s.a], idx[s.b]] for s in mech.springs], dtype=int).reshape(-1, 2)
        self._link_names = [f"link {l.name}" for l in mech.links] + [f"spring {s.name}" for s in mech.springs]
        self._sliders = np.array([[idx[s.a_from], idx[s.a_to], idx[s.b]] for s in mech.sliders],
                                 dtype=int).reshape(-1, 3)
        self._slider_names = [s.name for s in mech.sliders]
        self._hub = np.array(m.wheel_centre, dtype=int)
        self._hub_half = np.array([0.5 * w.hub_width_mm for w in mech.wheels])
        # member pairs whose tubes may not overlap (tiltopt.kinematics.clearance.member_pairs)
        from tiltopt.kinematics.clearance import member_pairs, members_of

        mem = members_of(model)
        self._cross_pairs = member_pairs(model, mem)
        self._cross_ends = (mem.ia, mem.ib, mem.radius)
        self._member_names = list(mem.names)

    # ------------------------------------------------------------ props
    @property
    def n_var(self) -> int:
        return len(self.variables)

    @property
    def names(self) -> list[str]:
        return [v.name for v in self.variables]

    @property
    def xl(self) -> np.ndarray:
        return np.array([v.lower for v in self.variables], dtype=float)

    @property
    def xu(self) -> np.ndarray:
        return np.array([v.upper for v in self.variables], dtype=float)

    @property
    def defaults(self) -> np.ndarray:
        return self._x0.copy()

    def variable(self, name: str) -> DesignVariable:
        for v in self.variables:
            if v.name == name:
                return v
        raise KeyError(name)

    def mirror_partner(self) -> np.ndarray:
        """Index of each point's mirror partner, shape (n_points,), model.point_refs order."""
        return self._partner.copy()

    # ------------------------------------------------------------ geometry
    def _check_x(self, X) -> np.ndarray:
        X = np.asarray(X, dtype=float)
        if X.ndim == 1:
            X = X[None]
        if X.ndim != 2 or X.shape[1] != self.n_var:
            raise ValueError(f"X must have shape (n, {self.n_var}) for template '{self.name}'; got {X.shape}")
        return X

    def geometry(self, X) -> Geometry:
        """Design-position geometry of a batch of design vectors.

        Parameters
        ----------
        X : ndarray of shape (n, n_var)

        Returns
        -------
        Geometry
            ``points`` of shape (n, n_points, 2) in ``model.point_refs`` order.
        """
        X = self._check_x(X)
        D = X - self._x0
        pts = self._P0[None] + (D @ self._A).reshape(len(X), -1, 2)
        R = self._R0[None] + D @ self._AR
        return self.model.batch_geometry(pts, outer_radius=R, x=self._X0[None] + D @ self._AX)

    def mechanism_for(self, x) -> Mechanism:
        """The mechanism of one design vector (same points as ``geometry(x[None])``).

        Parameters
        ----------
        x : array-like of shape (n_var,)
        """
        x = np.asarray(x, dtype=float).reshape(-1)
        g = self.geometry(x[None])
        pts, xs = g.points[0], g.x[0]
        mech = self.mechanism.with_points({r: (xs[i], pts[i, 0], pts[i, 1])
                                           for i, r in enumerate(self.model.point_refs)})
        wheels = tuple(replace(w, outer_radius_mm=float(g.outer_radius[0, k])) for k, w in enumerate(mech.wheels))
        values = ", ".join(f"{v.name} = {xv:g} {v.unit}" for v, xv in zip(self.variables, x))
        return replace(mech, wheels=wheels, name=mech.name,
                       description=(f"{self.description} [template {self.name}: {values}]").strip())

    def check_geometry(self, geom: Geometry) -> tuple[np.ndarray, list[str]]:
        """Per-candidate validity of design-position geometry (batched).

        Checks: links and springs at least 1 mm long, slider runners on their
        guide lines (guides at least 1 mm long), tyres touching the ground
        (hub height), R > r, and the tyres not overlapping (the contact points
        at least one tyre width 2r apart, right wheel to the right).

        Returns
        -------
        ok : ndarray of shape (n,), bool
        reason : list of str, length n
            "" where ok.
        """
        p = geom.points
        n = p.shape[0]
        checks: list[tuple[np.ndarray, Callable[[int], str]]] = []
        if len(self._link_ends):
            L = np.linalg.norm(p[:, self._link_ends[:, 0]] - p[:, self._link_ends[:, 1]], axis=-1)
            bad = L < MIN_MEMBER_MM
            checks.append((bad.any(1), lambda c, L=L, bad=bad: "invalid geometry: " + ", ".join(
                f"{self._link_names[j]} is {L[c, j]:.2f} mm long (at least {MIN_MEMBER_MM} mm)"
                for j in np.flatnonzero(bad[c]))))
        if len(self._sliders):
            a, b, r = (p[:, self._sliders[:, k]] for k in range(3))
            u = b - a
            Lg = np.linalg.norm(u, axis=-1)
            off = (np.abs((r[..., 0] - a[..., 0]) * u[..., 1] - (r[..., 1] - a[..., 1]) * u[..., 0])
                   / np.maximum(Lg, 1e-12))
            bad = (Lg < MIN_MEMBER_MM) | (off > 0.01)
            checks.append((bad.any(1), lambda c, off=off, bad=bad: "invalid geometry: " + ", ".join(
                f"slider {self._slider_names[j]}: runner {off[c, j]:.2f} mm off its guide line"
                for j in np.flatnonzero(bad[c]))))
        R, r, g0 = geom.outer_radius, geom.crown_radius, geom.static_camber
        zc = p[:, self._hub, 1]
        need = (R - r) * np.cos(g0) + r
        bad_r = (r >= R) | (R <= 0)
        bad_z = np.abs(zc - need) > 0.01
        checks.append(((bad_r | bad_z).any(1), lambda c: "invalid geometry: the tyres must touch the ground "
                       f"with R > r (hub z {zc[c].round(2).tolist()}, needed {need[c].round(2).tolist()})"))
        from tiltopt.kinematics.wheel_solid import pair_gap

        hub = p[:, self._hub]
        gap = pair_gap(hub[..., 0], hub[..., 1], g0, R, r, np.broadcast_to(self._hub_half, R.shape))
        right_side = hub[:, 1, 0] > hub[:, 0, 0]
        checks.append(((gap <= 0) | ~right_side, lambda c: "invalid geometry: the wheels overlap (their solids "
                       f"{gap[c]:.1f} mm apart at the design position, track "
                       f"{hub[c, 1, 0] - hub[c, 0, 0]:.1f} mm between the hubs)"))
        if len(self._cross_pairs) and not self.allow_crossing:
            from tiltopt.kinematics.clearance import _segments_gap

            ia, ib, rad = self._cross_ends
            i, j = self._cross_pairs[:, 0], self._cross_pairs[:, 1]
            over = _segments_gap(p[:, ia[i]], p[:, ib[i]], p[:, ia[j]], p[:, ib[j]]) - rad[i] - rad[j] < 0
            checks.append((over.any(1), lambda c, over=over: "invalid geometry: member tubes overlap or cross in "
                           "the front view at the design position (" + ", ".join(
                               f"{self._member_names[i[k]]} and {self._member_names[j[k]]}"
                               for k in np.flatnonzero(over[c])[:3])
                           + "); set [template] allow_crossing = true if they run at different x"))
        bad_any = np.zeros(n, dtype=bool)
        for b, _ in checks:
            bad_any |= b
        reason = [""] * n
        for c in np.flatnonzero(bad_any):
            reason[c] = "; ".join(msg(c) for b, msg in checks if b[c])
        return ~bad_any, reason

    def size_mm(self) -> float:
        """An upper bound of the template's extent (mm) over its design box.

        The largest |coordinate| any point can take within the bounds, plus the
        largest tyre outer radius. Used to scale penalties.
        """
        lo, hi = self.xl, self.xu
        mid, half = 0.5 * (lo + hi), 0.5 * (hi - lo)
        pts_mid = self._P0 + ((mid - self._x0) @ self._A).reshape(-1, 2)
        reach = np.abs(pts_mid) + (np.abs(self._A) * half[:, None]).sum(0).reshape(-1, 2)
        Rmax = float(np.max(self._R0 + ((mid - self._x0) @ self._AR) + np.abs(self._AR).T @ half))
        return float(reach.max() + Rmax)

    # ------------------------------------------------------------ derived
    def with_bounds(self, bounds: Mapping[str, Sequence[float]] | None, src: str = "<memory>") -> "Template":
        """A copy with some bounds replaced (``{name: (lower, upper)}``)."""
        if not bounds:
            return self
        known = {v.name: v for v in self.variables}
        new = []
        for name, b in bounds.items():
            if name not in known:
                raise InputError(f"unknown design variable '{name}' of template '{self.name}'. "
                                 f"Variables: {', '.join(known)}.", src, f"template.bounds.{name}")
            if not (isinstance(b, (list, tuple)) and len(b) == 2
                    and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in b)):
                raise InputError(f"expected [lower, upper] in {known[name].unit}. Got {b!r} instead.", src,
                                 f"template.bounds.{name}")
            lo, hi = float(b[0]), float(b[1])
            if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
                raise InputError(f"the bounds must be finite with lower < upper. Got [{lo}, {hi}] instead.", src,
                                 f"template.bounds.{name}")
        for v in self.variables:
            if v.name in bounds:
                v = replace(v, lower=float(bounds[v.name][0]), upper=float(bounds[v.name][1]))
            new.append(v)
        return Template(self.name, self.mechanism, new, self.description, self.source, self.allow_crossing)

    def subset(self, active: Iterable[str] | None = None, fixed: Mapping[str, float] | None = None,
               src: str = "<memory>") -> "Template":
        """A template with only the ``active`` variables; the others are held.

        Held variables keep their default, or the value in ``fixed``; the new
        base mechanism is the mechanism at those values.
        """
        fixed = dict(fixed or {})
        known = self.names
        for name, val in fixed.items():
            if name not in known:
                raise InputError(f"unknown design variable '{name}' of template '{self.name}'. "
                                 f"Variables: {', '.join(known)}.", src, f"template.fixed.{name}")
            if isinstance(val, bool) or not isinstance(val, (int, float)) or not math.isfinite(val) \
                    or abs(val) > MAX_COORD_MM:
                raise InputError(f"expected a finite number within +-{MAX_COORD_MM:g}. Got {val!r} instead.", src,
                                 f"template.fixed.{name}")
        active = [n for n in known if n not in fixed] if active is None else list(active)
        for name in active:
            if name not in known:
                raise InputError(f"unknown design variable '{name}' of template '{self.name}'. "
                                 f"Variables: {', '.join(known)}.", src, "template.variables")
            if name in fixed:
                raise InputError(f"design variable '{name}' is both active and fixed. Remove it from one of "
                                 f"template.variables and template.fixed.", src, f"template.fixed.{name}")
        if not active:
            raise InputError("a template needs at least one active design variable.", src, "template.variables")
        if active == known and not fixed:
            return self
        x = self._x0.copy()
        for k, name in enumerate(known):
            if name in fixed:
                x[k] = float(fixed[name])
        ok, reason = self.check_geometry(self.geometry(x[None]))
        if not ok[0]:   # the held values make the base mechanism itself impossible
            raise InputError(f"these fixed values give no valid mechanism ({reason[0]}). Change them.", src,
                             "template.fixed")
        base = self.mechanism_for(x)
        base = replace(base, description=self.mechanism.description, name=self.mechanism.name)
        vars_ = [self.variable(n) for n in active]
        return Template(self.name, base, vars_, self.description, self.source, self.allow_crossing)

    # ------------------------------------------------------------ I/O
    def to_dict(self) -> dict:
        """A JSON-able description from which :meth:`from_dict` rebuilds the same template."""
        return {"format": TEMPLATE_FORMAT, "name": self.name, "description": self.description,
                "mechanism_toml": mechanism_to_toml(self.mechanism),
                "variables": [v.to_dict() for v in self.variables], "allow_crossing": self.allow_crossing}

    @classmethod
    def from_dict(cls, d: Mapping, src: str = "<memory>") -> "Template":
        if d.get("format") != TEMPLATE_FORMAT:
            raise InputError(f"expected a template dict of format {TEMPLATE_FORMAT!r}. Got {d.get('format')!r}.",
                             src, "format")
        mech = parse_mechanism(decode_toml(d["mechanism_toml"], src), src)
        return cls(d["name"], mech, [DesignVariable.from_dict(v) for v in d["variables"]],
                   d.get("description", ""), src, bool(d.get("allow_crossing", False)))

    def __repr__(self) -> str:
        return f"Template({self.name!r}, n_var={self.n_var}, variables={self.names})"


# ---------------------------------------------------------------- from a mechanism
_VAR_KEYS = {"name", "points", "axis", "factors", "lower", "upper", "default", "unit", "description", "kind"}


def template_from_mechanism(mech: Mechanism, variables: Sequence[Mapping | DesignVariable], name: str | None = None,
                            src: str = "<memory>", key: str = "template.variables") -> Template:
    """Turn any symmetric mechanism into a template by naming the coordinates that vary.

    Parameters
    ----------
    mech : Mechanism
        Symmetric left/right (every point has a mirror partner).
    variables : sequence of dict or DesignVariable
        Each dict: ``name``, ``points`` (list of ``"body.point"``), ``axis``
        (``"y"`` or ``"z"``), ``lower``, ``upper``; optional ``factors`` (one
        per point, default 1), ``default`` (the variable's value in the
        base mechanism; default: the first point's coordinate), ``unit`` (default ``"mm"``), ``description``. Or
        ``kind = "outer_radius"`` (a wheel size variable; no points, default
        the tyre outer radius). Pin partners and mirror partners follow (see
        module docs).
    name : str, optional
        Default: the mechanism's name.

    Returns
    -------
    Template
    """
    out = []
    idx = {r: i for i, r in enumerate(mech.point_refs)}
    for i, v in enumerate(variables):
        if isinstance(v, DesignVariable):
            out.append(v)
            continue
        w = f"{key}[{i}]"
        if not isinstance(v, Mapping):
            raise InputError(f"expected a table of a design variable. Got {v!r} instead.", src, w)
        for k in v:
            if k not in _VAR_KEYS:
                raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(sorted(_VAR_KEYS))}.", src,
                                 f"{w}.{k}")
        for k in ("name", "lower", "upper"):
            if k not in v:
                raise InputError("this key is required but missing.", src, f"{w}.{k}")
        nm = v["name"]
        if not isinstance(nm, str) or not nm.isidentifier():
            raise InputError(f"expected a name of letters, digits and '_'. Got {nm!r} instead.", src, f"{w}.name")
        nums = {}
        for k in ("lower", "upper", "default"):
            if k in v:
                x = v[k]
                if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
                    raise InputError(f"expected a finite number. Got {x!r} instead.", src, f"{w}.{k}")
                nums[k] = float(x)
        if not nums["lower"] < nums["upper"]:
            raise InputError(f"expected lower < upper. Got lower {nums['lower']} and upper {nums['upper']}.",
                             src, f"{w}.upper")
        kind = v.get("kind", POINT)
        if kind == OUTER_RADIUS:
            if "points" in v or "axis" in v:
                raise InputError("a wheel size variable (kind = 'outer_radius') names no points or axis.", src, w)
            default = nums.get("default", mech.wheels[0].outer_radius_mm)
            out.append(DesignVariable(nm, v.get("unit", "mm"), nums["lower"], nums["upper"], default,
                                      v.get("description", "tyre outer radius R of both wheels"), OUTER_RADIUS))
            continue
        if kind != POINT:
            raise InputError(f"expected kind 'point' or 'outer_radius'. Got {kind!r} instead.", src, f"{w}.kind")
        for k in ("points", "axis"):
            if k not in v:
                raise InputError("this key is required but missing.", src, f"{w}.{k}")
        pts = v["points"]
        if isinstance(pts, str):
            pts = [pts]
        if not isinstance(pts, list) or not pts or not all(isinstance(p, str) for p in pts):
            raise InputError(f"expected a list of point references 'body.point'. Got {v['points']!r}.", src,
                             f"{w}.points")
        for p in pts:
            if p not in idx:
                raise InputError(f"unknown point {p!r}. Points: {', '.join(mech.point_refs)}.", src, f"{w}.points")
        axis = v["axis"]
        if axis not in ("x", "y", "z"):
            raise InputError(f"expected 'x', 'y' or 'z'. Got {axis!r} instead.", src, f"{w}.axis")
        factors = v.get("factors", [1.0] * len(pts))
        if not isinstance(factors, list) or len(factors) != len(pts) or not all(
                isinstance(f, (int, float)) and not isinstance(f, bool) and math.isfinite(f) for f in factors):
            raise InputError(f"expected one finite factor per point ({len(pts)}). Got {factors!r}.", src,
                             f"{w}.factors")
        default = nums.get("default", mech.point3(pts[0])["xyz".index(axis)])
        out.append(DesignVariable(nm, v.get("unit", "mm"), nums["lower"], nums["upper"], default,
                                  v.get("description", f"{axis} of {', '.join(pts)}"), POINT,
                                  tuple(Move(p, axis, float(f)) for p, f in zip(pts, factors))))
    return Template(name or mech.name, mech, out, mech.description, src)


# ---------------------------------------------------------------- built-ins
BUILTIN_NAMES = ("twin_beam", "twin_beam_sprung", "wishbone_rocker")
_ENTRY_KEYS = {"template", "mechanism", "description", "default_active", "variables"}


@dataclass(frozen=True)
class TemplateEntry:
    """A built-in template: its variable file (``configs/<name>_template.toml``), mechanism file,
    variable definitions (the dict form of :func:`template_from_mechanism`) and default active set."""

    name: str
    path: Path
    mechanism_file: Path
    description: str
    variables: tuple
    default_active: tuple[str, ...]


def load_template_entry(path: str | Path) -> TemplateEntry:
    """Read a template variable file (see ``configs/twin_beam_template.toml``).

    Keys: ``template`` (name), ``mechanism`` (file, relative to this one), ``description``,
    ``default_active`` (list of names, optional: all), ``[[variables]]`` (as
    :func:`template_from_mechanism`).
    """
    path = Path(path)
    src = str(path)
    data = read_toml(path, "template variable .toml")
    for k in data:
        if k not in _ENTRY_KEYS:
            raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(sorted(_ENTRY_KEYS))}.", src, k)
    for k in ("template", "mechanism", "variables"):
        if k not in data:
            raise InputError("this key is required but missing.", src, k)
    variables = data["variables"]
    if not isinstance(variables, list) or not all(isinstance(v, dict) for v in variables):
        raise InputError("expected [[variables]] tables.", src, "variables")
    names = [v.get("name") for v in variables]
    active = data.get("default_active", names)
    if not isinstance(active, list) or any(a not in names for a in active):
        raise InputError(f"default_active must list variable names ({', '.join(map(str, names))}).", src,
                         "default_active")
    return TemplateEntry(str(data["template"]), path, path.parent / str(data["mechanism"]),
                         str(data.get("description", "")), tuple(variables), tuple(active))


def _builtin_entries() -> dict[str, TemplateEntry]:
    out = {}
    for name in BUILTIN_NAMES:
        e = load_template_entry(config_path(f"{name}_template.toml"))
        if e.name != name:
            raise InputError(f"expected template = {name!r}. Got {e.name!r}.", str(e.path), "template")
        out[name] = e
    return out


#: the built-in templates, from configs/<name>_template.toml
TEMPLATES: dict[str, TemplateEntry] = _builtin_entries()


def template_from_entry(e: TemplateEntry) -> Template:
    """The full template (every variable) of a template variable file."""
    mech = load_mechanism(e.mechanism_file)
    t = template_from_mechanism(mech, list(e.variables), name=e.name, src=str(e.path), key="variables")
    t.description = e.description or t.description
    return t


def get_template(name: str, bounds: Mapping[str, Sequence[float]] | None = None,
                 variables: Iterable[str] | None = None, fixed: Mapping[str, float] | None = None,
                 src: str = "<memory>") -> Template:
    """A built-in template by name.

    Parameters
    ----------
    name : {'twin_beam', 'twin_beam_sprung', 'wishbone_rocker'}
    bounds : dict of str -> (lower, upper), optional
        Bound overrides.
    variables : list of str, optional
        The active variables (default: the template's default set, every
        variable but ``wheel_radius``, less those in ``fixed``).
    fixed : dict of str -> float, optional
        Values for held variables (default: their defaults).
    """
    if name not in TEMPLATES:
        raise InputError(f"unknown template {name!r}. Templates: {', '.join(TEMPLATES)}.", src, "template.name")
    e = TEMPLATES[name]
    full = template_from_entry(e)
    # bounds first (they may name held variables too), then the subset
    t = full.with_bounds(bounds, src)
    if variables is None:   # the default set, less any variable the caller holds
        variables = [v for v in e.default_active if v not in (fixed or {})]
    return t.subset(list(variables), fixed, src)
