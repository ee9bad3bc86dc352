"""The switch matrix in front of the SMU: channels 1..N, at most one closed at a time."""

from __future__ import annotations

from simulator.errors import ScpiError


class Tray:
    """Relay channels; closing one first opens any other (break-before-make).

    `history` records every relay action as ("open" | "close", channel), so a test can prove the
    order of operations.
    """

    def __init__(self, count: int) -> None:
        self.count = count
        self.closed: int | None = None
        self.history: list[tuple[str, int]] = []

    def check(self, channel: int) -> None:
        if not 1 <= channel <= self.count:
            raise ScpiError(-222, f"channel {channel} not in 1..{self.count}")

    def close(self, channel: int) -> None:
        self.check(channel)
        if self.closed == channel:
            return
        self.open_all()
        self.closed = channel
        self.history.append(("close", channel))

    def open_all(self) -> None:
        if self.closed is not None:
            self.history.append(("open", self.closed))
            self.closed = None
