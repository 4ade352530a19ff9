"""The command-line frame: version, usage errors, a closed output pipe."""

import importlib.metadata
import subprocess
import sys

import pytest

from ohmgraph.io.cli import COMMANDS, main


def test_version_is_the_installed_distribution(capsys):
    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0
    assert capsys.readouterr().out.strip() == f"ohmgraph {importlib.metadata.version('ohmgraph')}"


def test_no_command_is_a_usage_error(capsys):
    with pytest.raises(SystemExit) as stop:
        main([])
    assert stop.value.code == 2
    assert "usage: ohmgraph" in capsys.readouterr().err


def test_every_command_has_help(capsys):
    for name in COMMANDS:
        with pytest.raises(SystemExit) as stop:
            main([name, "--help"])
        assert stop.value.code == 0
        assert f"usage: ohmgraph {name}" in capsys.readouterr().out


def test_closed_pipe_ends_quietly(tmp_path):
    # `ohmgraph ... | head -1`: the reader leaves while a long table is still being printed.
    assert main(["generate", "grid2d", "40", "40", "-o", str(tmp_path / "grid.csv")]) == 0
    command = [sys.executable, "-c", "import sys; from ohmgraph.io.cli import main; "
               "sys.exit(main(sys.argv[1:]))", "resistance", str(tmp_path / "grid.csv"),
               "--ground", "0_0", "--across-resistors"]
    child = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    assert child.stdout.readline()            # the table has started ...
    child.stdout.close()                      # ... and nobody reads the rest
    _, err = child.communicate(timeout=120)
    assert b"Traceback" not in err and b"BrokenPipeError" not in err
    assert child.returncode == 0


def test_command_summaries_match_their_modules():
    # ``ohmgraph --help`` lists COMMANDS without importing the modules; each summary must be the
    # help its module registers.
    import argparse
    import importlib

    for name, summary in COMMANDS.items():
        subparsers = argparse.ArgumentParser().add_subparsers()
        importlib.import_module(f"ohmgraph.io.commands.{name.replace('-', '_')}").register(subparsers)
        registered = {action.dest: action.help for action in subparsers._choices_actions}
        assert registered[name] == summary, name


def test_help_and_version_import_no_command_module():
    code = ("import sys\nfrom ohmgraph.io.cli import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "loaded = [m for m in sys.modules if m.startswith(('ohmgraph.io.commands.', "
            "'ohmgraph.engine', 'numpy', 'scipy'))]\nprint(loaded)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert out.strip().splitlines()[-1] == "[]"


def test_single_process_start_up_does_not_load_the_mpi_stack(tmp_path):
    """Issue 11: mpi4py and PETSc are imported only under mpiexec or the PETSc back end."""
    import subprocess
    import sys

    net = tmp_path / "net.csv"
    net.write_text("from,to,value\n1,0,2\n")
    code = ("import sys; from ohmgraph.io.cli import main; "
            f"main(['solve', {str(net)!r}, '-o', {str(tmp_path / 'out.h5')!r}]); "
            "print(sorted(m for m in sys.modules if m.split('.')[0] in ('mpi4py', 'petsc4py')))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip().splitlines()[-1] == "[]"


def test_the_executable_ends_with_the_code_and_every_line_written(tmp_path):
    """``entry`` ends the process at once (no interpreter shutdown): what the command printed
    to a pipe is flushed first, and its exit code is the process's."""
    net = tmp_path / "net.csv"
    net.write_text("name,kind,from,to,value\nV1,V,a,0,5\nR1,R,a,b,10\nR2,R,b,0,20\n")
    run = [sys.executable, "-c", "import sys; from ohmgraph.io.cli import entry; "
           "sys.argv[0] = 'ohmgraph'; entry()"]
    solved = subprocess.run([*run, "solve", str(net), "-o", str(tmp_path / "out.h5")],
                            capture_output=True, text=True, timeout=120)
    assert solved.returncode == 0, solved.stderr
    assert f"{net} -> {tmp_path / 'out.h5'}" in solved.stdout
    assert "time (s)" in solved.stdout.splitlines()[-1]        # the summary's last line
    refused = subprocess.run([*run, "solve", str(net), "-o", str(tmp_path / "out.h5")],
                             capture_output=True, text=True, timeout=120)
    assert refused.returncode == 3
    assert "already exists" in refused.stderr
