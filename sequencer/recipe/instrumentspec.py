"""The station's instruments: one SMU (`instrument:` with `tray:`) or several (`instruments:`),
each with the tray channels wired to it.

    instrument: {resource: sim, dialect: scpi1999, timeout: 2 s, line_frequency: 50 Hz}
    tray: {channels: 1-20}

    instruments:                       # several SMUs, tested in parallel (sequencer.bench.parallel)
      - {name: bay-1, resource: "TCPIP0::192.0.2.17::5025::SOCKET", channels: 1-10}
      - {name: bay-2, resource: "TCPIP0::192.0.2.18::5025::SOCKET", channels: 11-20}

Either form may give `write_time` and `query_time`, what one SCPI write and one query round
trip cost on that instrument, for the run's time estimate (sequencer.run.estimate). Every entry of
`instruments:` takes the keys of `instrument:` plus `channels` (a count, a list or a range) and
an optional `name`; no channel may belong to two instruments, and all share one line frequency
(the plan's aperture is one number). With `resource: sim` each entry gets its own embedded
simulator serving the same simulated lot, so channel 12 is the same device whichever SMU it is
wired to.
"""

from __future__ import annotations

from dataclasses import dataclass

from sequencer.recipe.linkspec import NO_LINK_SETTINGS, LinkSettings

DEFAULT_DIALECT = "scpi1999"
SIM_RESOURCE = "sim"  # the embedded simulator (instruments.SIM_RESOURCE)


@dataclass(frozen=True)
class InstrumentSpec:
    """One SMU of a station and the tray channels wired to it."""

    name: str
    resource: str
    dialect: str
    timeout_s: float
    line_frequency_hz: float
    channels: tuple[int, ...]
    write_time_s: float | None = None  # what one write / query costs, for estimates
    query_time_s: float | None = None  # (None: sequencer.run.estimate's measured defaults)
    link: LinkSettings = NO_LINK_SETTINGS  # VISA library, terminators, serial line (linkspec)

    def __post_init__(self) -> None:
        if not self.channels:
            raise ValueError("an instrument needs at least one channel")
