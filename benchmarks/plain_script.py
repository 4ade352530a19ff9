"""The yardstick for ``ohmgraph solve`` end to end: a plain pandas + scipy + pyamg + h5py script.

Usage: ``python benchmarks/plain_script.py NET.csv OUT.h5``

Reads a branch table (``name,kind,from,to,value``; resistors, voltage sources to the reference
node ``0``, current sources), solves the grounded nodal equations with pyamg's smoothed
aggregation and CG to a relative residual of 1e-8, and writes node voltages and branch currents
with h5py. No checks, and no voltage sources between two non-reference nodes. This is how a
competent user would write it; it may only ever be made faster, never slower.
"""

import sys

import h5py
import numpy as np
import pandas as pd
import pyamg
import scipy.sparse as sp

table = pd.read_csv(sys.argv[1], engine="pyarrow",
                    dtype={"name": str, "kind": str, "from": str, "to": str, "value": float})
index, labels = pd.factorize(pd.concat([table["from"], table["to"]], ignore_index=True))
m, n = len(table), len(labels)
a, b = index[:m], index[m:]
kind, value = table["kind"].to_numpy(), table["value"].to_numpy()
R, V, I = kind == "R", kind == "V", kind == "I"
ground = labels.get_loc("0")

known = np.full(n, np.nan)                      # held potentials: pads (V to 0) and the reference
known[a[V]], known[ground] = value[V], 0.0
g = 1.0 / value[R]
L = sp.csr_matrix((np.concatenate([g, g, -g, -g]),
                   (np.concatenate([a[R], b[R], a[R], b[R]]),
                    np.concatenate([a[R], b[R], b[R], a[R]]))), shape=(n, n))
inject = np.bincount(b[I], value[I], n) - np.bincount(a[I], value[I], n)
free = np.isnan(known)
rhs = inject[free] - L[free][:, ~free] @ known[~free]
A = L[free][:, free].tocsr()
x = pyamg.smoothed_aggregation_solver(A).solve(rhs, tol=1e-8, accel="cg")
voltage = known.copy()
voltage[free] = x

current = np.zeros(m)
current[R] = (voltage[a[R]] - voltage[b[R]]) / value[R]
current[I] = value[I]
leaving = np.bincount(a, current, n) - np.bincount(b, current, n)   # KCL at each pad node
current[V] = -leaving[a[V]]
with h5py.File(sys.argv[2], "w") as out:
    out["nodes/label"] = labels.to_numpy().astype("S")
    out["nodes/voltage"] = voltage
    out["branches/name"] = table["name"].to_numpy().astype("S")
    out["branches/current"] = current
