"""How problems print: the GNU form for plan places, `data: COLUMN:` for data findings."""

from compiler.problems import Place, Problem


def test_a_listing_message_keeps_its_lines_and_the_hint_its_own():
    problem = Problem("the plan differs from its lock:\n  a: 1 → 2\n  b: x → y",
                      place=Place("p.yaml", 3, 5), hint="amend it")
    assert problem.format() == ("p.yaml:3:5: error: the plan differs from its lock:\n"
                                "  a: 1 → 2\n  b: x → y\n  hint: amend it")


def test_control_characters_from_a_file_are_escaped_not_sent_to_the_terminal():
    problem = Problem("cannot read d.csv: field 'a\x1b[31m\rb\x00'\u2028", column="c\nd",
                      hint="h\x07")
    assert problem.format() == ("data: c\\nd: cannot read d.csv: field 'a\\x1b[31m\\rb\\x00'"
                                "\\u2028\n  hint: h\\x07")
    assert problem.as_json()["message"] == problem.message  # JSON escapes them itself


def test_characters_that_print_as_nothing_or_a_plain_space_are_escaped():
    # a column name with a zero-width space, a no-break space or a byte-order mark looks like
    # the declared one; a right-to-left override would reorder the rest of the line
    problem = Problem("unknown column `age\u200b`; `dose\xa0mg`; `\ufeffid`; `x\u202ey`",
                      column="a\u200bb")
    assert problem.format() == ("data: a\\u200bb: unknown column `age\\u200b`; "
                                "`dose\\xa0mg`; `\\ufeffid`; `x\\u202ey`")


def test_letters_and_symbols_beyond_ascii_print_as_they_are():
    problem = Problem("`durée` must be ≥ 0 — not −1.5 (µg)", place=Place("p.yaml", 1, 1))
    assert problem.format() == "p.yaml:1:1: error: `durée` must be ≥ 0 — not −1.5 (µg)"


def test_did_you_mean_prefers_the_same_letters_in_other_code_points():
    # composed é (U+00E9) against e + combining acute (U+0301), beside a near spelling
    from compiler.suggest import did_you_mean

    assert did_you_mean("dure\u0301e", ["durée", "durees"]) == (
        "did you mean `dur\\xe9e` (the same letters as `dure\u0301e`, in other Unicode code "
        "points: names must match code point for code point)?")
    assert did_you_mean("durée", ["Durée", "duree"]) == "did you mean `Durée`?"
    assert did_you_mean("durée", ["durée"]) is None  # the word itself is never suggested
