"""Growing an array inside a compiled kernel (shared by the kernels that append)."""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True, nogil=True)
def with_room(array, needed):
    """``array`` itself when it holds at least ``needed`` entries, else a copy at least twice
    as long (amortised constant time per appended entry)."""
    if needed <= array.size:
        return array
    larger = np.empty(max(needed, 2 * array.size), array.dtype)
    larger[:array.size] = array
    return larger
