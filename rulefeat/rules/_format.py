"""Source spans and the one helper that formats every rule error with a caret line."""

from __future__ import annotations

from typing import NamedTuple

# Lines longer than this are shown as a window around the span, so a huge rule stays readable.
_WIDTH = 100


class Span(NamedTuple):
    """Half-open character range ``[start, end)`` of a token or node in the rule text."""

    start: int
    end: int

    def join(self, other: Span) -> Span:
        return Span(min(self.start, other.start), max(self.end, other.end))


def _printable(text: str) -> str:
    # One character out per character in, so the caret stays aligned under its column.
    return "".join(c if c.isprintable() or c == "\t" else "?" for c in text)


def caret_lines(text: str, span: Span) -> str:
    """The source line holding ``span`` and a line of carets under the span."""
    start = max(0, min(span.start, len(text)))
    end = max(start + 1, min(span.end, len(text)))
    line_start = text.rfind("\n", 0, start) + 1
    line_end = text.find("\n", start)
    line_end = len(text) if line_end < 0 else line_end
    line = text[line_start:line_end]
    col, width = start - line_start, max(1, min(end, line_end) - start)
    lead = ""
    if len(line) > _WIDTH:
        left = max(0, col - _WIDTH // 2)
        right = min(len(line), left + _WIDTH)
        prefix, suffix = ("..." if left else ""), ("..." if right < len(line) else "")
        width = max(1, min(width, right - col))
        line, col = prefix + line[left:right] + suffix, col - left + len(prefix)
    if "\n" in text:
        lead = f"line {text.count(chr(10), 0, line_start) + 1}: "
    shown = _printable(line)
    pad = "".join("\t" if c == "\t" else " " for c in shown[:col])
    return f"    {lead}{shown}\n    {' ' * len(lead)}{pad}{'^' * width}"


def message(text: str, *, rule: str | None = None, source: str | None = None, span: Span | None = None) -> str:
    """Format an error: which rule, what is wrong, and the rule text with a caret under ``span``."""
    where = f"Rule {rule!r}: " if rule else ""
    out = f"{where}{text}"
    if source is not None and span is not None:
        out += "\n" + caret_lines(source, span)
    return out


def error(cls: type[Exception], text: str, *, rule: str | None = None, source: str | None = None,
          span: Span | None = None) -> Exception:
    """Build an error of class ``cls`` whose message carries the caret line; keeps the parts as attributes."""
    exc = cls(message(text, rule=rule, source=source, span=span))
    exc.rule, exc.span, exc.source = rule, span, source
    return exc
