"""``tiltopt clearance``: wheel, tube, shell and ground clearance over the lean x travel x steer envelope."""
from __future__ import annotations

import math

import click

from tiltopt.base.errors import InputError
from tiltopt.base.limits import MAX_CLEARANCE_SAMPLES, MAX_CROWN_SAMPLES, MAX_STEER_SAMPLES, check_count
from tiltopt.base.safety import SAFETY_CAUTION as CAUTION
from tiltopt.base.units import parse_states
from tiltopt.kinematics.mechanism import load_mechanism
from tiltopt.kinematics.model import Model

from ..cli import main
from ..output import flatten, table, to_csv, to_json

COLUMNS = [
    ("lean_deg", "lean_deg"), ("travel_mm", "travel_mm"), ("steer_deg", "steer_deg"), ("converged", "ok"),
    ("wheel_shell_clearance_mm.left", "shell_L_mm"), ("wheel_shell_clearance_mm.right", "shell_R_mm"),
    ("wheel_link_clearance_mm.left", "member_L_mm"), ("wheel_link_clearance_mm.right", "member_R_mm"),
    ("wheel_carrier_clearance_mm.left", "carrier_L_mm"), ("wheel_carrier_clearance_mm.right", "carrier_R_mm"),
    ("wheel_pair_clearance_mm", "wheels_mm"), ("member_gap_mm", "tubes_mm"),
    ("ground_clearance_mm", "ground_mm"), ("extent_mm", "extent_mm"), ("track_mm", "track_mm"),
    ("inside_violation_mm", "inside_viol_mm"), ("outside_violation_mm", "outside_viol_mm"),
]


def clearance_run(mech_path: str, shell_path: str, lean: str, travel: str, crown_samples: int | None = None,
                  steer_samples: int | None = None):
    """Load, sweep and check one mechanism; returns (mech, shell, clearance result)."""
    from tiltopt.kinematics.clearance import ClearanceSettings, evaluate_clearance
    from tiltopt.kinematics.shell import load_shell
    from tiltopt.kinematics.sweep import sweep

    leans, travels = parse_states(lean, travel)
    mech = load_mechanism(mech_path)
    shell = load_shell(shell_path)
    kw = {}
    if crown_samples is not None:
        kw["crown_samples"] = crown_samples
    if steer_samples is not None:
        kw["steer_samples"] = steer_samples
    try:
        settings = ClearanceSettings(**kw)
    except ValueError as exc:
        raise InputError(f"{exc}.", key="--crown-samples / --steer-samples") from None
    n_steer = settings.steer_samples if mech.steer_envelope else 1
    check_count(len(leans) * len(travels) * 2 * n_steer * settings.crown_samples, MAX_CLEARANCE_SAMPLES,
                f"tyre samples (states {len(leans) * len(travels)} x 2 wheels x steer {n_steer} x crown "
                f"{settings.crown_samples})", "Use fewer states or fewer --crown-samples / --steer-samples.",
                key="--crown-samples / --steer-samples")
    model = Model(mech)
    res = sweep(model, lean_deg=leans, travel_mm=travels)
    return mech, shell, evaluate_clearance(model, None, res, shell, settings)


@main.command("clearance")
@click.argument("mech", type=click.Path(dir_okay=False))
@click.option("--shell", "shell_path", required=True, type=click.Path(dir_okay=False),
              help="Body shell: .toml (superellipse stations) or .csv (polygon sections x_mm,y_mm,z_mm).")
@click.option("--lean", default="0:40:5", show_default=True, help="Leans, deg: start:stop:step or a,b,c.")
@click.option("--travel", default="0", show_default=True, help="Travels, mm (bump positive): start:stop:step or a,b,c.")
@click.option("--crown-samples", type=click.IntRange(4, MAX_CROWN_SAMPLES), default=None,
              help="Coarse samples round each tyre's crown circle (default 24). More = slower, tighter error bound.")
@click.option("--steer-samples", type=click.IntRange(1, MAX_STEER_SAMPLES), default=None,
              help="Coarse steer samples across the steer range (default 3).")
@click.option("--format", "fmt", type=click.Choice(["table", "json", "csv"]), default="table", show_default=True)
def clearance_cmd(mech, shell_path, lean, travel, crown_samples, steer_samples, fmt):
    """Wheel-to-shell, wheel-to-link, tube-to-shell and ground clearance, slots, width and track per state.

    Clearances are signed minimum distances in mm (positive = clear), each tyre steered through
    the mechanism's [steer_envelope] at every lean. The error estimate is an upper bound of how far
    the true minimum may lie below the reported one at this sampling.
    """
    m, shell, res = clearance_run(mech, shell_path, lean, travel, crown_samples, steer_samples)
    rows = res.records(0)
    summary = res.summary_record(0)
    if fmt == "json":
        click.echo(to_json({
            "mechanism": m.name, "mechanism_file": str(mech), "shell": shell.name, "shell_file": str(shell_path),
            "units": {"length": "mm", "angle": "deg"},
            "sampling": {"crown_samples": res.settings.crown_samples, "steer_samples": res.settings.steer_samples,
                         "refine_iterations": res.settings.refine_iterations},
            "caution": CAUTION, "states": rows, "summary": summary}))
        return
    if fmt == "csv":
        click.echo(to_csv(rows), nl=False)
        return
    click.echo(f"{m.name} in shell {shell.name}: clearance per state, mm (positive = clear; '-' = state not reached)")
    click.echo(table([flatten(r) for r in rows], COLUMNS, digits=1))
    click.echo("\nenvelope summary:")
    lines = []
    for k, e in summary.items():
        if k == "slot_length_mm":
            continue
        v = "-" if e["value"] is None else f"{e['value']:.1f}"
        where = f"  at lean {e['lean_deg']:g} deg, travel {e['travel_mm']:g} mm" if "lean_deg" in e else ""
        err = f"  (error bound {e['error_mm']:.1f}, conservative {e['lower_mm']:.1f})" \
            if e.get("error_mm") is not None and e.get("lower_mm") is not None and math.isfinite(e["error_mm"]) \
            and e["value"] is not None and math.isfinite(e["value"]) else ""
        lines.append(f"  {k:<24} {v:>9}{where}{err}")
    click.echo("\n".join(lines))
    slots = {n: v for n, v in summary["slot_length_mm"].items() if v is None or v > 0}
    if slots:
        click.echo("slots swept on the shell outline (mm, add the tube diameter for the cut-out; tubes that "
                   "never cross it left out):")
        for n, v in slots.items():
            click.echo(f"  {n:<40} {'-' if v is None else f'{v:.1f}'}")
    bad = [r for r in rows if not r["converged"]]
    if bad:
        click.echo(f"\n{len(bad)} of {len(rows)} states not reached; their clearances are not reported.")
    click.echo("\n" + CAUTION)
