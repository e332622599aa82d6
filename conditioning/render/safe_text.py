"""The one sanitising step between user-supplied text and the terminal.

Names the user supplies (load-case headers, file names, node labels, strings
read back from a saved report) reach the terminal inside the tool's own
sentences. Two things must never happen with them: a control character (an
escape sequence that clears the screen, sets the window title, moves the
cursor; a bidirectional override that reorders what is shown) acting on the
terminal, and rich markup (``[bold red]``, ``[link=...]``, ``[/]``) being
interpreted or crashing the run.

:class:`SafeConsole` is the console every command prints through: markup is
off (a ``[...]`` in any string is shown as written), and every segment of text
has its control characters shown escaped (``\\x1b``, ``\\u202e``) just before it
is written. Rich's own styling codes are control segments, produced after this
step, so colours still work. :func:`shown` is the same escaping for text printed
without rich (the one-line error, log records).
"""

from __future__ import annotations

import re
from typing import Iterable

from rich.console import Console
from rich.segment import Segment

#: Characters shown escaped: C0 controls but newline and tab, DEL, C1 controls (U+0080-U+009F,
#: which include the 8-bit CSI), the Unicode bidirectional embeddings, overrides and isolates
#: (U+202A-U+202E, U+2066-U+2069), and the line and paragraph separators (U+2028, U+2029).
#: Common practice for showing untrusted text on a terminal (the Unicode bidi controls: Unicode
#: Standard Annex #9).
CONTROL = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")


def _escape(match: re.Match) -> str:
    code = ord(match.group())
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def shown(text: object) -> str:
    """``text`` with every control character shown escaped (``\\x1b``), newlines and tabs kept."""
    return CONTROL.sub(_escape, str(text))


def shown_line(text: object) -> str:
    """``text`` as one line: control characters escaped, and newlines and tabs too."""
    return shown(text).replace("\n", "\\n").replace("\t", "\\t")


#: Longest one-line message printed (the project's choice): an error quoting a garbled line of a
#: file (a 100 MB line without a newline) is cut there, the file's name coming first.
MAX_LINE = 1000


def one_line(text: object, limit: int = MAX_LINE) -> str:
    """:func:`shown_line`, cut to ``limit`` characters (an ellipsis and the count of the rest)."""
    line = shown_line(text)
    if len(line) <= limit:
        return line
    return f"{line[:limit]}... ({len(line) - limit:,} more characters)"


class SafeConsole(Console):
    """A rich Console that never interprets markup and escapes control characters in the text it writes."""

    def __init__(self, *args, **kwargs):
        kwargs["markup"] = False
        super().__init__(*args, **kwargs)

    def render(self, renderable, options=None) -> Iterable[Segment]:  # noqa: D102 - rich API
        for segment in super().render(renderable, options):
            if segment.control or not CONTROL.search(segment.text):
                yield segment
            else:
                yield Segment(shown(segment.text), segment.style, segment.control)


def safe_console(**kwargs) -> SafeConsole:
    """The console every command prints through (:class:`SafeConsole`)."""
    return SafeConsole(**kwargs)
