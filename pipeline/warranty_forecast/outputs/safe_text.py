"""Text from the data (product names, failure codes, file names, messages that quote them) made safe
for the places it is printed: one log line, a Markdown report, a matplotlib label.

Extract values are untrusted: a product name can hold a newline (a forged log line), a pipe (a broken
report table), `<script>` (HTML in a rendered report) or `$...$` (matplotlib math markup, which can
crash the chart). Every sink escapes at its own door; nothing here changes the tables' values.
"""

from __future__ import annotations

import re

# Control characters (C0, DEL, C1), the Unicode line and paragraph separators and the bidirectional
# overrides and isolates (which can make a line read differently from what it holds), as visible escapes.
_ONE_LINE_ESCAPES = {code: f"\\x{code:02x}" for code in (*range(0x20), 0x7F, *range(0x80, 0xA0))}
_ONE_LINE_ESCAPES.update({code: f"\\u{code:04x}" for code in (0x2028, 0x2029, *range(0x202A, 0x202F), *range(0x2066, 0x206A))})
_ONE_LINE_ESCAPES.update({ord("\n"): "\\n", ord("\r"): "\\r", ord("\t"): "\\t"})

# Markdown: characters that open markup or a table cell; HTML-significant ones become entities.
_MARKDOWN_SPECIAL = re.compile(r"[\\`*\[\]|<>&]")
_HTML_ENTITIES = {"<": "&lt;", ">": "&gt;", "&": "&amp;"}

CHART_LABEL_MAX_CHARACTERS = 60


def one_line(text: object) -> str:
    """`text` with every control or line-breaking character shown as an escape (\\n, \\x1b, \\u2028)."""
    return str(text).translate(_ONE_LINE_ESCAPES)


def markdown_text(text: object) -> str:
    """`text` for a Markdown paragraph or table cell: one line, markup characters escaped, HTML as entities."""
    return _MARKDOWN_SPECIAL.sub(
        lambda match: _HTML_ENTITIES.get(match.group(0), "\\" + match.group(0)), one_line(text)
    )


def chart_text(text: object, max_characters: int = CHART_LABEL_MAX_CHARACTERS) -> str:
    """`text` for a matplotlib title, tick or legend label: literal dollars (no math markup), one line,
    at most `max_characters` (longer text is cut with an ellipsis), and not hidden from legends (matplotlib
    skips labels that start with an underscore)."""
    value = one_line(text)
    if len(value) > max_characters:
        value = value[: max_characters - 1] + "\u2026"
    value = value.replace("$", r"\$")
    return "\u200b" + value if value.startswith("_") else value
