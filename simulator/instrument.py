"""The simulated instrument as a whole: SMU, tray, fixture lid, status registers, error queue.

Every SCPI handler calls a method here; the cross-cutting safety rules live here too, so they
hold whichever command reaches them:
- no hot switching: ROUTe:CLOSe is refused (-221) while the output is on above 1 V;
- interlock: with the lid open, a level above the touch-safe threshold (42 V) is refused (-221)
  and not applied, and so is switching the output on with such a level programmed; opening the
  lid while such a level is applied forces the output off.
One lock guards the whole state: several client connections share one instrument.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

from simulator.clock import Clock
from simulator.errors import ESR_OPC, ErrorQueue, ScpiError, esr_bit
from simulator.lot import Lot
from simulator.smu_model import Reading, Smu
from simulator.tray import Tray

CHANNEL_NOISE_STREAM = 0xC4A7  # noise of a closed channel, apart from the lot's streams
QUES_CURRENT = 2  # QUEStionable bit 1: the current limit was active at the last reading
TOUCH_SAFE_V = 42.0
HOT_SWITCH_V = 1.0


@dataclass
class Status:
    """IEEE 488.2 event status and SCPI QUEStionable registers."""

    esr: int = 0
    ese: int = 0
    sre: int = 0
    ques_condition: int = 0
    ques_event: int = 0
    ques_enable: int = 0

    def set_condition(self, value: int) -> None:
        # positive transitions latch into the event register (SCPI default PTR = all ones)
        self.ques_event |= value & ~self.ques_condition
        self.ques_condition = value

    def take_esr(self) -> int:
        value, self.esr = self.esr, 0
        return value

    def take_ques_event(self) -> int:
        value, self.ques_event = self.ques_event, 0
        return value


class Instrument:
    """State and behaviour behind the SCPI commands (see the module docstring for the rules)."""

    def __init__(
        self,
        lot: Lot,
        smu: Smu,
        *,
        version: str,
        touch_safe_v: float = TOUCH_SAFE_V,
        hot_switch_v: float = HOT_SWITCH_V,
    ) -> None:
        self.lock = threading.RLock()
        self.lot = lot
        self.smu = smu
        self.tray = Tray(len(lot))
        self.errors = ErrorQueue()
        self.status = Status()
        self.version = version
        self.touch_safe_v = touch_safe_v
        self.hot_switch_v = hot_switch_v
        self.lid_closed = True
        self.last_reading: Reading | None = None
        self._closures: dict[int, int] = {}

    @property
    def clock(self) -> Clock:
        return self.smu.clock

    # --- common commands and status ---------------------------------------------------------

    def identify(self) -> str:
        return f"CCBENCH,SIMULATED-SMU,SIM{self.lot.seed:06d},{self.version}"

    def reset(self) -> None:
        self.smu.reset()
        self.tray.open_all()
        self.last_reading = None

    def clear_status(self) -> None:
        self.errors.clear()
        self.status.esr = 0
        self.status.ques_event = 0

    def report(self, error: ScpiError) -> None:
        self.errors.push(error.code, error.detail)
        self.status.esr |= esr_bit(error.code)

    def operation_complete(self) -> None:
        self.status.esr |= ESR_OPC  # every operation finishes before the next is parsed

    def status_byte(self) -> int:
        s = self.status
        error_queue = 4 if len(self.errors) else 0
        ques = 8 if s.ques_event & s.ques_enable else 0
        esb = 32 if s.esr & s.ese else 0
        summary = error_queue | ques | esb
        return summary | (64 if summary & s.sre & ~64 else 0)

    # --- source and interlock ---------------------------------------------------------------

    def set_level(self, volts: float) -> None:
        if not self.lid_closed and abs(volts) > self.touch_safe_v:
            raise ScpiError(-221, "interlock open")
        self.smu.set_level(volts)
        self.last_reading = None

    def set_output(self, on: bool) -> None:
        if on and not self.lid_closed and abs(self.smu.level_v) > self.touch_safe_v:
            raise ScpiError(-221, "interlock open")
        self.smu.set_output(on)
        self.last_reading = None

    def set_lid(self, closed: bool) -> None:
        self.lid_closed = closed
        if not closed and self.smu.output_on and abs(self.smu.level_v) > self.touch_safe_v:
            self.set_output(False)

    # --- switch matrix ----------------------------------------------------------------------

    def close_channels(self, channels: tuple[int, ...]) -> None:
        if len(channels) != 1:
            raise ScpiError(-221, "close exactly one channel")
        self.tray.check(channels[0])
        if self.smu.output_on and abs(self.smu.level_v) > self.hot_switch_v:
            raise ScpiError(-221, "output on above 1 V (no hot switching)")
        if self.tray.closed != channels[0]:
            self._reseed_noise(channels[0])
        self.tray.close(channels[0])
        self.last_reading = None

    def _reseed_noise(self, channel: int) -> None:
        # Noise drawn from (seed, channel, how often it was closed): a device measured again on
        # a freshly started simulator (a resumed run) reads what an uninterrupted run reads.
        count = self._closures.get(channel, 0)
        self._closures[channel] = count + 1
        seed = [CHANNEL_NOISE_STREAM, self.lot.seed, channel, count]
        self.smu.rng = np.random.default_rng(seed)

    def open_all(self) -> None:
        self.tray.open_all()
        self.last_reading = None

    # --- measurement ------------------------------------------------------------------------

    def measure(self) -> Reading:
        closed = self.tray.closed
        device = None if closed is None else self.lot.at(closed).device
        reading = self.smu.measure(device)
        self.status.set_condition(QUES_CURRENT if reading.limited else 0)
        self.last_reading = reading
        return reading

    def fetch(self) -> Reading:
        if self.last_reading is None:
            raise ScpiError(-230, "no reading since the last change")
        return self.last_reading
