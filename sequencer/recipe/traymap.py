"""Which serial each tray channel holds, given at run time.  [pure but for reading the map]

    ccbench run recipe.yaml --serials tray-17.csv          # channel,serial per line
    ccbench run recipe.yaml --first-serial FK2611-07-0041  # channels in tray order, counted up

Without either a tray device is named `<lot>-NNN` by its channel. A map must name every channel
of the tray once and no serial twice; each serial is written as the recipe's `part_by_part`
`serials:` rule says and must match its `serial_pattern`, the same as a scanned serial, so a
part measured on the tray and again part by part is one part.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from pathlib import Path

from sequencer.model.errors import RecipeError
from sequencer.recipe.fields import MAX_TEXT
from sequencer.recipe.retest import RetestPolicy

MAX_MAP_BYTES = 16 << 20  # a million channels of short serials
_COUNTER = re.compile(r"^(.*?)(\d+)$")


def read_serial_map(path: Path, channels: Sequence[int], policy: RetestPolicy) -> dict[int, str]:
    """The `--serials` file: `channel,serial` lines (a header line, blank lines and lines
    starting with # are skipped). One RecipeError names the file, line and what to do."""
    where = str(path)
    try:
        raw = path.read_bytes()[: MAX_MAP_BYTES + 1]
    except OSError as exc:
        raise RecipeError(where, None, "", f"cannot be read ({exc.strerror or exc})") from None
    if len(raw) > MAX_MAP_BYTES:
        raise RecipeError(where, None, "", f"is larger than {MAX_MAP_BYTES >> 20} MiB")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise RecipeError(where, None, "", f"is not UTF-8 text (byte {exc.start})") from None
    named: dict[int, str] = {}
    lines: dict[int, int] = {}
    for number, line in enumerate(text.splitlines(), start=1):
        cells = [c.strip() for c in line.split(",")]
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        if number == 1 and cells[0].lower() == "channel":
            continue
        if len(cells) != 2 or not cells[0].isascii() or not cells[0].isdecimal():
            raise RecipeError(where, number, "", "write 'channel,serial' (a whole channel number)")
        channel = int(cells[0])
        if channel in named:
            raise RecipeError(
                where, number, "", f"channel {channel} again (first at line {lines[channel]})"
            )
        named[channel], lines[channel] = _serial(cells[1], policy, where, number), number
    check_serials(named, channels, where, lines)
    return named


def counted_serials(first: str, channels: Sequence[int], policy: RetestPolicy) -> dict[int, str]:
    """`--first-serial`: the tray's channels in order, from `first` counted up in its last
    digits, their width kept (FK2611-07-0998, -0999, -1000)."""
    where = "command line"
    start = _serial(first, policy, where, None, field="--first-serial")
    found = _COUNTER.match(start)
    if found is None:
        raise RecipeError(where, None, "--first-serial", "must end in digits to count up from")
    stem, digits = found.groups()
    names = {}
    for k, channel in enumerate(channels):
        names[channel] = _serial(
            f"{stem}{int(digits) + k:0{len(digits)}d}", policy, where, None, field="--first-serial"
        )
    return names


def check_serials(
    named: dict[int, str], channels: Sequence[int], where: str, lines: dict[int, int] | None = None
) -> None:
    """Every tray channel named once, nothing else, no serial twice."""
    tray = set(channels)
    for channel in named:
        if channel not in tray:
            raise RecipeError(
                where, (lines or {}).get(channel), "", f"channel {channel} is not on the tray"
            )
    missing = [c for c in channels if c not in named]
    if missing:
        raise RecipeError(
            where, None, "", f"names no serial for channel {missing[0]}"
            + (f" (and {len(missing) - 1} more)" if len(missing) > 1 else "")
            + "; list every channel of the tray",
        )  # fmt: skip
    seen: dict[str, int] = {}
    for channel in channels:
        serial = named[channel]
        if serial in seen:
            raise RecipeError(
                where, (lines or {}).get(channel), "",
                f"serial {serial!r} is on channels {seen[serial]} and {channel}",
            )  # fmt: skip
        seen[serial] = channel


def _serial(text: str, policy: RetestPolicy, where: str, line: int | None, field: str = "") -> str:
    serial = policy.serials.apply(text)
    if not serial:
        raise RecipeError(where, line, field, "a serial is empty")
    if len(serial) > MAX_TEXT or not serial.isprintable() or any(c.isspace() for c in serial):
        raise RecipeError(where, line, field, f"{serial[:40]!r} is not a serial (one short code)")
    if policy.serial_pattern and not re.fullmatch(policy.serial_pattern, serial):
        raise RecipeError(
            where, line, field,
            f"{serial!r} does not match this recipe's serials ({policy.serial_pattern})",
        )  # fmt: skip
    return serial
