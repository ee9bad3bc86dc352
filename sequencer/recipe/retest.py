"""Part-by-part testing: the recipe's `part_by_part:` section and its retest policy.  [pure]

    part_by_part:
      serial_pattern: 'FK2611-07-[0-9]{4}'  # every scanned serial must match (optional)
      retests: 1             # tests of a part beyond its first (aborted tests do not count)
      retest_passed: false   # false: a part that passed is refused as a duplicate
      result: last           # last | best | first: which attempt is the part's result

Every attempt is stored (device = the serial, pass = the attempt number). When an attempt is
stored it is marked `standing` if it became the part's result then; the part's result is its
latest standing attempt, so a reader needs no policy to find it, and nothing stored is rewritten.
An aborted attempt (a trip, a stop) never uses up a retest and stands only while the part has
no completed attempt.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from sequencer.recipe.serials import SerialRule

RESULTS = ("last", "best", "first")


@dataclass(frozen=True)
class RetestPolicy:
    retests: int = 1
    retest_passed: bool = False
    result: str = "last"
    serial_pattern: str = ""
    serials: SerialRule = field(default_factory=SerialRule)  # how a scan is written

    def __post_init__(self) -> None:
        if not 0 <= self.retests <= 100:
            raise ValueError(f"retests must be 0 to 100 (got {self.retests})")
        if self.result not in RESULTS:
            raise ValueError(f"result must be one of {', '.join(RESULTS)} (got {self.result!r})")

    def describe(self) -> str:
        again = "any part" if self.retest_passed else "parts that did not pass"
        times = f"{self.retests} retest" + ("s" if self.retests != 1 else "")
        return f"part by part; {times} of {again}; the {self.result} attempt stands"


@dataclass(frozen=True)
class Attempt:
    """One stored test of a part: its number (1, 2, ...), verdict, bin class, and whether it
    became the part's result when it was stored."""

    number: int
    verdict: str
    bin_class: str
    standing: bool

    @property
    def completed(self) -> bool:
        return self.verdict != "aborted"

    @property
    def good(self) -> bool:
        return self.bin_class == "pass"


@dataclass(frozen=True)
class Admission:
    """Whether a scanned part may be tested now, as which attempt, and the words for the screen."""

    allowed: bool
    attempt: int
    why: str


def standing_attempt(attempts: list[Attempt]) -> Attempt | None:
    """The part's result: its latest attempt that stood when it was stored."""
    return next((a for a in reversed(attempts) if a.standing), None)


def admit(attempts: list[Attempt], policy: RetestPolicy) -> Admission:
    """May this part (with these earlier attempts) be tested again, under `policy`?"""
    number = len(attempts) + 1
    if not attempts:
        return Admission(True, 1, "first test")
    done = sum(a.completed for a in attempts)
    result = standing_attempt(attempts)
    if result is not None and result.good and not policy.retest_passed:
        return Admission(False, number, f"duplicate: passed already ({_named(result)})")
    if done > policy.retests:
        tested = f"tested {done} time" + ("s" if done != 1 else "")
        return Admission(False, number, f"{tested}; no retest left (retests: {policy.retests})")
    if done == 0:
        return Admission(True, number, "tested again: every earlier attempt was aborted")
    return Admission(True, number, f"retest {done} of {policy.retests}")


def stands(attempts: list[Attempt], verdict: str, bin_class: str, policy: RetestPolicy) -> bool:
    """Whether a new attempt with this outcome becomes the part's result."""
    done = [a for a in attempts if a.completed]
    if not done:
        return True  # the first completed attempt, or an aborted one while nothing completed
    if verdict == "aborted":
        return False
    if policy.result == "first":
        return False
    if policy.result == "best":
        current = standing_attempt(attempts)
        return current is None or (bin_class == "pass") >= current.good
    return True


def _named(attempt: Attempt) -> str:
    return f"attempt {attempt.number}, {attempt.verdict}"
