"""The two ends of a run on the bench: a known safe state before anything else, and the output
off, read back, however the run ended; if the link is gone, one reconnect to switch it off.

Both work on an open `instruments.Connection`. `make_safe` never raises: it runs while another
error is being handled, and its report says on screen whether the output is known to be off.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

from instruments import Connection, InstrumentError, ScpiSmu
from sequencer.model.errors import SafetyError
from sequencer.run.device import switch_off

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Shutdown:
    """How a run left the output: `off` is True only when the instrument read back OFF."""

    off: bool
    reconnected: bool = False
    problem: str = ""

    def describe(self) -> str:
        if self.off and not self.reconnected:
            return "output off (read back from the instrument)"
        if self.off:
            return (
                f"the connection was lost ({self.problem}); reconnected once and switched the "
                "output off (read back)"
            )
        return (
            f"THE OUTPUT MAY STILL BE ON: {self.problem}; switch it off at the instrument "
            "before touching the fixture"
        )


def start_safe(smu: ScpiSmu) -> list[tuple[int, str]]:
    """Output off and level 0 V before anything else is sent; then the error queue emptied (its
    stale entries returned, for the screen and the run record), the dialect's setup sent, off
    and 0 V once more (after whatever the setup did) and the output state read back. A bench
    whose output will not read OFF is refused."""
    smu.all_off()  # every channel of a mainframe
    stale = smu.start_up()
    smu.all_off()
    if smu.output_is_on():
        raise SafetyError(
            f"the output of {smu.resource} still reads ON after it was switched off; "
            "check the instrument before running"
        )
    return stale


def require_interlock(smu: ScpiSmu, peak_v: float) -> None:
    """Before a run that reaches hazardous levels: the lid must read closed now."""
    try:
        closed = smu.interlock_closed()
    except InstrumentError as exc:
        raise SafetyError(
            f"the plan reaches {peak_v:g} V but the fixture interlock cannot be read "
            f"({exc.detail}); refused"
        ) from None
    if not closed:
        raise SafetyError(
            f"the plan reaches {peak_v:g} V and the fixture interlock reads open: close the lid, "
            "then start again"
        )


def make_safe(conn: Connection, level_v: float) -> Shutdown:
    """Ramp down from `level_v`, switch the output off and read it back; when that fails,
    reconnect once and try again. Never raises; the report says what was achieved."""
    problem = _off_and_confirmed(conn.smu, level_v)
    if not problem:
        return Shutdown(off=True)
    log.warning("%s: output off not confirmed (%s); reconnecting once", conn.resource, problem)
    try:
        smu = conn.reconnect()
    except Exception as exc:
        return Shutdown(False, False, f"{problem}; reconnecting failed: {_why(exc)}")
    second = _off_and_confirmed(smu, level_v)
    if second:
        return Shutdown(False, True, f"{problem}; after reconnecting: {second}")
    return Shutdown(True, True, problem)


def _off_and_confirmed(smu: ScpiSmu, level_v: float) -> str:
    """'' when the output reads back OFF, else why not."""
    try:
        switch_off(smu, level_v)
        smu.set_voltage(0.0)
        if smu.output_is_on():
            return "the output still reads ON"
        return ""
    except Exception as exc:  # a broken link, a hung instrument, garbage: all end up here
        smu.safe_state()  # output off first, then 0 V; never raises
        return _why(exc)


def _why(exc: BaseException) -> str:
    return exc.detail if isinstance(exc, InstrumentError) else f"{type(exc).__name__}: {exc}"
