"""Readings on real parts: fault trials on the invented 40 x 40 fixture and the large mesh.

Targets of issue 10 (numbers recorded in ``benchmarks/README.md``):

* 40 x 40 fixture (3,124 resistors of E24 values), ±1 % parts, 65 readings (40 node voltages,
  25 two-point resistances), ``OHMGRAPH_BENCH_TRIALS`` trials (default 200) per case: one planted
  fault (open, short, value change by a factor in [0.3, 0.8] or [1.2, 3]); no fault; a fault
  and a 1–5 ohm contact error on one resistance reading;
* a 100k-node mesh with 500 readings: ``compare`` with bands that include the parts and
  ``diagnose`` with the generalised least-squares fit.

Trials: :func:`ohmgraph.datasets.fixture.fault_trial` (full re-solve of the built copy, parts
uniform within tolerance, instrument errors uniform within accuracy).
"""

from __future__ import annotations

import os
import time

import numpy as np
import pytest

from ohmgraph.datasets.fixture import (FAULT_MODES, Accuracy, fault_trial, fixture_readings,
                                       probe_fixture)
from ohmgraph.engine.readings.bands import part_spread, reading_bands
from ohmgraph.engine.readings.gls import diagnose_parts
from ohmgraph.engine.readings.model import build_model, compare

TRIALS = int(os.environ.get("OHMGRAPH_BENCH_TRIALS", "200"))
SIDE = int(os.environ.get("OHMGRAPH_BENCH_SIZE", "316"))
TOLERANCE = 0.01


@pytest.fixture(scope="module")
def fixture():
    net = probe_fixture(40, seed=1)
    template = fixture_readings(net, 40, 25, seed=2)
    return net, template, build_model(net, template).model_value


def _trials(fixture, seed, modes, contact=None):
    net, template, nominal = fixture
    rng = np.random.default_rng(seed)
    seconds, outcomes = [], []
    for trial in range(TRIALS):
        start = time.perf_counter()
        outcomes.append(fault_trial(net, template, nominal, TOLERANCE, Accuracy(), rng,
                                    modes[trial % len(modes)], contact))
        seconds.append(time.perf_counter() - start)
    return outcomes, seconds


def _share(flags) -> str:
    flags = list(flags)
    return f"{sum(flags)}/{len(flags)} = {sum(flags) / max(len(flags), 1):.1%}"


def test_fixture_fault_trials(benchmark, fixture):
    outcomes, seconds = benchmark.pedantic(_trials, args=(fixture, 11, FAULT_MODES),
                                           rounds=1, iterations=1)
    seen = [o for o in outcomes if o.detectable]
    sizes = [o.group_size for o in seen if o.rank == 1]
    line = (f"fault trials: {TRIALS}, signature above 3 sigma in {_share(o.detectable for o in outcomes)}; "
            f"among those: first {_share(o.rank == 1 for o in seen)}, top 3 "
            f"{_share(1 <= o.rank <= 3 for o in seen)}, first as a single resistor "
            f"{_share(o.rank == 1 and o.group_size == 1 for o in seen)}, median group size "
            f"{np.median(sizes):.0f}, fault indicated {_share(o.fault_indicated for o in seen)}; "
            "by mode first "
            + ", ".join(f"{m} {_share(o.rank == 1 for o in seen if o.mode == m)}"
                        for m in FAULT_MODES)
            + f"; median trial {np.median(seconds):.2f} s")
    print("\n" + line)
    benchmark.extra_info["result"] = line


def test_fixture_no_fault_trials(benchmark, fixture):
    outcomes, seconds = benchmark.pedantic(_trials, args=(fixture, 12, ("none",)),
                                           rounds=1, iterations=1)
    line = (f"no-fault trials: {TRIALS}; no fault indicated "
            f"{_share(not o.fault_indicated for o in outcomes)}; a reading flagged "
            f"{_share(bool(o.flagged) for o in outcomes)}; median trial {np.median(seconds):.2f} s")
    print("\n" + line)
    benchmark.extra_info["result"] = line


def test_fixture_contact_error_trials(benchmark, fixture):
    outcomes, seconds = benchmark.pedantic(_trials, args=(fixture, 13, FAULT_MODES, (1.0, 5.0)),
                                           rounds=1, iterations=1)
    both = [o for o in outcomes if o.detectable and o.contact_detectable]
    line = (f"contact-error trials: {TRIALS}, fault and contact error both above 3 sigma in "
            f"{_share(o.detectable and o.contact_detectable for o in outcomes)}; among those: "
            f"corrupted reading flagged {_share(o.contact_reading in o.flagged for o in both)}, "
            f"another reading flagged {_share(any(r != o.contact_reading for r in o.flagged) for o in both)}, "
            f"fault in the top 3 {_share(1 <= o.rank <= 3 for o in both)}, first "
            f"{_share(o.rank == 1 for o in both)}; median trial {np.median(seconds):.2f} s")
    print("\n" + line)
    benchmark.extra_info["result"] = line
