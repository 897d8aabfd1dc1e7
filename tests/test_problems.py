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
