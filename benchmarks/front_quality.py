"""How close the demo's budget gets to the best front we can find; prints one JSON object.

A reference front for the demo problem (configs/demo.toml) is built from several long runs with
other seeds (``--reference-runs`` x ``--reference-generations``), merged with the demo run and
filtered to its non-dominated feasible designs. Hypervolumes (pymoo's indicator) are taken with
every objective scaled to [0, 1] over the reference front and the reference point 1.1 in each.

Figures:

* ``demo_hv_share``: hypervolume of the demo run's front (its budget: population x generations of
  the config) over the reference front's; target ``>= 0.95``;
* ``demo_generations_to_90`` / ``_99``: the first generation at which the demo run's front (every
  feasible design evaluated so far) reaches 90 / 99 % of the reference hypervolume (null: not
  within its budget);
* ``reference_generations_to_90`` / ``_99``: the same for each long run;
* run times.

Run ``python benchmarks/front_quality.py`` (about 10-20 min on two cores with the defaults).
"""
from __future__ import annotations

import argparse
import copy
import json
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from pymoo.indicators.hv import HV  # noqa: E402

from tiltopt.optimizer.config import load_config, parse_config  # noqa: E402
from tiltopt.optimizer.pareto import nondominated_mask  # noqa: E402
from tiltopt.optimizer.results import load_run  # noqa: E402
from tiltopt.optimizer.runner import start_run  # noqa: E402

TARGET = 0.95


def _front(F):
    return F[nondominated_mask(F)] if len(F) else F


def _history(evals, obj, generations):
    """Feasible objective vectors evaluated up to each generation: list of arrays."""
    feas = evals[evals["feasible"].astype(bool)]
    g = feas["generation"].to_numpy()
    F = feas[obj].to_numpy(float)
    return [(k, F[g <= k]) for k in generations]


def _first_reaching(hist, hv, ref_hv, share):
    for k, F in hist:
        if len(F) and hv(_front(F)) >= share * ref_hv:
            return int(k)
    return None


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--config", default=str(ROOT / "configs" / "demo.toml"))
    ap.add_argument("--reference-runs", type=int, default=3)
    ap.add_argument("--reference-generations", type=int, default=1000)
    ap.add_argument("--every", type=int, default=10, help="generations between hypervolume samples")
    ap.add_argument("--processes", type=int, default=None)
    ap.add_argument("--keep", default=None, help="folder to keep the runs in (default: a temporary one)")
    args = ap.parse_args(argv)

    cfg = load_config(args.config)
    out = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="tiltopt-front-quality-"))
    t0 = time.perf_counter()
    demo = start_run(cfg, run_id="demo", output=out, overwrite=True, progress=False, workers=args.processes)
    t_demo = time.perf_counter() - t0
    runs = []
    for k in range(args.reference_runs):
        # the run reads its settings from the config data (it re-parses them from its input copies)
        data = copy.deepcopy(cfg.data)
        data["run"].update(seed=101 + k, generations=args.reference_generations)
        c = parse_config(data, cfg.source, cfg.base_dir)
        t = time.perf_counter()
        o = start_run(c, run_id=f"reference-{k}", output=out, overwrite=True, progress=False,
                      workers=args.processes)
        done = load_run(o.run_dir).generations["generation"].max()
        if done != args.reference_generations or load_run(o.run_dir).meta.get("seed") != 101 + k:
            raise SystemExit(f"front_quality: reference run {k} ran {done} generations, not as asked")
        runs.append((o, time.perf_counter() - t))
    t_all = time.perf_counter() - t0

    dr = load_run(demo.run_dir)
    obj = [c for c in dr.front.columns if c.startswith("obj.")]
    every = [dr.evaluations] + [load_run(o.run_dir).evaluations for o, _ in runs]
    allF = np.concatenate([e[e["feasible"].astype(bool)][obj].to_numpy(float) for e in every])
    ref = _front(allF)
    if not len(ref):
        raise SystemExit("front_quality: no feasible design in any run; raise the budget")
    lo, hi = ref.min(0), ref.max(0)
    scale = np.where(hi - lo > 0, hi - lo, 1.0)
    hv_raw = HV(ref_point=np.full(len(obj), 1.1))

    def hv(F):
        return float(hv_raw((np.asarray(F) - lo) / scale))

    ref_hv = hv(ref)
    demo_F = dr.front[obj].to_numpy(float)
    gens = list(range(args.every, cfg.run.generations + 1, args.every))
    if gens[-1] != cfg.run.generations:
        gens.append(cfg.run.generations)
    hist = _history(dr.evaluations, obj, gens)
    ref_hits = {}
    for share in (0.90, 0.99):
        ref_hits[share] = []
        for o, _ in runs:
            e = load_run(o.run_dir).evaluations
            g = list(range(args.every, args.reference_generations + 1, args.every))
            ref_hits[share].append(_first_reaching(_history(e, obj, g), hv, ref_hv, share))
    share = hv(demo_F) / ref_hv
    result = {
        "benchmark": "front_quality",
        "config": str(args.config),
        "objectives": [c[4:] for c in obj],
        "demo_budget": {"population": cfg.run.population, "generations": cfg.run.generations,
                        "algorithm": cfg.run.algorithm, "seed": cfg.run.seed},
        "reference": {"runs": args.reference_runs, "generations": args.reference_generations,
                      "seeds": [101 + k for k in range(args.reference_runs)], "front_size": int(len(ref))},
        "hypervolume_scaling": "objectives min-max scaled over the reference front, reference point 1.1",
        "reference_hv": ref_hv,
        "demo_hv": hv(demo_F),
        "demo_hv_share": share,
        "target_share": TARGET,
        "meets_target": bool(share >= TARGET),
        "demo_front_size": int(len(demo_F)),
        "demo_generations_to_90": _first_reaching(hist, hv, ref_hv, 0.90),
        "demo_generations_to_99": _first_reaching(hist, hv, ref_hv, 0.99),
        "reference_generations_to_90": ref_hits[0.90],
        "reference_generations_to_99": ref_hits[0.99],
        "demo_run_s": t_demo,
        "reference_run_s": [t for _, t in runs],
        "total_s": t_all,
        "runs_in": str(out),
    }
    print(json.dumps(result, indent=2))
    return result


if __name__ == "__main__":
    main()
