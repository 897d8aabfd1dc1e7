"""Identifier checks on arrow text agree with a plain count of the values (collections.Counter)."""

from collections import Counter

import numpy as np
import pyarrow as pa

from compiler.bound import TextColumn
from compiler.contract import identifier_faults


def _expected_repeats(values):
    counts = Counter(v for v in values if v is not None)  # reference: Python's Counter
    return [r for r, v in enumerate(values) if v is not None and counts[v] > 1]


def test_repeats_in_shuffled_text_ids_match_a_plain_count():
    rng = np.random.default_rng(3)
    values = [f"id-{k}" for k in rng.integers(0, 400, 300)] + ["ü-7", "ü-7", "", None]
    order = rng.permutation(len(values))
    values = [values[k] for k in order]
    repeats, absent = identifier_faults(TextColumn(pa.array(values, pa.string())))
    expected = _expected_repeats(values)
    assert repeats.count == len(expected) and list(repeats.rows) == expected[:5]
    assert repeats.values == tuple(values[r] for r in expected[:5])
    assert absent.count == 1 and values[absent.rows[0]] is None


def test_ascending_text_ids_have_no_repeats():
    values = [f"P{k:05d}" for k in range(1, 2001)]
    column = TextColumn(pa.chunked_array([pa.array(values[:700]), pa.array(values[700:])]))
    repeats, absent = identifier_faults(column)
    assert repeats.count == 0 and absent.count == 0 and _expected_repeats(values) == []


def test_text_and_object_ids_give_the_same_faults():
    values = ["b", "a", "c", "a", None, "d", "b"]
    as_text = identifier_faults(TextColumn(pa.array(values, pa.string())))
    as_objects = identifier_faults(np.array(values, dtype=object))
    assert as_text == as_objects
