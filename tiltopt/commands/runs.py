"""``tiltopt run``, ``tiltopt batch``, ``tiltopt merge`` and ``tiltopt demo``."""
from __future__ import annotations

from pathlib import Path

import click

from tiltopt.base.errors import InputError
from tiltopt.base.limits import BATCH_CONFIRM_RUNS

from ..cli import main
from . import output_path


def _caution():
    from tiltopt.optimizer.results import CAUTION

    click.echo(CAUTION)


EXIT_INTERRUPTED = 130   # as shells report a command stopped by Ctrl-C (128 + SIGINT)


def _report_outcome(o):
    click.echo(f"run {o.run_id}: {o.status} after {o.generations} generations ({o.elapsed_s:.1f} s); "
               f"front of {o.front_size} designs")
    click.echo(f"results: {o.run_dir}  (front.parquet, evaluations.parquet, generations.parquet, run.json)")


@main.command("run")
@click.argument("config", required=False, type=click.Path(dir_okay=False))
@click.option("--resume", "resume", type=click.Path(file_okay=False), default=None,
              help="Continue the run in this folder from its checkpoint.")
@click.option("--output", type=click.Path(file_okay=False), default=None, callback=output_path,
              help="Folder for the run folder (default: the config's [run] output).")
@click.option("--run-id", default=None, help="Name of the run folder (default: <name>-s<seed>).")
@click.option("--overwrite", is_flag=True, help="Replace an existing run folder of the same id.")
@click.option("--quiet", is_flag=True, help="No progress line.")
@click.option("--allow-changed-inputs", is_flag=True,
              help="With --resume: go on when an input file changed since the run started (the run continues "
                   "with its own copies in RUN_DIR/inputs/).")
@click.option("--processes", type=click.IntRange(1, 64), default=None,
              help="Processes that evaluate each generation (default: this machine's cores, at most 4); "
                   "the front is the same for any number.")
def run_cmd(config, resume, output, run_id, overwrite, quiet, allow_changed_inputs, processes):
    """Optimise a run config (NSGA-II/III); Ctrl-C stops cleanly with a checkpoint (exit status 130)."""
    from tiltopt.optimizer.config import load_config
    from tiltopt.optimizer.runner import resume_run, start_run

    if resume:
        if config or output or run_id or overwrite:
            raise InputError("--resume takes only the run folder; the config is the one stored in it.", "--resume")
        o = resume_run(resume, progress=not quiet, allow_changed_inputs=allow_changed_inputs, workers=processes)
    else:
        if not config:
            raise InputError("expected a run config (tiltopt run CONFIG) or --resume RUN_DIR.", "run")
        if allow_changed_inputs:
            raise InputError("--allow-changed-inputs goes with --resume RUN_DIR; a new run reads its files as "
                             "they are.", "--allow-changed-inputs")
        o = start_run(load_config(config), run_id=run_id, output=output, overwrite=overwrite, progress=not quiet,
                      workers=processes)
    _report_outcome(o)
    _caution()
    if o.status == "interrupted":
        raise SystemExit(EXIT_INTERRUPTED)


@main.command("batch")
@click.argument("batch_file", type=click.Path(dir_okay=False))
@click.option("--workers", type=click.IntRange(1, None), default=2, show_default=True,
              help="Local worker processes (one run each at a time).")
@click.option("--scheduler", default=None, help="Address of a Dask distributed scheduler (tcp://host:8786).")
@click.option("--rerun-changed", is_flag=True,
              help="Start again the runs whose resolved config or input files differ from those in their folders "
                   "(their old results are replaced); without it such a batch is refused.")
@click.option("--yes", is_flag=True, help=f"Start a batch of more than {BATCH_CONFIRM_RUNS:,} runs.")
@click.option("--progress-every", type=click.FloatRange(0.5, 86400.0), default=30.0, show_default=True,
              help="When the output is not a terminal (a log): seconds between the progress lines of each run.")
def batch_cmd(batch_file, workers, scheduler, rerun_changed, yes, progress_every):
    """Run many configs / seeds / grid points; finished runs of the same config are kept on restart.

    Shows one live line per running run (generation, front size, ETA) and a table at the end; in a log,
    a progress line per run every --progress-every seconds. Ctrl-C stops every run after its generation
    with a checkpoint (local and Dask): start the batch again to continue.
    """
    import sys

    from tiltopt.optimizer.batch import SUMMARY, load_batch, run_dask, run_local, scheduler_address
    from tiltopt.optimizer.progress import BatchMonitor

    b = load_batch(batch_file, confirm_above=None if yes else BATCH_CONFIRM_RUNS)
    mon = BatchMonitor(stream=sys.stdout, every_s=progress_every)
    if scheduler:
        scheduler_address(scheduler)       # a clear message before anything else
        df = run_dask(b, scheduler, echo=mon.message, rerun_changed=rerun_changed, monitor=mon)
    else:
        df = run_local(b, workers=workers, echo=mon.message, rerun_changed=rerun_changed, monitor=mon)
    click.echo(_final_table(df.to_dict("records")))
    counts = df["status"].value_counts().to_dict()
    click.echo("status: " + ", ".join(f"{k} {v}" for k, v in sorted(counts.items())))
    click.echo(f"summary: {b.batch_dir / SUMMARY}")
    if "interrupted" in counts:
        raise SystemExit(EXIT_INTERRUPTED)
    if set(counts) - {"finished"}:
        raise SystemExit(1)


@main.command("merge")
@click.argument("run_dirs", nargs=-1, required=True, type=click.Path(file_okay=False))
@click.option("-o", "--output", "out", required=True, type=click.Path(file_okay=False), callback=output_path,
              help="Folder for the merged front.parquet and run.json.")
@click.option("--allow-different", is_flag=True,
              help="Merge fronts of different problems (envelope, shell, loads, constraints) anyway; each run's "
                   "problem is recorded in the merged run.json.")
def merge_cmd(run_dirs, out, allow_different):
    """Non-dominated union of several runs' fronts of one problem (any templates)."""
    from tiltopt.optimizer.merge import merge_fronts

    d, df = merge_fronts(run_dirs, out, allow_different=allow_different)
    tpl = df["source_run"].map(_template_of(run_dirs)).value_counts() if len(df) else None
    click.echo(f"merged {len(run_dirs)} fronts: {len(df)} non-dominated designs in {d / 'front.parquet'}")
    if tpl is not None and len(tpl) > 1:
        click.echo("by template: " + ", ".join(f"{t} {n} ({100 * n / len(df):.0f} %)" for t, n in tpl.items()))
    _caution()


def _final_table(rows) -> str:
    """The batch's summary rows (``summary.parquet`` columns) as a table: status, generations, front size, time."""
    from tiltopt.optimizer.progress import fmt_eta
    from tiltopt.output import table

    return table([{"run": r["run_id"], "status": r["status"], "generations": int(r["generations"]),
                   "front": int(r["front_size"]), "time": fmt_eta(float(r["elapsed_s"])),
                   "attempts": int(r["attempts"])} for r in rows],
                 [("run", "run"), ("status", "status"), ("generations", "generations"), ("front", "front size"),
                  ("time", "time"), ("attempts", "attempts")])


def _template_of(run_dirs) -> dict:
    """source run id -> template name, for the runs behind the given folders."""
    from tiltopt.optimizer.merge import MERGE_FORMAT
    from tiltopt.optimizer.results import read_run_json

    out = {}
    todo = [Path(d) for d in run_dirs]
    while todo:
        d = todo.pop()
        try:
            meta = read_run_json(d / "run.json")
        except InputError:
            continue
        if meta.get("format") == MERGE_FORMAT:
            todo += [Path(s["run_dir"]) for s in meta.get("sources") or [] if isinstance(s, dict) and s.get("run_dir")]
        else:
            out[str(meta.get("run_id", d.name))] = (meta.get("template") or {}).get("name", "?")
    return out


@main.command("shortlist")
@click.argument("run_dirs", nargs=-1, required=True, type=click.Path(file_okay=False))
@click.option("--where", "where", multiple=True,
              help="A bound: NAME<=VALUE, NAME>=VALUE or LOW<=NAME<=HIGH; NAME a metric (max_scrub_mm), an "
                   "objective (min_clearance: the clearance, larger is better) or var.NAME. Repeat for more.")
@click.option("--targets", "targets_file", type=click.Path(dir_okay=False), default=None,
              help="A TOML file with a [targets] table (the explorer page's 'as targets'), instead of or "
                   "besides --where.")
@click.option("--weight", "weights", multiple=True, help="OBJECTIVE=W: its weight in the best compromise (default 1).")
@click.option("-o", "--output", required=True, type=click.Path(dir_okay=False), callback=output_path,
              help="Parquet file to write (the shortlisted front designs, best compromise first).")
@click.option("--allow-different", is_flag=True, help="With several fronts: of different problems (as merge).")
def shortlist_cmd(run_dirs, where, targets_file, weights, output, allow_different):
    """Write the front designs that meet bounds as Parquet, best compromise first, and say why it is best.

    Without --where or --targets the bounds are the run config's [targets].
    """
    from tiltopt.optimizer.shortlist import shortlist

    res = shortlist(list(run_dirs), output, where=list(where), targets_file=targets_file, weights=list(weights),
                    allow_different=allow_different)
    for line in res.lines():
        click.echo(line)
    _caution()


@main.command("demo")
@click.option("--config", type=click.Path(dir_okay=False), default=None, help="Another config instead of the demo.")
@click.option("--output", type=click.Path(file_okay=False), default=None, callback=output_path,
              help="Folder for the run folder (default: ./results).")
@click.option("--quiet", is_flag=True, help="No progress line.")
@click.option("--processes", type=click.IntRange(1, 64), default=None,
              help="Processes that evaluate each generation (default: this machine's cores, at most 4).")
def demo_cmd(config, output, quiet, processes):
    """Short optimisation of the Harbourline parcel trike demo config; prints where the results are."""
    from tiltopt.optimizer.demo import run_demo

    o = run_demo(config, output, progress=not quiet, workers=processes)
    _report_outcome(o)
    from tiltopt.reports import demo_outputs

    for name, path in demo_outputs(o.run_dir).items():
        click.echo(f"{name}: {Path(path)}")
    _caution()


@main.command("examples")
@click.argument("folder", type=click.Path(file_okay=False), default="tiltopt-examples", callback=output_path)
def examples_cmd(folder):
    """Copy the built-in files (mechanisms, templates, shell, loads, demo config) into FOLDER.

    The copies are a starting point for your own files; every command works on them
    (for example ``tiltopt sweep FOLDER/wishbone_rocker.toml``). Existing files are never replaced.
    """
    from importlib import resources

    from tiltopt.base.resources import CONFIGS_PACKAGE

    out = Path(folder)
    out.mkdir(parents=True, exist_ok=True)
    written, kept = [], []
    for entry in sorted(resources.files(CONFIGS_PACKAGE).iterdir(), key=lambda e: e.name):
        if not entry.is_file() or not entry.name.endswith((".toml", ".csv")):
            continue
        target = out / entry.name
        if target.exists():
            kept.append(entry.name)
            continue
        target.write_bytes(entry.read_bytes())
        written.append(entry.name)
    click.echo(f"{out}: wrote {len(written)} files" + (f", kept {len(kept)} existing ({', '.join(kept)})"
                                                       if kept else ""))
    for name in written:
        click.echo(f"  {name}")
