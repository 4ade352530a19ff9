"""The compiled endpoint numbering (engine/numbering.py) against its reference, Arrow's
``dictionary_encode`` of the two columns end to end (io/reader.py:
``_encode_endpoints_reference``): the same labels in the same order and the same numbers."""

import numpy as np
import pyarrow as pa
import pytest

from ohmgraph.datasets.generators import grid2d
from ohmgraph.engine.numbering import label_hash, number_labels
from ohmgraph.io import reader


def _agree(from_texts, to_texts, table_bits=16, sliced=False):
    """Kernel and reference on the same two columns; returns the labels."""
    def column(texts):
        if sliced:                            # a view into a longer column (offsets not from 0)
            return pa.array(["skipped", *texts, "after"], pa.string()).slice(1, len(texts))
        return pa.array(texts, pa.string())

    from_labels, to_labels = column(from_texts), column(to_texts)
    numbered = number_labels(*reader._string_buffers(from_labels),
                             *reader._string_buffers(to_labels), table_bits=table_bits)
    got = pa.StringArray.from_buffers(len(numbered.offsets) - 1, pa.py_buffer(numbered.offsets),
                                      pa.py_buffer(numbered.text))
    labels, from_node, to_node = reader._encode_endpoints_reference(from_labels, to_labels)
    assert got.to_pylist() == labels.to_pylist()
    np.testing.assert_array_equal(numbered.from_index, from_node)
    np.testing.assert_array_equal(numbered.to_index, to_node)
    assert numbered.from_index.dtype == numbered.to_index.dtype == np.int64
    # the definition itself: labels in order of first appearance over from, then to
    endpoints = [*from_texts, *to_texts]
    assert got.to_pylist() == list(dict.fromkeys(endpoints))
    assert [got[int(k)].as_py() for k in (*numbered.from_index, *numbered.to_index)] == endpoints
    return got.to_pylist()


def _random_labels(rng, count, alphabet="ab01_", longest=4):
    lengths = rng.integers(0, longest + 1, count)
    return ["".join(rng.choice(list(alphabet), size)) for size in lengths]


@pytest.mark.parametrize("seed", range(4))
@pytest.mark.parametrize("table_bits", [16, 1])
def test_random_labels_numbered_like_arrow(seed, table_bits):
    # a short alphabet gives many repeats, labels that share prefixes and differ in length;
    # table_bits=1 starts from a two-slot table: every insert collides and the table doubles
    rng = np.random.default_rng(seed)
    m = int(rng.integers(1, 3000))
    _agree(_random_labels(rng, m), _random_labels(rng, m), table_bits=table_bits,
           sliced=bool(seed % 2))


def test_labels_whose_hashes_agree_in_the_stored_bits_are_told_apart():
    # birthday search for two labels with the same upper 32 hash bits (the bits a slot stores):
    # they share a home slot in every table size and are told apart only by their text
    texts = np.array([f"n{k}" for k in range(300_000)])
    encoded = [t.encode() for t in texts]
    tags = np.array([int(label_hash(np.frombuffer(t, np.uint8), 0, len(t))) >> 32
                     for t in encoded], np.uint64)
    order = np.argsort(tags, kind="stable")
    same = np.flatnonzero(tags[order][1:] == tags[order][:-1])
    assert same.size, "no clash among 300,000 labels (expected about 10 by the birthday bound)"
    first, second = texts[order[same[0]]], texts[order[same[0] + 1]]
    assert first != second
    for table_bits in (16, 1):
        labels = _agree([first, second, first, "x"], [second, second, first, first],
                        table_bits=table_bits)
        assert labels == [first, second, "x"]


def test_guesses_counted():
    # from: a, b, c, d all new (hashed); to: b hashed, c is the label after b (guess), c again
    # (the previous entry's label), then a hashed
    from_labels, to_labels = pa.array(["a", "b", "c", "d"]), pa.array(["b", "c", "c", "a"])
    numbered = number_labels(*reader._string_buffers(from_labels),
                             *reader._string_buffers(to_labels))
    assert numbered.guessed == 2
    assert numbered.to_index.tolist() == [1, 2, 2, 0]


def test_empty_table_and_one_row():
    assert _agree([], []) == []
    assert _agree(["a"], ["a"]) == ["a"]
    assert _agree(["a"], ["b"]) == ["a", "b"]
    assert _agree([""], ["b"]) == ["", "b"]          # the reader rejects empty labels later


def test_non_ascii_and_long_labels():
    words = ["Ω1", "ünï-λ", "节点", "n1", "😀", "n1 ", " n1"] + ["λ" * 40, "x" * 65, "x" * 66,
                                                               "x" * 65 + "y", "é" * 300]
    rng = np.random.default_rng(5)
    from_texts = list(rng.choice(words, 500))
    to_texts = list(rng.choice(words, 500))
    labels = _agree(from_texts, to_texts, sliced=True)
    assert len(labels) == len(set(from_texts) | set(to_texts))


def test_generated_grid_numbered_like_arrow():
    net = grid2d(40, 30, pads=3, loads=1200, seed=8)
    labels = net.node_labels
    _agree(list(labels[net.from_node]), list(labels[net.to_node]))
    _agree(list(labels[net.from_node]), list(labels[net.to_node]), table_bits=1)


@pytest.mark.parametrize("kernel", [True, False])
def test_spellings_that_trim_to_one_label_merge_in_order_of_first_appearance(kernel,
                                                                            monkeypatch):
    if not kernel:
        monkeypatch.setattr(reader, "_encode_endpoints", reader._encode_endpoints_reference)
    from_labels = pa.array([" n2 ", "n1 ", "n3", "0", "n1", "\tn2"], pa.string())
    to_labels = pa.array(["n1", "0", "  n2", "n3\t", "n3", "n4 "], pa.string())
    labels, from_node, to_node = reader._number_nodes(from_labels, to_labels)
    assert labels.to_pylist() == ["n2", "n1", "n3", "0", "n4"]
    assert from_node.tolist() == [0, 1, 2, 3, 1, 0]
    assert to_node.tolist() == [1, 3, 0, 2, 2, 4]


def test_columns_with_null_entries_take_the_reference():
    # the reference refuses null entries (ArrowInvalid), which sends the reader to its exact pass
    from_labels = pa.array(["a", None, "b"], pa.string())
    to_labels = pa.array(["b", "c", "a"], pa.string())
    with pytest.raises(pa.ArrowInvalid):
        reader._encode_endpoints_reference(from_labels, to_labels)
    with pytest.raises(pa.ArrowInvalid):
        reader._encode_endpoints(from_labels, to_labels)


def test_a_numba_that_cannot_build_the_kernel_falls_back_to_arrow(monkeypatch):
    from numba.core.errors import NumbaError

    def unbuildable(*_):
        raise NumbaError("no llvm.prefetch here")

    monkeypatch.setattr(reader, "number_labels", unbuildable)
    from_labels = pa.array(["a", "b", "c"], pa.string())
    to_labels = pa.array(["b", "0", "a"], pa.string())
    labels, from_node, to_node = reader._encode_endpoints(from_labels, to_labels)
    assert labels.to_pylist() == ["a", "b", "c", "0"]
    assert from_node.tolist() == [0, 1, 2] and to_node.tolist() == [1, 3, 0]
