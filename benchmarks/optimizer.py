"""Speed of the optimiser on the demo config; prints one JSON object.

Measures, on this machine:
- generations per second of configs/demo.toml (its population and envelope) over a short run;
- the share of run time spent outside the batched ``evaluate_designs`` call (target < 20 %);
- the projected time of a population of 200 for 2000 generations over the demo envelope, from a
  short run at population 200 (target < 8 h, an overnight run).

Usage: python benchmarks/optimizer.py [--generations N] [--generations-200 12]
"""
from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tiltopt.optimizer.config import load_config  # noqa: E402
from tiltopt.optimizer.results import load_run  # noqa: E402
from tiltopt.optimizer.runner import Runner, config_record  # noqa: E402


def _measure(cfg, population: int, generations: int, out: Path) -> dict:
    settings = dataclasses.replace(cfg.run, population=population, generations=generations,
                                   checkpoint_every=max(1, cfg.run.checkpoint_every), output=out)
    run_dir = out / f"bench-p{population}"
    Runner(cfg.make_problem(), settings, run_dir, run_dir.name, config_record(cfg), progress=False,
           notices=False).run()
    run = load_run(run_dir)
    t = run.meta["timings"]
    g = run.generations
    # first generation carries one-off costs (imports, first solves); leave it out of the rates
    steady = g.iloc[1:] if len(g) > 2 else g
    gen_s = float(steady["generation_s"].mean())
    late = g.iloc[len(g) // 2:]   # designs that assemble cost more than early failures: the late half
    late_gen_s = float(late["generation_s"].mean())
    return {"population": population, "generations": generations, "elapsed_s": t["elapsed_s"],
            "evaluation_s": t["evaluation_s"], "outside_evaluation_share": t["outside_evaluation_share"],
            "seconds_per_generation": gen_s, "generations_per_second": 1.0 / gen_s,
            "late_seconds_per_generation": late_gen_s, "late_feasible_share": float(late["feasible_share"].mean()),
            "front_size": int(len(run.front))}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--config", default=str(ROOT / "configs" / "demo.toml"))
    ap.add_argument("--generations", type=int, default=None, help="default: the config's generations")
    ap.add_argument("--generations-200", type=int, default=12)
    a = ap.parse_args(argv)
    cfg = load_config(a.config)
    with tempfile.TemporaryDirectory() as tmp:
        demo = _measure(cfg, cfg.run.population, a.generations or cfg.run.generations, Path(tmp))
        big = _measure(cfg, 200, a.generations_200, Path(tmp))
    # two estimates of a generation at population 200: the short population-200 run, and the late
    # (mostly feasible, so dearest) generations of the demo run scaled linearly with population;
    # the projection takes the larger
    per_gen_200 = max(big["seconds_per_generation"],
                      demo["late_seconds_per_generation"] * 200.0 / cfg.run.population)
    projected_h = per_gen_200 * 2000 / 3600.0
    size = cfg.size()
    out = {
        "benchmark": "optimizer",
        "config": str(Path(a.config).resolve().relative_to(ROOT)) if str(a.config).startswith(str(ROOT)) else a.config,
        "cpu_count": os.cpu_count(),
        "states_per_candidate": size.get("states_per_candidate"),
        "n_var": size.get("n_var"), "n_obj": size.get("n_obj"),
        "demo": demo,
        "demo_generations_per_second": demo["generations_per_second"],
        "outside_evaluation_share": demo["outside_evaluation_share"],
        "outside_evaluation_share_target": 0.20,
        "population_200": big,
        "projected_seconds_per_generation_population_200": per_gen_200,
        "projected_hours_population_200_x_2000_generations": projected_h,
        "projected_hours_target": 8.0,
        "meets_targets": bool(demo["outside_evaluation_share"] < 0.20 and projected_h < 8.0),
        "note": "one run in one process (numpy may use both cores); a batch runs one run per core",
    }
    print(json.dumps(out, indent=2))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
