"""User-facing errors.

Every error a user can cause or meet is one of these.  The command line prints
``str(error)`` as one line and exits with status 2; ``--debug`` shows the
traceback instead.
"""

from __future__ import annotations


class CyclesimError(Exception):
    """Base of all errors that the command line reports as one line."""

    exit_code = 2


class ConfigError(CyclesimError):
    """A configuration value is missing, unknown, of the wrong type or out of range."""


class PluginError(CyclesimError):
    """A plug-in could not be found, loaded, or misbehaved (raised, NaN, wrong shape)."""


class SolverError(CyclesimError):
    """The integration failed; the message names the crank angle and the submodel."""


class InputFileError(CyclesimError):
    """A data file (lift table, trace file, ...) is malformed."""
