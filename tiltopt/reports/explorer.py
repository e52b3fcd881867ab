"""The Pareto explorer: one self-contained, offline HTML page.

The page holds plotly.js (from the installed plotly package, never a network
address), the candidates of one or more runs as JSON, and for the shown
candidates the precomputed point positions of every lean x travel state
(one batched sweep per run), so that its own JavaScript draws the linkage,
its curves and its tables without a server.

Python API
----------
- :class:`ExplorerRun` - what the page needs of one run.
- :func:`run_from_results` - an :class:`ExplorerRun` from ``tiltopt.optimizer.results.load_run``.
- :func:`build_explorer` - the page as a string; :func:`write_explorer` writes it atomically.
"""
from __future__ import annotations

import datetime as _dt
import json
import math
import re
import shlex
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from tiltopt.base.provenance import package_versions
from tiltopt.kinematics.model import Geometry, Model
from tiltopt.optimizer.pareto import nondominated_mask

from .analysis import analyse, lean_grid, state_clearance
from .common import SAFETY, atomic_write_text, column_label, column_unit

# Our own colour scheme: categorical colours for runs/templates, and a
# continuous scale from deep sea blue through teal to sand.
CATEGORICAL = ["#0d7c86", "#c8553d", "#6a4c93", "#d4a017", "#2f8f4e", "#b0417a", "#4d7ea8", "#8a6d3b"]
CONTINUOUS = [[0.0, "#14325c"], [0.35, "#1f7a8c"], [0.7, "#8fc0a9"], [1.0, "#f2d492"]]

_META_COLUMNS = {"candidate_id", "generation", "feasible", "violation", "reason"}


@dataclass
class ExplorerRun:
    """One run as the explorer shows it.

    Attributes
    ----------
    run_id : str
    front : pandas.DataFrame
        The run's non-dominated designs, docs/formats.md columns.
    model : kinematics.Model
        The template's topology.
    geometry_for : callable
        ``geometry_for(rows) -> Geometry`` for a DataFrame of rows of this run (batched).
    lean_limit_deg : float
    travel_mm : sequence of float
    evaluations : pandas.DataFrame, optional
        Every evaluated design; its infeasible rows are shown on demand.
    units : dict of column -> unit
    """

    run_id: str
    front: pd.DataFrame
    model: Model
    geometry_for: Callable[[pd.DataFrame], Geometry]
    lean_limit_deg: float
    travel_mm: Sequence[float] = (0.0,)
    lean_step_deg: float | None = None
    both_sides: bool = False
    evaluations: pd.DataFrame | None = None
    template: str = ""
    units: dict = field(default_factory=dict)
    run_dir: str | None = None
    shell: object | None = None
    meta: dict = field(default_factory=dict)


def run_from_results(run, run_dir: str | Path | None = None) -> ExplorerRun:
    """Adapter from ``tiltopt.optimizer.results.Run`` (see docs/formats.md)."""
    from .common import run_envelope, run_shell, run_units

    tpl = run.template
    var_cols = [f"var.{v.name}" for v in tpl.variables]
    env = run_envelope(run)

    def geometry_for(rows: pd.DataFrame) -> Geometry:
        return tpl.geometry(rows[var_cols].to_numpy(dtype=float))

    return ExplorerRun(
        run_id=str(run.run_id), front=run.front, model=tpl.model, geometry_for=geometry_for,
        lean_limit_deg=env["lean_limit_deg"], travel_mm=env["travel_mm"], lean_step_deg=env.get("lean_step_deg"),
        both_sides=env["both_sides"],
        evaluations=run.evaluations, template=getattr(tpl, "name", ""), units=run_units(run),
        run_dir=str(run_dir) if run_dir is not None else None, shell=run_shell(run), meta=dict(run.meta or {}))


# ----------------------------------------------------------------- helpers
def non_dominated(F: np.ndarray) -> np.ndarray:
    """Boolean mask of the non-dominated rows of F (all objectives minimised): the optimiser's own filter
    (:func:`tiltopt.optimizer.pareto.nondominated_mask`) over the rows with every objective finite; a row
    with NaN or inf is neither kept nor counted as dominating.

    F : ndarray of shape (n, m).
    """
    F = np.asarray(F, float)
    ok = np.all(np.isfinite(F), axis=1)
    keep = np.zeros(len(F), dtype=bool)
    keep[ok] = nondominated_mask(F[ok])
    return keep


def _clean(v):
    if v is None:
        return None
    if isinstance(v, (np.floating, float)):
        return None if not math.isfinite(float(v)) else float(f"{float(v):.7g}")
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (np.bool_,)):
        return bool(v)
    return v


def _round_list(a: np.ndarray, digits: int) -> list:
    a = np.round(np.asarray(a, float), digits)
    return [None if not math.isfinite(x) else (int(x) if digits == 0 else float(x)) for x in a.ravel()]


def _detail(an, k: int) -> dict:
    """JSON of one candidate's states (index k of the analysis batch)."""
    r = an.sweep
    T, L = r.status.shape[1:]
    ok = r.converged[k]
    pts = np.round(r.points[k] * 10.0)                                   # 0.1 mm
    states = []
    for t in range(T):
        row = []
        for l in range(L):
            if not ok[t, l]:
                row.append(None)
                continue
            row.append({"p": [int(v) for v in pts[t, l].ravel()],
                        "c": [round(float(v), 5) for v in r.camber[k, t, l]],
                        "o": [round(float(an.pose[k, t, l, 0]), 2), round(float(an.pose[k, t, l, 1]), 2),
                              round(float(an.pose[k, t, l, 2]), 6)]})
        states.append(row)
    deg = 180.0 / math.pi
    gap_all, gap_label = state_clearance(an)
    gap = gap_all[k]
    curves = {
        "scrub_mm": [_round_list(r.scrub[k, t], 3) for t in range(T)],
        "heave_mm": [_round_list(r.heave[k, t], 3) for t in range(T)],
        "camber_error_left_deg": [_round_list(r.camber_error[k, t, :, 0] * deg, 4) for t in range(T)],
        "camber_error_right_deg": [_round_list(r.camber_error[k, t, :, 1] * deg, 4) for t in range(T)],
        "gap_mm": [_round_list(gap[t], 2) for t in range(T)],
    }
    status = [[None if ok[t, l] else r.status_text(k, t, l) for l in range(L)] for t in range(T)]
    wheels = [[float(an.geom.outer_radius[k, i]), float(an.geom.crown_radius[k, i])] for i in range(2)]
    return {"s": states, "curves": curves, "status": status, "wheels": wheels, "gap_label": gap_label}


def _travel_subset(travel_mm) -> np.ndarray:
    """At most three travels for the page (droop, ride height, bump); the sheet has them all."""
    t = np.unique(np.asarray(travel_mm, float))
    if len(t) <= 3:
        return t
    return np.unique([t.min(), t[np.argmin(np.abs(t))], t.max()])


def _rows_of(run: ExplorerRun, infeasible_limit: int) -> pd.DataFrame:
    front = run.front.copy()
    front["__front"] = True
    parts = [front]
    if run.evaluations is not None and len(run.evaluations):
        ev = run.evaluations
        bad = ev[~ev["feasible"].astype(bool)]
        bad = bad[~bad["candidate_id"].isin(front["candidate_id"])]
        if len(bad) > infeasible_limit:
            bad = bad.sample(infeasible_limit, random_state=0)
        bad = bad.copy()
        bad["__front"] = False
        parts.append(bad)
    rows = pd.concat(parts, ignore_index=True)
    rows["__run"] = run.run_id
    rows["__template"] = run.template or run.model.mech.name
    return rows


def build_data(runs: Sequence[ExplorerRun], *, detail_limit: int = 800, infeasible_detail: int = 40,
               infeasible_limit: int = 2000, clearance_limit: int = 200, title: str = "Pareto explorer") -> dict:
    """The JSON the page embeds (see module docs)."""
    if not runs:
        raise ValueError("no runs")
    frames = [_rows_of(r, infeasible_limit) for r in runs]
    rows = pd.concat(frames, ignore_index=True)
    units: dict = {}
    for r in runs:
        units.update(r.units or {})
    obj_cols = [c for c in rows.columns if c.startswith("obj.")]
    common_obj = [c for c in obj_cols if all(c in r.front.columns for r in runs)]
    var_cols = [c for c in rows.columns if c.startswith("var.")]
    con_cols = [c for c in rows.columns if c.startswith("con.") and pd.api.types.is_numeric_dtype(rows[c])]
    metric_cols = [c for c in rows.columns
                   if not c.startswith(("obj.", "var.", "con.", "__")) and c not in _META_COLUMNS
                   and pd.api.types.is_numeric_dtype(rows[c]) and not pd.api.types.is_bool_dtype(rows[c])]
    feasible = rows["feasible"].astype(bool).to_numpy()
    merged = np.zeros(len(rows), bool)
    cand = np.flatnonzero(feasible & rows["__front"].to_numpy())
    if len(cand) and common_obj:
        merged[cand] = non_dominated(rows.iloc[cand][common_obj].to_numpy(float))

    columns = []
    for c, group in [(c, "objective") for c in obj_cols] + [(c, "variable") for c in var_cols] + \
            [(c, "metric") for c in metric_cols] + [(c, "constraint") for c in con_cols] + \
            [("generation", "meta"), ("violation", "meta")]:
        if c not in rows.columns:
            continue
        columns.append({"key": c, "label": column_label(c), "unit": column_unit(c, units), "group": group})
    values = {c["key"]: [_clean(v) for v in rows[c["key"]].to_numpy()] for c in columns}

    run_info = []
    detail: dict[str, dict] = {}
    for ri, (run, fr) in enumerate(zip(runs, frames)):
        lean = lean_grid(run.lean_limit_deg, run.lean_step_deg, finest_deg=5.0, both_sides=run.both_sides)
        travel = _travel_subset(run.travel_mm)
        offset = sum(len(f) for f in frames[:ri])
        is_front = fr["__front"].to_numpy()
        ok_rows = np.flatnonzero(is_front)
        if len(ok_rows) > detail_limit:   # spread the precomputed designs evenly along the front's rows
            ok_rows = ok_rows[np.unique(np.linspace(0, len(ok_rows) - 1, detail_limit).round().astype(int))]
        bad_rows = np.flatnonzero(~is_front)[:infeasible_detail]
        pick = np.concatenate([ok_rows, bad_rows]).astype(int)
        notes: list[str] = []
        spec = None
        shell_poly = None
        if len(pick):
            geom = run.geometry_for(fr.iloc[pick])
            an = analyse(run.model, geom, lean, travel, shell=run.shell, want_sizing=False,
                         want_clearance=len(pick) <= clearance_limit)
            notes = an.notes
            spec = an.spec
            shell_poly = None if an.shell_poly is None else np.round(an.shell_poly, 2).tolist()
            for k, i in enumerate(pick):
                detail[str(offset + int(i))] = _detail(an, k)
        if len(fr) > len(pick):
            notes.append(f"Drawings are precomputed for {len(pick)} of the {len(fr)} designs shown from this run "
                         f"({len(ok_rows)} front designs spread along the front and {len(bad_rows)} infeasible "
                         f"ones); raise --detail-limit for more.")
        run_info.append({
            "id": run.run_id, "template": run.template or run.model.mech.name,
            "dir": run.run_dir or run.run_id, "lean_deg": [float(v) for v in lean],
            "travel_mm": [float(v) for v in travel], "spec": spec, "shell": shell_poly, "notes": notes,
            "seed": run.meta.get("seed"), "config": run.meta.get("config"),
            "sheet_cmd": f"tiltopt sheet {shlex.quote(run.run_dir or run.run_id)} --candidate ",
            "n_front": int(is_front.sum()), "n_infeasible": int((~is_front).sum()),
        })
    run_index = {r.run_id: i for i, r in enumerate(runs)}
    templates = sorted(set(rows["__template"]))
    return {
        "title": title,
        "generated": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "versions": package_versions(),
        "safety": SAFETY,
        "runs": run_info,
        "templates": templates,
        "columns": columns,
        "objectives": obj_cols,
        "common_objectives": common_obj,
        "n": int(len(rows)),
        "ids": rows["candidate_id"].astype(str).tolist(),
        "run": [run_index[r] for r in rows["__run"]],
        "template": [templates.index(t) for t in rows["__template"]],
        "feasible": feasible.tolist(),
        "front": rows["__front"].astype(bool).tolist(),
        "merged": merged.tolist(),
        "reason": [str(v) if isinstance(v, str) else "" for v in rows.get("reason", pd.Series([""] * len(rows)))],
        "values": values,
        "detail": detail,
        "palette": CATEGORICAL,
        "scale": CONTINUOUS,
    }


def _asset(name: str) -> str:
    return resources.files("tiltopt.reports").joinpath("templates", name).read_text(encoding="utf-8")


def _script_json(obj) -> str:
    text = json.dumps(obj, separators=(",", ":"), allow_nan=False)
    return text.replace("</", "<\\/").replace("<!--", "<\\!--")


def build_explorer(runs: Sequence[ExplorerRun], *, plotly_src: str | None = None, **kw) -> str:
    """The explorer page as one HTML string.

    Parameters
    ----------
    plotly_src : str, optional
        Relative file name of a plotly.js written beside the page; default:
        plotly.js embedded in the page.
    """
    from plotly.offline import get_plotlyjs

    data = build_data(runs, **kw)
    page = _asset("explorer.html")
    if plotly_src:
        plotly_tag = f'<script src="{plotly_src}"></script>'
    else:
        plotly_tag = "<script>" + get_plotlyjs().replace("</script", "<\\/script") + "</script>"
    subs = {
        "{{TITLE}}": _escape(data["title"]),
        "{{CSS}}": _asset("explorer.css"),
        "{{PLOTLY}}": plotly_tag,
        "{{DATA}}": _script_json(data),
        "{{JS}}": _asset("explorer.js"),
    }
    return re.sub("|".join(re.escape(k) for k in subs), lambda m: subs[m.group(0)], page)


def _escape(s: str) -> str:
    import html

    return html.escape(s)


def write_explorer(path: str | Path, runs: Sequence[ExplorerRun], *, beside: bool = False, **kw) -> Path:
    """Write the page atomically; with ``beside`` plotly.js goes in a file next to it."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    src = None
    if beside:
        from plotly.offline import get_plotlyjs

        src = "plotly.min.js"
        atomic_write_text(path.parent / src, get_plotlyjs())
    atomic_write_text(path, build_explorer(runs, plotly_src=src, **kw))
    return path
