"""Writes that fail: a file-size limit (as a full disk would) and a read-only folder.

``RLIMIT_FSIZE`` makes the kernel refuse writes past the limit with EFBIG while SIGXFSZ is
ignored (POSIX ``setrlimit()``, RLIMIT_FSIZE; Linux setrlimit(2)), so the full-disk path runs
on any machine without skipping. Each case must exit 3 with one line naming the output and the
reason, and leave the folder exactly as it was.
"""

from __future__ import annotations

import ctypes
import os
import resource
import signal
import subprocess
import sys

import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.io.branch_table import write_branch_table
from ohmgraph.io.errors import EXIT_OUTPUT_REFUSED

TIMEOUT = 180
PR_CAPBSET_DROP, CAP_DAC_OVERRIDE = 24, 1          # linux/prctl.h, linux/capability.h


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    path = tmp_path_factory.mktemp("writes")
    write_branch_table(path / "net.csv", grid2d(120, 120, pads=4, loads=20, seed=2))
    return path


def run(folder, argv, preexec):
    process = subprocess.run([sys.executable, "-m", "ohmgraph.io.cli", *argv], cwd=folder,
                             preexec_fn=preexec, capture_output=True, text=True, timeout=TIMEOUT)
    return process.returncode, process.stderr


def size_limit(limit):
    def preexec():
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return preexec


# limits: 1 kB fails at the start; 200 kB fails part-way through (these outputs are larger)
LARGE = (["solve", "net.csv", "-o", "out.h5"],
         ["generate", "grid2d", "150", "150", "-o", "out.csv"],
         ["generate", "grid2d", "300", "300", "-o", "out.csv.gz"])
NODES = [f"{x}_0" for x in range(100)]
SMALL = (["resistance", "net.csv", "--to-reference", *NODES, "-o", "out.h5"],
         ["resistance", "net.csv", "--to-reference", *NODES, "-o", "out.csv"])
CASES = [(limit, argv) for limit in (1000, 200_000) for argv in LARGE] + [(1000, a) for a in SMALL]


@pytest.mark.parametrize("limit, argv", CASES, ids=[f"{a[0]}-{a[-1]}-{n}" for n, a in CASES])
def test_a_full_disk_leaves_nothing_and_says_why(folder, limit, argv):
    before = sorted(os.listdir(folder))
    code, err = run(folder, argv, size_limit(limit))
    assert code == EXIT_OUTPUT_REFUSED, err
    assert err.count("\n") == 1 and err.startswith(f"ohmgraph {argv[0]}: error: out.")
    assert ": cannot be written (" in err and "File too large" in err
    assert sorted(os.listdir(folder)) == before


def no_permission_override():
    """Root ignores folder permissions; drop that capability from the bounding set first."""
    if os.geteuid() == 0 and ctypes.CDLL(None).prctl(PR_CAPBSET_DROP, CAP_DAC_OVERRIDE,
                                                     0, 0, 0) != 0:
        os._exit(99)


def test_a_read_only_folder_leaves_nothing_and_says_why(folder):
    (folder / "ro").mkdir()
    (folder / "ro").chmod(0o555)
    try:
        code, err = run(folder, ["solve", "net.csv", "-o", "ro/out.h5"], no_permission_override)
        if code == 99:
            pytest.skip("running as root without CAP_SETPCAP: cannot make a folder read-only")
        assert code == EXIT_OUTPUT_REFUSED, err
        assert err == "ohmgraph solve: error: ro/out.h5: cannot be written (Permission denied)\n"
        assert list((folder / "ro").iterdir()) == []
    finally:
        (folder / "ro").chmod(0o755)
        (folder / "ro").rmdir()
