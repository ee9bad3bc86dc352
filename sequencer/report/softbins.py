"""Soft bin names -> numbers, for STDF (whose SOFT_BIN is a number, 0 to 32767) and the tables.

The numbers stay the same from lot to lot and from run to run of one recipe:

- 1 to 999: the named bins of the recipe's `bins:` list, in the order the recipe lists them
  (a name used by several rules keeps its first number);
- 1000 to 1009: the judge's general words, in the fixed order of `GENERAL`;
- 1100 + 10 x (figure's place in FIGURES) + (kind's place in FIGURE_KINDS): the reasons the
  judge gives per figure ("regulated current below min" is 1101, "limiting voltage above max"
  1112);
- 20000 to 29999: any other name, from a CRC-32 of its text (the next free number on a clash,
  the only case in which a number depends on the other names present).
"""

from __future__ import annotations

import zlib
from collections.abc import Iterable

from sequencer.model.judgesettings import FIGURE_INFO, FIGURES, BinRule

GENERAL = (
    "pass", "fail", "guard-band", "aborted", "open", "short", "compliance-limited",
    "oscillating", "non-monotonic", "incomplete",
)  # fmt: skip
FIGURE_KINDS = ("missing", "below min", "above max", "unproven", "in guard band")
NAMED_LAST = 999
OTHER_FIRST, OTHER_SPAN = 20000, 10000


def fixed_numbers() -> dict[str, int]:
    """The numbers of the judge's own words (independent of any recipe)."""
    table = {word: 1000 + k for k, word in enumerate(GENERAL)}
    for i, figure in enumerate(FIGURES):
        label = FIGURE_INFO[figure][2]
        for j, kind in enumerate(FIGURE_KINDS):
            table[f"{label} {kind}"] = 1100 + 10 * i + j
    return table


def soft_bin_numbers(rules: Iterable[BinRule], names: Iterable[str]) -> dict[str, int]:
    """A number for every named rule and every name in `names`."""
    table: dict[str, int] = {}
    for rule in rules:
        if rule.name and rule.name not in table:
            if len(table) == NAMED_LAST:
                raise ValueError(f"more than {NAMED_LAST} named bins")
            table[rule.name] = len(table) + 1
    for word, number in fixed_numbers().items():
        table.setdefault(word, number)
    used = set(table.values())
    for name in sorted(set(names) - set(table)):
        number = OTHER_FIRST + zlib.crc32(name.encode()) % OTHER_SPAN
        while number in used:
            number = OTHER_FIRST + (number - OTHER_FIRST + 1) % OTHER_SPAN
        table[name] = number
        used.add(number)
    return table
