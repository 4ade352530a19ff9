"""The engine on an open benchmark: the first IBM power grid (S. R. Nassif, "Power grid analysis
benchmarks", Proc. ASP-DAC 2008, pp. 376-381), in the branch-table format, solved by ohmgraph and
by the full MNA system with scipy's spsolve."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from ohmgraph.engine import Network, check, solve
from conftest import BACK_ENDS
from reference_mna import mna_solve

PG1 = Path(__file__).resolve().parents[1].parent / "shared/validation/pg1.csv.gz"


@pytest.fixture(scope="module")
def pg1() -> Network:
    if not PG1.exists():
        pytest.skip(f"open benchmark not available: {PG1}")
    table = pd.read_csv(PG1, dtype={"name": str, "kind": str, "from": str, "to": str,
                                    "value": np.float64})
    return Network.from_arrays(table["from"], table["to"], table["value"], table["kind"],
                               table["name"], reference="0")


@pytest.fixture(scope="module")
def pg1_reference(pg1):
    return mna_solve(pg1)  # Ho, Ruehli & Brennan, IEEE TCAS 22(6) 1975, solved by scipy spsolve


def test_pg1_is_well_posed_as_described(pg1):
    # Counts from the benchmark's conversion README (../shared/validation/README.md).
    report = check(pg1)
    assert report.solvable and not report.of_severity("warning")
    assert report.summary["branches_by_kind"] == {"R": 30027, "V": 14308, "I": 10774}
    assert report.summary["components"] == 1


@pytest.mark.parametrize("method", BACK_ENDS)
def test_pg1_every_node_voltage_matches_mna(pg1, pg1_reference, method):
    solution = solve(pg1, method=method)
    # The brief's acceptance level for this benchmark: every node within 1 microvolt.
    np.testing.assert_allclose(solution.node_voltage, pg1_reference.node_voltage, rtol=0, atol=1e-6)
    # Supply pads sit at 1.8 V and ground pads at 0 V, so every node lies between them
    # (maximum principle for a resistive network with loads drawn from supply to ground).
    assert pg1_reference.node_voltage.min() >= -1e-9
    assert pg1_reference.node_voltage.max() <= 1.8 + 1e-9
    # Currents of every voltage source (pads and 0 V layer connections), 1 uA: KCL sums of
    # resistor currents whose conductances reach 1/0.000635 ohm, so 1e-6 V errors allow ~1e-3 A;
    # the solves are far tighter than that, and 1 uA still catches any sign or routing error.
    np.testing.assert_allclose(solution.branch_current[pg1_reference.constrained_branches],
                               pg1_reference.constrained_current, rtol=0, atol=1e-6)
    assert solution.kcl_max_residual < 1e-8
    total = np.abs(solution.branch_power).sum()
    assert abs(solution.power_balance) < 1e-10 * total  # Tellegen, Philips Res. Rep. 7 (1952)
