# ohmgraph developer entry points. Everything installs into .venv from this project's own files.
PYTHON ?= python3
VENV   := .venv
BIN    := $(VENV)/bin
STAMP  := $(VENV)/.installed

.PHONY: demo test bench install mpi clean

$(BIN)/python:
	$(PYTHON) -m venv $(VENV)
	$(BIN)/python -m pip install --quiet --upgrade pip

# The compiled kernels (numba, cache=True) are built on their first call; solving a generated
# 260 x 260 mesh with both iterative back ends builds those of the common path here, once, so
# that the first real run does not pay them (about 6 s at 10^6 nodes).
$(STAMP): $(BIN)/python pyproject.toml
	$(BIN)/python -m pip install --quiet -e '.[test]'
	@echo "compiling the kernels (once, about 15 s)"
	@tmp=$$(mktemp -d) && \
	$(BIN)/ohmgraph generate grid2d 260 260 --pads 8 --loads 2000 -o $$tmp/grid.csv >/dev/null && \
	$(BIN)/ohmgraph solve $$tmp/grid.csv -o $$tmp/amg.h5 >/dev/null && \
	$(BIN)/ohmgraph solve $$tmp/grid.csv -o $$tmp/ac.h5 --method ac-cg >/dev/null; \
	status=$$?; rm -rf $$tmp; exit $$status
	touch $(STAMP)

install: $(STAMP)

# Optional MPI stack (issue 11): Debian's PETSc 3.18 (with hypre) and Open MPI from apt (root),
# then into .venv petsc4py pinned to that PETSc version, built against it (about 2.5 min), and
# the mpi4py wheel, which loads the system's MPI library. A fast no-op when both already import.
PETSC_DIR    ?= /usr/lib/petscdir/petsc3.18/x86_64-linux-gnu-real
PETSC4PY_PIN := petsc4py==3.18.5
MPI4PY_PIN   := mpi4py==4.1.2
HAVE_MPI     := $(BIN)/python -c "import mpi4py, petsc4py" 2>/dev/null && command -v mpiexec >/dev/null

mpi: $(STAMP)
	@if $(HAVE_MPI); then echo "make mpi: mpi4py, petsc4py and mpiexec already installed"; exit 0; fi; \
	set -e; \
	if [ ! -d "$(PETSC_DIR)" ] || ! command -v mpiexec >/dev/null; then \
	    apt-get update -qq; \
	    DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends petsc-dev openmpi-bin >/dev/null; \
	fi; \
	$(BIN)/python -m pip install --quiet "cython<3" setuptools wheel; \
	$(BIN)/python -m pip install --quiet --only-binary=mpi4py "$(MPI4PY_PIN)"; \
	PETSC_DIR="$(PETSC_DIR)" PETSC_ARCH= $(BIN)/python -m pip install --quiet --no-build-isolation "$(PETSC4PY_PIN)"; \
	$(BIN)/python -c "import mpi4py, petsc4py; print('make mpi: mpi4py', mpi4py.__version__, 'petsc4py', petsc4py.__version__)"

demo: $(STAMP)
	$(BIN)/ohmgraph demo

# tests/test_mpi.py launches its runs with mpiexec -n 2 when the MPI stack is installed.
test: $(STAMP)
	@if $(HAVE_MPI); then echo "make test: MPI stack found; tests/test_mpi.py runs its solves on 2 MPI ranks"; \
	else echo "make test: MPI stack not installed: the MPI tests (tests/test_mpi.py) are SKIPPED; 'make mpi' installs it"; fi
	$(BIN)/python -m pytest -q

# The peers of benchmarks/bench_peers.py (optional extra; the engine never imports them).
bench: $(STAMP)
	$(BIN)/python -m pip install --quiet -e '.[test,bench]'
	$(BIN)/python -m pytest benchmarks -q -p no:cacheprovider -o python_files='bench_*.py' --benchmark-enable --benchmark-columns=min,median,max,rounds -s

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache .benchmarks
