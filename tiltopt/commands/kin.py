"""``tiltopt sweep`` and ``tiltopt check``."""
from __future__ import annotations


import click

from tiltopt.base.errors import read_toml
from tiltopt.base.safety import SAFETY_CAUTION
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model
from tiltopt.base.units import parse_states

from ..cli import main
from ..output import table, to_csv, to_json

SWEEP_COLUMNS = [
    ("lean_deg", "lean_deg"), ("travel_mm", "travel_mm"), ("converged", "ok"), ("track_mm", "track_mm"),
    ("track_change_mm", "d_track_mm"), ("scrub_mm", "scrub_mm"), ("heave_mm", "heave_mm"),
    ("camber_error_left_deg", "cam_err_L_deg"), ("camber_error_right_deg", "cam_err_R_deg"),
    ("lean_point_offset_mm", "lean_pt_mm"),
]


def sweep_rows(mech_path: str, lean: str, travel: str):
    from tiltopt.kinematics.sweep import sweep

    leans, travels = parse_states(lean, travel)
    mech = load_mechanism(mech_path)
    model = Model(mech)
    res = sweep(model, lean_deg=leans, travel_mm=travels)
    return mech, model, res


@main.command("sweep")
@click.argument("mech", type=click.Path(dir_okay=False))
@click.option("--lean", default="0:35:5", show_default=True, help="Leans, deg: start:stop:step or a,b,c.")
@click.option("--travel", default="0", show_default=True, help="Travels, mm (bump positive): start:stop:step or a,b,c.")
@click.option("--format", "fmt", type=click.Choice(["table", "json", "csv"]), default="table", show_default=True)
def sweep_cmd(mech, lean, travel, fmt):
    """Lean x travel sweep of a mechanism file: track, scrub, heave, camber error per state."""
    m, model, res = sweep_rows(mech, lean, travel)
    rows = res.records(0)
    if fmt == "json":
        click.echo(to_json(rows))
        click.echo(SAFETY_CAUTION, err=True)     # stdout stays machine-readable; the person still reads it
        return
    if fmt == "csv":
        click.echo(to_csv(rows), nl=False)
        click.echo(SAFETY_CAUTION, err=True)
        return
    cols = list(SWEEP_COLUMNS) + [(f"spring_lengths_mm.{n}", f"{n}_mm") for n in model.spring_names]
    flat = []
    for r in rows:
        f = dict(r)
        for n, v in r["spring_lengths_mm"].items():
            f[f"spring_lengths_mm.{n}"] = v
        flat.append(f)
    click.echo(f"{m.name}: lean x travel sweep (springs held at their lean-0 lengths; '-' = state not reached)")
    click.echo(table(flat, cols, digits=3))
    bad = [r for r in rows if not r["converged"]]
    if bad:
        first = bad[0]
        click.echo(f"\n{len(bad)} of {len(rows)} states not reached; first: lean {first['lean_deg']:g} deg, "
                   f"travel {first['travel_mm']:g} mm: {first['status']}")
    _bump_table(model, res)
    click.echo("\n" + SAFETY_CAUTION)


def _bump_table(model, res):
    if model.spring_names:
        click.echo("\nbump at lean 0 (against the design position):")
        brows = []
        for r in res.bump_records(0):
            f = {k: v for k, v in r.items() if k != "motion_ratio"}
            for n, v in r["motion_ratio"].items():
                f[f"mr.{n}"] = v
            brows.append(f)
        click.echo(table(brows, [("travel_mm", "travel_mm"), ("track_change_mm", "d_track_mm"),
                                 ("camber_change_left_deg", "d_cam_L_deg"),
                                 ("camber_change_right_deg", "d_cam_R_deg")]
                         + [(f"mr.{n}", f"motion_ratio_{n}") for n in model.spring_names]))


def _file_kind(path: str) -> str:
    data = read_toml(path, "mechanism or run config .toml")
    return "mechanism" if "bodies" in data else "config"


@main.command("check")
@click.argument("file", type=click.Path(dir_okay=False))
def check_cmd(file):
    """Check a mechanism file (mobility, lean, travel) or a run config (problem size, run time)."""
    if _file_kind(file) == "config":
        from tiltopt.optimizer.config import check_config_lines

        for line in check_config_lines(file):
            click.echo(line)
        return
    from tiltopt.kinematics.mobility import analyse, describe

    mech = load_mechanism(file)
    model = Model(mech)
    for line in describe(model, analyse(model)):
        click.echo(line)

