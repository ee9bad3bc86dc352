"""How a scanned or typed serial is written before it names a part (the recipe's
`part_by_part.serials:`).  [pure]

    part_by_part:
      serials: {case: upper, drop: ' .'}   # FK2611-07-0001, fk2611-07-0001 and
                                           # 'FK2611-07-0001.' are one part

`case`: `as-scanned` (the default: serials are compared exactly as read), `upper` or `lower`.
`drop`: characters taken out of every serial wherever they are (default none; a space left in a
serial is refused as two codes in one scan). The result is what is checked against
`serial_pattern`, stored as the device name and shown, so a retest typed in lower case meets
the part's earlier attempts instead of becoming a new part.
"""

from __future__ import annotations

from dataclasses import dataclass

CASES = ("as-scanned", "upper", "lower")


@dataclass(frozen=True)
class SerialRule:
    case: str = "as-scanned"
    drop: str = ""

    def __post_init__(self) -> None:
        if self.case not in CASES:
            raise ValueError(f"case must be one of {', '.join(CASES)} (got {self.case!r})")

    def apply(self, serial: str) -> str:
        if self.drop:
            serial = serial.translate({ord(c): None for c in self.drop})
        if self.case == "upper":
            return serial.upper()
        if self.case == "lower":
            return serial.lower()
        return serial

    def describe(self) -> str:
        parts = [] if self.case == "as-scanned" else [f"serials in {self.case} case"]
        if self.drop:
            parts.append(f"without {self.drop!r}")
        return ", ".join(parts)
