"""The data contract: one finding class per test, each naming the column, count and an example."""

from __future__ import annotations

import pytest
from planbuilders import make_analysis, make_plan, make_population

from compiler.bind import bind
from compiler.problems import Exit, Stop
from compiler.read import read

DICTIONARY = {
    "pid": "identifier",
    "arm": {"kind": "categorical", "levels": ["usual", "walking"]},
    "site": {"kind": "categorical", "levels": ["north", "south", "east"]},
    "age": {"kind": "continuous", "min": 18, "max": 100},
    "smoker": "binary",
    "visits": "count",
    "dose": {"kind": "continuous"},
    "sbp": {"kind": "continuous", "max_missing": 0.25},
}
HEADER = "pid,arm,site,age,smoker,visits,dose,sbp"
GOOD = ["P01,usual,north,34,0,2,1.5,128",
        "P02,walking,south,61,1,0,2.0,141",
        "P03,walking,north,45,0,5,0.5,122",
        "P04,usual,south,47,1,1,1.0,119",
        "P05,usual,north,52,0,3,2.5,133",
        "P06,walking,south,39,1,2,1.5,125"]


def _plan(**kwargs):
    analyses = kwargs.pop("analyses", [make_analysis(
        "main", "sbp", "arm", add=["age", "smoker", "visits", "site", ("log", "dose")])])
    return make_plan(DICTIONARY, row_id=kwargs.pop("row_id", "pid"), analyses=analyses, **kwargs)


def _findings(tmp_path, rows, plan=None, header=HEADER):
    path = tmp_path / "d.csv"
    path.write_text("\n".join([header, *rows]) + "\n", encoding="utf-8")
    plan = plan or _plan()
    try:
        return bind(plan, read(plan, path)).findings
    except Stop as stop:
        assert stop.exit_code == Exit.DATA_CONTRACT
        return stop.problems


def _only(problems, code):
    hits = [p for p in problems if p.code == code]
    assert len(hits) == 1, [p.format() for p in problems]
    return hits[0]


def _edit(row: int, column: str, value: str) -> list[str]:
    rows = [r.split(",") for r in GOOD]
    rows[row][HEADER.split(",").index(column)] = value
    return [",".join(r) for r in rows]


def test_clean_data_give_no_errors(tmp_path):
    assert not [p for p in _findings(tmp_path, GOOD) if p.is_error]


def test_a_declared_column_missing_from_the_file(tmp_path):
    rows = [r.rsplit(",", 1)[0] + ",x" for r in GOOD]
    problem = _only(_findings(tmp_path, rows, header=HEADER.replace("sbp", "SBP")),
                    "column-missing")
    assert problem.column == "sbp"
    assert problem.hint == "the file has a column `SBP`"


def test_a_column_spelt_in_other_code_points_is_shown_as_such(tmp_path):
    # the plan writes âge composed (U+00E2), the file decomposed (a + U+0302): the two look
    # the same, so the hint spells the file's name out in code points
    dictionary = {("âge" if name == "age" else name): spec for name, spec in DICTIONARY.items()}
    plan = make_plan(dictionary, row_id="pid", analyses=[make_analysis(
        "main", "sbp", "arm", add=["âge", "smoker", "visits", "site"])])
    header = HEADER.replace("age", "a\u0302ge")
    problem = _only(_findings(tmp_path, GOOD, plan=plan, header=header), "column-missing")
    assert problem.column == "âge"
    assert problem.hint == ("the file has a column `a\\u0302ge` (the same letters as `âge`, in "
                            "other Unicode code points: names must match code point for code "
                            "point)")


def test_text_in_a_numeric_column(tmp_path):
    problem = _only(_findings(tmp_path, _edit(2, "age", "forty-five")), "text-in-numeric")
    assert problem.column == "age" and problem.details["rows"] == 1
    assert problem.details["examples"] == ["P03"] and problem.details["values"] == ["forty-five"]
    assert problem.format().startswith("data: age: text in a numeric column: 1 row")


def test_values_outside_the_declared_range(tmp_path):
    rows = _edit(1, "age", "104")
    rows[4] = rows[4].replace(",52,", ",12,")
    problem = _only(_findings(tmp_path, rows), "out-of-range")
    assert problem.column == "age" and problem.details["rows"] == 2
    assert problem.details["examples"] == ["P02", "P05"]
    assert problem.details["values"] == ["104", "12"]
    assert "values outside [18, 100]" in problem.message


@pytest.mark.parametrize("value", ["nan", "-inf", "Infinity"])
def test_nan_or_infinity_is_named_as_such_not_as_text(tmp_path, value):
    problem = _only(_findings(tmp_path, _edit(2, "age", value)), "non-finite")
    assert problem.message.startswith("values that are not finite numbers (NaN or infinity)")


def test_a_huge_value_is_shown_in_exponent_form_not_as_its_digits(tmp_path):
    problem = _only(_findings(tmp_path, _edit(1, "age", "2.44e200")), "out-of-range")
    assert problem.details["values"] == ["2.44e+200"]


def test_a_level_outside_the_declared_levels_hints_at_letter_case(tmp_path):
    problem = _only(_findings(tmp_path, _edit(1, "arm", "Walking")), "unknown-level")
    assert problem.column == "arm" and problem.details["rows"] == 1
    assert problem.details["values"] == ["Walking"]
    assert problem.hint == "`Walking` differs from the declared level `walking` only in case"


def test_a_level_in_other_code_points_is_spelt_out(tmp_path):
    # the plan declares sud-est with a composed é (U+00E9); one row has e + U+0301, which
    # prints the same: the hint names the code points
    dictionary = {**DICTIONARY, "site": {"kind": "categorical",
                                         "levels": ["north", "south", "sud-\u00e9st"]}}
    rows = _edit(2, "site", "sud-e\u0301st")
    plan = make_plan(dictionary, row_id="pid", analyses=[make_analysis("main", "sbp", "arm")])
    problem = _only(_findings(tmp_path, rows, plan), "unknown-level")
    assert problem.details["rows"] == 1
    assert problem.hint == ("`sud-e\\u0301st` is the declared level `sud-\u00e9st` in other "
                            "Unicode code points")


def test_binary_values_other_than_0_and_1(tmp_path):
    rows = _edit(0, "smoker", "2")
    rows[1] = rows[1].replace(",61,1,", ",61,1.0,")  # 1.0 is a one
    problem = _only(_findings(tmp_path, rows), "not-binary")
    assert problem.column == "smoker" and problem.details["rows"] == 1
    assert problem.details["values"] == ["2"]


@pytest.mark.parametrize("value", ["-1", "2.5"])
def test_counts_negative_or_not_whole(tmp_path, value):
    problem = _only(_findings(tmp_path, _edit(3, "visits", value)), "not-count")
    assert problem.column == "visits" and problem.details["rows"] == 1
    assert problem.details["examples"] == ["P04"] and problem.details["values"] == [value]


def test_a_repeated_row_id(tmp_path):
    problem = _only(_findings(tmp_path, _edit(4, "pid", "P02")), "duplicate-id")
    assert problem.column == "pid" and problem.details["rows"] == 2
    # the rows holding the repeated id are named by row number: the id cannot tell them apart
    assert problem.details["example_by"] == "row number"
    assert problem.details["examples"] == ["2", "5"] and problem.details["values"] == ["P02"] * 2


def test_a_missing_row_id_is_named_by_row_number(tmp_path):
    problem = _only(_findings(tmp_path, _edit(2, "pid", "")), "missing-id")
    assert problem.column == "pid" and problem.details["rows"] == 1
    assert problem.details["example_by"] == "row number" and problem.details["examples"] == ["3"]


def test_missing_share_above_max_missing(tmp_path):
    rows = _edit(0, "sbp", "NA")
    rows[3] = rows[3].rsplit(",", 1)[0] + ","
    problem = _only(_findings(tmp_path, rows), "too-many-missing")  # 2 of 6 = 33% > 25%
    assert problem.column == "sbp" and problem.details["rows"] == 2
    assert "33.3% of rows" in problem.message


def test_non_positive_values_under_a_log_term(tmp_path):
    problem = _only(_findings(tmp_path, _edit(5, "dose", "0")), "not-positive")
    assert problem.column == "dose" and problem.details["examples"] == ["P06"]
    assert problem.details["values"] == ["0"]


def test_non_positive_values_of_a_poisson_offset(tmp_path):
    plan = _plan(analyses=[make_analysis("rate", "visits", "arm", family="poisson",
                                         offset="dose")])
    problem = _only(_findings(tmp_path, _edit(1, "dose", "-0.5"), plan), "not-positive")
    assert problem.column == "dose" and problem.details["values"] == ["-0.5"]


def test_an_exposure_level_absent_from_the_analysed_rows(tmp_path):
    plan = _plan(populations=[make_population("smokers", ("smoker", "equals", 1))],
                 analyses=[make_analysis("main", "sbp", "arm", population="smokers")])
    rows = _edit(3, "arm", "walking")  # every smoker now walks
    problem = _only(_findings(tmp_path, rows, plan), "exposure-level-absent")
    assert problem.column == "arm" and problem.details["analysis"] == "main"
    # usual is the first level, so the reference: it is the other levels that lose their effect
    assert problem.message == ("the declared level `usual` of the exposure, its reference "
                               "level, does not occur among the 3 analysed rows of analysis "
                               "`main`, so no other level can be compared with it")


def test_an_absent_level_that_is_not_the_reference_loses_its_own_effect(tmp_path):
    plan = _plan(populations=[make_population("smokers", ("smoker", "equals", 1))],
                 analyses=[make_analysis("main", "sbp", "arm", population="smokers")])
    rows = _edit(5, "arm", "usual")  # P02 and P06, the smokers who walked, now usual care
    rows[1] = rows[1].replace("walking", "usual")
    problem = _only(_findings(tmp_path, rows, plan), "exposure-level-absent")
    assert problem.message == ("the declared level `walking` of the exposure does not occur "
                               "among the 3 analysed rows of analysis `main`, so its effect "
                               "cannot be estimated")


def test_unused_columns_are_a_warning_listing_them(tmp_path):
    rows = [r + ",x,7" for r in GOOD]
    problem = _only(_findings(tmp_path, rows, header=HEADER + ",note,batch"), "unused-columns")
    assert problem.severity == "warning" and problem.details["columns"] == ["note", "batch"]


def test_a_declared_level_never_seen_is_a_warning(tmp_path):
    problem = _only(_findings(tmp_path, GOOD), "level-never-seen")  # no row is from `east`
    assert problem.severity == "warning" and problem.column == "site"
    assert problem.details["level"] == "east"


def test_every_finding_is_reported_together(tmp_path):
    rows = _edit(0, "age", "150")
    rows[1] = rows[1].replace("walking", "jogging")
    rows[2] = rows[2].replace(",0,5,", ",7,5,")
    with pytest.raises(Stop) as caught:
        path = tmp_path / "d.csv"
        path.write_text("\n".join([HEADER, *rows]) + "\n")
        bind(_plan(), read(_plan(), path))
    codes = {p.code for p in caught.value.problems if p.is_error}
    assert codes == {"out-of-range", "unknown-level", "not-binary"}


def test_examples_are_row_numbers_without_a_row_id(tmp_path):
    problem = _only(_findings(tmp_path, _edit(4, "age", "7"), _plan(row_id=None)),
                    "out-of-range")
    assert problem.details["example_by"] == "row number"
    assert problem.details["examples"] == ["5"]  # the fifth data row
    assert "e.g. row 5: 7" in problem.message


def test_a_file_with_no_rows_stops_at_bind(tmp_path):
    problem = _only(_findings(tmp_path, []), "no-rows")
    assert problem.is_error and "no rows" in problem.message
