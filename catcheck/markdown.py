"""Text made safe for Markdown (report.md), escaping only what Markdown would misread.

report.md is read twice: raw, in a terminal or a diff, and rendered, as a review comment.
So text is left as it is wherever Markdown would show it unchanged ("A&A", "M <= 1.3
Msun" stay readable in the raw file), and a backslash escape is added only where Markdown
would change it: a ``<`` that could open an HTML tag, an ``&`` that could spell an HTML
entity, a backtick that would open a code span, a backslash that would escape the next
character, and, in table cells, a pipe and a line break.  Escapes are CommonMark
backslash escapes, which every renderer that follows CommonMark (GitHub, GitLab) removes.
"""

from __future__ import annotations

import re
from typing import Any

#: a ``<`` that Markdown could read as the start of an HTML tag, comment or autolink
_TAG_START = re.compile(r"<(?=[A-Za-z/!?])")
#: an ``&`` that Markdown would read as an HTML entity (``&amp;``, ``&#38;``, ``&#x26;``)
_ENTITY = re.compile(r"&(?=#?[0-9A-Za-z]+;)")


def text(value: Any) -> str:
    """``value`` as Markdown text that renders as the characters it holds."""
    escaped = str(value).replace("\\", "\\\\").replace("`", "\\`")
    return _ENTITY.sub(r"\\&", _TAG_START.sub(r"\\<", escaped))


def cell(value: Any) -> str:
    """``value`` as the text of one Markdown table cell (no pipe, no line break)."""
    return " ".join(text(value).replace("|", "\\|").splitlines())


def code(value: Any) -> str:
    """``value`` as an inline code span, whatever backticks it holds (shown verbatim)."""
    content = str(value).replace("\n", " ")
    longest = max((len(run) for run in re.findall(r"`+", content)), default=0)
    fence = "`" * (longest + 1)
    # CommonMark strips one space from each end when both ends have one
    padded = (f" {content} " if longest or (content[:1] == content[-1:] == " ")
              else content)
    return f"{fence}{padded}{fence}"
