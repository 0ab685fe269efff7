"""Small text helpers shared by error messages: did-you-mean and row listings."""

from __future__ import annotations

import difflib
from collections.abc import Iterable, Sequence


def suggest(name: str, options: Iterable[str], n: int = 1) -> list[str]:
    """Return up to ``n`` of ``options`` closest to ``name`` (case-insensitive)."""
    options = [str(o) for o in options]
    lowered = {o.lower(): o for o in options}
    hits = difflib.get_close_matches(str(name).lower(), list(lowered), n=n, cutoff=0.6)
    return [lowered[h] for h in hits]


def did_you_mean(name: str, options: Iterable[str]) -> str:
    """A ' Did you mean 'x'?' sentence, or '' when nothing is close."""
    hits = suggest(name, options)
    return f" Did you mean {hits[0]!r}?" if hits else ""


def show_rows(rows: Sequence[int], limit: int = 5) -> str:
    """Format row numbers as 'rows 3, 7, 9 (and 12 more)'."""
    total = len(rows)
    head = ", ".join(str(int(r)) for r in rows[:limit])
    more = f" (and {total - limit} more)" if total > limit else ""
    word = "row" if total == 1 else "rows"
    return f"{word} {head}{more}"
