"""A non-editable install carries every module: each source folder is a listed package.

An editable install finds any folder through the project's path, so a subpackage missing from
``pyproject.toml`` only shows in a real install, where setuptools may still copy its files as
data but warns that the package "would be ignored" by future versions. This test holds the list
in ``pyproject.toml`` to the folders of the source tree.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_every_source_folder_is_a_listed_package():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    listed = set(config["packages"])
    found = set()
    for package, folder in config["package-dir"].items():
        for init in (ROOT / folder).rglob("__init__.py"):
            relative = init.parent.relative_to(ROOT / folder).parts
            found.add(".".join((package, *relative)))
        for data in (ROOT / folder).rglob("*.csv"):
            relative = data.parent.relative_to(ROOT / folder).parts
            found.add(".".join((package, *relative)))
    assert found <= listed, f"not listed in pyproject.toml: {sorted(found - listed)}"
    assert listed <= found, f"listed but not in the tree: {sorted(listed - found)}"


def test_example_files_are_package_data():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    assert config["package-data"]["ohmgraph.datasets.examples"] == ["*.csv"]
    assert sorted(p.name for p in (ROOT / "datasets" / "examples").glob("*.csv"))
