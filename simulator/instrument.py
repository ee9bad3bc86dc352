"""The simulated instrument as a whole: SMU, tray, fixture lid, status registers, error queue,
reading buffer and the junction temperatures of the tray's devices.

Every SCPI handler calls a method here; the cross-cutting safety rules live here too, so they
hold whichever command reaches them:
- no hot switching: ROUTe:CLOSe is refused (-221) while the output is on above 1 V;
- interlock: with the lid open, a level above the touch-safe threshold (42 V) is refused (-221)
  and not applied, and so is switching the output on with such a level programmed, or
  starting a list that holds one; opening the lid while such a level is applied forces the
  output off and queues -300 "Device-specific error;interlock opened, output switched off" (so
  a driver polling the error queue sees it).
Acquisitions (INITiate, READ?, MEASure?) fill the reading buffer that FETCh? answers; any change
of level, output, routing or device empties it (FETCh? then gives -230). In LIST mode INITiate
steps through the list, one acquisition per trigger (TRIGger:COUNt of them, wrapping round), and
leaves the output at the last level it applied.
Faults (simulator/faults.py) reach the instrument through `apply_fault`; a device fault
replaces the device of one channel for the rest of the session.
One lock guards the whole state: several client connections share one instrument.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

from simulator.clock import Clock
from simulator.dataformat import DataFormat
from simulator.devices import TNOM_K, Device, open_circuit, short_circuit
from simulator.errors import ESR_OPC, ErrorQueue, ScpiError, esr_bit
from simulator.faults import FaultSchedule, Firing
from simulator.lot import Lot
from simulator.smu_model import Reading, Smu, TruthArrays
from simulator.thermal import Thermal
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
        faults: FaultSchedule | None = None,
        thermal: Thermal | None = None,
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
        self.buffer: list[Reading] = []  # the acquisitions FETCh? answers
        self.format = DataFormat()
        self.faults = faults if faults is not None else FaultSchedule(lot.seed)
        self.replaced: dict[int, Device] = {}  # channel -> device put there by a fault
        self._closures: dict[int, int] = {}  # channel -> times closed (seeds its noise)
        self.thermal = thermal or Thermal(TNOM_K, now=lambda: self.clock.now_s)

    @property
    def last_reading(self) -> Reading | None:
        return self.buffer[-1] if self.buffer else None

    @property
    def clock(self) -> Clock:
        return self.smu.clock

    # --- common commands and status ---------------------------------------------------------

    def identify(self) -> str:
        return f"CCBENCH,SIMULATED-SMU,SIM{self.lot.seed:06d},{self.version}"

    def reset(self) -> None:
        self.smu.reset()
        self.tray.open_all()
        self.format = DataFormat()
        self.invalidate()

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
        self.invalidate()

    def set_output(self, on: bool) -> None:
        if on and not self.lid_closed and abs(self.smu.level_v) > self.touch_safe_v:
            raise ScpiError(-221, "interlock open")
        self.smu.set_output(on)
        self.invalidate()

    def set_lid(self, closed: bool) -> None:
        self.lid_closed = closed
        if not closed and self.smu.output_on and abs(self.smu.level_v) > self.touch_safe_v:
            self.set_output(False)
            self.report(ScpiError(-300, "interlock opened, output switched off"))

    # --- faults -----------------------------------------------------------------------------

    def apply_fault(self, firing: Firing) -> None:
        """Carry out an instrument fault (wire faults are the connection's business)."""
        kind = firing.kind
        if kind == "lid-open":
            self.set_lid(False)
        elif kind in ("device-open", "device-short"):
            channel = firing.spec.channel or firing.channel
            if channel is not None:
                broken = open_circuit if kind == "device-open" else short_circuit
                self.replaced[channel] = broken()
                self.invalidate()
        elif kind == "error":
            raise ScpiError(firing.spec.code, f"injected fault on {firing.header}")

    def device_at(self, channel: int) -> Device:
        return self.replaced.get(channel) or self.lot.at(channel).device

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
        self.invalidate()

    def _reseed_noise(self, channel: int) -> None:
        # Noise drawn from (seed, channel, how often it was closed): a device measured again on
        # a freshly started simulator (a resumed run) reads what an uninterrupted run reads.
        count = self._closures.get(channel, 0)
        self._closures[channel] = count + 1
        seed = [CHANNEL_NOISE_STREAM, self.lot.seed, channel, count]
        if self.smu.noise_seed:
            seed.append(self.smu.noise_seed)
        self.smu.rng = np.random.default_rng(seed)
        self.smu.new_contact()

    def open_all(self) -> None:
        self.tray.open_all()
        self.invalidate()

    # --- measurement ------------------------------------------------------------------------

    def measure(self) -> Reading:
        """One acquisition at the present level; the buffer then holds just it."""
        self.buffer = [self._acquire()]
        return self.buffer[0]

    def initiate(self) -> list[Reading]:
        """TRIGger:COUNt acquisitions, at the fixed level or stepping through the list."""
        smu = self.smu
        levels = smu.list_v if smu.mode == "LIST" else (smu.level_v,)
        if not levels:
            raise ScpiError(-221, "LIST mode with an empty list")
        hazardous = max(abs(v) for v in levels) > self.touch_safe_v
        if smu.mode == "LIST" and hazardous and not self.lid_closed:
            raise ScpiError(-221, "interlock open")
        steps = [levels[k % len(levels)] for k in range(smu.trigger_count)]
        solved = self._solved_ahead(steps) if smu.mode == "LIST" else None
        if solved is not None:
            readings = smu.measure_list(steps, solved)
            for reading in readings:
                self.status.set_condition(QUES_CURRENT if reading.limited else 0)
            self.buffer = readings
            return readings
        readings = []  # collected apart: a fault mid-list must not lose the points before it
        for volts in steps:
            if smu.mode == "LIST":
                self._step_to(volts)
            readings.append(self._acquire())
        self.buffer = readings
        return readings

    def fetch(self) -> list[Reading]:
        if not self.buffer:
            raise ScpiError(-230, "no reading since the last change")
        return self.buffer

    def junction_k(self) -> float:
        return self.thermal.temperature(self.tray.closed)

    def _step_to(self, volts: float) -> None:
        if not self.lid_closed and abs(volts) > self.touch_safe_v:
            return  # the lid opened mid-list: the output is off and stays off
        self.smu.set_level(volts)
        self._refresh_power()

    def _solved_ahead(self, steps: list[float]) -> TruthArrays | None:
        """The whole list solved at once, when nothing can change during the run (no
        self-heating, no fault waiting for a point, and so no power or lid to follow from
        point to point); else None: point by point."""
        closed = self.tray.closed
        if closed is None or not self.smu.output_on or self.thermal.heating:
            return None
        if self.faults.waits_for_points:
            return None
        device = self.device_at(closed)
        return self.smu.true_list(device, steps, self.junction_k())

    def _acquire(self) -> Reading:
        closed = self.tray.closed
        for firing in self.faults.on_point(closed):
            try:
                self.apply_fault(firing)
            except ScpiError as error:  # on a point, an error is queued; the reading goes on
                self.report(error)
        device = None if closed is None else self.device_at(closed)
        reading = self.smu.measure(device, self.junction_k())
        self.status.set_condition(QUES_CURRENT if reading.limited else 0)
        self._refresh_power()
        return reading

    def invalidate(self) -> None:
        """A level, output, route or device changed: old readings are stale, power moves."""
        self.buffer = []
        self._refresh_power()

    def _refresh_power(self) -> None:
        thermal = self.thermal
        if not thermal.heating:
            return
        closed = self.tray.closed
        for channel in thermal.heated_channels():
            if channel != closed:
                thermal.set_power(channel, 0.0)
        if closed is not None:
            device = self.device_at(closed)
            volts, amps, _ = self.smu.true_output(device, thermal.temperature(closed))
            thermal.set_power(closed, volts * amps)
