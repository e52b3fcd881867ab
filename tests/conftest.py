"""pytest fixtures shared by the tests (helpers live in :mod:`tests.helpers`)."""
from __future__ import annotations

from pathlib import Path

import pytest

# a profile for hunting failures fast: `pytest --hypothesis-profile=noshrink` reports the first
# failing example without the (sometimes minutes-long) shrinking
from hypothesis import Phase
from hypothesis import settings as _hsettings

from tests.helpers import toml_text

_hsettings.register_profile("noshrink", phases=[Phase.explicit, Phase.reuse, Phase.generate])
# CI (CI=true) runs the same examples every time, so a landing never hangs on a new random draw;
# local runs draw new examples (and keep failures in .hypothesis/)
_hsettings.register_profile("ci", derandomize=True)
if __import__("os").environ.get("CI"):
    _hsettings.load_profile("ci")


@pytest.fixture
def write_mech(tmp_path):
    """``write_mech(data, name="mech.toml") -> Path``: write a mechanism dict as a TOML file."""

    def write(data: dict, name: str = "mech.toml") -> Path:
        path = tmp_path / name
        path.write_text(toml_text(data), encoding="utf-8")
        return path

    return write
