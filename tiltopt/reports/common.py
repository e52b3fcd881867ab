"""Shared bits of the report writers: the safety caution, atomic writes, labels and units,
provenance, and reading what the pages need out of a results run."""
from __future__ import annotations

import os
import re
import tempfile
from pathlib import Path

import numpy as np

from tiltopt.base.safety import SAFETY_CAUTION as SAFETY  # noqa: F401 (the report writers import it from here)

_UNIT_SUFFIX = [("_mm", "mm"), ("_deg", "deg"), ("_kg", "kg"), ("_nm", "N·m"), ("_n", "N"), ("_mpa", "MPa"),
                ("_pct", "%"), ("_n_per_mm", "N/mm")]

# units of the objectives (docs/formats.md names), as minimised
OBJECTIVE_UNITS = {"overall_width": "mm", "max_scrub": "mm", "max_heave": "mm", "min_clearance": "mm",
                   "linkage_mass": "kg", "slot_length": "mm", "max_camber_error": "deg"}


def atomic_write_text(path: str | Path, text: str, encoding: str = "utf-8") -> Path:
    """Write a file atomically: a temp file in the same folder, then os.replace."""
    return atomic_write_bytes(path, text.encode(encoding))


def atomic_write_bytes(path: str | Path, data: bytes) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix="." + path.name + ".", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)   # mkstemp makes 0600; give the file the usual permissions
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return path


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
    if col.startswith("obj.") and name in OBJECTIVE_UNITS:
        return OBJECTIVE_UNITS[name]
    for suf, unit in sorted(_UNIT_SUFFIX, key=lambda s: -len(s[0])):
        if name.endswith(suf):
            return unit
    if col == "violation":
        return "mm"
    if col == "generation":
        return "-"
    return "-"


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
    for suf, _ in sorted(_UNIT_SUFFIX, key=lambda s: -len(s[0])):
        if name.endswith(suf):
            name = name[: -len(suf)]
            break
    return name.replace("_", " ")


def label_with_unit(col: str, units: dict | None = None) -> str:
    u = column_unit(col, units)
    return f"{column_label(col)} [{u}]" if u and u != "-" else column_label(col)


def versions() -> dict:
    import ezdxf
    import numpy
    import plotly

    from tiltopt import __version__

    return {"tiltopt": __version__, "numpy": numpy.__version__, "plotly": plotly.__version__,
            "ezdxf": ezdxf.__version__}


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
    """Lean limit, lean step and travels of a run's envelope (config first, then run.json)."""
    spec = _get(run, "config.spec")
    env = _get(spec, "envelope")
    meta = getattr(run, "meta", {}) or {}

    def pick(key):
        v = _get(env, key)
        return v if v is not None else _get(meta, f"envelope.{key}", f"problem.envelope.{key}")

    lean, step, travel = pick("lean_limit_deg"), pick("lean_step_deg"), pick("travel_mm")
    return {"lean_limit_deg": float(lean if lean is not None else 30.0),
            "lean_step_deg": float(step) if step is not None else None,
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
