"""Node numbers from endpoint label text, in order of first appearance.

:func:`number_labels` works directly on the offsets and bytes of two variable-length text
columns (Arrow's string layout: entry ``k`` is ``text[offsets[k]:offsets[k + 1]]``), the ``from``
and ``to`` endpoints of every branch, and numbers the distinct labels in order of first
appearance over the ``from`` column and then the ``to`` column — the numbering of
``pyarrow.compute.dictionary_encode`` over the two columns end to end, which the reader keeps as
the reference (``io/reader.py: _encode_endpoints_reference``).

The distinct labels sit in a hash table with open addressing and linear probing (Knuth, *The Art
of Computer Programming*, vol. 3, 2nd ed., 1998, §6.4, Algorithm L), hashed by 64-bit FNV-1a
(:data:`ohmgraph.engine.checks.FNV_PRIME`) and placed by the top bits of the hash times
``2**64 / φ`` (Knuth's multiplicative hashing, same section). A slot holds the upper 32 bits of
the hash beside the label's number, so probing compares text only where those bits agree; the
table doubles whenever it would be more than half full.

Branch tables have locality: a column names its labels in roughly the order they first
appeared (a lattice's ``from`` column sweeps the nodes row by row, several times), or repeats
one label (every load to the reference). Before hashing, each entry is therefore compared with
the label numbered right after the column's previous entry, then with that entry itself — the
successor prediction of a sequential scan. Those labels' text lies in order in the label
buffer, so a correct guess costs a short comparison of bytes in cache instead of a probe at a
random position in a table of millions of entries (about 100 ns each, several dependent cache
misses); a wrong guess costs the comparison of a few bytes. Measured gain and the variants that
did not help (a small direct-mapped table of recently seen labels): ``benchmarks/README.md``.
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np

from .checks import FNV_OFFSET, FNV_PRIME

# 2**64 / golden ratio, odd (Knuth's multiplicative hashing).
GOLDEN = np.uint64(0x9E3779B97F4A7C15)
# The table starts with 2**16 slots (512 KiB) and doubles when more than half full.
INITIAL_TABLE_BITS = 16
_LOW32 = np.uint64(0xFFFFFFFF)


class LabelNumbering(NamedTuple):
    """Distinct labels in order of first appearance and each endpoint's label number.

    Attributes
    ----------
    offsets : ndarray of int32
        ``n + 1`` offsets of the ``n`` labels into ``text`` (Arrow's string layout).
    text : ndarray of uint8
        The labels' bytes end to end.
    from_index, to_index : ndarray of int64
        The label number of every ``from`` and ``to`` entry.
    """

    offsets: np.ndarray
    text: np.ndarray
    from_index: np.ndarray
    to_index: np.ndarray


def number_labels(from_offsets: np.ndarray, from_text: np.ndarray, to_offsets: np.ndarray,
                  to_text: np.ndarray, table_bits: int = INITIAL_TABLE_BITS) -> LabelNumbering:
    """Number the distinct labels of two text columns in order of first appearance (all of
    ``from``, then ``to``).

    Parameters
    ----------
    from_offsets, to_offsets : ndarray of int32
        ``m + 1`` offsets of each column's ``m`` entries into its text (equal lengths); the
        offsets need not start at 0 (a slice of a longer column).
    from_text, to_text : ndarray of uint8
        The columns' bytes (UTF-8; labels are compared byte for byte).
    table_bits : int
        log2 of the hash table's first size (tests pass tiny tables to force collisions).

    Returns
    -------
    LabelNumbering
    """
    offsets, text, from_index, to_index = _number_labels(
        np.ascontiguousarray(from_offsets, np.int32), np.ascontiguousarray(from_text, np.uint8),
        np.ascontiguousarray(to_offsets, np.int32), np.ascontiguousarray(to_text, np.uint8),
        int(table_bits))
    return LabelNumbering(offsets, text, from_index, to_index)


@numba.njit(cache=True, nogil=True, inline="always")
def label_hash(text, start, end):
    """64-bit FNV-1a of ``text[start:end]`` times ``2**64 / φ`` (slot bits at the top)."""
    value = FNV_OFFSET
    for k in range(start, end):
        value = (value ^ np.uint64(text[k])) * FNV_PRIME
    return value * GOLDEN


@numba.njit(cache=True, nogil=True, inline="always")
def _same_text(text, start, end, labels, label_start, label_end):
    """Whether ``text[start:end]`` equals ``labels[label_start:label_end]``."""
    if end - start != label_end - label_start:
        return False
    for k in range(end - start):
        if text[start + k] != labels[label_start + k]:
            return False
    return True


@numba.njit(cache=True, nogil=True)
def _doubled_table(table, bits):
    """The entries of ``table`` (``2**bits`` slots) placed in a table twice as large."""
    bits += 1
    larger = np.zeros(np.int64(1) << bits, np.uint64)
    mask = (np.int64(1) << bits) - 1
    for entry in table:
        if entry != 0:
            slot = np.int64(entry >> np.uint64(64 - bits))
            while larger[slot] != 0:
                slot = (slot + 1) & mask
            larger[slot] = entry
    return larger


@numba.njit(cache=True, nogil=True)
def _room(array, needed):
    """``array`` itself, or a copy at least twice as long, when it holds fewer than ``needed``."""
    if needed <= array.size:
        return array
    larger = np.empty(max(needed, 2 * array.size), array.dtype)
    larger[:array.size] = array
    return larger


@numba.njit(cache=True, nogil=True)
def _number_labels(from_offsets, from_text, to_offsets, to_text, table_bits):
    m = from_offsets.size - 1
    from_index = np.empty(m, np.int64)
    to_index = np.empty(m, np.int64)
    bits = table_bits
    table = np.zeros(np.int64(1) << bits, np.uint64)    # (upper hash bits << 32) | (number + 1)
    label_offsets = np.zeros(1024, np.int32)
    labels = np.empty(16384, np.uint8)
    n = 0
    for column in range(2):
        offsets = from_offsets if column == 0 else to_offsets
        text = from_text if column == 0 else to_text
        index = from_index if column == 0 else to_index
        previous = -1
        for row in range(m):
            start, end = offsets[row], offsets[row + 1]
            guess = previous + 1
            if guess < n and _same_text(text, start, end, labels, label_offsets[guess],
                                        label_offsets[guess + 1]):
                index[row] = guess
                previous = guess
                continue
            if previous >= 0 and _same_text(text, start, end, labels, label_offsets[previous],
                                            label_offsets[previous + 1]):
                index[row] = previous
                continue
            hashed = label_hash(text, start, end)
            tag = hashed >> np.uint64(32)
            mask = (np.int64(1) << bits) - 1
            slot = np.int64(hashed >> np.uint64(64 - bits))
            found = -1
            while table[slot] != 0:
                entry = table[slot]
                if entry >> np.uint64(32) == tag:
                    number = np.int64(entry & _LOW32) - 1
                    if _same_text(text, start, end, labels, label_offsets[number],
                                  label_offsets[number + 1]):
                        found = number
                        break
                slot = (slot + 1) & mask
            if found < 0:
                found = n
                n += 1
                label_offsets = _room(label_offsets, n + 1)
                labels = _room(labels, label_offsets[found] + end - start)
                at = label_offsets[found]
                labels[at:at + end - start] = text[start:end]
                label_offsets[n] = at + end - start
                table[slot] = (tag << np.uint64(32)) | np.uint64(n)
                if 2 * n > table.size:
                    table = _doubled_table(table, bits)
                    bits += 1
            index[row] = found
            previous = found
    return label_offsets[:n + 1].copy(), labels[:label_offsets[n]].copy(), from_index, to_index
