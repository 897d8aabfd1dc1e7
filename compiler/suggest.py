"""Did-you-mean: the nearest known name to a misspelt one, for hints."""

from __future__ import annotations

import difflib
import unicodedata
from typing import Iterable


def nearest(word: object, known: Iterable[str]) -> str | None:
    """The known name closest to ``word``: the same letters in other code points first
    (``é`` as one character or as ``e`` and a combining accent), then in another case, then
    difflib."""
    if not isinstance(word, str) or not word:
        return None
    known = [k for k in known if isinstance(k, str) and k != word]
    composed = _nfc(word)
    for same in (lambda k: _nfc(k) == composed,
                 lambda k: _nfc(k).casefold() == composed.casefold()):
        found = [k for k in known if same(k)]
        if found:
            return found[0]
    close = difflib.get_close_matches(word, known, n=1, cutoff=0.6)
    return close[0] if close else None


def shown(match: str, word: str) -> str:
    """``match`` in backticks, for a hint about ``word``; spelt out in code points when the
    two look the same (they differ only in how their letters are encoded)."""
    if _nfc(match) != _nfc(word):
        return f"`{match}`"
    return (f"`{_code_points(match)}` (the same letters as `{word}`, in other Unicode code "
            "points: names must match code point for code point)")


def level_hints(values: Iterable[str], levels: Iterable[str]) -> str | None:
    """A hint for data values outside the declared levels that are a declared level but for
    case, or but for how its letters are encoded; None when none is."""
    levels = list(levels)
    composed = {_nfc(level): level for level in levels}
    folded = {_nfc(level).casefold(): level for level in levels}
    hints = []
    for value in sorted(values):
        if _nfc(value) in composed:
            hints.append(f"`{_code_points(value)}` is the declared level "
                         f"`{composed[_nfc(value)]}` in other Unicode code points")
        elif _nfc(value).casefold() in folded:
            hints.append(f"`{value}` differs from the declared level "
                         f"`{folded[_nfc(value).casefold()]}` only in case")
    return "; ".join(hints) or None


def did_you_mean(word: object, known: Iterable[str]) -> str | None:
    """A hint such as "did you mean `population`?", or None when nothing is close."""
    match = nearest(word, known)
    return f"did you mean {shown(match, word)}?" if match else None


def _nfc(text: str) -> str:
    return unicodedata.normalize("NFC", text)


def _code_points(text: str) -> str:
    """``text`` with every character beyond ASCII as its escape: ``dur\\xe9e``."""
    return text.encode("ascii", "backslashreplace").decode("ascii")
