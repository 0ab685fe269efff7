"""Small text helpers shared by error messages and reports: did-you-mean, row listings, hidden characters."""

from __future__ import annotations

import difflib
import re
from collections.abc import Iterable, Sequence

# difflib compares the name with every option; past this many options only a bounded set of
# candidates is compared, so an error on a field with a million labels still comes back at once.
_DIRECT_LIMIT = 2000
_EDIT_CHARS = "abcdefghijklmnopqrstuvwxyz0123456789_-. "


def suggest(name: str, options: Iterable[str], n: int = 1) -> list[str]:
    """Return up to ``n`` of ``options`` closest to ``name`` (case-insensitive).

    With more than 2,000 options the comparison runs on a bounded candidate set: every option
    within one edit (a character deleted, inserted, replaced or two swapped) of ``name``, plus
    up to 2,000 options sharing its first three characters or its length (within one), found
    in one pass that stops once it has them (no pairwise comparison over all options).
    """
    if not isinstance(options, (dict, set, frozenset, list, tuple)):
        options = list(options)
    pool = options if len(options) <= _DIRECT_LIMIT else _candidates(str(name), options)
    lowered: dict[str, str] = {}
    for o in pool:
        text = str(o)
        lowered.setdefault(text.lower(), text)
    hits = difflib.get_close_matches(str(name).lower(), list(lowered), n=n, cutoff=0.6)
    return [lowered[h] for h in hits]


def _candidates(name: str, options) -> list:
    members = options if isinstance(options, (dict, set, frozenset)) else set(options)
    near = [e for e in _one_edit(name) | _one_edit(name.lower()) if e in members]
    prefix, size, cap = name[:3].lower(), len(name), _DIRECT_LIMIT // 2
    same_start, same_size = [], []
    for option in options:
        text = str(option)
        if len(same_start) < cap and text[:3].lower() == prefix:
            same_start.append(text)
        elif len(same_size) < cap and abs(len(text) - size) <= 1:
            same_size.append(text)
        if len(same_start) + len(same_size) >= _DIRECT_LIMIT:
            break
    return list(dict.fromkeys([*near, *same_start, *same_size]))


def _one_edit(word: str) -> set[str]:
    chars = set(_EDIT_CHARS) | set(word)
    splits = [(word[:i], word[i:]) for i in range(len(word) + 1)]
    out = {a + b[1:] for a, b in splits if b}
    out |= {a + b[1] + b[0] + b[2:] for a, b in splits if len(b) > 1}
    out |= {a + c + b[1:] for a, b in splits if b for c in chars}
    out |= {a + c + b for a, b in splits for c in chars}
    return out


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


# Characters that change how text looks without showing themselves: C0/C1 controls (NUL included) and DEL,
# the bidirectional embeddings, overrides, isolates and marks, and the Unicode line / paragraph separators.
HIDDEN = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029"
                    "\u202a-\u202e\u2066-\u2069]")
_HIDDEN_OR_BREAK = re.compile(HIDDEN.pattern[:-1] + "\t\n\r]")


def _escape(match: re.Match) -> str:
    code = ord(match.group())
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def visible(text: str, *, breaks: bool = False) -> str:
    r"""``text`` with every hidden character written as its escape (``\u202e``, ``\x00``), so it shows.

    Tabs and line breaks are kept unless ``breaks`` is true (then they are escaped too).

    >>> print(visible("abc\u202edef\x00"))
    abc\u202edef\x00
    """
    return (_HIDDEN_OR_BREAK if breaks else HIDDEN).sub(_escape, str(text))


def first_hidden(text: str) -> tuple[int, str] | None:
    """Position and escape of the first hidden character of ``text``, or None."""
    found = HIDDEN.search(text)
    return None if found is None else (found.start(), _escape(found))
