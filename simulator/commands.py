"""The command tree, as data: one row per SCPI command pattern, naming its parameter kind and
the instrument operations it runs. Replies: numbers NR3, integers NR1, booleans 1/0.

Simulator-only nodes (documented here, not part of SCPI-1999):
  SIMulation:LID OPEN|CLOSed, SIMulation:LID?  -> OPEN | CLOS   fixture lid (interlock) control
  SIMulation:TRAY:COUNt?                       -> NR1 number of tray channels
  SIMulation:BUSY?                             -> NR3, 13 digits: seconds the instrument worked
                                                  (acquisitions and per-command cost; with the
                                                  virtual clock nothing sleeps, time only adds up)
  SIMulation:LEVels:MAXimum?                   -> NR3 largest |V| ever applied with output on
  SIMulation:LEVels:COUNt?                     -> NR1 number of levels applied with output on
  SIMulation:FAULt "<fault>"                   arm a fault now (text form, simulator/faults.py);
                                                  a bad one is refused with -224 and the reason
  SIMulation:FAULt:CLEar                       disarm every fault
  SIMulation:FAULt:PENDing?                    -> NR1 faults armed and not yet spent
  SIMulation:FAULt:FIRed?                      -> NR1 firings so far
  SIMulation:TEMPerature <celsius>             ambient temperature of the tray (default 27 C,
                                                  the SPICE nominal); + query
  SIMulation:TEMPerature:JUNCtion?             -> NR3 junction temperature (C) of the connected
                                                  device (above the ambient with self-heating)
SIMulation:* units never trigger or count towards a fault.

Source lists and the reading buffer (SCPI-1999 shapes; see instrument.py and dataformat.py):
  [SOURce:]VOLTage:MODE FIXed|LIST, [SOURce:]LIST:VOLTage <v>{,<v>} (+ :POINts?),
  TRIGger[:SEQuence]:COUNt <n>, INITiate[:IMMediate], ABORt, FETCh?, READ? (= INIT + FETCh?),
  FORMat[:DATA] ASCii|REAL[,32], FORMat:BORDer NORMal|SWAPped, FORMat:FIELds VOLT,CURR[,STAT].
"""

from __future__ import annotations

from dataclasses import replace

from simulator.dataformat import FIELDS
from simulator.errors import OptionError, ScpiError
from simulator.faults import parse_fault
from simulator.instrument import Instrument
from simulator.scpi_params import (
    Boolean,
    Channels,
    Choice,
    Choices,
    DataType,
    Numeric,
    NumericList,
    Strings,
)
from simulator.scpi_parser import Command
from simulator.smu_model import CURRENT_RANGES_A, DEFAULT_LIMIT_A, Reading
from simulator.thermal import KELVIN_AT_0C

COMMAND_COST_S = 50e-6  # instrument time to parse and execute one message unit
LEVEL = Numeric("V", -200.0, 200.0, default=0.0)
LIMIT = Numeric("A", 1e-9, 0.1, default=DEFAULT_LIMIT_A)
DELAY = Numeric("S", 0.0, 10.0, default=0.0)
NPLC = Numeric(None, 0.01, 10.0, default=1.0)
RANGE = Numeric("A", 0.0, CURRENT_RANGES_A[-1], least=CURRENT_RANGES_A[0])
LINE = Numeric("HZ", 50.0, 60.0, default=50.0)
SOURCE_MODES = Choice(("VOLTage", "CURRent"))
MAX_POINTS = 10_000  # list length and trigger count; the buffer holds as many readings
COUNT = Numeric(None, 1.0, MAX_POINTS, default=1.0, integer=True)
AMBIENT = Numeric("CEL", -55.0, 150.0, default=27.0)
MASK8 = Numeric(None, 0.0, 255.0, integer=True)
MASK16 = Numeric(None, 0.0, 32767.0, integer=True)


def nr3(value: float) -> str:
    return f"{value:+.6E}"


def flag(value: bool) -> str:
    return "1" if value else "0"


def pair(reading: Reading) -> str:
    return f"{nr3(reading.voltage_v)},{nr3(reading.current_a)}"


def _set_mode(inst: Instrument, mode: str) -> None:
    if mode != "VOLTage":
        raise ScpiError(-224, "this SMU sources voltage only")


def _set_line_frequency(inst: Instrument, hz: float) -> None:
    if hz not in (50.0, 60.0):
        raise ScpiError(-224, "line frequency is 50 or 60 Hz")
    inst.smu.line_frequency_hz = hz


def _set_limit(inst: Instrument, amps: float) -> None:
    inst.smu.limit_a = amps


def _set_delay(inst: Instrument, seconds: float) -> None:
    inst.smu.trigger_delay_s = seconds


def _set_nplc(inst: Instrument, nplc: float) -> None:
    inst.smu.nplc = nplc


def _set_range_auto(inst: Instrument, on: bool) -> None:
    inst.smu.range_auto = on


def _set_sense(inst: Instrument, names: tuple[str, ...]) -> None:
    known = {"VOLT", "VOLTAGE", "CURR", "CURRENT", "VOLT:DC", "VOLTAGE:DC", "CURR:DC", "CURRENT:DC"}
    unknown = [name for name in names if name.upper() not in known]
    if unknown:
        raise ScpiError(-224, f"sense function {unknown[0]}")
    inst.smu.sense_functions = names
    # As a SCPI-1999 instrument does, each reading then carries the sensed functions, in the
    # order named (FORMat:FIELds, our own node, may still choose otherwise afterwards).
    fields = tuple("VOLTage" if name.upper().startswith("VOLT") else "CURRent" for name in names)
    inst.format = replace(inst.format, fields=fields)


def _set_ese(inst: Instrument, mask: float) -> None:
    inst.status.ese = int(mask)


def _set_sre(inst: Instrument, mask: float) -> None:
    inst.status.sre = int(mask) & ~64  # bit 6 (MSS) cannot be enabled (IEEE 488.2)


def _set_ques_enable(inst: Instrument, mask: float) -> None:
    inst.status.ques_enable = int(mask)


def _preset_status(inst: Instrument) -> None:
    inst.status.ques_enable = 0


def _next_error(inst: Instrument) -> str:
    return str(inst.errors.pop())


def _all_errors(inst: Instrument) -> str:
    entries = [str(inst.errors.pop()) for _ in range(len(inst.errors))]
    return ",".join(entries) or str(inst.errors.pop())


def _route_state(inst: Instrument) -> str:
    closed = inst.tray.closed
    return "(@)" if closed is None else f"(@{closed})"


def _route_query(inst: Instrument, channels: tuple[int, ...]) -> str:
    for channel in channels:
        inst.tray.check(channel)
    return ",".join(flag(inst.tray.closed == channel) for channel in channels)


def _set_range(inst: Instrument, amps: float) -> None:
    inst.smu.set_fixed_range(amps)


def _range(inst: Instrument) -> str:
    return nr3(inst.smu.range_a)


def _set_source_mode(inst: Instrument, mode: str) -> None:
    inst.smu.mode = mode
    inst.invalidate()


def _set_list(inst: Instrument, levels: tuple[float, ...]) -> None:
    inst.smu.set_list(levels)


def _set_count(inst: Instrument, count: float) -> None:
    inst.smu.trigger_count = int(count)


def _read(inst: Instrument) -> str:
    return inst.format.render(inst.initiate())


def _set_data(inst: Instrument, kind: str) -> None:
    inst.format = replace(inst.format, data=kind)


def _set_border(inst: Instrument, order: str) -> None:
    inst.format = replace(inst.format, byte_order=order)


def _set_fields(inst: Instrument, names: tuple[str, ...]) -> None:
    inst.format = replace(inst.format, fields=names)


def _short(spelling: str) -> str:
    return "".join(c for c in spelling if not c.islower())


def _set_ambient(inst: Instrument, celsius: float) -> None:
    inst.thermal.set_ambient(celsius + KELVIN_AT_0C)
    inst.invalidate()


def _arm_fault(inst: Instrument, texts: tuple[str, ...]) -> None:
    if len(texts) != 1:
        raise ScpiError(-108, "one quoted fault expected")
    try:
        inst.faults.arm(parse_fault(texts[0]))
    except OptionError as error:
        raise ScpiError(-224, error.problem) from None


COMMANDS: tuple[Command, ...] = (
    # IEEE 488.2 common commands
    Command("*IDN", query=lambda inst: inst.identify()),
    Command("*RST", set=Instrument.reset),
    Command("*CLS", set=Instrument.clear_status),
    Command("*OPC", set=Instrument.operation_complete, query=lambda inst: "1"),
    Command("*WAI", set=lambda inst: None),  # commands run one after another: nothing pending
    Command("*ESR", query=lambda inst: str(inst.status.take_esr())),
    Command("*ESE", _set_ese, lambda inst: str(inst.status.ese), MASK8),
    Command("*SRE", _set_sre, lambda inst: str(inst.status.sre), MASK8),
    Command("*STB", query=lambda inst: str(inst.status_byte())),
    Command("*TST", query=lambda inst: "0"),
    # SYSTem
    Command("SYSTem:ERRor[:NEXT]", query=_next_error),
    Command("SYSTem:ERRor:ALL", query=_all_errors),
    Command("SYSTem:ERRor:COUNt", query=lambda inst: str(len(inst.errors))),
    Command("SYSTem:VERSion", query=lambda inst: "1999.0"),
    Command("SYSTem:LFRequency", _set_line_frequency, lambda i: nr3(i.smu.line_frequency_hz), LINE),
    Command("SYSTem:INTerlock", query=lambda inst: flag(inst.lid_closed)),
    # SOURce
    Command(
        "[SOURce:]FUNCtion:MODE", _set_mode, lambda inst: "VOLT", Choice(("VOLTage", "CURRent"))
    ),
    Command(
        "[SOURce:]VOLTage[:LEVel][:IMMediate][:AMPLitude]",
        Instrument.set_level,
        lambda inst: nr3(inst.smu.level_v),
        LEVEL,
    ),
    Command("[SOURce:]CURRent:LIMit[:AMPLitude]", _set_limit, lambda i: nr3(i.smu.limit_a), LIMIT),
    Command("OUTPut[:STATe]", Instrument.set_output, lambda i: flag(i.smu.output_on), Boolean()),
    # TRIGger and SENSe
    Command("TRIGger[:SEQuence]:DELay", _set_delay, lambda i: nr3(i.smu.trigger_delay_s), DELAY),
    Command("[SENSe:]CURRent[:DC]:NPLCycles", _set_nplc, lambda i: nr3(i.smu.nplc), NPLC),
    Command("[SENSe:]CURRent[:DC]:RANGe[:UPPer]", _set_range, _range, RANGE),
    Command(
        "[SENSe:]CURRent[:DC]:RANGe:AUTO",
        _set_range_auto,
        lambda inst: flag(inst.smu.range_auto),
        Boolean(),
    ),
    Command(
        "[SENSe:]FUNCtion[:ON]",
        _set_sense,
        lambda inst: ",".join(f'"{name}"' for name in inst.smu.sense_functions),
        Strings(),
    ),
    # source lists, trigger and the reading buffer
    Command(
        "[SOURce:]VOLTage:MODE",
        _set_source_mode,
        lambda inst: _short(inst.smu.mode),
        Choice(("FIXed", "LIST")),
    ),
    Command(
        "[SOURce:]LIST:VOLTage",
        _set_list,
        lambda inst: ",".join(nr3(v) for v in inst.smu.list_v),
        NumericList(LEVEL, MAX_POINTS),
    ),
    Command("[SOURce:]LIST:VOLTage:POINts", query=lambda inst: str(len(inst.smu.list_v))),
    Command("TRIGger[:SEQuence]:COUNt", _set_count, lambda i: str(i.smu.trigger_count), COUNT),
    Command("INITiate[:IMMediate]", set=Instrument.initiate),
    Command("ABORt", set=lambda inst: None),  # acquisitions end before the next unit is read
    Command(
        "FORMat[:DATA]",
        _set_data,
        lambda inst: "ASC" if inst.format.data == "ASCii" else "REAL,32",
        DataType(),
    ),
    Command(
        "FORMat:BORDer",
        _set_border,
        lambda inst: _short(inst.format.byte_order),
        Choice(("NORMal", "SWAPped")),
    ),
    Command(
        "FORMat:FIELds",
        _set_fields,
        lambda inst: ",".join(_short(name) for name in inst.format.fields),
        Choices(FIELDS),
    ),
    # measurement instructions
    Command("READ", query=_read),
    Command("FETCh", query=lambda inst: inst.format.render(inst.fetch())),
    Command("MEASure[:SCALar]:CURRent[:DC]", query=lambda inst: nr3(inst.measure().current_a)),
    Command("MEASure[:SCALar]:VOLTage[:DC]", query=lambda inst: nr3(inst.measure().voltage_v)),
    # STATus
    Command("STATus:QUEStionable:CONDition", query=lambda i: str(i.status.ques_condition)),
    Command("STATus:QUEStionable[:EVENt]", query=lambda i: str(i.status.take_ques_event())),
    Command(
        "STATus:QUEStionable:ENABle",
        _set_ques_enable,
        lambda inst: str(inst.status.ques_enable),
        MASK16,
    ),
    Command("STATus:PRESet", set=_preset_status),
    # ROUTe: the tray's switch matrix
    Command("ROUTe:CLOSe", Instrument.close_channels, _route_query, Channels(), Channels()),
    Command("ROUTe:CLOSe:STATe", query=_route_state),
    Command("ROUTe:OPEN:ALL", set=Instrument.open_all),
    # simulator-only nodes
    Command(
        "SIMulation:LID",
        lambda inst, state: inst.set_lid(state == "CLOSed"),
        lambda inst: "CLOS" if inst.lid_closed else "OPEN",
        Choice(("OPEN", "CLOSed")),
    ),
    Command("SIMulation:TRAY:COUNt", query=lambda inst: str(inst.tray.count)),
    Command("SIMulation:BUSY", query=lambda inst: f"{inst.clock.busy_s:+.12E}"),
    Command("SIMulation:LEVels:MAXimum", query=lambda inst: nr3(inst.smu.max_applied_v())),
    Command("SIMulation:LEVels:COUNt", query=lambda inst: str(len(inst.smu.applied_levels))),
    Command(
        "SIMulation:TEMPerature",
        _set_ambient,
        lambda inst: nr3(inst.thermal.ambient_k - KELVIN_AT_0C),
        AMBIENT,
    ),
    Command(
        "SIMulation:TEMPerature:JUNCtion",
        query=lambda inst: nr3(inst.junction_k() - KELVIN_AT_0C),
    ),
    Command("SIMulation:FAULt", _arm_fault, spec=Strings()),
    Command("SIMulation:FAULt:CLEar", set=lambda inst: inst.faults.clear()),
    Command("SIMulation:FAULt:PENDing", query=lambda inst: str(inst.faults.pending)),
    Command("SIMulation:FAULt:FIRed", query=lambda inst: str(len(inst.faults.fired))),
)
