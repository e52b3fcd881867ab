"""``tiltopt demo``: a short run of configs/demo.toml (the Harbourline parcel trike)."""
from __future__ import annotations

from pathlib import Path

from kinematics.errors import InputError

DEMO_CONFIG = "demo.toml"


def demo_config_path() -> Path:
    """configs/demo.toml of the source tree (an editable install), else of the current folder."""
    here = Path(__file__).resolve().parents[1] / "configs" / DEMO_CONFIG
    for p in (here, Path.cwd() / "configs" / DEMO_CONFIG):
        if p.is_file():
            return p
    raise InputError(f"the demo config was not found at {here}. Run tiltopt demo from a clone of the project "
                     "(pip install -e .), or give a config: tiltopt demo --config CONFIG.", "demo")


def run_demo(config: str | Path | None = None, output: str | Path | None = None, progress: bool = True):
    """Run the demo config (replacing an earlier demo run) and return its :class:`RunOutcome`."""
    from .config import load_config
    from .runner import start_run

    cfg = load_config(config or demo_config_path())
    return start_run(cfg, output=output, overwrite=True, progress=progress)
