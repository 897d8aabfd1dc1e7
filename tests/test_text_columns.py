"""The text columns a read Table holds behave like the numpy object arrays they stand for
(numpy's own object-array semantics are the reference)."""

import numpy as np
import pyarrow as pa

from compiler.bound import CodedColumn, RowLabels, TextColumn

VALUES = ["north", None, "south", "north", "east", None, "south"]


def _coded() -> CodedColumn:
    distinct = ("north", "south", "east")
    codes = np.array([-1 if v is None else distinct.index(v) for v in VALUES], np.int32)
    return CodedColumn(codes, distinct)


def test_a_coded_column_compares_like_an_object_array():
    column, reference = _coded(), np.array(VALUES, dtype=object)
    for value in ("north", "east", "west", None):
        np.testing.assert_array_equal(column == value, reference == value)
        np.testing.assert_array_equal(column != value, reference != value)


def test_a_coded_column_indexes_like_an_object_array():
    column, reference = _coded(), np.array(VALUES, dtype=object)
    rows, mask = np.array([6, 0, 1]), reference != None  # noqa: E711
    assert [column[int(r)] for r in range(len(VALUES))] == VALUES
    assert list(column[rows]) == list(reference[rows])
    assert list(column[mask]) == list(reference[mask])
    assert list(column[2:5]) == list(reference[2:5]) and np.asarray(column).dtype == object


def test_a_text_column_indexes_like_an_object_array():
    column = TextColumn(pa.chunked_array([pa.array(VALUES[:3]), pa.array(VALUES[3:])]))
    reference = np.array(VALUES, dtype=object)
    rows = np.array([5, 2, 0])
    assert [column[r] for r in range(len(VALUES))] == VALUES
    assert list(column[rows]) == list(reference[rows])
    np.testing.assert_array_equal(column.missing(), np.equal(reference, None))


def test_row_labels_are_row_ids_or_one_based_row_numbers():
    rows = np.array([0, 3, 6])
    assert list(RowLabels(rows)) == ["1", "4", "7"]
    assert list(RowLabels(rows, np.array(VALUES, dtype=object))) == ["north", "north", "south"]
    assert list(RowLabels(rows)[np.array([2, 0])]) == ["7", "1"]
