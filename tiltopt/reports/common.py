"""Shared bits of the report writers: the safety caution, atomic writes (tiltopt.base.files), labels and units,
provenance, and reading what the pages need out of a results run."""
from __future__ import annotations

import re

import numpy as np

from tiltopt.base.files import atomic_write_bytes, atomic_write_text  # noqa: F401 (the report writers' writer)
from tiltopt.base.safety import SAFETY_CAUTION as SAFETY  # noqa: F401 (the report writers import it from here)
from tiltopt.base.units import name_ending, unit_of_name
from tiltopt.problems.registry import OBJECTIVES


def column_unit(col: str, units: dict | None = None) -> str:
    """Unit of a results column: the Parquet metadata first, then the name's suffix."""
    if col == "violation":
        return "sum over constraints"
    if col == "generation":
        return "-"
    if units and units.get(col):
        u = str(units[col])
        return "-" if u == "1" else u
    name = col.split(".", 1)[1] if col.startswith(("obj.", "var.")) else col
    if col.startswith("obj.") and name in OBJECTIVES:
        return OBJECTIVES[name].unit
    return unit_of_name(name, "-")


def column_label(col: str) -> str:
    """Readable label of a results column, without its unit."""
    if col.startswith("obj."):
        name = col[4:]
        if name == "min_clearance":
            return "min clearance, negated"
        return name.replace("_", " ")
    if col.startswith("con."):
        return "constraint " + col[4:].replace("_", " ") + " (feasible at or below 0)"
    name = col[4:] if col.startswith("var.") else col
    end = name_ending(name)
    if end:
        name = name[: -len(end[0])]
    return name.replace("_", " ")


def label_with_unit(col: str, units: dict | None = None) -> str:
    u = column_unit(col, units)
    return f"{column_label(col)} [{u}]" if u and u != "-" else column_label(col)


# ---------------------------------------------------------------- runs
def _get(obj, *names, default=None):
    for n in names:
        cur = obj
        ok = True
        for part in n.split("."):
            if cur is None:
                ok = False
                break
            if isinstance(cur, dict):
                if part not in cur:
                    ok = False
                    break
                cur = cur[part]
            else:
                try:   # a property that cannot answer (e.g. a merged run without a config) counts as absent
                    cur = getattr(cur, part)
                except Exception:
                    ok = False
                    break
        if ok and cur is not None:
            return cur
    return default


def run_envelope(run) -> dict:
    """Lean limit, lean step, both sides and travels of a run's envelope (config first, then run.json)."""
    spec = _get(run, "config.spec")
    env = _get(spec, "envelope")
    meta = getattr(run, "meta", {}) or {}

    def pick(key):
        v = _get(env, key)
        return v if v is not None else _get(meta, f"envelope.{key}", f"problem.envelope.{key}")

    lean, step, travel = pick("lean_limit_deg"), pick("lean_step_deg"), pick("travel_mm")
    return {"lean_limit_deg": float(lean if lean is not None else 30.0),
            "lean_step_deg": float(step) if step is not None else None,
            "both_sides": bool(pick("both_sides") or False),
            "travel_mm": [float(t) for t in (np.atleast_1d(travel) if travel is not None else [0.0])]}


def run_shell(run):
    spec = _get(run, "config.spec")
    return _get(spec, "shell")


def run_loads(run):
    spec = _get(run, "config.spec")
    return _get(spec, "loads")


def run_units(run) -> dict:
    for attr in ("units",):
        u = getattr(run, attr, None)
        if isinstance(u, dict):
            return u
    meta = getattr(run, "meta", {}) or {}
    u = meta.get("units")
    return dict(u) if isinstance(u, dict) else {}


def safe_name(s: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", s)
