"""The hand-written package list in pyproject.toml covers every subpackage."""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_every_subpackage_is_listed_and_rules_are_shipped():
    conf = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    listed = set(conf["packages"])
    found = {".".join(p.parent.relative_to(ROOT).parts)
             for p in (ROOT / "commitadvisor").rglob("__init__.py")}
    assert found <= listed, f"add to pyproject.toml packages: {sorted(found - listed)}"
    assert conf["package-dir"]["commitadvisor.rules"] == "rules"
    assert (ROOT / "rules" / "baseline.toml").is_file()
