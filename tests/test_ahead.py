"""Loading libraries ahead while a large input is read (``ohmgraph.io.ahead``)."""

from __future__ import annotations

import subprocess
import sys

from ohmgraph.io.ahead import AHEAD_BYTES, loading_ahead


def _sized_file(path, size):
    path.write_bytes(b"")
    with open(path, "r+b") as handle:
        handle.truncate(size)             # sparse: takes no disk space
    return path


def test_small_input_starts_nothing(tmp_path):
    small = _sized_file(tmp_path / "small.csv", AHEAD_BYTES - 1)
    with loading_ahead(small) as thread:
        assert thread is None


def test_missing_input_starts_nothing(tmp_path):
    with loading_ahead(tmp_path / "absent.csv") as thread:
        assert thread is None


def test_large_input_loads_in_the_background_and_joins(tmp_path):
    large = _sized_file(tmp_path / "large.csv", AHEAD_BYTES)
    code = ("import sys\n"
            "from ohmgraph.io.ahead import loading_ahead\n"
            f"with loading_ahead({str(large)!r}, modules=('pyamg',)) as thread:\n"
            "    started = thread is not None\n"
            "from ohmgraph.engine.kernel_loading import _smallest_kernel\n"
            "print(started, thread.is_alive(), 'pyamg' in sys.modules,\n"
            "      len(_smallest_kernel.signatures))\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["True", "False", "True", "1"]


def test_nothing_starts_under_an_address_space_limit(tmp_path):
    large = _sized_file(tmp_path / "large.csv", AHEAD_BYTES)
    code = ("import resource\n"
            "resource.setrlimit(resource.RLIMIT_AS, (8 * 2**30, resource.RLIM_INFINITY))\n"
            "from ohmgraph.io.ahead import loading_ahead\n"
            f"with loading_ahead({str(large)!r}) as thread:\n"
            "    print(thread is None)\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.split() == ["True"]
