"""The readers: only the declared columns, typed by the dictionary, the digest of the bytes."""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd
import pytest
from planbuilders import make_analysis, make_plan

from compiler.bind import bind
from compiler.problems import Exit, Stop
from compiler.read import read

DICTIONARY = {
    "pid": "identifier",
    "arm": {"kind": "categorical", "levels": ["usual", "walk"]},
    "age": {"kind": "continuous", "min": 18, "max": 100},
    "smoker": "binary",
    "visits": "count",
    "sbp": {"kind": "continuous"},
}
PLAN = make_plan(DICTIONARY, row_id="pid",
                 analyses=[make_analysis("main", "sbp", "arm", add=["age", "smoker", "visits"])])
ROWS = ("pid,arm,age,smoker,visits,sbp\n"
        "007,usual,34.5,0,2,128.5\n"
        "012,walk,61,1,0,141\n"
        "013,walk,NA,0,5,\n"
        "101,usual,47.25,1,1,119\n")


def _file(tmp_path, name: str, content: str | bytes):
    path = tmp_path / name
    path.write_bytes(content.encode("utf-8") if isinstance(content, str) else content)
    return path


def _stop(plan, path) -> Stop:
    with pytest.raises(Stop) as caught:
        read(plan, path)
    assert caught.value.exit_code == Exit.DATA_CONTRACT
    return caught.value


def test_identifiers_keep_leading_zeros(tmp_path):
    table = read(PLAN, _file(tmp_path, "d.csv", ROWS))
    assert list(table.columns["pid"]) == ["007", "012", "013", "101"]


def test_kinds_give_the_dictionary_types_and_missing_markers_become_missing(tmp_path):
    table = read(PLAN, _file(tmp_path, "d.csv", ROWS))
    assert table.columns["age"].dtype == np.float64
    assert table.columns["arm"].dtype == object
    np.testing.assert_array_equal(table.columns["age"], [34.5, 61, np.nan, 47.25])
    np.testing.assert_array_equal(table.columns["sbp"], [128.5, 141, np.nan, 119])


def test_sha256_is_that_of_the_file_bytes(tmp_path):
    path = _file(tmp_path, "d.csv", ROWS * 1)
    table = read(PLAN, path)
    # reference: Python's hashlib over the bytes on disk
    assert table.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert table.size_bytes == path.stat().st_size


def test_sha256_covers_a_file_larger_than_one_parse_block(tmp_path):
    body = "".join(f"{i:07d},walk,{20 + i % 70},0,1,120\n" for i in range(400_000))
    path = _file(tmp_path, "big.csv", "pid,arm,age,smoker,visits,sbp\n" + body)
    table = read(PLAN, path)
    assert table.rows_read == 400_000
    assert table.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_a_file_that_changes_while_it_is_read_stops_the_run(tmp_path, monkeypatch):
    # The parse and the digest read the file separately, so a change between them would give
    # a digest of other bytes than those analysed: the file's identity is compared around both.
    import compiler.read as module

    path = _file(tmp_path, "d.csv", ROWS)
    real = module._identity
    calls = iter(range(100))

    def shifting(p):
        size, mtime, *rest = real(p)
        return size, mtime + next(calls), *rest  # a new modification time each look

    monkeypatch.setattr(module, "_identity", shifting)
    stop = _stop(PLAN, path)
    assert stop.problems[0].code == "data-changed"
    assert str(path) in stop.problems[0].message


def test_only_declared_columns_are_read_and_the_others_listed_as_unused(tmp_path):
    text = ROWS.replace("pid,", "note,pid,", 1).replace("\n0", "\nx,0").replace("\n1", "\ny,1")
    table = read(PLAN, _file(tmp_path, "d.csv", text))
    assert set(table.columns) == set(DICTIONARY)
    assert table.unused_columns == ("note",)


def test_byte_order_mark_and_crlf_line_endings(tmp_path):
    path = _file(tmp_path, "d.csv", b"\xef\xbb\xbf" + ROWS.replace("\n", "\r\n").encode())
    table = read(PLAN, path)
    assert list(table.columns["pid"]) == ["007", "012", "013", "101"]
    assert list(table.columns["sbp"][:2]) == [128.5, 141.0]  # no stray \r in the last column


def test_quoted_fields_may_hold_the_delimiter(tmp_path):
    plan = make_plan({"pid": "identifier", "site": "categorical", "y": "continuous"})
    path = _file(tmp_path, "d.csv", 'pid,site,y\n1,"north, upper",2.5\n2,south,3\n')
    assert list(read(plan, path).columns["site"]) == ["north, upper", "south"]


def test_unicode_column_names(tmp_path):
    plan = make_plan({"größe": {"kind": "continuous"}, "région": "categorical"})
    path = _file(tmp_path, "d.csv", "région,größe\nnord,171.5\nsüd,180\n")
    table = read(plan, path)
    assert list(table.columns["größe"]) == [171.5, 180.0]
    assert list(table.columns["région"]) == ["nord", "süd"]


def test_tab_separated_values(tmp_path):
    table = read(PLAN, _file(tmp_path, "d.tsv", ROWS.replace(",", "\t")))
    assert list(table.columns["pid"]) == ["007", "012", "013", "101"]
    assert table.format == "tsv"


def test_declared_missing_markers_are_honoured(tmp_path):
    plan = make_plan(DICTIONARY, missing=[".", "-99"])
    table = read(plan, _file(tmp_path, "d.csv", ROWS.replace("NA", ".").replace(",119", ",-99")))
    assert np.isnan(table.columns["age"][2]) and np.isnan(table.columns["sbp"][3])


def test_text_in_a_numeric_column_is_kept_for_the_contract(tmp_path):
    table = read(PLAN, _file(tmp_path, "d.csv", ROWS.replace("61,", "sixty-one,")))
    assert table.unparsed["age"].count == 1
    assert table.unparsed["age"].values == ("sixty-one",)
    assert np.isnan(table.columns["age"][1])


def test_an_empty_file_is_a_clear_error(tmp_path):
    stop = _stop(PLAN, _file(tmp_path, "d.csv", b""))
    assert "is empty" in stop.problems[0].message


def test_a_header_only_file_reads_zero_rows(tmp_path):
    table = read(PLAN, _file(tmp_path, "d.csv", ROWS.splitlines()[0] + "\n"))
    assert table.rows_read == 0
    assert len(table.columns["pid"]) == 0 and table.columns["age"].dtype == np.float64


def test_a_ragged_row_names_its_line(tmp_path):
    lines = ROWS.splitlines()
    lines[3] = "013,walk,NA,0"  # line 4 of the file, two fields short
    stop = _stop(PLAN, _file(tmp_path, "d.csv", "\n".join(lines) + "\n"))
    problem = stop.problems[0]
    assert problem.column is None
    assert "line 4 has 4 fields where the header has 6" in problem.message


@pytest.mark.parametrize("before", ["\n", '"two\nlines",walk,40,0,1,120\n'])
def test_a_ragged_row_is_named_by_its_physical_line(tmp_path, before):
    # a blank line, or a quoted field with a line break, is one line more than one record
    text = ROWS.splitlines()[0] + "\n" + before + "013,walk,NA,0\n"
    stop = _stop(PLAN, _file(tmp_path, "d.csv", text))
    line = 1 + before.count("\n") + 1
    assert stop.problems[0].details["line"] == line
    assert f"line {line} has 4 fields" in stop.problems[0].message


def test_a_missing_file_is_a_clear_error(tmp_path):
    stop = _stop(PLAN, tmp_path / "absent.csv")
    assert "not found" in stop.problems[0].message


def test_a_folder_or_a_pipe_is_not_a_data_file(tmp_path):
    import os

    (tmp_path / "folder.csv").mkdir()
    os.mkfifo(tmp_path / "pipe.csv")
    assert "is a folder" in _stop(PLAN, tmp_path / "folder.csv").problems[0].message
    assert "is not a regular file" in _stop(PLAN, tmp_path / "pipe.csv").problems[0].message


def test_an_unknown_extension_asks_for_data_format(tmp_path):
    stop = _stop(PLAN, _file(tmp_path, "d.txt", ROWS))
    assert "data.format" in stop.problems[0].message


def test_a_file_that_is_not_its_format_is_a_clear_error(tmp_path):
    stop = _stop(PLAN, _file(tmp_path, "d.parquet", ROWS))
    assert stop.problems[0].message.startswith("cannot read")


def test_a_file_not_in_utf8_says_so(tmp_path):
    stop = _stop(PLAN, _file(tmp_path, "d.csv", ROWS.replace("walk", "w\u00e4lk").encode("latin-1")))
    assert "UTF-8" in stop.problems[0].hint


def test_a_header_python_csv_cannot_take_is_a_clear_error(tmp_path):
    # a first field over the csv module's field size limit (131,072 characters)
    stop = _stop(PLAN, _file(tmp_path, "d.csv", b"p" * 200_000 + b"\n1\n"))
    assert stop.problems[0].code == "data-unreadable"
    assert "header row is not delimited text" in stop.problems[0].message


def test_a_lone_carriage_return_ends_the_header_as_it_does_for_pyarrow(tmp_path):
    # old Mac line ends: pyarrow reads CR as a line end, and so does the header's reading
    table = read(PLAN, _file(tmp_path, "d.csv", ROWS.replace("\n", "\r")))
    assert table.rows_read == 4
    assert list(table.columns["pid"]) == ["007", "012", "013", "101"]


def test_a_header_with_none_of_the_declared_columns_still_counts_rows(tmp_path):
    # a header that is not UTF-8 is read by pyarrow with other names than Python gives it,
    # so the rows are counted from the first column by position, not by name
    content = b"\xff\xfe\x81,\x9c\n1,2\n3,4\n5,6\n"
    table = read(PLAN, _file(tmp_path, "d.csv", content))
    assert table.rows_read == 3 and table.columns == {}
    stop = _bind_stop(table)
    assert {p.column for p in stop.problems} >= set(DICTIONARY)


def test_random_bytes_are_a_clear_error_not_a_fault(tmp_path):
    # seeded noise: whatever the bytes, the read stops with exit 3 and a one-line message
    rng = np.random.default_rng(20261203)
    for attempt in range(40):
        path = _file(tmp_path, f"noise{attempt}.csv", rng.bytes(5000))
        try:
            table = read(PLAN, path)
        except Stop as stop:
            assert stop.exit_code == Exit.DATA_CONTRACT
            assert all("\n" not in p.format().split("\n  hint:")[0] for p in stop.problems)
        else:
            _bind_stop(table)


def _bind_stop(table) -> Stop:
    with pytest.raises(Stop) as caught:
        bind(PLAN, table)
    assert caught.value.exit_code == Exit.DATA_CONTRACT
    return caught.value


def test_text_in_a_numeric_parquet_column_is_kept_for_the_contract(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = pa.table({"pid": ["1", "2"], "arm": ["usual", "walk"], "age": ["40.5", "old"],
                      "smoker": [0, 1], "visits": [1, 2], "sbp": [120.0, 130.0]})
    pq.write_table(frame, tmp_path / "d.parquet")
    table = read(PLAN, tmp_path / "d.parquet")
    assert table.unparsed["age"].values == ("old",) and table.columns["age"][0] == 40.5


def test_numbers_stored_in_a_text_variable_read_as_their_shortest_form(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = pa.table({"pid": [7, 12], "arm": [1.0, None], "age": [40.0, 50.0],
                      "smoker": [0, 1], "visits": [1, 2], "sbp": [120.0, 130.0]})
    pq.write_table(frame, tmp_path / "d.parquet")
    table = read(PLAN, tmp_path / "d.parquet")
    assert list(table.columns["pid"]) == ["7", "12"]
    assert list(table.columns["arm"]) == ["1", None]


def test_data_format_overrides_the_extension(tmp_path):
    plan = make_plan(DICTIONARY, data_format="tsv")
    table = read(plan, _file(tmp_path, "export.txt", ROWS.replace(",", "\t")))
    assert table.format == "tsv" and table.rows_read == 4


# --- the same data in every format ----------------------------------------------------------

SHORT = make_plan(DICTIONARY, row_id="pid", analyses=[
    make_analysis("main", "sbp", "arm", add=["age", "smoker", "visits"])])


def _frame() -> pd.DataFrame:
    return pd.DataFrame({
        "pid": ["007", "012", "013", "101", "102"],
        "arm": ["usual", "walk", "walk", "usual", ""],
        "age": [34.5, 61.0, np.nan, 47.25, 52.0],
        "smoker": [0.0, 1.0, 0.0, 1.0, 0.0],
        "visits": [2.0, 0.0, 5.0, 1.0, 3.0],
        "sbp": [128.5, 141.0, np.nan, 119.0, 133.0],
    })


def _write(frame: pd.DataFrame, path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq
    import pyreadstat

    if path.suffix == ".csv":
        frame.to_csv(path, index=False)
    elif path.suffix == ".parquet":
        pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), path)
    elif path.suffix == ".xpt":
        pyreadstat.write_xport(frame, str(path), file_format_version=5)
    else:
        frame.to_stata(path, write_index=False, version=118)


@pytest.mark.parametrize("suffix", [".parquet", ".xpt", ".dta"])
def test_every_format_gives_the_columns_of_the_csv(tmp_path, suffix):
    _write(_frame(), tmp_path / "d.csv")
    _write(_frame(), tmp_path / f"d{suffix}")
    expected = read(SHORT, tmp_path / "d.csv").columns
    got = read(SHORT, tmp_path / f"d{suffix}").columns
    assert set(got) == set(expected)
    for name in expected:
        assert got[name].dtype == expected[name].dtype, name
        np.testing.assert_array_equal(got[name], expected[name], err_msg=name)


@pytest.mark.parametrize("suffix", [".parquet", ".xpt", ".dta"])
def test_every_format_gives_the_sample_of_the_csv(tmp_path, suffix):
    _write(_frame(), tmp_path / "d.csv")
    _write(_frame(), tmp_path / f"d{suffix}")
    expected = bind(SHORT, read(SHORT, tmp_path / "d.csv")).sample("main")
    got = bind(SHORT, read(SHORT, tmp_path / f"d{suffix}")).sample("main")
    np.testing.assert_array_equal(got.rows, expected.rows)
    np.testing.assert_array_equal(got.row_ids, expected.row_ids)
    assert got.flow == expected.flow


@pytest.mark.parametrize("offset", [0, 1, 7, 8, 13])
def test_float_blocks_match_pyarrows_own_conversion_at_any_offset(offset):
    # reference: pyarrow's Array.to_numpy, which read avoids because it imports pandas
    import pyarrow as pa

    from compiler.read import _float_block

    rng = np.random.default_rng(3)
    values = [None if rng.random() < 0.3 else float(i) for i in range(1000)]
    block = pa.array(values, type=pa.float64()).slice(offset, 500)
    out = np.empty(len(block))
    valid = _float_block(block, out)
    np.testing.assert_array_equal(out, block.to_numpy(zero_copy_only=False))
    np.testing.assert_array_equal(valid, block.is_valid().to_numpy(zero_copy_only=False))


# --- files that are not what their format says, in memory and streamed ----------------------

def _cut(fraction):
    return lambda data: data[: int(len(data) * fraction)]


def _timestamp_age(path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pq.read_table(path)
    ages = pa.array(pd.to_datetime(np.arange(table.num_rows) * 1e9))
    pq.write_table(table.set_column(table.schema.get_field_index("age"), "age", ages), path)


BROKEN = {  # file name: how a good file of that format is broken
    "half.parquet": _cut(0.5),
    "empty.parquet": _cut(0),
    "tiny.dta": lambda data: data[:8],  # shorter than the Stata header
    "half.dta": _cut(0.5),
    # pandas reads the whole records it finds and only warns (a cut at a record's end, a
    # multiple of 80 bytes, cannot be seen: a version 5 file carries no row count)
    "half.xpt": lambda data: data[: len(data) // 2 // 80 * 80 + 37],
    "timestamp-age.parquet": None,
}


@pytest.mark.parametrize("name", sorted(BROKEN))
@pytest.mark.parametrize("streamed", [False, True])
def test_a_broken_file_is_named_with_exit_3_in_memory_and_streamed(tmp_path, name, streamed):
    from compiler.pipeline import analyse

    path = tmp_path / name
    frame = pd.concat([_frame()] * 40, ignore_index=True)  # 200 rows: records to cut into
    frame["pid"] = [f"{i:03d}" for i in range(len(frame))]
    _write(frame, path)
    if BROKEN[name] is None:
        _timestamp_age(path)
    else:
        path.write_bytes(BROKEN[name](path.read_bytes()))
    with pytest.raises(Stop) as caught:
        analyse(SHORT, path, stream=streamed)
    assert caught.value.exit_code == Exit.DATA_CONTRACT
    assert caught.value.problems[0].message.startswith(f"cannot read {path} as ")
    if name == "half.xpt":
        assert "cut short" in caught.value.problems[0].message
