"""``tiltopt shortlist``: the front designs that meet bounds, as Parquet, best compromise first.

The bounds are ``--where`` expressions and a ``[targets]`` file, or else the run config's
``[targets]`` (:mod:`tiltopt.optimizer.selection`); several fronts are first merged as
``tiltopt merge`` would (one problem, the non-dominated union). The file (docs/formats.md,
"Shortlist file") holds the front's columns plus ``compromise_score`` (sorted by it, the best
compromise first), with the units, the bounds, the weights, how the best compromise was chosen and
what it gives up, the sources and the caution in its metadata.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from tiltopt.base.errors import InputError

from . import results as R
from . import runfolder as RF
from .merge import check_same_problem, union_front
from .selection import (
    Bound,
    Choice,
    best_compromise,
    merge_bounds,
    objectives_of,
    parse_targets,
    parse_weight,
    parse_where,
    resolve,
)

SHORTLIST_FORMAT = "tiltopt-shortlist-1"


@dataclass
class ShortlistResult:
    """What ``tiltopt shortlist`` wrote and why."""

    path: Path
    n_front: int
    n_meeting: int
    bounds: tuple
    bounds_from: str
    choice: Choice

    def lines(self) -> list[str]:
        b = "; ".join(x.text() for x in self.bounds) or "none"
        out = [f"{self.n_meeting} of {self.n_front} front designs meet the bounds ({b}; from {self.bounds_from})",
               f"shortlist: {self.path} ({self.n_meeting} designs, best compromise first)"]
        if self.choice.candidate_id is not None:
            out.append(f"best compromise: {self.choice.candidate_id}. {self.choice.method}")
            out += ["  " + t for t in self.choice.gives_up_text()]
        return out


def _bounds(where, targets_file, run, front, objs) -> tuple[tuple, dict, str]:
    bounds: list[Bound] = []
    weights: dict = {}
    from_ = []
    for w in where:
        b = parse_where(w)
        try:
            resolve(b.name, front, objs)
        except InputError as exc:
            raise InputError(str(exc.detail), "--where") from None
        bounds.append(b)
    if where:
        from_.append("--where")
    if targets_file:
        from tiltopt.base.errors import read_toml

        data = read_toml(targets_file, "targets .toml")
        if not isinstance(data, dict) or set(data) != {"targets"}:
            raise InputError("expected a [targets] table (and nothing else), as the explorer page copies it.",
                             str(targets_file))
        t = parse_targets(data["targets"], str(targets_file), objectives=[o.name for o in objs])
        for b in t.bounds:
            try:
                resolve(b.name, front, objs)
            except InputError as exc:
                raise InputError(str(exc.detail), str(targets_file), f"targets.{b.name}") from None
        bounds += t.bounds
        weights.update(t.weights)
        from_.append(str(targets_file))
    if not from_:
        try:
            t = run.config.targets
        except Exception:   # a merged front, or a run without a config: no targets
            t = None
        if t:
            bounds += t.bounds
            weights.update(t.weights)
            from_.append("the run config's [targets]")
        else:
            from_.append("no bounds given")
    return merge_bounds(bounds), weights, ", ".join(from_)


def shortlist(run_dirs, output, *, where=(), targets_file=None, weights=(),
              allow_different: bool = False) -> ShortlistResult:
    """Write the shortlist of one or more fronts (module docs).

    Raises
    ------
    InputError
        For an unreadable run, fronts of different problems, a bad expression, weight or targets file,
        a name the front has no column for, or an output that would replace a run folder's file.
    """
    runs = [R.load_run(d) for d in run_dirs]
    if len(runs) == 1:
        front = runs[0].front.copy()
        sources = [str(runs[0].run_dir)]
    else:
        if len({tuple(r.objective_names) for r in runs}) == 1:
            check_same_problem(runs, allow_different)
        front = union_front(runs)
        sources = [str(r.run_dir) for r in runs]
    units: dict = {}
    for r in runs:
        units.update(r.units)
    objs = objectives_of(front, units)
    bounds, w, bounds_from = _bounds(where, targets_file, runs[0], front, objs)
    for text in weights:
        name, v = parse_weight(text)
        w[name] = v
    choice = best_compromise(front, bounds, w, units)
    keep = np.isfinite(choice.scores)
    out = front[keep].copy()
    out["compromise_score"] = choice.scores[keep]
    out = out.sort_values("compromise_score", kind="stable").reset_index(drop=True)
    path = Path(output)
    if path.name in RF.RUN_FILES and RF.folder_kind(path.parent) == "run":
        raise InputError(f"{path.name} is a file of the run folder {path.parent}; writing the shortlist there would "
                         f"replace it. Give another -o file.", str(path), "-o")
    units = {**units, "compromise_score": "1 (weighted root-mean-square of the scaled objectives; smallest is best)"}
    meta = {"format": SHORTLIST_FORMAT, "sources": sources, "bounds": [b.text() for b in bounds],
            "where": [b.where() for b in bounds], "bounds_from": bounds_from, "weights": choice.weights,
            "best_compromise": choice.to_dict(), "versions": R.package_versions(), "caution": R.CAUTION}
    R.write_parquet(path, out, units, meta)
    return ShortlistResult(path, int(len(front)), int(keep.sum()), bounds, bounds_from, choice)
