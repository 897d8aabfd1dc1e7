"""How the report writes numbers, and how it says why a value is missing.

Every number in the report passes through here, so the whole report keeps one style:
4 significant digits, p-values to 4 decimals (or "< 0.0001"), a true minus sign, counts
grouped by thin spaces. A value that is None becomes a dash with a numbered note that gives
the reason; :class:`Notes` numbers each distinct reason once per section.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

DIGITS = 4
DASH = "—"
MINUS = "\u2212"
THIN = "\u202f"  # narrow no-break space: groups digits, never breaks a number


@dataclass(frozen=True)
class Cell:
    """One printed value. ``mark`` is the note number when the value is missing."""

    text: str
    mark: int | None = None
    note: str | None = None  # the reason, also given as a tooltip on screen
    numeric: bool = True


class Counter:
    """One numbering of notes across the whole report, so marks never repeat."""

    def __init__(self) -> None:
        self.last = 0


class Notes:
    """The notes of one section: each distinct reason gets a number once."""

    def __init__(self, counter: Counter) -> None:
        self._counter = counter
        self._numbers: dict[str, int] = {}
        self.items: list[tuple[int, str]] = []

    def mark(self, reason: str) -> int:
        if reason not in self._numbers:
            self._counter.last += 1
            self._numbers[reason] = self._counter.last
            self.items.append((self._counter.last, reason))
        return self._numbers[reason]

    def cell(self, value, reason: str | None, fmt=None, *, default: str) -> Cell:
        """``value`` printed by ``fmt`` (default :func:`num`), or a dash with its reason."""
        if value is None:
            why = reason or default
            return Cell(DASH, self.mark(why), why)
        return Cell((fmt or num)(value))

    def estimate_cell(self, estimate, low, high, reason: str | None, *, default: str) -> Cell:
        """"−5.95 (−8.01 to −3.89)": an estimate with its interval in one cell; a dash
        with its reason when the estimate is missing, the estimate alone (marked) when
        only the interval is."""
        if estimate is None:
            return self.cell(None, reason, default=default)
        if low is None or high is None:
            why = reason or "the interval could not be computed"
            return Cell(f"{num(estimate)} ({DASH})", self.mark(why), why)
        return Cell(f"{num(estimate)} ({num(low)} to {num(high)})")


def _signed(text: str) -> str:
    return text.replace("-", MINUS)


def num(x: float, digits: int = DIGITS) -> str:
    """``digits`` significant digits in fixed notation; large values as whole numbers and
    tiny or huge ones as a × 10ⁿ, so a column never mixes e-notation with decimals."""
    if isinstance(x, bool):
        return "yes" if x else "no"
    if x == 0:
        return "0"
    magnitude = math.floor(math.log10(abs(x)))
    if magnitude >= 9 or magnitude < -4:
        mantissa, exponent = f"{x:.{digits - 1}e}".split("e")
        return _signed(f"{mantissa} × 10") + _superscript(int(exponent))
    decimals = max(0, digits - 1 - magnitude)
    text = f"{x:.{decimals}f}"
    if decimals == 0 and abs(x) >= 10_000:
        text = group(int(round(x)))
    return _signed(text)


def plain(x: float) -> str:
    """Up to 4 significant digits without trailing zeros: medians and quartiles of counts."""
    text = num(x)
    if "." in text and "×" not in text:
        text = text.rstrip("0").rstrip(".")
    return text


def p_value(p: float) -> str:
    return "< 0.0001" if p < 0.0001 else f"{p:.4f}"


def integer(n: int) -> str:
    return _signed(group(int(n)))


def group(n: int) -> str:
    """Digits in groups of three, by a narrow no-break space (ISO 80000 style)."""
    return f"{n:,}".replace(",", THIN)


def percent(share: float) -> str:
    return f"{100 * share:.1f}{THIN}%"


def change(change: dict) -> str:
    """A change from the first tier, as its size and direction: "19.8 % away from zero",
    "4.1 % toward zero", "112 % with the sign reversed", "none"."""
    if change["direction"] == "none":
        return "none"
    size = DASH if change["relative"] is None else f"{100 * change['relative']:.1f}{THIN}%"
    if change["direction"] == "sign reversed":
        return f"{size}, sign reversed"
    return f"{size} {change['direction']}"


def test_value(test: str, value: float) -> str:
    """A statistic with the distribution it is referred to: "t = −5.02", "χ² = 3.1"."""
    return f"{TEST_SYMBOL.get(test, test)} = {num(value)}"


TEST_SYMBOL = {"t": "t", "z": "z", "F": "F", "chi2": "χ²"}


def df(x: float) -> str:
    """Degrees of freedom: whole numbers as such, fractional ones (Satterthwaite) to 4 digits."""
    return integer(int(x)) if float(x).is_integer() else num(x)


def sentence(text: str) -> str:
    text = text.strip()
    return text if text.endswith((".", "!", "?")) else f"{text}."


def alpha(a: float) -> str:
    return f"{a:.4g}"


def level(confidence: float) -> str:
    return f"{100 * confidence:.4g}{THIN}%"


def short(digest: str) -> str:
    return digest[:12]


_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


def _superscript(n: int) -> str:
    return str(n).translate(_SUPERSCRIPT)
