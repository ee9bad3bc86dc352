"""The recipe's `tempco:` limits on each device's temperature coefficient of the regulated
current, in %/K (sequencer.judge.devicetempco):

    tempco: {min: -0.05 %/K, max: 0.05 %/K}
"""

from __future__ import annotations

import re
from typing import Any

from sequencer.judge.devicetempco import TempCoLimits
from sequencer.recipe.fields import Fields
from sequencer.recipe.units import PLAIN_NUMBER, UnitProblem, plain_number
from sequencer.recipe.yamlsource import Source

_PCT_PER_K = re.compile(rf"\s*({PLAIN_NUMBER})\s*%/K\s*")


def parse_tempco_limits(source: Source, value: Any) -> TempCoLimits:
    """The limits (none when the recipe has no `tempco:`)."""
    if value is None:
        return TempCoLimits()
    f = Fields.at(source, "tempco", value)
    low, high = _limit(f, "min"), _limit(f, "max")
    f.finish()
    if low is not None and high is not None:
        f.check(low < high, "max", f"must be above min ({low:g} %/K)")
    return TempCoLimits(min_pct_per_k=low, max_pct_per_k=high)


def _limit(f: Fields, key: str) -> float | None:
    f.used.add(key)
    if key not in f.data:
        return None
    value = f.raw(key)
    match = _PCT_PER_K.fullmatch(value) if isinstance(value, str) else None
    if match is None:
        raise f.source.error(f.where(key), f"must be in %/K, e.g. '0.05 %/K' (got {value!r})")
    try:
        return plain_number(match.group(1))
    except UnitProblem as exc:
        raise f.source.error(f.where(key), str(exc)) from None
