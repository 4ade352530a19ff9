"""Seeded fault trials on a small copy of the invented fixture (statistics at test size).

The full-size targets (40 x 40 fixture, 65 readings, 200 trials) are measured in
``benchmarks/bench_parts.py``; here a 12 x 12 fixture with 24 readings and 30 trials per case
checks the same statistics against the same thresholds, seeded so that the counts repeat.
"""

from __future__ import annotations

import numpy as np
import pytest

from ohmgraph.datasets.fixture import (FAULT_MODES, Accuracy, fault_trial, fixture_readings,
                                       probe_fixture)
from ohmgraph.engine.readings.model import build_model

TRIALS = 30


@pytest.fixture(scope="module")
def fixture():
    net = probe_fixture(12, seed=1)
    template = fixture_readings(net, 16, 8, seed=2)
    return net, template, build_model(net, template).model_value


def run(fixture, seed, modes, contact=None):
    net, template, nominal = fixture
    rng = np.random.default_rng(seed)
    return [fault_trial(net, template, nominal, 0.01, Accuracy(), rng,
                        modes[trial % len(modes)], contact) for trial in range(TRIALS)]


def test_fixture_counts():
    net = probe_fixture(40, seed=0)
    # 2 x 40 x 39 lattice resistors + feed + 3 returns; 1,600 lattice nodes + VIN + ground.
    assert int((net.kind == 0).sum()) == 3124 and net.n_nodes == 1602
    assert np.array_equal(probe_fixture(40, seed=0).value, net.value)


def test_planted_faults_rank_first(fixture):
    trials = run(fixture, 3, FAULT_MODES)
    outcomes = [o for o in trials if o.detectable]
    assert len(outcomes) >= 20
    first = np.mean([o.rank == 1 for o in outcomes])
    top3 = np.mean([1 <= o.rank <= 3 for o in outcomes])
    assert first >= 0.9 and top3 >= 0.98
    assert np.mean([o.fault_indicated for o in outcomes]) >= 0.8
    # No reading is corrupted: a flag is a false one (the contact test allows 5 %; measured
    # here 0 of 30).
    assert sum(bool(o.flagged) for o in trials) <= 1


def test_no_fault_is_not_indicated(fixture):
    outcomes = run(fixture, 4, ("none",))
    assert np.mean([not o.fault_indicated for o in outcomes]) >= 0.95
    # False flags: measured 3 of 30 at this size (8 resistance readings; the contact test's
    # limit holds 5 % for the readings' errors alone, and choosing the best fault with and
    # without a reading adds to it). The full-size rate is measured in benchmarks/.
    assert sum(bool(o.flagged) for o in outcomes) <= 3


def test_contact_errors_are_flagged(fixture):
    # 1-5 ohm added to one resistance reading; among the trials where both the fault and the
    # contact error exceed 3 sigma (23 of 30 here), the targets: the corrupted reading
    # flagged and the fault in the top 3 in at least 90 % each (measured: 23 and 23 of 23;
    # another reading flagged as well in 2 of 23).
    outcomes = run(fixture, 5, FAULT_MODES, (1.0, 5.0))
    both = [o for o in outcomes if o.detectable and o.contact_detectable]
    assert len(both) >= 20
    assert np.mean([o.contact_reading in o.flagged for o in both]) >= 0.9
    assert np.mean([1 <= o.rank <= 3 for o in both]) >= 0.9
    assert np.mean([any(r != o.contact_reading for r in o.flagged) for o in both]) <= 0.1
