"""Text that came from input, made safe to print.

Config names, keys, values and paths reach the terminal in tables and error lines.  A terminal
acts on control characters (ANSI escape sequences recolour, move the cursor, retitle the window
or rewrite what was printed before; a carriage return overwrites a line), so text from input is
printed only through :func:`printable`.  The command line wraps its standard output and error
in :class:`PrintableStream`, which applies it to everything written; the tool's own progress
line, which redraws itself with a carriage return, writes to :func:`terminal` of the stream.

:func:`excerpt` shortens a token from a file the user gave as data to a few characters, so an
error about such a file names the file and the problem without repeating its contents.
"""

from __future__ import annotations

import re

__all__ = ["printable", "excerpt", "PrintableStream", "terminal"]

# ECMA-48 control sequences: CSI (ESC [ params final), OSC and the other strings ended by BEL or
# ST (ESC P/X/]/^/_ ... ), and two-character escapes (ESC and one byte in 0x40-0x5F)
_ESCAPES = re.compile(
    r"\x1b\[[0-?]*[ -/]*[@-~]"
    r"|[\x1b][PX\]^_][^\x07\x1b]*(?:\x07|\x1b\\)?"
    r"|\x9b[0-?]*[ -/]*[@-~]"
    r"|\x1b[@-Z\\-_]?"
)
# C0 controls but tab and newline, DEL, C1 controls, and the Unicode bidirectional overrides
# and isolates (which reorder what follows them on the line)
_CONTROLS = re.compile("[\x00-\x08\x0b-\x1f\x7f-\x9f\u200e\u200f\u202a-\u202e\u2066-\u2069]")


def printable(text, one_line: bool = False) -> str:
    """``text`` with escape sequences removed and other control characters shown as ``?``.

    Parameters
    ----------
    text : object
        Converted with ``str``.
    one_line : bool
        Also turn newlines and tabs into spaces (for the one-line error message).
    """
    s = _ESCAPES.sub("", str(text))
    if one_line:
        s = s.replace("\r\n", " ").replace("\n", " ").replace("\t", " ")
    return _CONTROLS.sub("?", s)


def excerpt(token, n: int = 8) -> str:
    """A few characters of a token read from a file the user gave as data, quoted, e.g.
    ``'root:x:0…' (32 characters)``: enough to find it, not enough to repeat the file."""
    s = printable(token, one_line=True)
    if len(s) <= n:
        return repr(s)
    return f"{s[:n]!r}... ({len(s)} characters)"


class PrintableStream:
    """A text stream that passes everything written through :func:`printable`.

    Every other attribute (``flush``, ``isatty``, ``fileno``, ``encoding``, ...) is the wrapped
    stream's; ``unfiltered`` is the wrapped stream itself.
    """

    def __init__(self, stream):
        self.unfiltered = stream

    def write(self, text: str) -> int:
        self.unfiltered.write(printable(text))
        return len(text)

    def writelines(self, lines) -> None:
        for line in lines:
            self.write(line)

    def __getattr__(self, name):
        return getattr(self.unfiltered, name)


def terminal(stream):
    """The stream under a :class:`PrintableStream` (for the tool's own control characters)."""
    return getattr(stream, "unfiltered", stream)
