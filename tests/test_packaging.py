"""A non-editable install carries every module: each source folder is a listed package.

An editable install finds any folder through the project's path, so a subpackage missing from
``pyproject.toml`` would only break a real (non-editable) install. This test builds a wheel, as
pip does for ``pip install .``, and checks that every Python module and example file of the
source tree is in it.
"""

from __future__ import annotations

import subprocess
import sys
import zipfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
FOLDERS = {"engine": "ohmgraph/engine", "io": "ohmgraph/io", "datasets": "ohmgraph/datasets"}


def source_files() -> set:
    files = set()
    for folder, package in FOLDERS.items():
        for path in (ROOT / folder).rglob("*"):
            if "__pycache__" in path.parts or not path.is_file():
                continue
            if path.suffix in (".py", ".csv"):
                files.add(f"{package}/{path.relative_to(ROOT / folder).as_posix()}")
    return files


def test_the_wheel_holds_every_module_and_example(tmp_path):
    subprocess.run([sys.executable, "-m", "pip", "wheel", "--quiet", "--no-deps",
                    "--wheel-dir", str(tmp_path), str(ROOT)],
                   check=True, capture_output=True, cwd=tmp_path)
    wheel = next(tmp_path.glob("ohmgraph-*.whl"))
    with zipfile.ZipFile(wheel) as archive:
        packed = set(archive.namelist())
    missing = sorted(source_files() - packed)
    assert not missing, f"not in the wheel (list the package in pyproject.toml): {missing}"
