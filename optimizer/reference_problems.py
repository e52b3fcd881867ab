"""Published test problems with the ``evaluate_designs`` interface of :class:`tiltopt.problems.problem.TiltProblem`.

They check the optimiser itself (runner, result files, batches) against
fronts known in closed form, independent of the linkage kinematics. A run
config selects one with a ``[benchmark]`` table instead of the problem tables::

    [benchmark]
    name = "zdt1"      # zdt1, zdt2, zdt3 (Zitzler, Deb and Thiele, Evolutionary Computation 8(2), 2000)
    n_var = 30
    eval_delay_s = 0.0 # optional: simulated evaluation cost per batch, seconds (exercises batches, kills)
"""
from __future__ import annotations

import time

import numpy as np
from pymoo.core.problem import Problem

from tiltopt.base.errors import InputError
from tiltopt.base.limits import MAX_BENCHMARK_VARIABLES
from tiltopt.problems.problem import Evaluation  # the same result type as the linkage problem's

BENCHMARKS = {
    "zdt1": "ZDT1: convex front f2 = 1 - sqrt(f1), 2 objectives (Zitzler, Deb and Thiele 2000)",
    "zdt2": "ZDT2: concave front f2 = 1 - f1^2, 2 objectives (Zitzler, Deb and Thiele 2000)",
    "zdt3": "ZDT3: disconnected front, 2 objectives (Zitzler, Deb and Thiele 2000)",
}
BENCHMARK_KEYS = ("name", "n_var", "eval_delay_s")


class ZDTProblem(Problem):
    """ZDT1/2/3 as a vectorized pymoo problem with ``evaluate_designs``.

    Parameters
    ----------
    name : {'zdt1', 'zdt2', 'zdt3'}
    n_var : int
        Number of variables, all in [0, 1] (the paper uses 30).
    eval_delay_s : float
        Sleep per batched call (simulated cost).
    """

    def __init__(self, name: str = "zdt1", n_var: int = 30, eval_delay_s: float = 0.0):
        if name not in BENCHMARKS:
            raise ValueError(f"unknown benchmark {name!r}")
        super().__init__(n_var=n_var, n_obj=2, n_ieq_constr=0, xl=np.zeros(n_var), xu=np.ones(n_var),
                         elementwise=False)
        self.name = name
        self.eval_delay_s = float(eval_delay_s)
        self.variable_names = [f"x{i + 1}" for i in range(n_var)]
        self.objective_names = ["f1", "f2"]
        self.constraint_names: list[str] = []
        self.variable_units = {v: "1" for v in self.variable_names}
        self.objective_units = {"f1": "1", "f2": "1"}
        self.constraint_units: dict[str, str] = {}

    def objectives(self, X) -> np.ndarray:
        """F of shape (n, 2) for X of shape (n, n_var); the formulas of the paper."""
        X = np.asarray(X, dtype=float)
        f1 = X[:, 0]
        g = 1.0 + 9.0 * X[:, 1:].sum(axis=1) / (X.shape[1] - 1)
        if self.name == "zdt1":
            h = 1.0 - np.sqrt(f1 / g)
        elif self.name == "zdt2":
            h = 1.0 - (f1 / g) ** 2
        else:
            h = 1.0 - np.sqrt(f1 / g) - (f1 / g) * np.sin(10.0 * np.pi * f1)
        return np.column_stack([f1, g * h])

    def evaluate_designs(self, X) -> Evaluation:
        X = np.atleast_2d(np.asarray(X, dtype=float))
        if self.eval_delay_s > 0:
            time.sleep(self.eval_delay_s)
        F = self.objectives(X)
        n = X.shape[0]
        g = 1.0 + 9.0 * X[:, 1:].sum(axis=1) / (X.shape[1] - 1)
        return Evaluation(X=X, F=F, G=np.zeros((n, 0)), feasible=np.ones(n, dtype=bool), violation=np.zeros(n),
                          reason=[""] * n, metrics={"g": g}, objective_names=list(self.objective_names),
                          constraint_names=[])

    def _evaluate(self, x, out, *args, **kwargs):
        out["F"] = self.objectives(x)


def parse_benchmark(table, src: str) -> ZDTProblem:
    """The problem of a ``[benchmark]`` table (see module docs)."""
    if not isinstance(table, dict):
        raise InputError(f"expected a table. Got {table!r} instead.", src, "benchmark")
    for k in table:
        if k not in BENCHMARK_KEYS:
            raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(BENCHMARK_KEYS)}.", src, f"benchmark.{k}")
    name = table.get("name")
    if not isinstance(name, str) or name not in BENCHMARKS:
        raise InputError(f"expected one of {', '.join(BENCHMARKS)}. Got {name!r} instead.", src, "benchmark.name")
    n_var = table.get("n_var", 30)
    if isinstance(n_var, bool) or not isinstance(n_var, int) or not 2 <= n_var <= MAX_BENCHMARK_VARIABLES:
        raise InputError(f"expected an integer from 2 to {MAX_BENCHMARK_VARIABLES}. Got {n_var!r} instead.", src,
                         "benchmark.n_var")
    delay = table.get("eval_delay_s", 0.0)
    if isinstance(delay, bool) or not isinstance(delay, (int, float)) or not 0 <= delay <= 3600:
        raise InputError(f"expected a number of seconds from 0 to 3600. Got {delay!r} instead.", src,
                         "benchmark.eval_delay_s")
    return ZDTProblem(name, n_var, float(delay))
