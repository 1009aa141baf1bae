"""Read what the command line printed on stderr, as the one-line-error tests need it."""

from __future__ import annotations

COMPILE_NOTICE = "cyclesim: compiling the cycle loop for "


def error_lines(err: str) -> list:
    """The lines of ``err`` without the notice of a first compile of the cycle loop: that notice
    comes only with a cold loop cache (a fresh machine, a new combination of models), so a test
    that counts an error's lines must not depend on which test ran first."""
    return [ln for ln in err.strip().splitlines() if not ln.startswith(COMPILE_NOTICE)]
