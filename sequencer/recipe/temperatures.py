"""The recipe's `temperatures:`: set points the lot's steps run at, each once its soak rule holds.

    temperatures:
      - 25 degC                                   # the default soak rule
      - {set: 85 degC, band: 1 K, for: 10 min, timeout: 45 min}
      - {set: -20 degC}

A set point is stable once the chamber's reading has stayed within `band` of it for `for` (the
mount lags the air, so the time at temperature is what lets the devices follow). The default soak
rule, 0.5 K for 5 min with a 60 min timeout, is common practice, no source. A soak that has not
settled by `timeout` ends the run (sequencer.run.soak).
"""

from __future__ import annotations

from dataclasses import dataclass

DEFAULT_BAND_K = 0.5  # common practice, no source
DEFAULT_SOAK_S = 300.0  # common practice, no source
DEFAULT_TIMEOUT_S = 3600.0  # common practice, no source


@dataclass(frozen=True, kw_only=True)
class SetPoint:
    celsius: float
    band_k: float = DEFAULT_BAND_K
    soak_s: float = DEFAULT_SOAK_S
    timeout_s: float = DEFAULT_TIMEOUT_S

    def describe(self) -> str:
        return f"{self.celsius:g} degC (within {self.band_k:g} K for {self.soak_s:g} s)"
