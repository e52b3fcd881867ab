"""Benchmark: force analysis + member sizing for 100 candidates x all load cases.

Prints one JSON object. The sweep at the load states (kinematics) is timed
separately; the target (< 1 ms per candidate on one core) is for the force
analysis and sizing given the solved poses.

    python benchmarks/loads.py [--mechanism configs/wishbone_rocker.toml] [--candidates 100]
"""
from __future__ import annotations

import argparse
import json
import os
import platform
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tiltopt.kinematics.forces import ForceModel  # noqa: E402
from tiltopt.kinematics.loads import load_loads  # noqa: E402
from tiltopt.kinematics.mechanism import load_mechanism  # noqa: E402
from tiltopt.kinematics.model import Model  # noqa: E402
from tiltopt.kinematics.sizing import size_linkage  # noqa: E402
from tiltopt.kinematics.sweep import sweep  # noqa: E402


def candidates(model: Model, n: int, spread_mm: float, seed: int = 1):
    """Random geometries of the model's topology: coincident design points move together,
    wheel centres keep their height and the chassis datum stays put."""
    rng = np.random.default_rng(seed)
    P = model.default_geometry.points[0]
    key = [tuple(np.round(p, 2)) for p in P]
    groups = {k: i for i, k in enumerate(dict.fromkeys(key))}
    gi = np.array([groups[k] for k in key])
    off = rng.uniform(-spread_mm, spread_mm, (n, len(groups), 2))
    d = off[:, gi]
    d[:, model.wheel_centre, 1] = 0.0
    fixed = [model.point_index[r] for r in model.point_refs if r.endswith(".datum")]
    d[:, fixed] = 0.0
    return model.batch_geometry(P[None] + d)


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--mechanism", default=str(ROOT / "configs" / "wishbone_rocker.toml"))
    ap.add_argument("--loads", default=str(ROOT / "configs" / "loads_demo.toml"))
    ap.add_argument("--candidates", type=int, default=100)
    ap.add_argument("--repeat", type=int, default=5)
    a = ap.parse_args()
    model = Model(load_mechanism(a.mechanism))
    spec = load_loads(a.loads)
    geom = candidates(model, a.candidates, 8.0)
    states = spec.states()
    fm = ForceModel(model, spec.tilt_lock_body, spec.default_pivot_base_mm)
    t0 = time.perf_counter()
    sw = sweep(model, geom, lean_deg=sorted({s.lean_deg for s in states}),
               travel_mm=sorted({s.travel_mm for s in states}))
    t_sweep = time.perf_counter() - t0
    size_linkage(model, geom, spec, sweep_result=sw, force_model=fm)   # warm-up
    best = np.inf
    for _ in range(a.repeat):
        t0 = time.perf_counter()
        res = size_linkage(model, geom, spec, sweep_result=sw, force_model=fm)
        best = min(best, time.perf_counter() - t0)
    C = a.candidates
    print(json.dumps({
        "benchmark": "loads: force analysis + member sizing",
        "mechanism": model.mech.name,
        "candidates": C,
        "load_states": len(states),
        "members": len(res.members),
        "force_and_sizing_s": round(best, 5),
        "ms_per_candidate": round(1000.0 * best / C, 4),
        "target_ms_per_candidate": 1.0,
        "meets_target": bool(1000.0 * best / C < 1.0),
        "sweep_at_load_states_s": round(t_sweep, 4),
        "feasible_candidates": int(res.feasible.sum()),
        "states_in_equilibrium": int(res.forces.ok.sum()),
        "median_linkage_mass_kg": float(np.nanmedian(res.linkage_mass_kg)),
        "numpy": np.__version__, "python": platform.python_version(),
        "cpu_count": os.cpu_count(),
        "threads_note": "set OMP_NUM_THREADS=1 for a one-core figure",
    }, indent=2))


if __name__ == "__main__":
    main()
