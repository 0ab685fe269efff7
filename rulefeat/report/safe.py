"""What makes user text safe in a shared report: one place for every output format.

Rule names, ``means`` and ``why``, population names, action labels, student ids and the model's repr
come from users and their data; reports carrying them are opened in Markdown viewers, spreadsheets and
browsers.  Every writer of ``report/`` (and the command line's CSV output) passes user text through one
of these functions:

- :func:`markdown_text` escapes Markdown and HTML syntax, so no tag, image or link is live (a
  ``[x](javascript:...)`` shows as text); :func:`code_span` and :func:`fenced` wrap text as code whatever
  backticks it holds.
- :func:`csv_cell` neutralises cells a spreadsheet would run as a formula (starting with ``=``, ``+``,
  ``-``, ``@``, tab or carriage return) with a leading ``'``, as the OWASP guidance on CSV injection
  recommends; number columns are written as numbers.
- :func:`visible` writes control, NUL and bidirectional-override characters as their escapes
  (``\\u202e``), in every format: a right-to-left override cannot make a name read backwards.
- :func:`plot_text` keeps text away from matplotlib's math-text parser (``$`` escaped), so a population
  named ``$\\foo$`` is drawn as written.
- :func:`json_text` writes hidden characters of JSON output as ``\\u`` escapes with four hex digits (the same
  string when read back).

Rule text itself is refused at load when it holds hidden characters (docs/rules.md, "Text limits").
"""

from __future__ import annotations

import re

import pandas as pd

from .. import _frame
from .._text import HIDDEN, visible

__all__ = ["visible", "markdown_text", "code_span", "fenced", "csv_cell", "csv_frame", "plot_text", "json_text",
           "FORMULA_PREFIXES"]

FORMULA_PREFIXES = ("=", "+", "-", "@", "\t", "\r")
# Markdown punctuation that can start code, links, images, tables or emphasis (``<`` ``>`` ``&`` become
# entities); an underscore inside a word (``hasty_error``) starts no emphasis and is left as it is.
_MARKDOWN = re.compile(r"([\\`*\[\]~|]|(?<![0-9A-Za-z])_|_(?![0-9A-Za-z]))")
_BREAKS = re.compile(r"[\r\n]+")


def markdown_text(text) -> str:
    """``text`` as inline Markdown that shows literally: syntax escaped, ``<`` ``>`` ``&`` as entities.

    Line breaks become spaces (one cell, one list item); pipes are escaped too, so the text is safe in a
    table cell.

    >>> print(markdown_text("[x](javascript:alert(1)) <script> hasty_error"))
    \\[x\\](javascript:alert(1)) &lt;script&gt; hasty_error
    """
    text = _BREAKS.sub(" ", visible(str(text)))
    text = text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return _MARKDOWN.sub(r"\\\1", text)


def code_span(text) -> str:
    """An inline Markdown code span showing ``text`` as written, whatever backticks it holds.

    >>> code_span("gap < 3s"), code_span("a `b` c")
    ('`gap < 3s`', '`` a `b` c ``')
    """
    text = " ".join(visible(str(text)).split())  # a code span may not span lines
    runs = [len(run) for run in re.findall(r"`+", text)]
    fence = "`" * (max(runs, default=0) + 1)
    return f"{fence} {text} {fence}" if runs else f"{fence}{text}{fence}"


def fenced(lines, info: str = "text") -> list[str]:
    """A fenced code block around ``lines``, its fence longer than any backtick run inside."""
    body = [visible(str(line), breaks=True) for line in lines]
    runs = [len(run) for line in body for run in re.findall(r"`{3,}", line)]
    fence = "`" * max(3, max(runs, default=0) + 1)
    return [f"{fence}{info}", *body, fence]


def csv_cell(value):
    """A text cell a spreadsheet shows as text: hidden characters and carriage returns escaped, formula
    prefixes neutralised (a line break inside a cell is kept: the CSV writer quotes it).

    >>> csv_cell("=HYPERLINK(1)"), csv_cell("-x"), csv_cell("Zorbleth Hill"), csv_cell(3)
    ("'=HYPERLINK(1)", "'-x", 'Zorbleth Hill', 3)
    """
    if not isinstance(value, str):
        return value
    value = visible(value).replace("\r", "\\x0d")  # a lone CR is not quoted by the csv module: a row break
    return "'" + value if value.startswith(FORMULA_PREFIXES) else value


def csv_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` whose text cells and column names pass :func:`csv_cell`; numbers stay numbers."""
    out = frame.copy()
    for column in out.columns:
        if not (_frame.is_number_dtype(out[column].dtype) or _frame.is_datetime(out[column])):
            out[column] = out[column].map(csv_cell, na_action="ignore")
    out.columns = [csv_cell(str(c)) for c in out.columns]
    return out


def plot_text(text, limit: int = 120) -> str:
    r"""``text`` for a matplotlib label: hidden characters escaped, ``$`` escaped (no math text), cut to
    ``limit`` characters with "…" (a label longer than that squeezes the plot away; tables keep it whole).

    >>> plot_text("$\\foo$"), plot_text("x" * 200)[-3:]
    ('\\$\\foo\\$', 'xx…')
    """
    text = visible(str(text), breaks=True)
    text = text if len(text) <= limit else text[:limit] + "…"
    return text.replace("$", r"\$")


def json_text(text: str) -> str:
    """JSON text with hidden characters written as ``\\u`` escapes with four hex digits (they can only stand inside strings)."""
    return HIDDEN.sub(lambda m: f"\\u{ord(m.group()):04x}", text)
