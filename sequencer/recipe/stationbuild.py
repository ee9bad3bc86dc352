"""A validated station file (format.station.StationFile) -> the frozen parts of recipe.load.Station.

The format checked every key, type, unit and the rules of each section; what is left here are
the rules that span instruments (cross-field: no shared channel, no repeated name, no
instrument named twice, one line frequency) and the station folder a dialect path is relative to.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from sequencer.model.accuracy import DEFAULT_ACCURACY, Accuracy, AccuracyTable, RangeAccuracy
from sequencer.recipe.chamberspec import ChamberSpec
from sequencer.recipe.fields import show
from sequencer.recipe.format import station as form
from sequencer.recipe.format.errors import validated
from sequencer.recipe.instrumentspec import SIM_RESOURCE, InstrumentSpec
from sequencer.recipe.limits import Limits
from sequencer.recipe.linkspec import LinkSettings, SerialSettings
from sequencer.recipe.resultsdb import SharedDatabase
from sequencer.recipe.yamlsource import Source


def instrument_specs(
    source: Source, station: form.StationFile, folder: Path
) -> tuple[InstrumentSpec, ...]:
    """Every SMU with its channels, from `instrument:` + `tray:` or from `instruments:`."""
    if station.instruments is None:
        assert station.instrument is not None and station.tray is not None  # the format's rule
        return (_spec("smu", station.instrument, station.tray.channels, folder),)
    specs = tuple(
        _spec(
            f"smu{index + 1}" if entry.name is None else entry.name, entry, entry.channels, folder
        )
        for index, entry in enumerate(station.instruments)
    )
    check_instruments_together(source, specs)
    return specs


def _spec(
    name: str, entry: form.Instrument, channels: tuple[int, ...], folder: Path
) -> InstrumentSpec:
    dialect = entry.dialect
    if dialect != form.DEFAULT_DIALECT and not Path(dialect).is_absolute():
        dialect = str((folder / dialect).resolve())
    return InstrumentSpec(
        name,
        entry.resource,
        dialect,
        entry.timeout,
        entry.line_frequency,
        channels,
        entry.write_time,
        entry.query_time,
        link=_link(entry),
    )


def _link(entry: form.Instrument) -> LinkSettings:
    serial = entry.serial
    line = None if serial is None else SerialSettings(
        serial.baud, serial.data_bits, serial.parity, serial.stop_bits, serial.flow_control,
        serial.echo,
    )  # fmt: skip
    return LinkSettings(entry.visa_library, entry.read_termination, entry.write_termination, line)


def check_instruments_together(source: Source, specs: tuple[InstrumentSpec, ...]) -> None:
    """Cross-field rule: no channel on two instruments, no name twice, one line frequency (the
    plan's aperture is one number)."""
    for index, spec in enumerate(specs):
        where = f"instruments[{index}]"
        for other in specs[:index]:
            shared = sorted(set(spec.channels) & set(other.channels))
            if shared:
                problem = f"shares channel {shared[0]} with {other.name}"
                raise source.error(f"{where}.channels", problem)
            if other.name == spec.name:
                raise source.error(f"{where}.name", f"repeats the instrument name '{spec.name}'")
            if spec.resource != SIM_RESOURCE and same_resource(other.resource, spec.resource):
                taken = f"names the instrument {other.name} already uses ({show(other.resource)})"
                raise source.error(f"{where}.resource", f"{taken}; two workers would drive one SMU")
            if other.line_frequency_hz != spec.line_frequency_hz:
                problem = f"must be the same for every instrument ({other.line_frequency_hz:g} Hz)"
                raise source.error(f"{where}.line_frequency", problem)


def same_resource(a: str, b: str) -> bool:
    """Two VISA resource strings that open the same instrument: VISA names are case-blind and
    board 0 may be left out (`TCPIP::h::5025::SOCKET` is `tcpip0::h::5025::socket`)."""
    return _resource_key(a) == _resource_key(b)


def _resource_key(resource: str) -> tuple[str, ...]:
    interface, *rest = resource.strip().upper().split("::")
    board = interface.rstrip("0123456789")
    number = interface[len(board) :] or "0"
    return (board, str(int(number)), *(part.strip() for part in rest))


def station_limits(limits: form.StationLimits) -> Limits:
    return Limits(
        limits.max_voltage,
        limits.max_current,
        limits.max_power,
        limits.touch_safe_v,
        limits.touch_safe_reason.strip(),
    )


def simulator_options(sim: form.Simulator) -> tuple[tuple[str, object], ...]:
    """The options written, in the format's order; faults as written (the simulator reads them)."""
    out: list[tuple[str, object]] = []
    for key in form.Simulator.file_keys():
        if key not in sim.model_fields_set:
            continue
        value = getattr(sim, key)
        if key == "faults":
            value = tuple(_fault(f) for f in value)
        out.append((key, value))
    return tuple(out)


def _fault(fault: Any) -> object:
    if isinstance(fault, str):
        return fault
    return written(fault)


def written(section: Any) -> dict[str, Any]:
    """The keys a file wrote in a section, in the format's order, with their values as
    validated (a number as written: the simulators read them)."""
    return {
        k: getattr(section, k) for k in type(section).model_fields if k in section.model_fields_set
    }


def accuracy(section: form.Accuracy | None) -> Accuracy:
    if section is None:
        return DEFAULT_ACCURACY
    current = _table(section.current) or DEFAULT_ACCURACY.current
    voltage = _table(section.voltage) or DEFAULT_ACCURACY.voltage
    return Accuracy(current, voltage)


def _table(rows: list[Any] | None) -> AccuracyTable | None:
    if rows is None:
        return None
    return AccuracyTable(tuple(RangeAccuracy(r.range, r.gain, r.offset) for r in rows))


def shared_database(value: str | form.ResultsDatabase | None) -> SharedDatabase | None:
    if value is None:
        return None
    if isinstance(value, str):
        return SharedDatabase(value)
    return SharedDatabase(value.url, value.wait_at_end)


def chamber(section: form.Chamber | None) -> ChamberSpec | None:
    if section is None:
        return None
    sim = section.simulator
    options = (
        ()
        if sim is None
        else tuple(
            (key, tuple(value) if key == "faults" else value) for key, value in written(sim).items()
        )
    )
    return ChamberSpec(
        resource=section.resource,
        dialect=section.dialect,
        timeout_s=section.timeout,
        lowest_c=section.lowest,
        highest_c=section.highest,
        rate_k_per_s=section.rate,
        safe_c=None if section.safe == "off" else float(section.safe),
        simulator=options,
    )


def parse_accuracy(source: Source, value: Any) -> Accuracy:
    """A station's `accuracy:` section alone (a station text stored with a run)."""
    if value is None:
        return DEFAULT_ACCURACY
    return accuracy(validated(form.Accuracy, source, value, "accuracy"))


def parse_results_database(source: Source, value: Any) -> SharedDatabase | None:
    """A station's `results_database:` alone (a station text stored with a run)."""
    if value is None:
        return None
    return shared_database(validated(form.SharedStore, source, value, "results_database"))
