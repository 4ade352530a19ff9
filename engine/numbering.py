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
``2**64 / φ`` (Knuth's multiplicative hashing, same section). A slot is two words: the upper 32
bits of the hash beside the label's number, and where the label's text starts beside its
length, so a probe reads the slot and then only the text of a label whose hash bits agree; the
table doubles whenever it would be more than half full (32 to 64 bytes a distinct label).

Branch tables have locality: a column names its labels in roughly the order they first
appeared (a lattice's ``from`` column sweeps the nodes row by row, several times), or repeats
one label (every load to the reference). Before hashing, each entry is therefore compared with
the label numbered right after the column's previous entry, then with that entry itself (a
successor guess). Those labels' text lies in order in the label buffer, so a correct guess
costs a short comparison of bytes in cache instead of a probe at a random place in a table of
millions of slots (dependent cache misses, about 100 ns); a wrong one costs the comparison of a
few bytes.

Entries that go through the table (new labels, and every entry of a table without locality)
overlap their cache misses by software-pipelined prefetching (Chen, Ailamaki, Gibbons and Mowry,
"Improving hash join performance through prefetching", ICDE 2004): each such entry asks for the
home slot of the entry :data:`PREFETCH_DISTANCE` rows ahead and for the text of the label in
the (by then cached) home slot of the entry half as far ahead; the hashes computed ahead are
kept for when their rows come. Measured gains, and the variants that did not help (a small
direct-mapped table of recently seen labels, dropping the guess after repeated misses):
``benchmarks/README.md``.
"""

from __future__ import annotations

from typing import NamedTuple

import numba
import numpy as np
from llvmlite import ir
from numba.core import cgutils, types
from numba.extending import intrinsic

from .checks import FNV_OFFSET, FNV_PRIME
from .growth import with_room

# 2**64 / golden ratio, odd (Knuth's multiplicative hashing).
GOLDEN = np.uint64(0x9E3779B97F4A7C15)
# The table starts with 2**16 slots (1 MiB) and doubles when more than half full.
INITIAL_TABLE_BITS = 16
_LOW32 = np.uint64(0xFFFFFFFF)
# While an entry goes through the hash table, the slot of the entry this many rows ahead, and the
# text of the label in the slot of the entry half as far ahead, are requested from memory.
PREFETCH_DISTANCE = 8
RING = 2 * PREFETCH_DISTANCE


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
    guessed : int
        Entries numbered by the successor guess, without hashing (the rest were looked up in
        the hash table).
    """

    offsets: np.ndarray
    text: np.ndarray
    from_index: np.ndarray
    to_index: np.ndarray
    guessed: int


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
    return LabelNumbering(*_number_labels(
        np.ascontiguousarray(from_offsets, np.int32), np.ascontiguousarray(from_text, np.uint8),
        np.ascontiguousarray(to_offsets, np.int32), np.ascontiguousarray(to_text, np.uint8),
        int(table_bits)))


@numba.njit(cache=True, nogil=True, inline="always")
def label_hash(text, start, end):
    """64-bit FNV-1a of ``text[start:end]`` times ``2**64 / φ`` (slot bits at the top)."""
    value = FNV_OFFSET
    for k in range(start, end):
        value = (value ^ np.uint64(text[k])) * FNV_PRIME
    return value * GOLDEN


@intrinsic
def _prefetch(typingctx, array, index):
    """Ask the processor to bring ``array[index]`` into cache (LLVM's ``llvm.prefetch``: a
    read, high locality); no effect on any value, never faults."""
    def codegen(context, builder, signature, args):
        array_type = signature.args[0]
        view = context.make_array(array_type)(context, builder, args[0])
        pointer = cgutils.get_item_pointer(context, builder, array_type, view, [args[1]],
                                           wraparound=False)
        byte_pointer = ir.IntType(8).as_pointer()
        word = ir.IntType(32)
        function = builder.module.declare_intrinsic(
            "llvm.prefetch", [byte_pointer],
            ir.FunctionType(ir.VoidType(), [byte_pointer, word, word, word]))
        builder.call(function, [builder.bitcast(pointer, byte_pointer), word(0), word(3),
                                word(1)])
        return context.get_dummy_value()

    return types.void(array, index), codegen


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
    """The entries of ``table`` (``2**bits`` slots of two words) placed in a table twice as
    large."""
    bits += 1
    larger = np.zeros(np.int64(2) << bits, np.uint64)
    mask = (np.int64(1) << bits) - 1
    for old in range(table.size // 2):
        entry = table[2 * old]
        if entry != 0:
            slot = np.int64(entry >> np.uint64(64 - bits))
            while larger[2 * slot] != 0:
                slot = (slot + 1) & mask
            larger[2 * slot] = entry
            larger[2 * slot + 1] = table[2 * old + 1]
    return larger


@numba.njit(cache=True, nogil=True)
def _number_labels(from_offsets, from_text, to_offsets, to_text, table_bits):
    m = from_offsets.size - 1
    from_index = np.empty(m, np.int64)
    to_index = np.empty(m, np.int64)
    bits = table_bits
    # slot k: table[2k] = (upper 32 hash bits << 32) | (number + 1), 0 when empty;
    # table[2k + 1] = (start of the label's text << 32) | its length
    table = np.zeros(np.int64(2) << bits, np.uint64)
    label_offsets = np.zeros(1024, np.int32)
    labels = np.empty(16384, np.uint8)
    n = 0
    guessed = 0         # returned; numba 0.68 compiled the loop without this count 1.8x slower
    for column in range(2):
        offsets = from_offsets if column == 0 else to_offsets
        text = from_text if column == 0 else to_text
        index = from_index if column == 0 else to_index
        previous = -1
        ring_row = np.full(RING, -1, np.int64)
        ring_hash = np.zeros(RING, np.uint64)
        for row in range(m):
            start, end = offsets[row], offsets[row + 1]
            guess = previous + 1
            if guess < n and _same_text(text, start, end, labels, label_offsets[guess],
                                        label_offsets[guess + 1]):
                index[row] = guess
                previous = guess
                guessed += 1
                continue
            if previous >= 0 and _same_text(text, start, end, labels, label_offsets[previous],
                                            label_offsets[previous + 1]):
                index[row] = previous
                guessed += 1
                continue
            # hashes computed ahead are kept by row in a ring of 2 * PREFETCH_DISTANCE
            if ring_row[row % RING] == row:
                hashed = ring_hash[row % RING]
            else:
                hashed = label_hash(text, start, end)
            # prefetch the home slot of the entry PREFETCH_DISTANCE rows ahead and, where the
            # home slot of the entry half as far ahead holds its hash bits, that label's text
            ahead = row + PREFETCH_DISTANCE
            if ahead < m:
                later = label_hash(text, offsets[ahead], offsets[ahead + 1])
                ring_row[ahead % RING] = ahead
                ring_hash[ahead % RING] = later
                _prefetch(table, 2 * np.int64(later >> np.uint64(64 - bits)))
                ahead = row + PREFETCH_DISTANCE // 2
                if ring_row[ahead % RING] == ahead:
                    later = ring_hash[ahead % RING]
                else:
                    later = label_hash(text, offsets[ahead], offsets[ahead + 1])
                home = 2 * np.int64(later >> np.uint64(64 - bits))
                if table[home] >> np.uint64(32) == later >> np.uint64(32):
                    _prefetch(labels, np.int64(table[home + 1] >> np.uint64(32)))
            tag = hashed >> np.uint64(32)
            mask = (np.int64(1) << bits) - 1
            slot = np.int64(hashed >> np.uint64(64 - bits))
            found = -1
            while table[2 * slot] != 0:
                if table[2 * slot] >> np.uint64(32) == tag:
                    where = table[2 * slot + 1]
                    label_start = np.int64(where >> np.uint64(32))
                    if _same_text(text, start, end, labels, label_start,
                                  label_start + np.int64(where & _LOW32)):
                        found = np.int64(table[2 * slot] & _LOW32) - 1
                        break
                slot = (slot + 1) & mask
            if found < 0:
                found = n
                n += 1
                if n + 1 > label_offsets.size:
                    label_offsets = with_room(label_offsets, n + 1)
                at = label_offsets[found]
                if at + end - start > labels.size:
                    labels = with_room(labels, at + end - start)
                for k in range(end - start):
                    labels[at + k] = text[start + k]
                label_offsets[n] = at + end - start
                table[2 * slot] = (tag << np.uint64(32)) | np.uint64(n)
                table[2 * slot + 1] = (np.uint64(at) << np.uint64(32)) | np.uint64(end - start)
                if 2 * n > table.size // 2:
                    table = _doubled_table(table, bits)
                    bits += 1
            index[row] = found
            previous = found
    return (label_offsets[:n + 1].copy(), labels[:label_offsets[n]].copy(), from_index,
            to_index, guessed)
