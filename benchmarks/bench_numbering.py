"""Numbering the endpoint labels of a branch table: the compiled kernel
(``engine/numbering.py``, through ``io/reader.py: _encode_endpoints``) against its reference,
Arrow's ``dictionary_encode`` of the two columns end to end (``_encode_endpoints_reference``),
both from the same Arrow string columns to the labels and two int64 index arrays.

The grids of ``grid_table.py`` (``OHMGRAPH_VS_SIDES``, default ``1000,2000``; the CSV files are
kept in ``OHMGRAPH_VS_DATA`` as by ``bench_vs_script.py``), in the file's row order and with
the rows shuffled (seeded; no locality left), and the open pg1 network when it is present. The two run in turn, reference then kernel, ``OHMGRAPH_NUMBERING_ROUNDS`` times
(default 7); the table gives median wall seconds and median CPU seconds of the calling thread
(``time.thread_time``: less disturbed by other work on a shared machine) and the median
per-round ratio. Nothing here asserts a time.

    .venv/bin/python -m pytest benchmarks/bench_numbering.py -o python_files='bench_*.py' \\
        --benchmark-enable -s
"""

from __future__ import annotations

import os
import statistics
import time

import numpy as np
import pyarrow as pa
import pyarrow.csv as pa_csv
import pytest
from bench_vs_script import SIDES, data_folder, grid_csv  # noqa: F401 -- data_folder: fixture
from conftest import PG1

from ohmgraph.io import reader

ROUNDS = int(os.environ.get("OHMGRAPH_NUMBERING_ROUNDS", "7"))
SHUFFLE_SEED = 1


def endpoint_columns(path) -> tuple[pa.Array, pa.Array]:
    """The ``from`` and ``to`` columns as the reader has them before numbering."""
    table = pa_csv.read_csv(path, convert_options=pa_csv.ConvertOptions(
        include_columns=["from", "to"], column_types={"from": pa.string(), "to": pa.string()}))
    return table["from"].combine_chunks(), table["to"].combine_chunks()


def timed(function, *args) -> tuple[float, float]:
    wall, cpu = time.perf_counter(), time.thread_time()
    result = function(*args)
    wall, cpu = time.perf_counter() - wall, time.thread_time() - cpu
    del result
    return wall, cpu


def compare(benchmark, name, from_labels, to_labels) -> None:
    reader._encode_endpoints(from_labels[:2], to_labels[:2])           # load the kernel
    rounds = {"reference": [], "kernel": []}
    for _ in range(ROUNDS):
        rounds["reference"].append(timed(reader._encode_endpoints_reference, from_labels,
                                         to_labels))
        rounds["kernel"].append(timed(reader._encode_endpoints, from_labels, to_labels))
    load = os.getloadavg()[0]
    print(f"\n{name}: {len(from_labels):,} rows, {ROUNDS} rounds, load average {load:.1f}")
    for which in (0, 1):
        reference = [r[which] for r in rounds["reference"]]
        kernel = [r[which] for r in rounds["kernel"]]
        ratio = statistics.median(k / r for k, r in zip(kernel, reference))
        label = ("wall", "thread CPU")[which]
        print(f"  {label:10s} reference {statistics.median(reference):.3f} s, kernel "
              f"{statistics.median(kernel):.3f} s, kernel / reference {ratio:.2f}")
        benchmark.extra_info[f"{name} {label} reference s"] = statistics.median(reference)
        benchmark.extra_info[f"{name} {label} kernel s"] = statistics.median(kernel)
        benchmark.extra_info[f"{name} {label} ratio"] = ratio
    benchmark.extra_info["load average"] = load
    benchmark.pedantic(reader._encode_endpoints, (from_labels, to_labels), rounds=1)


@pytest.mark.parametrize("order", ["file", "shuffled"])
@pytest.mark.parametrize("side", SIDES)
def test_grid(benchmark, data_folder, side, order):  # noqa: F811 -- the imported fixture
    from_labels, to_labels = endpoint_columns(grid_csv(data_folder, side))
    if order == "shuffled":              # no locality left: the kernel's worst case
        rows = pa.array(np.random.default_rng(SHUFFLE_SEED).permutation(len(from_labels)))
        from_labels, to_labels = from_labels.take(rows), to_labels.take(rows)
    compare(benchmark, f"grid {side}, rows in {order} order", from_labels, to_labels)


@pytest.mark.skipif(not PG1.exists(), reason=f"{PG1} not present")
def test_pg1(benchmark):
    compare(benchmark, "pg1", *endpoint_columns(PG1))
