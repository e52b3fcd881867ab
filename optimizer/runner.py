"""NSGA-II / NSGA-III runs over ``problem.evaluate_designs``, with checkpoints, resume and result files.

The loop is pymoo's ask / tell: each generation's designs go to one batched
``evaluate_designs(X)`` call, every evaluated design is recorded, and the
algorithm's state (population, random generator ...) is written every
``checkpoint_every`` generations as arrays and JSON (:mod:`tiltopt.optimizer.checkpoint`;
never a pickle, so resuming a folder from anyone runs no code of theirs). A
resumed run continues to the same front as an uninterrupted run with the same seed.

One process writes a run folder at a time: :class:`~tiltopt.optimizer.runfolder.FolderLock`
(``run.lock``) is held from start to end, and the OS drops it when the process dies.

Any object works as the problem if it has ``n_var``, ``n_obj``,
``n_ieq_constr``, ``xl``, ``xu`` and ``evaluate_designs(X)`` returning an
object with ``F``, ``G``, ``feasible``, ``violation``, ``reason``,
``metrics``, ``objective_names`` and ``constraint_names``
(:class:`tiltopt.problems.problem.TiltProblem`, :class:`tiltopt.optimizer.reference_problems.ZDTProblem`).
"""
from __future__ import annotations

import math
import signal
import threading
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from pymoo.core.evaluator import Evaluator
from pymoo.core.problem import Problem
from pymoo.problems.static import StaticProblem

from tiltopt.base.errors import InputError
from tiltopt.base.inputs import reading_copies

from . import checkpoint as CK
from . import results as R
from . import runfolder as RF
from .config import RunConfig, RunSettings, parse_config
from .pareto import HV_REFERENCE, Normaliser, dominated_by, hypervolume, nondominated_mask
from .progress import Progress


class _Bounds(Problem):
    """What the algorithm sees of the problem: sizes and bounds only."""

    def __init__(self, n_var, n_obj, n_ieq_constr, xl, xu):
        super().__init__(n_var=n_var, n_obj=n_obj, n_ieq_constr=n_ieq_constr, xl=xl, xu=xu, elementwise=False)

    def _evaluate(self, x, out, *args, **kwargs):
        raise RuntimeError("the runner evaluates designs through evaluate_designs(); the algorithm must not")


@dataclass
class ProblemInfo:
    """Names and units of a problem's columns (from the problem object)."""

    kind: str
    variables: list
    variable_units: dict
    objectives: list
    objective_units: dict
    constraints: list
    constraint_units: dict
    template: dict | None

    def to_dict(self) -> dict:
        return {"kind": self.kind, "variables": self.variables, "variable_units": self.variable_units,
                "objectives": self.objectives, "objective_units": self.objective_units,
                "constraints": self.constraints, "constraint_units": self.constraint_units}


def describe_problem(problem) -> ProblemInfo:
    """Variable, objective and constraint names and units of a problem object."""
    template = getattr(problem, "template", None)
    if template is not None and hasattr(template, "variables"):
        variables = [v.name for v in template.variables]
        vunits = {v.name: v.unit for v in template.variables}
        tdict = template.to_dict()
        kind = "tilt"
    else:
        variables = list(getattr(problem, "variable_names", [f"x{i + 1}" for i in range(problem.n_var)]))
        vunits = dict(getattr(problem, "variable_units", {}) or {v: "1" for v in variables})
        tdict = None
        kind = str(getattr(problem, "name", type(problem).__name__))
    objectives = list(getattr(problem, "objective_names", [f"f{i + 1}" for i in range(problem.n_obj)]))
    constraints = list(getattr(problem, "constraint_names", [f"g{i + 1}" for i in range(problem.n_ieq_constr)]))
    return ProblemInfo(kind=kind, variables=variables, variable_units=vunits, objectives=objectives,
                       objective_units=dict(getattr(problem, "objective_units", {}) or {}),
                       constraints=constraints, constraint_units=dict(getattr(problem, "constraint_units", {}) or {}),
                       template=tdict)


def _largest_partitions(n_obj: int, population: int) -> int:
    p = 1
    while math.comb(p + 1 + n_obj - 1, n_obj - 1) <= population:
        p += 1
    return p


def cv_then_random(pop, P, random_state=None, **kwargs):
    """Binary tournament for NSGA-III: smaller constraint violation wins, ties by the algorithm's generator.

    pymoo 0.6.2's own NSGA-III tournament breaks ties of equal, positive
    violation with an unseeded generator, so the same seed could give
    different fronts; this one draws every tie from ``random_state``.

    Parameters
    ----------
    P : ndarray of shape (n_tournaments, 2)
        Indices into ``pop``.

    Returns
    -------
    S : ndarray of shape (n_tournaments, 1)
    """
    cv = np.asarray(pop.get("CV"), dtype=float).reshape(len(pop), -1)[:, 0]
    a, b = P[:, 0], P[:, 1]
    coin = random_state.random(len(P)) < 0.5
    S = np.where(cv[a] < cv[b], a, np.where(cv[b] < cv[a], b, np.where(coin, a, b)))
    return S[:, None].astype(int)


def make_algorithm(settings: RunSettings, n_obj: int, sampling=None):
    """The pymoo algorithm of a run: NSGA-II, or NSGA-III with Das-Dennis reference directions.

    sampling : ndarray of shape (population, n_var), optional
        The first population (default: pymoo's random sampling in the bounds).
    """
    extra = {} if sampling is None else {"sampling": np.asarray(sampling, float)}
    if settings.algorithm == "nsga2":
        from pymoo.algorithms.moo.nsga2 import NSGA2

        return NSGA2(pop_size=settings.population, eliminate_duplicates=True, **extra)
    from pymoo.algorithms.moo.nsga3 import NSGA3
    from pymoo.util.ref_dirs import get_reference_directions

    parts = settings.nsga3_partitions or _largest_partitions(n_obj, settings.population)
    ref_dirs = get_reference_directions("das-dennis", n_obj, n_partitions=parts)
    from pymoo.operators.selection.tournament import TournamentSelection

    return NSGA3(pop_size=settings.population, ref_dirs=ref_dirs, eliminate_duplicates=True,
                 selection=TournamentSelection(func_comp=cv_then_random), **extra)


@dataclass
class RunState:
    """Everything besides the algorithm that a checkpoint keeps."""

    generation: int = 0
    n_evals: int = 0
    generations: list = field(default_factory=list)
    archive: dict | None = None  # column -> ndarray, the non-dominated feasible designs so far
    normaliser: Normaliser | None = None
    elapsed_s: float = 0.0
    evaluation_s: float = 0.0
    part_start: int = 1          # first generation not yet in a part file
    pending: list = field(default_factory=list)
    started_utc: str = ""


@dataclass
class RunOutcome:
    """How a run ended.

    Attributes
    ----------
    run_dir : Path
    run_id : str
    status : {'finished', 'interrupted'}
    generations : int
        Generations done.
    front_size : int
    elapsed_s : float
    """

    run_dir: Path
    run_id: str
    status: str
    generations: int
    front_size: int
    elapsed_s: float


class _StopFlag:
    """SIGINT handling: the first Ctrl-C asks to stop after this generation, a second aborts."""

    def __init__(self, progress: Progress):
        self.requested = False
        self.progress = progress
        self._old = None

    def _handler(self, signum, frame):
        if self.requested:
            raise KeyboardInterrupt
        self.requested = True
        self.progress.message("stopping after this generation, writing a checkpoint (Ctrl-C again to abort) ...")

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            self._old = signal.signal(signal.SIGINT, self._handler)
        return self

    def __exit__(self, *exc):
        if self._old is not None:
            signal.signal(signal.SIGINT, self._old)
        return False


class Runner:
    """One run of a problem into a run folder.

    Parameters
    ----------
    problem : object with ``evaluate_designs``
    settings : RunSettings
    run_dir : Path
    run_id : str
    config : dict, optional
        Everything about the config to keep in run.json (``config``, ``config_source``, ``config_base_dir``).
    progress : bool
        Print a progress line on stderr.
    stop_after : int, optional
        Stop (as after Ctrl-C, with a checkpoint) once this many generations are done.
    notices : bool
        Print notices (stop requested, how to resume) on stderr.
    lock : FolderLock, optional
        The run folder's lock, when the caller holds it already (else :meth:`run` takes it).
    report_progress : bool
        Write ``progress.json`` in the run folder (about once a second and at the end): the
        generation, front size and ETA a batch shows (docs/formats.md, "Run folder").
    stop_file : Path, optional
        Stop after the current generation, as after Ctrl-C, once this file exists (a batch's stop
        request: how a Dask worker, which no Ctrl-C reaches, is stopped).
    """

    def __init__(self, problem, settings: RunSettings, run_dir: Path, run_id: str, config: dict | None = None,
                 progress: bool = True, stop_after: int | None = None, notices: bool = True,
                 lock: RF.FolderLock | None = None, restart_hint: str = CK.RESTART_HINT,
                 report_progress: bool = False, stop_file: Path | None = None):
        self.problem = problem
        self.restart_hint = restart_hint     # the end of the message about a damaged checkpoint
        self.settings = settings
        self.run_dir = Path(run_dir)
        self.run_id = run_id
        self.config = config or {}
        self.info = describe_problem(problem)
        self.progress = Progress(settings.generations, run_id, enabled=progress, notices=notices)
        self.stop_after = stop_after
        self.width = max(3, len(str(settings.generations)))
        self.algorithm = None
        self.state = RunState()
        self.units = self._units()
        self.versions = R.package_versions()
        self.lock = lock
        self.report_progress = report_progress
        self.stop_file = Path(stop_file) if stop_file is not None else None
        self._reported = -math.inf

    # -------------------------------------------------------------- setup
    def _units(self) -> dict:
        u = dict(R.BASE_UNITS)
        for v in self.info.variables:
            u[f"var.{v}"] = self.info.variable_units.get(v, "1")
        for o in self.info.objectives:
            u[f"obj.{o}"] = self.info.objective_units.get(o, "1")
        for c in self.info.constraints:
            u[f"con.{c}"] = self.info.constraint_units.get(c, "1")
        from tiltopt.problems.problem import METRIC_UNITS

        u.update(METRIC_UNITS)
        return u

    def _new_algorithm(self):
        p = self.problem
        # a problem may seed the first population (the base design and perturbations of it)
        seed_fn = getattr(p, "initial_designs", None)
        sampling = seed_fn(self.settings.population, self.settings.seed) if seed_fn is not None else None
        alg = make_algorithm(self.settings, p.n_obj, sampling)
        shell = _Bounds(p.n_var, p.n_obj, p.n_ieq_constr, np.asarray(p.xl, float), np.asarray(p.xu, float))
        alg.setup(shell, termination=("n_gen", self.settings.generations), seed=self.settings.seed, verbose=False)
        return alg

    def _meta(self) -> dict:
        return {"run_id": self.run_id, "seed": self.settings.seed, "config": self.config.get("config"),
                "versions": self.versions, "caution": R.CAUTION}

    # -------------------------------------------------------------- checkpoint
    def _write_checkpoint(self):
        blob = CK.encode(self.algorithm, self.state, self.info.to_dict(), self.settings.to_dict(), self.versions)
        R.write_bytes(self.run_dir / R.CHECKPOINT, blob)

    def _load_checkpoint(self) -> bool:
        path = self.run_dir / R.CHECKPOINT
        if not CK.present(path):     # anything else at its path is refused by decode
            refuse_old_checkpoint(self.run_dir)
            return False
        alg = self._new_algorithm()     # the same construction as a new run; the checkpoint holds its state
        p = self.problem
        fields = CK.decode(path, alg, self.info.to_dict(), p.n_var, p.n_obj, p.n_ieq_constr, self.restart_hint)
        norm = fields.pop("normaliser")
        self.algorithm = alg
        self.state = RunState(**fields, normaliser=None if norm is None else Normaliser.restored(*norm))
        # parts written after the checkpoint belong to generations that will run again
        parts = self.run_dir / R.PARTS_DIR
        if parts.is_dir():
            for f in parts.glob("evaluations-*.parquet"):
                if int(f.name.split("-")[1][1:]) > self.state.generation:
                    f.unlink()
        return True

    # -------------------------------------------------------------- records
    def _records(self, gen: int, X: np.ndarray, ev) -> dict:
        """Columns (name -> ndarray of shape (n,)) of one generation's evaluations."""
        n = X.shape[0]
        cols: dict[str, Any] = {
            "candidate_id": np.array([f"g{gen:0{self.width}d}-{i:04d}" for i in range(n)], dtype=object),
            "generation": np.full(n, gen, dtype=np.int64),
            "feasible": np.asarray(ev.feasible, dtype=bool),
            "violation": np.asarray(ev.violation, dtype=float),
            "reason": np.array([str(r) for r in ev.reason], dtype=object),
        }
        for j, v in enumerate(self.info.variables):
            cols[f"var.{v}"] = X[:, j].astype(float)
        F = np.asarray(ev.F, dtype=float)
        for j, o in enumerate(self.info.objectives):
            cols[f"obj.{o}"] = F[:, j]
        G = np.asarray(ev.G, dtype=float).reshape(n, -1)
        for j, c in enumerate(self.info.constraints):
            cols[f"con.{c}"] = G[:, j]
        for name, arr in (ev.metrics or {}).items():
            a = np.asarray(arr)
            if a.ndim == 1:
                cols[name] = a
            elif a.ndim == 2:
                for k in range(a.shape[1]):
                    cols[f"{name}.{k}"] = a[:, k]
        return cols

    def _obj_cols(self):
        return [f"obj.{o}" for o in self.info.objectives]

    def _update_archive(self, rec: dict):
        """Keep the non-dominated feasible designs of every generation so far (first of equal designs).

        Incremental: the new designs are compared with each other and with the archive, never the
        archive with itself, so a generation costs O(archive x population).
        """
        s = self.state
        feas = rec["feasible"]
        if not feas.any():
            return
        oc, vc = self._obj_cols(), [f"var.{v}" for v in self.info.variables]
        new = {k: v[feas] for k, v in rec.items()}
        Fn = np.column_stack([new[c] for c in oc])
        Xn = np.column_stack([new[c] for c in vc])
        keep = nondominated_mask(Fn)
        _, first = np.unique(Xn, axis=0, return_index=True)     # equal designs in one generation: the first
        uniq = np.zeros(len(Fn), dtype=bool)
        uniq[first] = True
        keep &= uniq
        if not s.archive:
            s.archive = {k: v[keep] for k, v in new.items()}
            return
        Fa = np.column_stack([s.archive[c] for c in oc])
        Xa = np.column_stack([s.archive[c] for c in vc])
        idx_new = np.flatnonzero(keep)
        idx_new = idx_new[~dominated_by(Fn[idx_new], Fa)]
        if len(idx_new):   # a design already in the archive stays there once (equal X: equal F)
            cand = np.flatnonzero(np.isin(Fn[idx_new, 0], Fa[:, 0]))
            if len(cand):
                rows = idx_new[cand]
                same = np.array([(Xa[Fa[:, 0] == Fn[r, 0]] == Xn[r]).all(axis=1).any() for r in rows])
                idx_new = np.setdiff1d(idx_new, rows[same])
        if len(idx_new) == 0:
            return
        keep_old = ~dominated_by(Fa, Fn[idx_new])
        s.archive = _concat_cols([{k: v[keep_old] for k, v in s.archive.items()},
                                  {k: v[idx_new] for k, v in new.items()}])

    def _population_hypervolume(self, F_new, feas_new) -> float:
        """Hypervolume of the population's non-dominated feasible designs, normalised objectives.

        The bounds are fixed once, from the feasible designs of the first generation that has at
        least max(n_obj + 1, population / 4) of them (so a lone early design does not set the
        scale); until then NaN. Later designs better than those bounds give values above
        1.1 ** n_obj: the figure measures progress within one run, not across runs.
        """
        s = self.state
        if s.normaliser is None:
            if feas_new.sum() < max(self.problem.n_obj + 1, self.settings.population // 4):
                return float("nan")
            s.normaliser = Normaliser.from_points(F_new[feas_new])
        pop = self.algorithm.pop
        feas = np.asarray(pop.get("feas"), dtype=bool).reshape(-1)
        if not feas.any():
            return 0.0
        Fp = np.asarray(pop.get("F"), dtype=float)[feas]
        return hypervolume(s.normaliser(Fp), np.full(self.problem.n_obj, HV_REFERENCE))

    def _front_size(self) -> int:
        return 0 if not self.state.archive else int(len(self.state.archive["candidate_id"]))

    # -------------------------------------------------------------- files
    def _write_front_and_generations(self):
        meta = self._meta()
        front = pd.DataFrame(self.state.archive) if self.state.archive else self._empty_records()
        R.write_parquet(self.run_dir / R.FRONT, front, self.units, meta)
        gens = pd.DataFrame(self.state.generations, columns=list(R.GENERATION_UNITS))
        R.write_parquet(self.run_dir / R.GENERATIONS, gens, R.GENERATION_UNITS, meta)

    def _empty_records(self) -> pd.DataFrame:
        cols = (["candidate_id", "generation", "feasible", "violation", "reason"]
                + [f"var.{v}" for v in self.info.variables] + self._obj_cols()
                + [f"con.{c}" for c in self.info.constraints])
        return pd.DataFrame({c: pd.Series(dtype=str if c in ("candidate_id", "reason") else
                                          (bool if c == "feasible" else (np.int64 if c == "generation" else float)))
                             for c in cols})

    def _flush_part(self):
        s = self.state
        if not s.pending:
            return
        df = pd.DataFrame(_concat_cols(s.pending))
        name = f"evaluations-g{s.part_start:06d}-g{s.generation:06d}.parquet"
        R.write_parquet(self.run_dir / R.PARTS_DIR / name, df, self.units, self._meta())
        s.pending = []
        s.part_start = s.generation + 1

    def _write_evaluations(self):
        parts = sorted((self.run_dir / R.PARTS_DIR).glob("evaluations-*.parquet")) \
            if (self.run_dir / R.PARTS_DIR).is_dir() else []
        frames = [R.read_parquet(p)[0] for p in parts]
        if self.state.pending:
            frames.append(pd.DataFrame(_concat_cols(self.state.pending)))
        df = pd.concat(frames, ignore_index=True) if frames else self._empty_records()
        R.write_parquet(self.run_dir / R.EVALUATIONS, df, self.units, self._meta())

    def _write_run_json(self, status: str, error: str | None = None):
        s = self.state
        outside = max(s.elapsed_s - s.evaluation_s, 0.0)
        doc = {
            "format": "tiltopt-run-1",
            "run_id": self.run_id,
            "status": status,
            "seed": self.settings.seed,
            "run": self.settings.to_dict(),
            "config": self.config.get("config"),
            "config_source": self.config.get("config_source"),
            "config_base_dir": self.config.get("config_base_dir"),
            "config_sha256": self.config.get("config_sha256"),
            "inputs": self.config.get("inputs"),
            "problem": self.info.to_dict(),
            "template": self.info.template,
            "hypervolume": {"normalisation": s.normaliser.to_dict() if s.normaliser else None,
                            "reference": HV_REFERENCE,
                            "note": "hypervolume of each generation's population front (non-dominated feasible "
                                    "designs); objectives mapped to [0, 1] by the feasible range of the first "
                                    "generation with max(n_obj + 1, population / 4) feasible designs; reference "
                                    "point 1.1 in each"},
            "versions": self.versions,
            "timings": {"started_utc": s.started_utc, "updated_utc": datetime.now(timezone.utc).isoformat(),
                        "elapsed_s": s.elapsed_s, "evaluation_s": s.evaluation_s, "outside_evaluation_s": outside,
                        "outside_evaluation_share": outside / s.elapsed_s if s.elapsed_s > 0 else None,
                        "generations_done": s.generation, "evaluations": s.n_evals},
            "front_size": self._front_size(),
            "caution": R.CAUTION,
        }
        if error:
            doc["error"] = error
        R.write_json(self.run_dir / R.RUN_JSON, doc)

    def _progress_report(self, status: str, eta_s: float = float("nan"), evals_per_s: float = float("nan"),
                         force: bool = False) -> None:
        """``progress.json`` (a batch's progress lines read it): at most once a second unless ``force``."""
        if not self.report_progress:
            return
        now = time.monotonic()
        if not force and now - self._reported < 1.0:
            return
        self._reported = now
        s = self.state
        last = s.generations[-1] if s.generations else {}
        doc = {"run_id": self.run_id, "status": status, "generation": s.generation,
               "generations": self.settings.generations, "front_size": self._front_size(),
               "elapsed_s": s.elapsed_s, "eta_s": eta_s if math.isfinite(eta_s) else None,
               "evals_per_s": evals_per_s if math.isfinite(evals_per_s) else None,
               "feasible_share": last.get("feasible_share"),
               "hypervolume": last.get("hypervolume") if math.isfinite(last.get("hypervolume", float("nan"))) else None,
               "updated_utc": datetime.now(timezone.utc).isoformat()}
        try:
            R.write_json(self.run_dir / R.PROGRESS, doc)
        except OSError:      # a progress line is not worth stopping a run for
            pass

    def _stop_requested(self) -> bool:
        try:
            return self.stop_file is not None and self.stop_file.exists()
        except OSError:
            return False

    def _checkpoint(self, status="running"):
        self._flush_part()
        self._write_front_and_generations()
        self._write_checkpoint()
        self._write_run_json(status)

    # -------------------------------------------------------------- the loop
    def _warm_up(self) -> None:
        """Evaluate the centre of the bounds once before the clock starts.

        The first evaluation after an install compiles the numba kernels (numba caches them);
        doing it here keeps that out of the first generation's rate and ETA. Best effort: the
        result is discarded, nothing is recorded, and the algorithm's random state is untouched.
        """
        t = time.perf_counter()
        x = 0.5 * (np.asarray(self.problem.xl, float) + np.asarray(self.problem.xu, float))
        self.problem.evaluate_designs(x[None])
        dt = time.perf_counter() - t
        if dt > 2.0:
            self.progress.message(f"compiled the solver kernels in {dt:.0f} s (once per install; cached)")

    def run(self, resume: bool = False) -> RunOutcome:
        """Run (or continue) to the configured number of generations, or until stopped.

        Holds the run folder's lock throughout (taken here unless the caller holds it).

        Raises
        ------
        InputError
            When another process writes the folder, the checkpoint is damaged, or the disk is full
            (the message says how to continue).
        """
        own = self.lock is None
        if own:
            self.lock = RF.FolderLock.acquire(self.run_dir)
        try:
            return self._run(resume)
        except OSError as exc:
            if exc.errno not in RF.DISK_FULL:
                raise
            raise InputError(f"the disk is full (writing {exc.filename or 'a result file'}). Every file written "
                             f"before is whole and the last checkpoint is valid: free some space, then continue "
                             f"with: tiltopt run --resume {self.run_dir}", str(self.run_dir)) from None
        finally:
            if own:
                self.lock.release()
                self.lock = None

    def _run(self, resume: bool) -> RunOutcome:
        RF.clean_temp_files(self.run_dir)      # left by a writer killed mid-write; we hold the lock
        if not (resume and self._load_checkpoint()):
            self.algorithm = self._new_algorithm()
            self.state = RunState(started_utc=datetime.now(timezone.utc).isoformat())
            RF.clear_run_files(self.run_dir, results_only=True)
            self._write_run_json("running")
        alg, s = self.algorithm, self.state
        p = self.problem
        every = self.settings.checkpoint_every
        status = "finished"
        self._warm_up()
        session_t0 = time.perf_counter()
        base_elapsed = s.elapsed_s
        session_gens = 0
        try:
            with _StopFlag(self.progress) as stop:
                self._progress_report("running", force=True)
                while alg.has_next():
                    if stop.requested or (self.stop_after is not None and s.generation >= self.stop_after) \
                            or self._stop_requested():
                        status = "interrupted"
                        break
                    t0 = time.perf_counter()
                    pop = alg.ask()
                    X = np.asarray(pop.get("X"), dtype=float)
                    te = time.perf_counter()
                    ev = p.evaluate_designs(X)
                    eval_dt = time.perf_counter() - te
                    F = np.asarray(ev.F, dtype=float)
                    G = np.asarray(ev.G, dtype=float).reshape(len(X), -1)
                    if F.shape != (len(X), p.n_obj) or G.shape[1] != p.n_ieq_constr:
                        raise RuntimeError(f"evaluate_designs returned F {F.shape}, G {G.shape} for "
                                           f"{len(X)} designs, {p.n_obj} objectives, {p.n_ieq_constr} constraints")
                    if not (np.isfinite(F).all() and np.isfinite(G).all()):
                        raise RuntimeError("evaluate_designs returned inf or NaN in F or G")
                    kw = {"F": F, "G": G} if p.n_ieq_constr else {"F": F}
                    Evaluator().eval(StaticProblem(alg.problem, **kw), pop)
                    alg.tell(infills=pop)

                    s.generation += 1
                    s.n_evals += len(X)
                    rec = self._records(s.generation, X, ev)
                    s.pending.append(rec)
                    self._update_archive(rec)
                    feas = rec["feasible"]
                    hv = self._population_hypervolume(F, feas)
                    now = time.perf_counter()
                    s.elapsed_s = base_elapsed + (now - session_t0)
                    s.evaluation_s += eval_dt
                    s.generations.append({
                        "generation": s.generation, "evaluations": s.n_evals, "feasible": int(feas.sum()),
                        "feasible_share": float(feas.mean()), "front_size": self._front_size(),
                        "hypervolume": hv, "elapsed_s": s.elapsed_s, "generation_s": now - t0,
                        "evaluation_s": eval_dt})
                    session_gens += 1
                    per_gen = (now - session_t0) / session_gens
                    eta = per_gen * (self.settings.generations - s.generation)
                    self.progress.update(s.generation, len(X) / max(now - t0, 1e-9), float(feas.mean()), hv, eta)
                    self._progress_report("running", eta, len(X) / max(now - t0, 1e-9))
                    if s.generation % every == 0 and alg.has_next():
                        self._checkpoint()
        except KeyboardInterrupt:
            # aborted inside a generation: keep the last checkpoint, write what completed generations hold
            self.progress.message("aborted; results of the completed generations are written, "
                                  "--resume continues from the last checkpoint")
            self._write_front_and_generations()
            self._write_evaluations()
            self._write_run_json("interrupted")
            self._progress_report("interrupted", force=True)
            raise
        except BaseException as exc:
            self.progress.close()
            if not (isinstance(exc, OSError) and exc.errno in RF.DISK_FULL):   # a full disk takes no more writes
                self._write_run_json("failed", error=f"{type(exc).__name__}: {exc}")
                self._progress_report("failed", force=True)
            raise
        self.progress.close()
        self._flush_part()
        self._write_front_and_generations()
        self._write_checkpoint()
        self._write_evaluations()
        self._write_run_json(status)
        self._progress_report(status, 0.0 if status == "finished" else float("nan"), force=True)
        if status == "finished":   # evaluations.parquet now holds every part
            _remove_parts(self.run_dir)
        if status == "interrupted":
            self.progress.message(f"stopped at generation {s.generation}; continue with: "
                                  f"tiltopt run --resume {self.run_dir}")
        return RunOutcome(self.run_dir, self.run_id, status, s.generation, self._front_size(), s.elapsed_s)


def _concat_cols(blocks: list) -> dict:
    """Concatenate column dicts (a column missing from a block is NaN there)."""
    keys: dict[str, None] = {}
    for b in blocks:
        keys.update(dict.fromkeys(b))
    out = {}
    for k in keys:
        parts = []
        for b in blocks:
            n = len(next(iter(b.values())))
            parts.append(b[k] if k in b else np.full(n, np.nan))
        out[k] = np.concatenate(parts)
    return out


# ------------------------------------------------------------------ entry points
def _remove_parts(run_dir: Path) -> None:
    """Delete the part files (evaluations.parquet holds them all now), and their folder when empty."""
    parts = Path(run_dir) / R.PARTS_DIR
    if parts.is_dir() and not parts.is_symlink():
        for f in parts.iterdir():
            if RF.PART_RE.match(f.name):
                f.unlink(missing_ok=True)
        try:
            parts.rmdir()
        except OSError:
            pass


def refuse_old_checkpoint(run_dir: Path) -> None:
    """An InputError when the folder holds an old pickled checkpoint (never loaded)."""
    old = Path(run_dir) / RF.OLD_CHECKPOINT
    if old.exists():
        raise InputError("a checkpoint of an older tiltopt (a Python pickle). tiltopt never loads pickles: loading "
                         "one runs whatever code its author put in it. Start the run again with: tiltopt run CONFIG "
                         "--overwrite (or delete checkpoint.pkl; --resume then starts it again from generation 1).",
                         str(old))


def config_record(cfg: RunConfig, inputs: list | None = None) -> dict:
    """What run.json keeps of a config: the data as run, where it came from, its hash, the input files."""
    return {"config": cfg.data, "config_source": cfg.source, "config_base_dir": str(cfg.base_dir),
            "config_sha256": RF.config_hash(cfg.data), "inputs": inputs}


def prepare_fresh(cfg: RunConfig, run_dir: Path, config_file=None):
    """Copy and hash a new run's input files into ``run_dir/inputs/`` (lock held) and build its problem from the
    copies, so that the run, its resume and its reports read the same bytes.

    Returns
    -------
    cfg : RunConfig
        Parsed from the copies.
    problem
    record : dict
        For run.json (:func:`config_record` with the input records).
    """
    cfg, entries = RF.collect_inputs(cfg.data, cfg.source, cfg.base_dir, config_file)
    recs = RF.copy_inputs(run_dir, entries)
    copies = {r["role"]: Path(run_dir) / r["copy"] for r in recs if r["copy"] and r["role"] != "config"}
    with reading_copies(copies):
        cfg = parse_config(cfg.data, cfg.source, cfg.base_dir)
        problem = cfg.make_problem()
    return cfg, problem, config_record(cfg, recs)


def default_run_id(cfg: RunConfig) -> str:
    return f"{cfg.run.name}-s{cfg.run.seed}"


def _exists_message(run_dir: Path, meta: dict) -> str:
    st = meta.get("status")
    if st == "finished":
        return ("a run folder with this id already exists and holds a finished run; pass --overwrite to replace it, or "
                "--run-id NAME for a new folder.")
    what = {"running": "a run that stopped without finishing (no process holds its lock: it was killed)",
            "interrupted": "an interrupted run", "failed": "a failed run"}.get(st, f"a run ({st or 'status unknown'})")
    how = ("from its last checkpoint" if (run_dir / R.CHECKPOINT).is_file()
           else "it stopped before its first checkpoint, so this starts it again from generation 1")
    return (f"a run folder with this id already exists and holds {what}. Continue it with: "
            f"tiltopt run --resume {run_dir} ({how}), or pass --overwrite to start it again.")


def start_run(cfg: RunConfig, run_id: str | None = None, output: str | Path | None = None, overwrite: bool = False,
              progress: bool = True, stop_after: int | None = None, workers: int | None = None) -> RunOutcome:
    """Start a new run of a config into ``<output>/<run-id>/``.

    Parameters
    ----------
    cfg : RunConfig
    run_id : str, optional
        A plain name (:func:`~tiltopt.optimizer.runfolder.check_name`); default ``<name>-s<seed>``.
    output : path, optional
        Folder for the run folder (default: the config's ``[run] output``).
    overwrite : bool
        Replace an existing run folder of the same id (only a tiltopt run folder, and only the files
        tiltopt wrote in it).
    workers : int, optional
        Processes that evaluate each batch (default ``optimizer.parallel.DEFAULT_WORKERS``); the
        front is the same for any number.

    Raises
    ------
    InputError
        When the id is not a plain name, the folder exists (without ``overwrite``), is not a tiltopt
        run folder, or another process writes it.
    """
    if run_id is not None:
        rid = RF.check_name(run_id, "run id", "--run-id")
    else:
        rid = RF.check_name(default_run_id(cfg), "run id (run.name and run.seed)", cfg.source, "run.name")
    root = Path(output) if output is not None else cfg.run.output
    run_dir = root / rid
    RF.refuse_foreign(run_dir)
    with RF.FolderLock.acquire(run_dir) as lock:
        RF.refuse_foreign(run_dir)     # again, now that nobody else writes it
        if RF.folder_kind(run_dir) == "run" and not overwrite:
            raise InputError(_exists_message(run_dir, RF.read_meta(run_dir) or {}), str(run_dir))
        RF.clear_run_files(run_dir)
        cfg, problem, record = prepare_fresh(cfg, run_dir, cfg.source)
        from .parallel import make_parallel

        problem = make_parallel(cfg, workers, problem)
        try:
            return Runner(problem, cfg.run, run_dir, rid, record, progress, stop_after, lock=lock).run(resume=False)
        finally:
            getattr(problem, "close", lambda: None)()


def _stderr(text: str) -> None:
    import sys

    sys.stderr.write(text + "\n")
    sys.stderr.flush()


def resume_run(run_dir: str | Path, progress: bool = True, stop_after: int | None = None,
               problem=None, allow_changed_inputs: bool = False, workers: int | None = None) -> RunOutcome:
    """Continue a run from its checkpoint to the configured number of generations.

    A run killed before its first checkpoint starts again from generation 1 (same config, same
    input copies, same seed: the same front). ``problem`` may be given for runs of a problem object
    made in code (no config in run.json). The config is the one in run.json, the input files are the
    run folder's copies; an original that changed since the start is refused unless
    ``allow_changed_inputs``.
    """
    d = Path(run_dir)
    if not d.is_dir():
        raise InputError("expected a run folder (results/<run-id>/). It does not exist.", str(d))
    if not (d / R.RUN_JSON).exists():
        raise InputError("expected a run folder with run.json; none found. Is this a results/<run-id>/ folder?",
                         str(d))
    meta = R.read_run_json(d / R.RUN_JSON)      # a damaged one is a message naming what is wrong
    if str(meta.get("format", "")).startswith("tiltopt-merge-"):
        raise InputError("this folder holds a merged front (tiltopt merge), not a run: there is nothing to resume.",
                         str(d))
    notice = _stderr        # notices are printed with or without the progress line (as the runner's own)
    with RF.FolderLock.acquire(d) as lock:
        meta = RF.read_meta(d) or meta
        if meta.get("status") == "finished":        # nothing to run, nothing to check
            t = meta.get("timings") or {}
            return RunOutcome(d, str(meta.get("run_id", d.name)), "finished", int(t.get("generations_done", 0)),
                              len(R.load_run(d).front), float(t.get("elapsed_s", 0.0)))
        if meta.get("config") is not None:
            copies = RF.verify_inputs(d, meta, allow_changed_inputs, notice)
            with reading_copies(copies):
                cfg = parse_config(meta["config"], str(d / R.RUN_JSON), meta.get("config_base_dir"))
                if problem is None:
                    from .parallel import make_parallel

                    problem = make_parallel(cfg, workers)
            settings = cfg.run
            record = {"config": meta["config"], "config_source": meta.get("config_source"),
                      "config_base_dir": meta.get("config_base_dir"),
                      "config_sha256": meta.get("config_sha256") or RF.config_hash(meta["config"]),
                      "inputs": meta.get("inputs")}
        else:
            if problem is None:
                raise InputError("this run was started from code, not a config; resume it from code with its "
                                 "problem.", str(d))
            run = meta.get("run")
            if not isinstance(run, dict):
                raise InputError("run.json holds neither a config nor run settings.", str(d / R.RUN_JSON), "run")
            settings = RunSettings(**{**run, "output": Path(run["output"])})
            record = {}
        runner = Runner(problem, settings, d, meta.get("run_id", d.name), record, progress, stop_after, lock=lock)
        has_checkpoint = CK.present(d / R.CHECKPOINT)
        if not has_checkpoint:
            refuse_old_checkpoint(d)
            notice(f"{d}: no checkpoint yet (the run stopped before its first one): starting it again from "
                   f"generation 1")
        try:
            return runner.run(resume=has_checkpoint)
        finally:
            getattr(problem, "close", lambda: None)()


def run_problem(problem, settings: RunSettings, run_dir: str | Path, run_id: str | None = None,
                progress: bool = False, stop_after: int | None = None, resume: bool = False) -> RunOutcome:
    """Run any problem object with ``evaluate_designs`` (see module docs) into ``run_dir``."""
    d = Path(run_dir)
    return Runner(problem, settings, d, run_id or d.name, None, progress, stop_after).run(resume=resume)
