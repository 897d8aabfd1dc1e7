"""Readers' messages the user can act on, the digest of the bytes analysed, and the small
contract gaps of issue 22: every case built in code."""

from __future__ import annotations

import os

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from planbuilders import make_analysis, make_plan

from compiler import read as read_module
from compiler.bind import bind
from compiler.pipeline import analyse
from compiler.problems import Exit, Stop
from compiler.read import read

from test_read import PLAN, ROWS, _bind_stop, _file


def _refusal(path, stream: bool | None = None) -> str:
    with pytest.raises(Stop) as caught:
        analyse(PLAN, path, stream=stream) if stream is not None else read(PLAN, path)
    assert caught.value.exit_code == Exit.DATA_CONTRACT
    return caught.value.problems[0].message


@pytest.mark.parametrize("stream", [None, True])
@pytest.mark.parametrize("size, line", [(20 << 20, "a field"), (100 << 20, "a line")])
def test_a_line_longer_than_the_block_is_named_with_its_length(tmp_path, stream, size, line):
    head, first, *rest = ROWS.splitlines(keepends=True)
    long = "x" * size + first if line == "a field" else "," * size + "\n"
    path = _file(tmp_path, "d.csv", head + first + long + "".join(rest))
    message = _refusal(path, stream)
    assert f"cannot read {path} as csv: line 3 is {size >> 20} MiB long, longer than the" in message


def test_a_utf16_file_is_said_to_be_utf16(tmp_path):
    path = _file(tmp_path, "d.csv", ROWS.encode("utf-16"))
    assert _refusal(path) == f"data file {path} is encoded as UTF-16, not UTF-8"
    path = _file(tmp_path, "e.csv", ROWS.encode("utf-16-le"))  # no byte-order mark
    assert "is encoded as UTF-16 or UTF-32 (its header holds NUL bytes)" in _refusal(path)


@pytest.mark.parametrize("header", ["pid,arm,age,smoker,visits,sbp", "other,names"])
def test_a_header_without_its_line_end_reads_as_the_header_with_it(tmp_path, header):
    said = []
    for name, text in (("ended.csv", header + "\n"), ("open.csv", header)):
        path = _file(tmp_path, name, text)
        stop = _bind_stop(read(PLAN, path))
        said.append([p.message.replace(str(path), "FILE") for p in stop.problems])
    assert said[0] == said[1]
    assert "the data file FILE has no rows, only a header" in said[1]


@pytest.mark.parametrize("name", ["empty.dta", "empty.xpt", "empty.parquet", "empty.csv"])
def test_an_empty_file_is_said_to_be_empty(tmp_path, name):
    path = _file(tmp_path, name, b"")
    assert "the file is empty (0 bytes)" in _refusal(path)


def test_a_file_rewritten_in_place_during_the_read_is_refused(tmp_path, monkeypatch):
    """Same size, modification time set back: only the status-change time tells."""
    import pyarrow.csv as pacsv

    path = _file(tmp_path, "d.csv", ROWS)
    stamp = os.stat(path)
    real = pacsv.read_csv

    def parse_then_rewrite(*args, **kwargs):
        table = real(*args, **kwargs)
        path.write_bytes(ROWS.replace("128.5", "129.5").encode())  # as an editor saving
        os.utime(path, ns=(stamp.st_atime_ns, stamp.st_mtime_ns))
        return table

    monkeypatch.setattr(pacsv, "read_csv", parse_then_rewrite)
    assert "changed while it was being read" in _refusal(path)


def test_a_streamed_run_refuses_a_file_rewritten_between_its_passes(tmp_path, monkeypatch):
    from compiler import stream_fit

    rng = np.random.default_rng(22)
    rows = "".join(f"{k:03d},{'usual' if k % 2 else 'walk'},{rng.uniform(20, 90):.1f},{k % 3 % 2},"
                   f"{k % 4},{rng.normal(130, 10):.1f}\n" for k in range(40))
    text = ROWS.splitlines(keepends=True)[0] + rows
    path = _file(tmp_path, "d.csv", text)
    stamp = os.stat(path)
    real = stream_fit.fit_streamed

    def fit_then_rewrite(*args, **kwargs):
        path.write_bytes(text.replace(",0,", ",1,", 1).encode())  # the same size
        os.utime(path, ns=(stamp.st_atime_ns, stamp.st_mtime_ns))
        return real(*args, **kwargs)

    monkeypatch.setattr(stream_fit, "fit_streamed", fit_then_rewrite)
    assert "changed while it was being read" in _refusal(path, stream=True)


@pytest.mark.parametrize("stream", [False, True])
def test_a_boolean_column_is_not_a_continuous_one(tmp_path, stream):
    plan = make_plan({"y": "continuous", "x": "binary"},
                     analyses=[make_analysis("main", "y", "x")])
    path = tmp_path / "d.parquet"
    pq.write_table(pa.table({"y": [True, False, True, False], "x": [1.0, 0.0, 0.0, 1.0]}), path)
    with pytest.raises(Stop) as caught:
        analyse(plan, path, stream=stream)
    assert caught.value.exit_code == Exit.DATA_CONTRACT
    problem = caught.value.problems[0]
    assert problem.column == "y" and "true/false (boolean) column" in problem.message


def test_ids_in_two_unicode_forms_are_said_to_print_the_same(tmp_path):
    composed, decomposed = "jos\u00e9", "jose\u0301"
    text = ROWS.replace("007", composed, 1).replace("012", decomposed, 1)
    table = read(PLAN, _file(tmp_path, "d.csv", text))
    bound = bind(PLAN, table)
    warned = [p for p in bound.findings if p.code == "id-unicode-forms"]
    assert len(warned) == 1 and warned[0].severity == "warning"
    assert "U+00E9" in warned[0].message and "U+0065 U+0301" in warned[0].message.replace(
        "U+006A U+006F U+0073 ", "")
    assert np.asarray(table.columns["pid"]).tolist()[:2] == [composed, decomposed]  # kept
