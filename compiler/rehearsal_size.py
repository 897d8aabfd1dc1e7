"""How large a synthetic rehearsal may be: a bound on the values it makes, not only rows.

The synthetic table is made whole in memory, and its canonical CSV (whose sha256 is the
table's digest) is written as text, so a rehearsal costs roughly 230 bytes and 4 µs per
value (1,000,000 rows of the demo's 13 variables: 2.8 GiB and 56 s on a 2-core machine). It
is a check of the plan, not of the data's size: :data:`MAX_VALUES` keeps it near 1 GB and
a quarter of a minute. Plain Python, so `check` can refuse a ``data.expected_rows`` that no
rehearsal could make, before numpy is loaded.
"""

from __future__ import annotations

MAX_VALUES = 5_000_000


def max_rows(variables: int) -> int:
    """The most synthetic rows a plan with this many declared variables may have."""
    return MAX_VALUES // max(variables, 1)


def shown(rows: int) -> str:
    """A row count as a reader can take it in (a 299-digit one is cut short)."""
    text = str(rows)
    return text if len(text) <= 20 else f"{text[:8]}…{text[-4:]} ({len(text)} digits)"


def too_many(rows: int, variables: int) -> str | None:
    """Why ``rows`` synthetic rows cannot be made, or None."""
    limit = max_rows(variables)
    if rows <= limit:
        return None
    return (f"{shown(rows)} synthetic rows of {variables} variables is more than a rehearsal "
            f"makes: at most {limit:,} rows ({MAX_VALUES:,} values) for this plan")
