"""Run configs: a ``[run]`` table plus the problem tables of :func:`tiltopt.problems.spec.parse_problem`.

::

    [run]
    name = "harbourline-demo"   # run ids start with it
    seed = 1                    # same config and seed: the same front
    algorithm = "nsga2"         # {'nsga2', 'nsga3'} (tiltopt.problems.registry.ALGORITHMS)
    population = 40
    generations = 30
    output = "../results"       # folder for results/<run-id>/, relative to this config
    checkpoint_every = 5        # generations between checkpoints
    nsga3_partitions = 6        # optional: reference-direction partitions for nsga3

Instead of the problem tables, a ``[benchmark]`` table selects a published test
problem (:mod:`tiltopt.optimizer.reference_problems`), for checking the optimiser.

An optional ``[targets]`` table says which designs of the front the user would build and how the
objectives weigh in the best compromise (:mod:`tiltopt.optimizer.selection`); it does not change
the problem.
"""
from __future__ import annotations

import copy
import math
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from tiltopt.base.errors import InputError
from tiltopt.base.errors import read_toml as _read_toml
from tiltopt.base.limits import MAX_GENERATION_STATES, MAX_POPULATION, MAX_REFERENCE_DIRECTIONS, check_count

ALGORITHM_NAMES = ("nsga2", "nsga3")
RUN_KEYS = ("name", "seed", "algorithm", "population", "generations", "output", "checkpoint_every",
            "nsga3_partitions")
RUN_DEFAULTS = {"algorithm": "nsga2", "output": "results", "checkpoint_every": 10, "nsga3_partitions": None}


@dataclass(frozen=True)
class RunSettings:
    """The ``[run]`` table, validated.

    Attributes
    ----------
    name : str
    seed : int
    algorithm : {'nsga2', 'nsga3'}
    population : int
    generations : int
    output : Path
        Absolute folder that holds run folders.
    checkpoint_every : int
    nsga3_partitions : int or None
    """

    name: str
    seed: int
    algorithm: str
    population: int
    generations: int
    output: Path
    checkpoint_every: int
    nsga3_partitions: int | None = None

    def to_dict(self) -> dict:
        d = asdict(self)
        d["output"] = str(self.output)
        return d


@dataclass
class RunConfig:
    """A validated run config.

    Attributes
    ----------
    run : RunSettings
    spec : tiltopt.problems.spec.ProblemSpec or None
        None for a ``[benchmark]`` config.
    benchmark : dict or None
        The ``[benchmark]`` table.
    data : dict
        The config as read (JSON-able; run.json stores it).
    targets : tiltopt.optimizer.selection.Targets
        The ``[targets]`` table (empty without one).
    source : str
        The file it came from.
    base_dir : Path
        Folder relative paths start from.
    """

    run: RunSettings
    spec: Any
    benchmark: dict | None
    data: dict
    source: str
    base_dir: Path = field(default_factory=Path)
    targets: Any = None

    def make_problem(self):
        """A fresh problem object with ``evaluate_designs`` (TiltProblem, or a benchmark)."""
        if self.benchmark is not None:
            from .reference_problems import parse_benchmark

            return parse_benchmark(self.benchmark, self.source)
        from tiltopt.problems.problem import TiltProblem

        return TiltProblem(self.spec)

    def size(self) -> dict:
        """Problem size: n_var, n_obj, n_constr, states_per_candidate (and the spec's extras)."""
        if self.spec is not None:
            return dict(self.spec.size())
        p = self.make_problem()
        return {"benchmark": p.name, "n_var": p.n_var, "n_obj": p.n_obj, "n_constr": p.n_ieq_constr,
                "states_per_candidate": 1}


def _int(v, src, key, lo, hi=None):
    if isinstance(v, bool) or not isinstance(v, int):
        raise InputError(f"expected a whole number. Got {v!r} instead.", src, key)
    if v < lo:
        raise InputError(f"must be at least {lo}. Got {v} instead.", src, key)
    if hi is not None and v > hi:
        raise InputError(f"must be at most {hi:,}. Got {v:,} instead.", src, key)
    return v


def parse_run(table: Any, src: str, base_dir: Path) -> RunSettings:
    """Validate a ``[run]`` table (see module docs)."""
    if not isinstance(table, dict):
        raise InputError(f"expected a [run] table. Got {table!r} instead.", src, "run")
    for k in table:
        if k not in RUN_KEYS:
            raise InputError(f"unknown key '{k}'. Expected one of: {', '.join(RUN_KEYS)}.", src, f"run.{k}")
    for k in ("name", "seed", "population", "generations"):
        if k not in table:
            raise InputError("this key is required but missing.", src, f"run.{k}")
    t = {**RUN_DEFAULTS, **table}
    name = t["name"]
    if not isinstance(name, str) or not name.strip() or any(c in name for c in '/\\:*?"<>|'):
        raise InputError(f"expected a short name usable in a folder name (no / \\ : * ? \" < > |). Got {name!r}.",
                         src, "run.name")
    seed = _int(t["seed"], src, "run.seed", 0)
    alg = t["algorithm"]
    if alg not in ALGORITHM_NAMES:
        raise InputError(f"expected one of {', '.join(ALGORITHM_NAMES)}. Got {alg!r} instead.", src, "run.algorithm")
    pop = _int(t["population"], src, "run.population", 4, MAX_POPULATION)
    gens = _int(t["generations"], src, "run.generations", 1)
    every = _int(t["checkpoint_every"], src, "run.checkpoint_every", 1)
    parts = t["nsga3_partitions"]
    if parts is not None:
        parts = _int(parts, src, "run.nsga3_partitions", 1, MAX_REFERENCE_DIRECTIONS)
    out = t["output"]
    if not isinstance(out, str) or not out:
        raise InputError(f"expected a folder path (relative to the config). Got {out!r} instead.", src, "run.output")
    outp = Path(out)
    outp = (outp if outp.is_absolute() else base_dir / outp).resolve()
    return RunSettings(name=name.strip(), seed=seed, algorithm=alg, population=pop, generations=gens, output=outp,
                       checkpoint_every=every, nsga3_partitions=parts)


def parse_config(data: dict, src: str = "<memory>", base_dir: str | Path | None = None) -> RunConfig:
    """Validate a run config read from TOML.

    Parameters
    ----------
    data : dict
        Tables of the config.
    src : str
        File name for messages.
    base_dir : path, optional
        Folder relative paths start from (default: the current folder).

    Raises
    ------
    InputError
        Naming the key, for unknown keys and bad values.
    """
    base = Path(base_dir).resolve() if base_dir is not None else Path(".").resolve()
    if not isinstance(data, dict):
        raise InputError("expected the tables of a run config.", src)
    if "run" not in data:
        raise InputError("a run config needs a [run] table (name, seed, population, generations).", src, "run")
    data = copy.deepcopy(data)
    run = parse_run(data["run"], src, base)
    if "benchmark" in data:
        extra = [k for k in data if k not in ("run", "benchmark")]
        if extra:
            raise InputError(f"unknown key '{extra[0]}': a [benchmark] config has only [run] and [benchmark].", src,
                             extra[0])
        from .reference_problems import parse_benchmark

        n_obj = parse_benchmark(data["benchmark"], src).n_obj
        _check_size(run, n_obj, 1, src)
        return RunConfig(run=run, spec=None, benchmark=dict(data["benchmark"]), data=data, source=src, base_dir=base,
                         targets=_empty_targets())
    from tiltopt.problems.spec import parse_problem

    spec = parse_problem(data, src, base)
    _check_size(run, len(spec.objectives), spec.envelope.n_states, src)
    return RunConfig(run=run, spec=spec, benchmark=None, data=data, source=src, base_dir=base,
                     targets=parse_run_targets(data.get("targets", {}), src, spec))


def target_names(spec) -> list[str]:
    """The names a ``[targets]`` bound may name for a problem: its metric columns, objective names and
    ``obj.`` columns, and its design variables (``var.NAME``)."""
    from tiltopt.problems.problem import METRIC_UNITS

    return (list(METRIC_UNITS) + list(spec.objectives) + [f"obj.{o}" for o in spec.objectives]
            + [f"var.{v}" for v in spec.template.names])


def parse_run_targets(table, src: str, spec):
    """The ``[targets]`` table of a run config (:func:`tiltopt.optimizer.selection.parse_targets`)."""
    from .selection import parse_targets

    return parse_targets(table, src, target_names(spec), list(spec.objectives))


def _empty_targets():
    from .selection import Targets

    return Targets()


def _check_size(run: RunSettings, n_obj: int, states: int, src: str) -> None:
    """A generation's states and NSGA-III's reference directions within :mod:`tiltopt.base.limits`."""
    check_count(run.population * states, MAX_GENERATION_STATES,
                f"states per generation (population {run.population} x {states} states per candidate)",
                "Use a smaller population or a coarser envelope (lean_step_deg, travel_mm).", src, "run.population")
    if run.algorithm == "nsga3" and run.nsga3_partitions is not None:
        check_count(math.comb(run.nsga3_partitions + n_obj - 1, n_obj - 1), MAX_REFERENCE_DIRECTIONS,
                    f"NSGA-III reference directions ({run.nsga3_partitions} partitions, {n_obj} objectives)",
                    "Use fewer nsga3_partitions (or leave it out: as many directions as fit the population).",
                    src, "run.nsga3_partitions")


def read_toml(path: str | Path) -> dict:
    return _read_toml(path, "run config .toml")


def load_config(path: str | Path) -> RunConfig:
    """Read and validate a run config file (relative paths start at its folder)."""
    p = Path(path)
    return parse_config(read_toml(p), str(p), p.resolve().parent)


def time_evaluations(problem, seed: int = 0, sizes=(4, 12)) -> tuple[float, float]:
    """Fixed and per-candidate cost of ``problem.evaluate_designs``, seconds.

    Evaluates random designs within the bounds in two batch sizes (after a
    warm-up call) and fits ``t = fixed + per_candidate * n``.
    """
    rng = np.random.default_rng(seed)
    xl, xu = np.asarray(problem.xl, float), np.asarray(problem.xu, float)
    problem.evaluate_designs(xl + rng.random((2, len(xl))) * (xu - xl))
    times = []
    for n in sizes:
        X = xl + rng.random((n, len(xl))) * (xu - xl)
        t0 = time.perf_counter()
        problem.evaluate_designs(X)
        times.append(time.perf_counter() - t0)
    per = max((times[1] - times[0]) / (sizes[1] - sizes[0]), times[1] / sizes[1] * 0.25, 0.0)
    fixed = max(times[1] - per * sizes[1], 0.0)
    return fixed, per


def _fmt_duration(s: float) -> str:
    if not math.isfinite(s):
        return "?"
    if s < 90:
        return f"{s:.0f} s"
    if s < 5400:
        return f"{s / 60:.0f} min"
    return f"{s / 3600:.1f} h"


OVERHEAD_SHARE = 0.15   # our own allowance for the optimiser's share of a generation (benchmarks/optimizer.py)


def check_config_lines(path: str | Path) -> list[str]:
    """Validate a run config and describe it: problem size and an estimated run time."""
    cfg = load_config(path)
    r = cfg.run
    size = cfg.size()
    problem = cfg.make_problem()
    lines = [f"{path}: run config is valid."]
    if cfg.spec is not None:
        lines.append(f"problem: template '{size.get('template')}', {size['n_var']} variables, "
                     f"{size['n_obj']} objectives ({', '.join(cfg.spec.objectives)}), {size['n_constr']} constraints "
                     f"({', '.join(cfg.spec.constraints)})")
        lines.append(f"states per candidate: {size['states_per_candidate']} ({size.get('n_lean')} leans x "
                     f"{size.get('n_travel')} travels); clearance {'on' if size.get('clearance') else 'off'}, "
                     f"sizing {'on' if size.get('sizing') else 'off'}")
        lines.append("requirements (constraint: limit, where it comes from):")
        for q in cfg.spec.limits.requirements(cfg.spec.constraints):
            lim = ("" if q["limit"] is None or isinstance(q["limit"], bool)
                   else f" {q['key']} = {q['limit']:g} {q['unit']}")
            lines.append(f"  {q['name']}:{lim or ' on'} ({q['source']})")
    else:
        lines.append(f"problem: benchmark '{size['benchmark']}', {size['n_var']} variables, "
                     f"{size['n_obj']} objectives, {size['n_constr']} constraints; states per candidate: 1")
    lines.append(f"run: {r.algorithm}, population {r.population}, {r.generations} generations "
                 f"({r.population * r.generations} evaluations), seed {r.seed}, checkpoint every "
                 f"{r.checkpoint_every} generations, results in {r.output}")
    fixed, per = time_evaluations(problem, r.seed)
    gen_s = (fixed + per * r.population) / (1.0 - OVERHEAD_SHARE)
    lines.append(f"estimated run time: {_fmt_duration(gen_s * r.generations)} on this machine "
                 f"({per * 1e3:.2f} ms per candidate + {fixed * 1e3:.1f} ms per batch measured on a few random "
                 f"designs, plus {OVERHEAD_SHARE:.0%} for the optimiser)")
    return lines
