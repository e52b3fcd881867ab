"""The Pareto explorer: one self-contained, offline HTML page, and the detail it asks ``--serve`` for.

The page holds plotly.js (from the installed plotly package, never a network address), every shown
design's values (objectives as a person reads them, design variables, metrics: float32 columns,
gzip-compressed, decoded by the browser's own ``DecompressionStream``), the drawing description of
each run's topology, and the detail (:mod:`tiltopt.reports.detail`: every state's drawing, curves
and clearances) of a few designs per run: its best compromise, the best design on each objective
and some spread along the front. ``tiltopt explore --serve`` computes the detail of any other design
when the page asks for it (``/detail/<row>.json`` on 127.0.0.1, :class:`Explorer.detail_json`), so
every design of any front opens its drawing, curves and tables; opened from a file, the page says
how to get the detail of a design it does not hold.

Why the detail is computed by tiltopt and not in the page: the drawing, curves and clearances then
come from the same sweep, 3-D clearance search of the wheel solids and front-view marks as the run's
figures and the build sheet, so the page can never disagree with them, and the page stays small
however large the front (a 10,000-design front: ``benchmarks/explorer.py``).

Python API
----------
- :class:`ExplorerRun` - what the page needs of one run.
- :func:`run_from_results` - an :class:`ExplorerRun` from ``tiltopt.optimizer.results.load_run``.
- :class:`Explorer` - the page (:meth:`Explorer.html`) and the detail of any of its designs.
- :func:`build_explorer` - the page as a string; :func:`write_explorer` writes it atomically.
"""
from __future__ import annotations

import base64
import datetime as _dt
import gzip
import json
import re
import shlex
import threading
from collections import OrderedDict
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Callable, Sequence

import numpy as np
import pandas as pd

from tiltopt.base.provenance import package_versions
from tiltopt.kinematics.model import Geometry, Model
from tiltopt.optimizer.pareto import nondominated_mask

from .common import SAFETY, atomic_write_text, column_label, column_unit

# Our own colour scheme: categorical colours for runs/templates, and a
# continuous scale from deep sea blue through teal to sand.
CATEGORICAL = ["#0d7c86", "#c8553d", "#6a4c93", "#d4a017", "#2f8f4e", "#b0417a", "#4d7ea8", "#8a6d3b"]
CONTINUOUS = [[0.0, "#14325c"], [0.35, "#1f7a8c"], [0.7, "#8fc0a9"], [1.0, "#f2d492"]]

_META_COLUMNS = {"candidate_id", "generation", "feasible", "violation", "reason", "source_run",
                 "source_candidate_id"}
#: metrics offered as filters beside the objectives, when the front has them (docs/formats.md names)
KEY_METRICS = ("max_camber_error_deg", "design_track_mm", "motion_ratio", "tilt_lock_torque_nm", "linkage_mass_kg",
               "min_clearance_mm", "min_wheel_carrier_mm", "overall_width_mm", "lean_sweep_width_mm",
               "max_scrub_mm", "max_heave_mm", "spring_stroke_mm", "max_spring_force_n", "max_utilisation")
#: designs per run whose detail the page holds (besides its best compromise and each objective's best)
DEFAULT_DETAIL_LIMIT = 24
DETAIL_CACHE = 256


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
        Every evaluated design; a sample of its infeasible rows is shown on demand, and all are counted.
    units : dict of column -> unit
    targets : tiltopt.optimizer.selection.Targets, optional
        The run config's ``[targets]``.
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
    targets: object | None = None
    shortlist_dir: str | None = None     # the folder `tiltopt shortlist` reads (a merged front's own folder)


def run_from_results(run, run_dir: str | Path | None = None, front: pd.DataFrame | None = None,
                     shortlist_dir: str | None = None) -> ExplorerRun:
    """Adapter from ``tiltopt.optimizer.results.Run`` (see docs/formats.md).

    ``front`` replaces the run's own front (the rows of a merged front that came from this run).
    """
    from .common import run_envelope, run_shell, run_units

    tpl = run.template
    var_cols = [f"var.{v.name}" for v in tpl.variables]
    env = run_envelope(run)

    def geometry_for(rows: pd.DataFrame) -> Geometry:
        return tpl.geometry(rows[var_cols].to_numpy(dtype=float))

    targets = None
    try:
        targets = run.config.targets
    except Exception:  # a run without a config (from code, or an older tiltopt): no targets
        targets = None
    return ExplorerRun(
        run_id=str(run.run_id), front=run.front if front is None else front, model=tpl.model,
        geometry_for=geometry_for, lean_limit_deg=env["lean_limit_deg"], travel_mm=env["travel_mm"],
        lean_step_deg=env.get("lean_step_deg"), both_sides=env["both_sides"], evaluations=run.evaluations,
        template=getattr(tpl, "name", ""),
        units=run_units(run), run_dir=str(run_dir) if run_dir is not None else None, shell=run_shell(run),
        meta=dict(run.meta or {}), targets=targets, shortlist_dir=shortlist_dir)


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


def pack_columns(arrays: Sequence[np.ndarray]) -> str:
    """Columns as float32 (NaN for missing), column after column, bytes shuffled (the 1st bytes of every
    value, then the 2nd ...: far better for gzip), gzip-compressed, base64: the page's ``values``."""
    if not arrays:
        return ""
    a = np.ascontiguousarray(np.stack([np.asarray(x, np.float32) for x in arrays]))
    shuffled = np.frombuffer(a.tobytes(), np.uint8).reshape(-1, 4).T.copy().tobytes()
    return base64.b64encode(gzip.compress(shuffled, 6, mtime=0)).decode("ascii")


def unpack_columns(text: str, n_rows: int) -> np.ndarray:
    """Inverse of :func:`pack_columns` (the tests' reader): array (n_columns, n_rows) float32."""
    raw = gzip.decompress(base64.b64decode(text))
    b = np.frombuffer(raw, np.uint8).reshape(4, -1).T.copy()
    return np.frombuffer(b.tobytes(), np.float32).reshape(-1, n_rows)


def _rows_of(run: ExplorerRun, infeasible_limit: int) -> tuple[pd.DataFrame, int]:
    """The rows a run shows (its front, then a seeded sample of its infeasible designs) and how many
    infeasible designs it evaluated in all."""
    front = run.front.copy()
    front["__front"] = True
    parts = [front]
    n_bad = 0
    if run.evaluations is not None and len(run.evaluations):
        ev = run.evaluations
        bad = ev[~ev["feasible"].astype(bool)]
        bad = bad[~bad["candidate_id"].isin(front["candidate_id"])]
        n_bad = int(len(bad))
        if len(bad) > infeasible_limit:
            bad = bad.sample(infeasible_limit, random_state=0)
        bad = bad.copy()
        bad["__front"] = False
        parts.append(bad)
    rows = pd.concat(parts, ignore_index=True)
    rows["__run"] = run.run_id
    rows["__template"] = run.template or run.model.mech.name
    return rows, n_bad


def _column_meta(c: str, group: str, units: dict) -> dict:
    """A column as the page shows it: label, unit, how it reads (``sense``: display = sense * stored) and
    which way is better, and the name a bound on it takes (``where``)."""
    from tiltopt.problems.registry import OBJECTIVES

    meta = {"key": c, "label": column_label(c), "unit": column_unit(c, units), "group": group, "sense": 1,
            "better": None, "where": c}
    if group == "objective":
        spec = OBJECTIVES.get(c[4:])
        meta["label"] = c[4:].replace("_", " ")
        if spec is not None:
            meta["sense"] = -1 if spec.sign < 0 else 1
            meta["where"] = spec.metric
            meta["unit"] = spec.unit
        meta["better"] = "higher" if meta["sense"] < 0 else "lower"
    return meta


def _objective_metric_columns(objectives: Sequence[str]) -> dict:
    from tiltopt.problems.registry import OBJECTIVES

    return {o: OBJECTIVES[o[4:]].metric for o in objectives if o[4:] in OBJECTIVES}


def _asset(name: str) -> str:
    return resources.files("tiltopt.reports").joinpath("templates", name).read_text(encoding="utf-8")


def _script_json(obj) -> str:
    text = json.dumps(obj, separators=(",", ":"), allow_nan=False)
    return text.replace("</", "<\\/").replace("<!--", "<\\!--")


def _escape(s: str) -> str:
    import html

    return html.escape(s)


# ----------------------------------------------------------------- the page and its designs
class Explorer:
    """The rows of a page over one or more runs, the page, and the detail of any of its rows.

    Parameters
    ----------
    runs : sequence of ExplorerRun
    infeasible_limit : int
        Infeasible designs shown per run (a seeded random sample; the page gives the real count).
    merged_front : bool
        The runs are the sources of one merged front folder (``tiltopt merge``): the page says so.
    """

    def __init__(self, runs: Sequence[ExplorerRun], *, infeasible_limit: int = 2000, title: str = "Pareto explorer",
                 merged_front: str | None = None):
        if not runs:
            raise ValueError("no runs")
        self.runs = list(runs)
        self.title = title
        self.merged_front = merged_front
        parts = [_rows_of(r, infeasible_limit) for r in self.runs]
        self.frames = [p[0] for p in parts]
        self.n_infeasible = [p[1] for p in parts]
        self.offsets = np.cumsum([0] + [len(f) for f in self.frames])
        self.rows = pd.concat(self.frames, ignore_index=True)
        from .detail import page_grid

        self.grids = [page_grid(r.lean_limit_deg, r.lean_step_deg, r.travel_mm, r.both_sides) for r in self.runs]
        self._cache: OrderedDict[int, dict] = OrderedDict()
        self._lock = threading.Lock()

    # -------------------------------------------------------------- detail
    def _where(self, i: int) -> tuple[int, int]:
        if not 0 <= i < len(self.rows):
            raise IndexError(i)
        ri = int(np.searchsorted(self.offsets, i, side="right") - 1)
        return ri, int(i - self.offsets[ri])

    def details(self, rows: Sequence[int]) -> dict[int, dict]:
        """The detail (:mod:`tiltopt.reports.detail`) of page rows, one batched analysis per run; cached."""
        from .detail import design_details

        rows = [int(i) for i in rows]
        out = {i: self._cache[i] for i in rows if i in self._cache}
        todo = [i for i in dict.fromkeys(rows) if i not in out]
        by_run: dict[int, list[tuple[int, int]]] = {}
        for i in todo:
            ri, local = self._where(i)
            by_run.setdefault(ri, []).append((i, local))
        for ri, items in by_run.items():
            run = self.runs[ri]
            lean, travel, mask = self.grids[ri]
            frame = self.frames[ri].iloc[[loc for _, loc in items]]
            dets = design_details(run.model, run.geometry_for(frame), lean, travel, mask, shell=run.shell)
            for (i, _), d in zip(items, dets):
                d["row"] = i
                out[i] = d
                self._cache[i] = d
        while len(self._cache) > DETAIL_CACHE:
            self._cache.popitem(last=False)
        return out

    def detail_json(self, i: int) -> bytes:
        """The detail of page row ``i`` as JSON bytes (what ``--serve`` answers ``/detail/<i>.json`` with).

        Raises
        ------
        IndexError
            When the page has no row ``i``.
        """
        with self._lock:     # one analysis at a time: the machine's cores go to it
            d = self.details([i])[i]
        return json.dumps(d, separators=(",", ":"), allow_nan=False).encode("utf-8")

    # -------------------------------------------------------------- page data
    def _embedded_rows(self, detail_limit: int, choices: list) -> list[int]:
        """The rows whose detail the page holds: each run's best compromise, each objective's best design and
        ``detail_limit`` more spread along its front, and a few infeasible designs."""
        pick: list[int] = []
        for ri, (run, fr) in enumerate(zip(self.runs, self.frames)):
            off = int(self.offsets[ri])
            is_front = fr["__front"].to_numpy()
            feas = is_front & fr["feasible"].astype(bool).to_numpy()
            if choices[ri] is not None and choices[ri].row >= 0:
                pick.append(off + choices[ri].row)
            for c in [c for c in fr.columns if str(c).startswith("obj.")]:
                v = np.where(feas, fr[c].to_numpy(float), np.inf)
                if np.isfinite(v).any():
                    pick.append(off + int(np.argmin(v)))
            rows = np.flatnonzero(is_front)
            if len(rows) > detail_limit:
                rows = rows[np.unique(np.linspace(0, len(rows) - 1, detail_limit).round().astype(int))]
            pick += [off + int(k) for k in rows]
            pick += [off + int(k) for k in np.flatnonzero(~is_front)[:min(4, detail_limit)]]
        return list(dict.fromkeys(pick))

    def data(self, detail_limit: int = DEFAULT_DETAIL_LIMIT) -> dict:
        """The JSON the page embeds (see module docs)."""
        from tiltopt.optimizer.selection import best_compromise

        rows = self.rows
        units: dict = {}
        for r in self.runs:
            units.update(r.units or {})
        obj_cols = [c for c in rows.columns if c.startswith("obj.")]
        common_obj = [c for c in obj_cols if all(c in r.front.columns for r in self.runs)]
        var_cols = [c for c in rows.columns if c.startswith("var.")]
        metric_cols = [c for c in rows.columns
                       if not c.startswith(("obj.", "var.", "con.", "__")) and c not in _META_COLUMNS
                       and pd.api.types.is_numeric_dtype(rows[c]) and not pd.api.types.is_bool_dtype(rows[c])]
        feasible = rows["feasible"].astype(bool).to_numpy()
        is_front = rows["__front"].to_numpy().astype(bool)
        merged = np.zeros(len(rows), bool)
        cand = np.flatnonzero(feasible & is_front)
        if len(cand) and common_obj:
            merged[cand] = non_dominated(rows.iloc[cand][common_obj].to_numpy(float))

        columns, arrays = [], []
        metric_of = _objective_metric_columns(obj_cols)
        display: dict[str, np.ndarray] = {}
        for c, group in [(c, "objective") for c in obj_cols] + [(c, "variable") for c in var_cols] + \
                [(c, "metric") for c in metric_cols] + [("generation", "meta"), ("violation", "meta")]:
            if c not in rows.columns:
                continue
            meta = _column_meta(c, group, units)
            v = meta["sense"] * rows[c].to_numpy(float)
            # a metric that is an objective's own figure is sent once: the page reads it from the objective
            twin = next((o for o, m in metric_of.items() if m == c and o in display), None)
            if twin is not None and np.array_equal(display[twin], v, equal_nan=True):
                meta["alias"] = twin
            elif np.all(np.isnan(v)) or (np.all(v == v[0]) if len(v) else True):
                meta["const"] = None if (not len(v) or np.isnan(v[0])) else float(v[0])
            else:
                meta["slot"] = len(arrays)
                arrays.append(v)
                display[c] = v
            if group == "objective":
                display[c] = v
            columns.append(meta)

        choices = []
        for ri, (run, fr) in enumerate(zip(self.runs, self.frames)):
            front = fr[fr["__front"].to_numpy()]
            tg = run.targets
            try:
                ch = best_compromise(front, tg.bounds if tg else (), tg.weights if tg else None, run.units)
            except Exception:  # targets naming a column this front lacks: shown as a note, no choice
                ch = None
            choices.append(ch)
        detail_rows = self._embedded_rows(detail_limit, choices)
        detail = {str(i): d for i, d in self.details(detail_rows).items()} if detail_rows else {}

        run_info = []
        for ri, run in enumerate(self.runs):
            fr = self.frames[ri]
            lean, travel, mask = self.grids[ri]
            from .drawing import drawing_spec, shell_outline

            spec = drawing_spec(run.model, run.geometry_for(fr.iloc[:1]) if len(fr) else None)
            shell_poly = None
            notes = []
            if run.shell is not None:
                sp = shell_outline(run.shell, run.model.mech.station_x_mm)
                shell_poly = None if sp is None else np.round(sp, 2).tolist()
                if sp is None:
                    notes.append(f"The body shell has no section at the linkage station x = "
                                 f"{run.model.mech.station_x_mm:g} mm.")
            else:
                notes.append("No body shell given: the drawing has no shell section and the shell clearances "
                             "are absent.")
            if len(travel) < len(np.unique(run.travel_mm)):
                notes.append(f"The drawings and curves show the travels {', '.join(f'{t:g}' for t in travel)} mm of "
                             f"the envelope's {len(np.unique(run.travel_mm))}; the build sheet has them all.")
            ch = choices[ri]
            shortlist_dir = run.shortlist_dir or run.run_dir or run.run_id
            tg = run.targets
            run_info.append({
                "id": run.run_id, "template": run.template or run.model.mech.name,
                "dir": run.run_dir or run.run_id, "shortlist_dir": shortlist_dir,
                "lean_deg": [float(v) for v in lean], "envelope_lean": [bool(v) for v in mask],
                "travel_mm": [float(v) for v in travel], "spec": spec, "shell": shell_poly, "notes": notes,
                "seed": run.meta.get("seed"), "config": run.meta.get("config"),
                "sheet_cmd": f"tiltopt sheet {shlex.quote(run.run_dir or run.run_id)} --candidate ",
                "n_front": int(fr["__front"].sum()), "n_infeasible_shown": int((~fr["__front"]).sum()),
                "n_infeasible": int(self.n_infeasible[ri]),
                "targets": tg.to_dict() if tg else {},
                "compromise": None if ch is None else {**ch.to_dict(), "row": None if ch.row < 0 else
                                                      int(self.offsets[ri]) + ch.row},
            })
        templates = sorted(set(rows["__template"]))
        tpl_of = rows["__template"].to_numpy()
        own = [{"template": t, "n": int(np.sum(merged & (tpl_of == t)))} for t in templates]
        from .marks import DRAWN_WITHIN_MM, KIND_TEXT, KINDS

        reason_col = rows["reason"] if "reason" in rows.columns else pd.Series([""] * len(rows))
        reason_text = [v if isinstance(v, str) else "" for v in reason_col]
        reasons = sorted({v for v in reason_text if v})
        reason_index = {v: k for k, v in enumerate(reasons)}

        return {
            "title": self.title,
            "generated": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
            "versions": package_versions(),
            "safety": SAFETY,
            "runs": run_info,
            "templates": templates,
            "ownership": own,
            "merged_front": self.merged_front,
            "columns": columns,
            "values": pack_columns(arrays),
            "n_slots": len(arrays),
            "objectives": obj_cols,
            "common_objectives": common_obj,
            "key_metrics": [m for m in KEY_METRICS if m in rows.columns],
            "n": int(len(rows)),
            "ids": rows["candidate_id"].astype(str).tolist(),
            "run": (np.searchsorted(self.offsets, np.arange(len(rows)), side="right") - 1).tolist(),
            "template": [templates.index(t) for t in rows["__template"]],
            "feasible": feasible.astype(int).tolist(),
            "front": is_front.astype(int).tolist(),
            "merged": merged.astype(int).tolist(),
            "reasons": reasons,
            "reason": [reason_index.get(v, -1) for v in reason_text],
            "detail": detail,
            "marks": {"drawn_within_mm": DRAWN_WITHIN_MM, "text": KIND_TEXT, "kinds": list(KINDS)},
            "palette": CATEGORICAL,
            "scale": CONTINUOUS,
        }

    def html(self, *, plotly_src: str | None = None, detail_limit: int = DEFAULT_DETAIL_LIMIT) -> str:
        """The page as one HTML string (``plotly_src``: a plotly.js file beside it; default: embedded)."""
        from plotly.offline import get_plotlyjs

        data = self.data(detail_limit)
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


def build_data(runs: Sequence[ExplorerRun], *, detail_limit: int = DEFAULT_DETAIL_LIMIT, infeasible_limit: int = 2000,
               title: str = "Pareto explorer") -> dict:
    """The JSON the page embeds (see module docs)."""
    return Explorer(runs, infeasible_limit=infeasible_limit, title=title).data(detail_limit)


def build_explorer(runs: Sequence[ExplorerRun], *, plotly_src: str | None = None, **kw) -> str:
    """The explorer page as one HTML string (``plotly_src``: relative name of a plotly.js beside the page)."""
    detail_limit = kw.pop("detail_limit", DEFAULT_DETAIL_LIMIT)
    return Explorer(runs, **kw).html(plotly_src=plotly_src, detail_limit=detail_limit)


def write_explorer(path: str | Path, runs: Sequence[ExplorerRun] | Explorer, *, beside: bool = False,
                   detail_limit: int = DEFAULT_DETAIL_LIMIT, **kw) -> Path:
    """Write the page atomically; with ``beside`` plotly.js goes in a file next to it."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    ex = runs if isinstance(runs, Explorer) else Explorer(runs, **kw)
    src = None
    if beside:
        from plotly.offline import get_plotlyjs

        src = "plotly.min.js"
        atomic_write_text(path.parent / src, get_plotlyjs())
    atomic_write_text(path, ex.html(plotly_src=src, detail_limit=detail_limit))
    return path
