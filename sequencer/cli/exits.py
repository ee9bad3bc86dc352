"""Exit codes every command shares, and the error a stop signal ends a run with (light: `ccbench`
reads these before it knows which command runs)."""

from __future__ import annotations

from sequencer.model.errors import CcbenchError

EXIT_INTERRUPTED = 130
EXIT_OUTPUT_MAY_BE_ON = 6  # wins over every other code: the one a supervising script must see


class Stopped(CcbenchError):
    """A signal (Ctrl-C, SIGTERM, SIGHUP, SIGQUIT) ended a run; the message says how the
    output was left."""

    exit_code = EXIT_INTERRUPTED


def why_stopped(exc: BaseException) -> str:
    """'stopped by SIGHUP', say (the signal gate names the signal in the exception)."""
    return str(exc) or ("stopped by Ctrl-C" if isinstance(exc, KeyboardInterrupt) else "stopped")
