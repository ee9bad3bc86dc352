"""Words shared by every file format's messages: the longest text, the nearest known key, and
a value as a message quotes it.

Messages have one form, `recipes/limiter.yaml:14: sweep.stop must be at most 60 V (got 80 V)`;
the formats (sequencer.recipe.format) check the values, format.errors writes the line.
"""

from __future__ import annotations

import difflib
from typing import Any

# Names, lots and reasons are short; a longer text is a mistake (or an attack on every record
# and screen the text is copied into).
MAX_TEXT = 500


def close_to(word: str, known: list[str]) -> list[str]:
    """Known keys a misspelt or mis-cased key was probably meant to be."""
    by_case = [k for k in known if k.lower() == str(word).lower()]
    return by_case or difflib.get_close_matches(str(word), known, n=1, cutoff=0.75)


def show(value: Any, longest: int = 60) -> str:
    """A value as a message quotes it: never a whole file (a station path naming some other
    file would otherwise echo it into the screen and every log)."""
    text = repr(value) if not isinstance(value, dict | list) else type(value).__name__
    return text if len(text) <= longest else text[: longest - 1] + "…"
