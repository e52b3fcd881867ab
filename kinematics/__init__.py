"""Planar kinematics of tilting twin-wheel linkages: mechanism files, the batched solver, sweeps and metrics."""
from tiltopt.base.errors import InputError

from .mechanism import Mechanism, load_mechanism, mechanism_to_toml, mirror, parse_mechanism
from .model import Geometry, Model
from .sweep import SweepResult, SweepSettings, sweep

__all__ = ["InputError", "Mechanism", "load_mechanism", "parse_mechanism", "mechanism_to_toml", "mirror",
           "Geometry", "Model", "SweepResult", "SweepSettings", "sweep"]
