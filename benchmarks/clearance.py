"""Speed of the batched clearance check (one run, one core); prints one JSON object.

Measures, on the wishbone-rocker demo mechanism with a steer envelope (25 deg lock upright, 10 at
20 deg lean, 4 at 40 deg) and a 25 mm tube on each wishbone, in the demo shell
configs/shell_demo.toml, over the default envelope of ``tiltopt clearance`` (lean 0:40:5 x travel
-30, 0, 30 = 27 states) at the default sampling:

* ``clearance_candidates_per_s`` and ``clearance_ms_per_candidate`` (CPU time; wall clock in
  ``*_wall_ms_per_candidate``): evaluate_clearance for 100
  candidates in one batch (the body points of every state included, which the sweep computes
  only on demand);
* ``sweep_ms_per_candidate``: the kinematic sweep of the same envelope;
* ``clearance_share``: clearance / (clearance + sweep), the share of a candidate's evaluation
  time the clearance check takes (``clearance_to_sweep_ratio``: clearance / sweep);
* ``target_ms_per_candidate``: 2.0, and ``meets_target``;
* ``numpy_clearance_ms_per_candidate``: the same check by the numpy reference path
  (``ClearanceSettings(kernel="numpy")``), and ``compiled_speedup`` over it;
* ``polygon_*``: the same check with the demo shell's stations as 240-vertex polygons
  (``tiltopt.kinematics.shell.polygon_sections``, as from a CAD export), ``--polygon-candidates`` of them,
  by the compiled kernel and by the numpy path.

The first call compiles the kernel (numba caches it in ``kinematics/__pycache__``); the timed runs
come after a warm-up.

Run ``python benchmarks/clearance.py``. Pin to one core with ``taskset -c 0`` for a clean
single-core figure.
"""
from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import time
import tomllib
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import numpy as np  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tiltopt.kinematics.clearance import ClearanceSettings, evaluate_clearance  # noqa: E402
from tiltopt.kinematics.mechanism import parse_mechanism  # noqa: E402
from tiltopt.kinematics.model import Model  # noqa: E402
from tiltopt.kinematics.shell import load_shell, polygon_sections  # noqa: E402
from tiltopt.kinematics.sweep import sweep  # noqa: E402

TARGET_MS = 2.0


def demo_mechanism():
    d = tomllib.loads((ROOT / "configs" / "wishbone_rocker.toml").read_text())
    d["steer_envelope"] = {"lean_deg": [0.0, 20.0, 40.0], "max_steer_deg": [25.0, 10.0, 4.0]}
    d["segments"] = [{"name": f"{b}_tube", "body": b, "a": "inner", "b": "outer", "tube_od_mm": 25.0}
                     for b in ("upper_arm_left", "upper_arm_right", "lower_arm_left", "lower_arm_right")]
    return parse_mechanism(d, "benchmark")


def candidates(model: Model, n: int, seed: int = 0) -> np.ndarray:
    """Symmetric random variants of the mechanism: lateral scale of all points, 0.95-1.05."""
    rng = np.random.default_rng(seed)
    pts = np.repeat(model.default_geometry.points, n, 0).copy()
    pts[..., 0] *= rng.uniform(0.95, 1.05, size=(n, 1))
    return pts


def best_of(fn, repeat: int) -> tuple[float, float]:
    """Best (CPU seconds, wall seconds) of ``repeat`` runs.

    CPU time of this process is the single-core figure: on a machine shared with other work the
    wall clock also counts time spent waiting for the core.
    """
    cpu, wall = [], []
    for _ in range(repeat):
        c, t = time.process_time(), time.perf_counter()
        fn()
        cpu.append(time.process_time() - c)
        wall.append(time.perf_counter() - t)
    return min(cpu), min(wall)


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--candidates", type=int, default=100)
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--polygon-candidates", type=int, default=20)
    args = ap.parse_args(argv)

    model = Model(demo_mechanism())
    shell = load_shell(ROOT / "configs" / "shell_demo.toml")
    leans = np.arange(0.0, 40.0 + 1e-9, 5.0)
    travels = np.array([-30.0, 0.0, 30.0])
    C = args.candidates
    geom = model.batch_geometry(candidates(model, C))
    settings = ClearanceSettings()

    sr = sweep(model, geom, leans, travels)
    t_sweep, w_sweep = best_of(lambda: sweep(model, geom, leans, travels), args.repeat)

    def clearance():
        fresh = dataclasses.replace(sr, _points=None)      # body points are part of the clearance cost
        return evaluate_clearance(model, geom, fresh, shell, settings)

    res = clearance()  # warm-up
    t_clear, w_clear = best_of(clearance, args.repeat)
    ms = 1e3 * t_clear / C
    numpy_settings = dataclasses.replace(settings, kernel="numpy")
    t_numpy, _ = best_of(lambda: evaluate_clearance(model, geom, dataclasses.replace(sr, _points=None), shell,
                                                    numpy_settings), max(1, args.repeat // 2))

    poly = polygon_sections(shell, 240)
    Cp = args.polygon_candidates
    geom_p = model.batch_geometry(candidates(model, Cp, seed=1))
    sr_p = sweep(model, geom_p, leans, travels)
    evaluate_clearance(model, geom_p, sr_p, poly, settings)   # warm-up
    t_poly, _ = best_of(lambda: evaluate_clearance(model, geom_p, dataclasses.replace(sr_p, _points=None), poly,
                                                   settings), args.repeat)
    t_poly_np, _ = best_of(lambda: evaluate_clearance(model, geom_p, dataclasses.replace(sr_p, _points=None), poly,
                                                      numpy_settings), 1)
    summ = res.summary()
    out = {
        "benchmark": "clearance",
        "mechanism": "wishbone_rocker + steer envelope + 4 wishbone tubes",
        "shell": "configs/shell_demo.toml",
        "candidates": C,
        "states_per_candidate": int(len(leans) * len(travels)),
        "sampling": dataclasses.asdict(settings),
        "converged_share": float(sr.converged.mean()),
        "clearance_candidates_per_s": C / t_clear,
        "clearance_ms_per_candidate": ms,
        "sweep_ms_per_candidate": 1e3 * t_sweep / C,
        "clearance_wall_ms_per_candidate": 1e3 * w_clear / C,
        "sweep_wall_ms_per_candidate": 1e3 * w_sweep / C,
        "timing": "best of --repeat runs, CPU time of this process (wall clock alongside)",
        "clearance_share": t_clear / (t_clear + t_sweep),
        "clearance_to_sweep_ratio": t_clear / t_sweep,
        "target_ms_per_candidate": TARGET_MS,
        "meets_target": bool(ms < TARGET_MS),
        "numpy_clearance_ms_per_candidate": 1e3 * t_numpy / C,
        "compiled_speedup": t_numpy / t_clear,
        "polygon_shell": "configs/shell_demo.toml stations as 240-vertex polygons",
        "polygon_candidates": Cp,
        "polygon_clearance_ms_per_candidate": 1e3 * t_poly / Cp,
        "polygon_numpy_clearance_ms_per_candidate": 1e3 * t_poly_np / Cp,
        "median_min_wheel_shell_error_mm": float(np.nanmedian(summ["min_wheel_shell_error_mm"])),
        "threads": os.environ.get("OMP_NUM_THREADS"),
    }
    print(json.dumps(out, indent=2))
    return out


if __name__ == "__main__":
    main()
