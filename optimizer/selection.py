"""From a front to the designs to build: targets, ``--where`` bounds, and the best compromise with its reasons.

A **bound** limits one column of a front: a metric (its name ends in its unit, ``max_scrub_mm``), an
objective (by its name, which means its metric as a person reads it: ``min_clearance`` is the
clearance in mm, larger is better, though the files keep it negated as ``obj.min_clearance``), or a
design variable (``var.arm_span``). Bounds come from

* the ``[targets]`` table of a run config (docs/formats.md, "Run config")::

      [targets]
      max_scrub_mm = { max = 18.0 }          # at most
      min_clearance_mm = { min = 40.0 }      # at least
      linkage_mass_kg = { min = 2.5, max = 3.5 }
      [targets.weights]                      # of the objectives in the best compromise (default 1)
      max_scrub = 2.0

* ``--where`` expressions of ``tiltopt shortlist`` (``"max_scrub_mm<=18"``, ``"40<=min_clearance_mm"``,
  ``"2.5<=linkage_mass_kg<=3.5"``), and ``--weight max_scrub=2``;
* the explorer page's filters, which it copies as either of the two.

**The best compromise** (:func:`best_compromise`) is chosen among the feasible designs that meet every
bound: each objective is scaled from the best value among them (0) to the worst value the user
accepts (1): the bound on it where one is set, else the worst value among them; the design with the
smallest weighted root-mean-square of the scaled objectives wins (compromise programming with the
ideal point of the shortlist; ties go to the first row). :class:`Choice` says how it was chosen and
what it gives up against the best design on each objective; the build sheet and the explorer page
print both. The explorer's JavaScript repeats this rule (``compromise`` in
``tiltopt/reports/templates/explorer.js``); ``tests/test_selection.py`` and the browser test hold the
two to each other.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import pandas as pd

from tiltopt.base.errors import InputError

TARGET_BOUND_KEYS = ("min", "max")
_OPS = {"<=": "max", "<": "max", ">=": "min", ">": "min"}
_NUMBER = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_NAME = r"[A-Za-z_][A-Za-z0-9_.]*"


@dataclass(frozen=True)
class Bound:
    """``lo <= column <= hi`` (either side may be None). ``name`` is what the user wrote."""

    name: str
    lo: float | None = None
    hi: float | None = None

    def text(self) -> str:
        if self.lo is not None and self.hi is not None:
            return f"{self.lo:g} <= {self.name} <= {self.hi:g}"
        return f"{self.name} >= {self.lo:g}" if self.lo is not None else f"{self.name} <= {self.hi:g}"

    def where(self) -> str:
        """As a ``--where`` expression."""
        if self.lo is not None and self.hi is not None:
            return f"{self.lo:g}<={self.name}<={self.hi:g}"
        return f"{self.name}>={self.lo:g}" if self.lo is not None else f"{self.name}<={self.hi:g}"


@dataclass(frozen=True)
class Targets:
    """Bounds and objective weights (module docs)."""

    bounds: tuple[Bound, ...] = ()
    weights: Mapping[str, float] = field(default_factory=dict)
    source: str = ""

    def __bool__(self) -> bool:
        return bool(self.bounds) or bool(self.weights)

    def to_dict(self) -> dict:
        """The ``[targets]`` table (JSON-able; what run.json and the page keep)."""
        out: dict = {}
        for b in self.bounds:
            out[b.name] = {k: v for k, v in (("min", b.lo), ("max", b.hi)) if v is not None}
        if self.weights:
            out["weights"] = dict(self.weights)
        return out

    def toml(self) -> str:
        """The ``[targets]`` table as TOML text."""
        lines = ["[targets]"]
        for b in self.bounds:
            parts = [f"{k} = {v!r}" for k, v in (("min", b.lo), ("max", b.hi)) if v is not None]
            lines.append(f"{b.name} = {{ {', '.join(parts)} }}")
        if self.weights:
            lines += ["", "[targets.weights]"] + [f"{k} = {float(v)!r}" for k, v in self.weights.items()]
        return "\n".join(lines) + "\n"


def _number(v, src, key) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise InputError(f"expected a finite number. Got {v!r} instead.", src, key)
    return float(v)


def _check_bound(b: Bound, src: str, key: str) -> Bound:
    if b.lo is None and b.hi is None:
        raise InputError("expected min, max or both (for example { max = 18.0 }).", src, key)
    if b.lo is not None and b.hi is not None and b.lo > b.hi:
        raise InputError(f"min ({b.lo:g}) is above max ({b.hi:g}): no design can meet it.", src, key)
    return b


def check_weights(weights: Mapping, src: str, key: str, objectives: Sequence[str] | None = None) -> dict:
    out = {}
    for name, v in weights.items():
        if objectives is not None and name not in objectives:
            raise InputError(f"unknown objective {name!r}: weights are given per objective ({', '.join(objectives)}).",
                             src, f"{key}.{name}")
        w = _number(v, src, f"{key}.{name}")
        if w < 0:
            raise InputError(f"a weight must be at least 0. Got {w:g} instead.", src, f"{key}.{name}")
        out[str(name)] = w
    if out and not any(w > 0 for w in out.values()) and (objectives is None or set(out) >= set(objectives)):
        raise InputError("every weight is 0: at least one objective must count.", src, key)
    return out


def parse_targets(table, src: str, known: Sequence[str] | None = None, objectives: Sequence[str] | None = None,
                  key: str = "targets") -> Targets:
    """Validate a ``[targets]`` table (module docs).

    Parameters
    ----------
    known : names a bound may name (metric columns, objective names, ``var.`` columns), or None (any).
    objectives : objective names the weights may name, or None (any).

    Raises
    ------
    InputError
        Naming the file and the key, for an unknown name, a bound without min or max, min above max,
        an unknown key of a bound, a negative weight or only zero weights.
    """
    if not isinstance(table, dict):
        raise InputError(f"expected a table of column = {{ min = ..., max = ... }}. Got {table!r} instead.", src, key)
    bounds, weights = [], {}
    for name, v in table.items():
        where = f"{key}.{name}"
        if name == "weights":
            if not isinstance(v, dict):
                raise InputError(f"expected a table of objective = weight. Got {v!r} instead.", src, where)
            weights = check_weights(v, src, where, objectives)
            continue
        if known is not None and name not in known:
            raise InputError(f"unknown column {name!r}. A target names a metric (its name ends in its unit, e.g. "
                             f"max_scrub_mm), an objective or a design variable (var.NAME); known: "
                             f"{', '.join(sorted(known)[:12])} ...", src, where)
        if not isinstance(v, dict):
            raise InputError(f"expected {{ min = ..., max = ... }}. Got {v!r} instead.", src, where)
        for k in v:
            if k not in TARGET_BOUND_KEYS:
                raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(TARGET_BOUND_KEYS)}.", src,
                                 f"{where}.{k}")
        b = Bound(str(name), _number(v["min"], src, f"{where}.min") if "min" in v else None,
                  _number(v["max"], src, f"{where}.max") if "max" in v else None)
        bounds.append(_check_bound(b, src, where))
    return Targets(tuple(bounds), weights, src)


def parse_where(expr: str, src: str = "--where") -> Bound:
    """One ``--where`` expression: ``NAME<=V``, ``NAME>=V``, ``V<=NAME``, ``V<=NAME<=W`` (``<`` and ``>`` as
    ``<=`` and ``>=``: a front's figures are continuous).

    Raises
    ------
    InputError
        When the expression is none of these, naming what arrived.
    """
    text = str(expr).replace(" ", "")
    bad = InputError(f"expected NAME<=VALUE, NAME>=VALUE or LOW<=NAME<=HIGH (for example max_scrub_mm<=18 or "
                     f"40<=min_clearance_mm). Got {expr!r}.", src)
    m = re.fullmatch(rf"({_NUMBER})(<=|<)({_NAME})(<=|<)({_NUMBER})", text)
    if m:
        return _check_bound(Bound(m.group(3), float(m.group(1)), float(m.group(5))), src, src)
    m = re.fullmatch(rf"({_NAME})(<=|<|>=|>)({_NUMBER})", text)
    if m:
        side = _OPS[m.group(2)]
        v = float(m.group(3))
        return Bound(m.group(1), v if side == "min" else None, v if side == "max" else None)
    m = re.fullmatch(rf"({_NUMBER})(<=|<|>=|>)({_NAME})", text)
    if m:
        side = {"max": "min", "min": "max"}[_OPS[m.group(2)]]      # 40<=x: x >= 40
        v = float(m.group(1))
        return Bound(m.group(3), v if side == "min" else None, v if side == "max" else None)
    raise bad


def merge_bounds(bounds: Sequence[Bound]) -> tuple[Bound, ...]:
    """One bound per name: the intersection of the bounds given for it."""
    out: dict[str, Bound] = {}
    for b in bounds:
        a = out.get(b.name)
        if a is None:
            out[b.name] = b
            continue
        lo = max((v for v in (a.lo, b.lo) if v is not None), default=None)
        hi = min((v for v in (a.hi, b.hi) if v is not None), default=None)
        out[b.name] = Bound(b.name, lo, hi)
    return tuple(out.values())


# ------------------------------------------------------------------ a front and its objectives
@dataclass(frozen=True)
class Objective:
    """An objective of a front as a person reads it: ``display = sense * obj.<name>``."""

    name: str
    column: str          # the column a bound on it reads (its metric, or obj.<name>)
    sense: float         # +1: the display value is the minimised one; -1: it is maximised (clearance)
    unit: str

    @property
    def better(self) -> str:
        return "lower" if self.sense > 0 else "higher"


def objectives_of(front: pd.DataFrame, units: Mapping | None = None) -> list[Objective]:
    """The front's objectives (its ``obj.`` columns) with the metric each is read as (the registry)."""
    from tiltopt.problems.registry import OBJECTIVES

    out = []
    for c in front.columns:
        if not str(c).startswith("obj."):
            continue
        name = c[4:]
        spec = OBJECTIVES.get(name)
        unit = (units or {}).get(c) or (spec.unit if spec else "")
        if spec is not None and spec.metric in front.columns:
            out.append(Objective(name, spec.metric, -1.0 if spec.sign < 0 else 1.0, spec.unit))
        else:
            out.append(Objective(name, c, 1.0, str(unit)))
    return out


def resolve(name: str, front: pd.DataFrame, objectives: Sequence[Objective]) -> str:
    """The column a bound's name reads: an objective name is its metric column; else the column itself.

    Raises
    ------
    InputError
        When the front has no such column.
    """
    for o in objectives:
        if name == o.name:
            return o.column
    if name in front.columns and pd.api.types.is_numeric_dtype(front[name]) and not str(name).startswith("con."):
        return name
    names = [o.name for o in objectives] + [c for c in front.columns if pd.api.types.is_numeric_dtype(front[c])
                                            and not pd.api.types.is_bool_dtype(front[c])
                                            and not str(c).startswith(("con.", "obj."))]
    raise InputError(f"the front has no column {name!r}. Give an objective ({', '.join(o.name for o in objectives)}), "
                     f"a metric or a design variable, for example: {', '.join(names[len(objectives):][:8])} ...", name)


def bounds_mask(front: pd.DataFrame, bounds: Sequence[Bound],
                objectives: Sequence[Objective] | None = None) -> np.ndarray:
    """True for the rows that meet every bound (NaN never meets one)."""
    objectives = objectives if objectives is not None else objectives_of(front)
    ok = np.ones(len(front), bool)
    for b in bounds:
        v = front[resolve(b.name, front, objectives)].to_numpy(float)
        with np.errstate(invalid="ignore"):
            if b.lo is not None:
                ok &= v >= b.lo
            if b.hi is not None:
                ok &= v <= b.hi
    return ok


# ------------------------------------------------------------------ the best compromise
@dataclass
class Choice:
    """A best compromise and why (module docs).

    Attributes
    ----------
    candidate_id : str or None
        None when no feasible design meets the bounds.
    row : int
        Its row in the front given (-1 when none).
    n_front, n_feasible, n_meeting : int
    bounds : tuple of Bound
    weights : dict of objective -> weight (every objective)
    rows : list of dict
        Per objective: ``objective``, ``unit``, ``better``, ``value`` (this design, as read), ``best``
        (the best value among the designs meeting the bounds), ``best_id``, ``gives_up`` (how much worse
        than the best, >= 0, as read), ``scale_to`` (the value scaled to 1: the bound or the worst), ``scaled``.
    method : str
        How it was chosen, in words.
    scores : ndarray of shape (n_front,)
        Each design's weighted root-mean-square of its scaled objectives (the smallest wins); NaN for the
        designs that do not meet the bounds or are infeasible.
    """

    candidate_id: str | None
    row: int
    n_front: int
    n_feasible: int
    n_meeting: int
    bounds: tuple
    weights: dict
    rows: list
    method: str
    scores: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def to_dict(self) -> dict:
        return {"candidate_id": self.candidate_id, "n_front": self.n_front, "n_feasible": self.n_feasible,
                "n_meeting": self.n_meeting, "bounds": [b.text() for b in self.bounds], "weights": self.weights,
                "rows": self.rows, "method": self.method}

    def gives_up_text(self) -> list[str]:
        """One line per objective: what this design gives up against the best design on it."""
        out = []
        for r in self.rows:
            if r["gives_up"] <= 1e-9 * max(1.0, abs(r["best"])):
                out.append(f"{r['objective']}: {r['value']:.4g} {r['unit']}, the best of the shortlist")
            else:
                word = "more" if r["better"] == "lower" else "less"
                out.append(f"{r['objective']}: {r['value']:.4g} {r['unit']}, {r['gives_up']:.3g} {r['unit']} {word} "
                           f"than the best ({r['best']:.4g} {r['unit']}, {r['best_id']})")
        return out


def best_compromise(front: pd.DataFrame, bounds: Sequence[Bound] = (), weights: Mapping | None = None,
                    units: Mapping | None = None) -> Choice:
    """The best compromise among the feasible designs of ``front`` that meet ``bounds`` (module docs)."""
    objs = objectives_of(front, units)
    bounds = merge_bounds(bounds)
    w_in = check_weights(dict(weights or {}), "weights", "weights", [o.name for o in objs])
    w = {o.name: float(w_in.get(o.name, 1.0)) for o in objs}
    feas = front["feasible"].astype(bool).to_numpy() if "feasible" in front else np.ones(len(front), bool)
    meet = feas & bounds_mask(front, bounds, objs)
    idx = np.flatnonzero(meet)
    n_feas = int(feas.sum())
    btext = "; ".join(b.text() for b in bounds)
    if not len(idx):
        why = (f"none of the {n_feas} feasible front designs meets the bounds ({btext})" if bounds
               else "the front has no feasible design")
        return Choice(None, -1, len(front), n_feas, 0, bounds, w, [], why[0].upper() + why[1:] + ".",
                      np.full(len(front), np.nan))
    ids = front["candidate_id"].astype(str).to_numpy()
    # display values (as read) and the bound each objective's column has
    by_col = {b.name: b for b in bounds}
    for b in bounds:
        by_col[resolve(b.name, front, objs)] = b
    rows, Z, W = [], [], []
    for o in objs:
        v = o.sense * front[f"obj.{o.name}"].to_numpy(float)[idx]     # as read (clearance positive)
        f = o.sense * v                                                 # minimised
        k_best = int(np.argmin(f))
        best_f = f[k_best]
        b = by_col.get(o.column) or by_col.get(o.name)
        worst_f = float(np.max(f))
        to = "the worst value among them"
        if b is not None:
            lim = b.hi if o.sense > 0 else b.lo           # the side of the bound that limits the objective
            if lim is not None:
                worst_f, to = o.sense * lim, "the bound"
        span = worst_f - best_f
        z = (f - best_f) / span if span > 0 else np.zeros_like(f)
        Z.append(z)
        W.append(w[o.name])
        rows.append({"objective": o.name, "column": o.column, "unit": o.unit, "better": o.better, "z": z,
                     "best": float(o.sense * best_f), "best_id": str(ids[idx[k_best]]),
                     "scale_to": float(o.sense * worst_f), "scale_to_is": to, "weight": w[o.name]})
    Z = np.stack(Z, 1)
    W = np.array(W)
    score = np.sqrt((Z ** 2 * W).sum(1) / max(W.sum(), 1e-300))
    k = int(np.argmin(score))
    row = int(idx[k])
    for r in rows:
        z = r.pop("z")
        v = float(front[f"obj.{r['objective']}"].iloc[row]) * (1.0 if r["better"] == "lower" else -1.0)
        r["value"] = v
        r["gives_up"] = float(v - r["best"]) if r["better"] == "lower" else float(r["best"] - v)
        r["scaled"] = float(z[k])
    ws = ", ".join(f"{o.name} {w[o.name]:g}" for o in objs)
    method = (f"{len(idx)} of the {n_feas} feasible front designs meet " +
              (f"the bounds ({btext})" if bounds else "every constraint (no bounds were set)") +
              f". Among them each objective is scaled from the best value (0) to the bound where one limits it, "
              f"else the worst value among them (1); the design with the smallest weighted root-mean-square of "
              f"the scaled objectives (weights: {ws}) is the best compromise.")
    all_scores = np.full(len(front), np.nan)
    all_scores[idx] = score
    return Choice(str(ids[row]), row, len(front), n_feas, len(idx), bounds, w, rows, method, all_scores)


def parse_weight(text: str, src: str = "--weight") -> tuple[str, float]:
    """``OBJECTIVE=W`` of ``tiltopt shortlist --weight``."""
    m = re.fullmatch(rf"\s*({_NAME})\s*=\s*({_NUMBER})\s*", str(text))
    if not m:
        raise InputError(f"expected OBJECTIVE=WEIGHT (for example max_scrub=2). Got {text!r}.", src)
    w = float(m.group(2))
    if w < 0:
        raise InputError(f"a weight must be at least 0. Got {w:g}.", src)
    return m.group(1), w
