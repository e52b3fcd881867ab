"""Speed of the batched kinematics solver (one run, one core).

Measures, on the wishbone-rocker demo mechanism (c):

* ``states_per_s``: the batched sweep over 100 candidates x 30 states
  (3 travels x 10 leans 0..45 deg), in the batch shape the optimizer uses:
  all candidates and travels together, states warm-started along the lean
  sweep;
* ``scalar_states_per_s``: the same kind of states solved one at a time by
  the scalar scipy loop of :mod:`tests.reference_solver` (a subset of the
  candidates; states per second is what is compared). The batch and the
  scalar loop are timed in turns over ``--repeat`` rounds, so both see the
  same machine, and each figure is its best round;
* ``bound_states_per_s``: raw throughput of numpy's batched ``linalg.solve``
  for the system size used, divided by the Newton iterations used per state,
  and ``bound_fraction`` = states_per_s / bound_states_per_s;
* ``steering_seconds``: the steering solve over the same envelope
  (:func:`tiltopt.kinematics.steering.steer_envelope` as the optimiser runs it: every
  state at 9 steering inputs, both wheels, their reach and steer ranges, the trail and
  caster of every state), the point positions it reads included (computed afresh
  each time), and
  ``steering_share`` = steering_seconds / batch_seconds: what the steering adds
  to a candidate's kinematics time (target at most 0.30). Timed in turns with the
  sweep, best of ``--repeat`` rounds each.

Run ``python benchmarks/kinematics.py --json``. Pin to one core with
``taskset -c 0`` for a clean single-core figure.
"""
from __future__ import annotations

import argparse
import json
import os
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.reference_solver import reference_sweep  # noqa: E402
from tiltopt.kinematics import Model, load_mechanism, sweep  # noqa: E402
from tiltopt.kinematics.solver import n_rows  # noqa: E402
from tiltopt.kinematics.steering import ENVELOPE_INPUTS, steer_envelope  # noqa: E402


def candidates(model: Model, n: int, seed: int = 0) -> np.ndarray:
    """Symmetric random variants of the mechanism: lateral scale of all points, 0.95-1.05."""
    rng = np.random.default_rng(seed)
    base = model.default_geometry.points[0]
    pts = np.repeat(base[None], n, 0).copy()
    pts[..., 0] *= rng.uniform(0.95, 1.05, size=(n, 1))
    return pts


def best_of(fn, repeat: int) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main(argv=None) -> dict:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--json", action="store_true", help="print only the JSON object")
    ap.add_argument("--candidates", type=int, default=100)
    ap.add_argument("--scalar-candidates", type=int, default=2)
    ap.add_argument("--repeat", type=int, default=7)
    args = ap.parse_args(argv)
    os.environ.setdefault("OMP_NUM_THREADS", "1")

    mech = load_mechanism(ROOT / "configs" / "wishbone_rocker.toml")
    model = Model(mech)
    leans = np.arange(0.0, 45.0 + 1e-9, 5.0)
    travels = np.array([-30.0, 0.0, 30.0])
    C = args.candidates
    pts = candidates(model, C)
    geom = model.batch_geometry(pts)
    n_states = C * len(leans) * len(travels)

    sweep(model, geom, leans, travels)  # warm-up (and numba's first compile, if any)
    res = sweep(model, geom, leans, travels)
    converged_share = float(res.converged.mean())
    # Newton iterations per state: lean-stage iterations of the requested states plus the lean
    # steps in between (none here: the step is the requested 5 deg), plus the travel stage.
    lean_iters = float(res.iterations[:, :, 1:].sum())
    iters_per_state = max(lean_iters / max(res.converged[:, :, 1:].sum(), 1), 1.0)

    # The batch and the scalar scipy loop (on a subset of the candidates) are timed in turns,
    # --repeat rounds, so both see the same machine; each figure is its best round.
    sc = min(args.scalar_candidates, C)
    mechs = [mech.with_points({ref: tuple(pts[c, i]) for i, ref in enumerate(model.point_refs)})
             for c in range(sc)]
    t_batch, t_scalar, t_steer = np.inf, np.inf, np.inf

    def steer_fresh():
        res._points = None                   # nothing of the clearance check's points is reused
        steer_envelope(model, geom, res, every_input=False)   # as the optimiser runs it

    steer_fresh()
    for _ in range(args.repeat):
        t_batch = min(t_batch, best_of(lambda: sweep(model, geom, leans, travels), 1))
        t_steer = min(t_steer, best_of(steer_fresh, 1))
        t_scalar = min(t_scalar, best_of(lambda: [reference_sweep(m_c, leans, travels, max_lean_step_deg=5.0,
                                                                  max_travel_step_mm=15.0) for m_c in mechs], 1))
    states_per_s = n_states / t_batch
    scalar_states_per_s = sc * len(leans) * len(travels) / t_scalar

    # raw batched linalg.solve bound for the system size used (lean-stage items: C x travels)
    n = model.n_q
    N = C * len(travels)
    rng = np.random.default_rng(1)
    A = rng.normal(size=(N, n, n)) + n * np.eye(n)
    b = rng.normal(size=(N, n, 1))
    np.linalg.solve(A, b)
    t_solve = best_of(lambda: np.linalg.solve(A, b), 20)
    solves_per_s = N / t_solve
    bound = solves_per_s / iters_per_state

    out = {
        "mechanism": mech.name,
        "unknowns": n,
        "equations_lean_stage": n_rows(model, "lean"),
        "candidates": C,
        "states_per_candidate": len(leans) * len(travels),
        "states": n_states,
        "batch_seconds": round(t_batch, 5),
        "states_per_s": round(states_per_s, 1),
        "converged_share": round(converged_share, 4),
        "newton_iterations_per_state": round(iters_per_state, 3),
        "scalar_states_per_s": round(scalar_states_per_s, 2),
        "speedup": round(states_per_s / scalar_states_per_s, 1),
        "raw_solves_per_s": round(solves_per_s, 1),
        "bound_states_per_s": round(bound, 1),
        "bound_fraction": round(states_per_s / bound, 4),
        "steering_inputs_per_state": ENVELOPE_INPUTS,
        "steering_seconds": round(t_steer, 5),
        "steering_share": round(t_steer / t_batch, 4),
        "targets": {"states_per_s": 50000, "speedup": 300, "steering_share": 0.30},
        "numpy": np.__version__,
    }
    print(json.dumps(out, indent=None if args.json else 2))
    return out


if __name__ == "__main__":
    main()
