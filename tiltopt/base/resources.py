"""Built-in files shipped inside the package (read with :mod:`importlib.resources`).

The project's ``configs/`` folder is installed as the package ``tiltopt.configs`` and
``kinematics/data/`` as ``tiltopt.kinematics.data``, so a normal ``pip install .`` carries them and
every command works from any folder, not only from a clone.
"""
from __future__ import annotations

from importlib import resources
from pathlib import Path

CONFIGS_PACKAGE = "tiltopt.configs"
DATA_PACKAGE = "tiltopt.kinematics.data"


def _path(package: str, name: str) -> Path:
    p = resources.files(package).joinpath(name)
    # an installed or editable package lives on disk: its resources are plain files
    return Path(str(p))


def config_path(name: str) -> Path:
    """A built-in config, mechanism, shell or template file (``configs/<name>``)."""
    return _path(CONFIGS_PACKAGE, name)


def data_path(name: str) -> Path:
    """A built-in data file (``kinematics/data/<name>``: materials, tube catalogue)."""
    return _path(DATA_PACKAGE, name)
