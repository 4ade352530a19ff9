"""Loading numba's compiled-code machinery ahead of the first kernel.

The first cached kernel a process loads pays about 0.2 s for numba's target machinery (its
registries of typed implementations); later kernels load from their cache in a few milliseconds
each. :func:`load_kernel_machinery` pays that cost on purpose, so that a command can do it in a
background thread while its input is read, instead of in its first checking stage.
"""

from __future__ import annotations

import numba
import numpy as np


def load_kernel_machinery() -> None:
    """Load numba's compiled-code machinery by loading the smallest cached kernel."""
    _smallest_kernel(np.zeros(1))


@numba.njit(cache=True, nogil=True)
def _smallest_kernel(values):
    """A cached kernel with nothing to do: loading it sets up the machinery."""
    return values.sum()
