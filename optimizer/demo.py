"""``tiltopt demo``: a short run of the built-in demo config (the Harbourline parcel trike)."""
from __future__ import annotations

from pathlib import Path

from tiltopt.base.resources import config_path

DEMO_CONFIG = "demo.toml"
DEMO_OUTPUT = "results"   # relative to the current folder


def demo_config_path() -> Path:
    """The built-in ``configs/demo.toml`` (package data, so any install has it)."""
    return config_path(DEMO_CONFIG)


def run_demo(config: str | Path | None = None, output: str | Path | None = None, progress: bool = True,
             workers: int | None = None):
    """Run the demo config (replacing an earlier demo run) and return its :class:`RunOutcome`.

    Results go to ``output`` (default ``./results/`` of the current folder), never into the
    installed package.
    """
    from .config import load_config
    from .runner import start_run

    cfg = load_config(config or demo_config_path())
    out = Path(output) if output is not None else (Path.cwd() / DEMO_OUTPUT if config is None else None)
    return start_run(cfg, output=out, overwrite=True, progress=progress, workers=workers)
