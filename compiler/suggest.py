"""Did-you-mean: the nearest known name to a misspelt one, for hints."""

from __future__ import annotations

import difflib
from typing import Iterable


def nearest(word: object, known: Iterable[str]) -> str | None:
    """The known name closest to ``word``: same letters in another case first, then difflib."""
    if not isinstance(word, str) or not word:
        return None
    known = [k for k in known if isinstance(k, str)]
    folded = [k for k in known if k.casefold() == word.casefold() and k != word]
    if folded:
        return folded[0]
    close = difflib.get_close_matches(word, known, n=1, cutoff=0.6)
    return close[0] if close else None


def did_you_mean(word: object, known: Iterable[str]) -> str | None:
    """A hint such as "did you mean `population`?", or None when nothing is close."""
    match = nearest(word, known)
    return f"did you mean `{match}`?" if match else None
