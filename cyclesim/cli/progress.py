"""Progress on stderr for long work, through tqdm (a maintained progress-bar library).

* :class:`StatusLine` shows a study's phase messages (``"coupled cycle 3: change 2.1e-03"``): on a
  terminal one live line that each message replaces, cleared at the end; into a file or pipe every
  message is kept as a line of its own (a log stays readable).
* :func:`count_bar` counts finished items (cycles, iterations) on a terminal, or returns None.
"""

from __future__ import annotations

import sys

__all__ = ["StatusLine", "count_bar"]


def _is_tty(stream) -> bool:
    return bool(getattr(stream, "isatty", lambda: False)())


class StatusLine:
    """A live status line on a terminal (tqdm), plain lines elsewhere; call with a message, then close."""

    def __init__(self, stream=None):
        from ..textsafe import terminal

        self.stream = stream or terminal(sys.stderr)   # redraws itself: the unfiltered stream
        self.bar = None
        if _is_tty(self.stream):
            from tqdm import tqdm

            self.bar = tqdm(total=None, file=self.stream, bar_format="  {desc}", leave=False, dynamic_ncols=True)

    def __call__(self, msg: str) -> None:
        from ..textsafe import printable

        msg = printable(msg, one_line=True)   # text from input never reaches the terminal raw
        if self.bar is not None:
            self.bar.set_description_str(str(msg))
        else:
            self.stream.write(f"  {msg}\n")
            self.stream.flush()

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()
            self.bar = None


def count_bar(total: int | None, desc: str, unit: str, enabled: bool | None = None, stream=None):
    """A tqdm bar of ``total`` items on stderr where ``enabled`` (None: where stderr is a terminal)."""
    from ..textsafe import terminal

    stream = stream or terminal(sys.stderr)
    if enabled is None:
        enabled = _is_tty(stream)
    if not enabled:
        return None
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit=unit, file=stream, leave=False, dynamic_ncols=True)
