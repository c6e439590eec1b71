"""Exit codes and the error type every command turns into a one-line message."""

from __future__ import annotations

#: all inputs got a result (including no_edge / over_limit)
EXIT_OK = 0
#: usage error: bad options, unreadable instrument/calibration/manifest, bad values
EXIT_USAGE = 2
#: at least one input was rejected; the others were still processed
EXIT_REJECTED = 3


class CritlineError(Exception):
    """An error the user can act on; printed as one line, never as a traceback."""

    exit_code = EXIT_USAGE


class UsageError(CritlineError):
    exit_code = EXIT_USAGE
