"""An installed stream-miner holds all of its code: pyproject.toml lists packages by name,
so a subpackage missing from the list is left out of the wheel (its imports then fail for a
pip-installed user, though they work in the checkout)."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_every_subpackage_is_listed_for_the_wheel():
    listed = set(tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]["packages"])
    found = {
        ".".join(init.parent.relative_to(ROOT).parts) for init in (ROOT / "stream_miner").rglob("__init__.py")
    }
    assert found - listed == set()
