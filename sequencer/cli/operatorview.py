"""`ccbench run --part-by-part --operator-view`: the production screen. After each part one
instruction takes the verdict panel's place, in block letters read from across the bench:

- a part in a pass-class bin: PASS, BIN n ("put it in bin n");
- a part that did not pass and may be tested again under the recipe's retest policy: FAIL,
  RETEST ("RETEST ALLOWED (1 left)"); one that may not: FAIL, DO NOT RETEST ("reject it to
  bin n");
- an aborted test: ABORTED, AGAIN (aborted tests use up no retest);
- a scanned part the policy refuses (a duplicate of a passed part, no retest left): NOT
  TESTED, DO NOT RETEST, with the reason, instead of a plain line under the last panel.

Under each panel, the run's running count: parts, passed, failed (each part once, with the
attempt that stands) and tests. The plan and the estimate are not shown in this view. Every
line fits 80 columns; without colour (a pipe, NO_COLOR) the words alone carry it.
"""

from __future__ import annotations

from rich import box
from rich.align import Align
from rich.console import Group, RenderableType
from rich.panel import Panel
from rich.text import Text

from sequencer.bench.parts import PartResult, Refusal, Tally
from sequencer.cli.verdictview import ABORTED_STYLE, STYLES, WORDS, block_letters, verdict_style

FLAG_HELP = (
    "with --part-by-part: the production screen (after each part what to do with it, in big "
    "letters, and a running count; no plan or estimate lines)"
)


def render(item: object) -> RenderableType:
    if isinstance(item, PartResult):
        return Group(_result_panel(item), Text(count_line(item.tally), justify="center"))
    if isinstance(item, Refusal):
        return _refusal_panel(item)
    return item if isinstance(item, str) else str(item)


def instruction(result: PartResult) -> tuple[str, str]:
    """(the word in block letters, the sentence beside it) for one tested part."""
    j = result.judgement
    where = f"bin {j.hard_bin}" if j.hard_bin is not None else "the reject bin"
    if j.verdict == "aborted":
        return "AGAIN", "TEST IT AGAIN: the test was aborted (it uses up no retest)"
    if j.bin_class == "pass":
        return (
            f"BIN {j.hard_bin}" if j.hard_bin is not None else "OK"
        ), f"PUT IT IN {where.upper()}"
    if result.again is not None and result.again.allowed and result.retests_left > 0:
        return "RETEST", (
            f"RETEST ALLOWED ({result.retests_left} left): test it again, or reject it to {where}"
        )
    return "DO NOT RETEST", f"DO NOT RETEST: reject it to {where}"


def count_line(tally: Tally | None) -> str:
    if tally is None:
        return ""
    return (
        f"parts {tally.parts}   passed {tally.passed}   failed {tally.failed}   tests {tally.tests}"
    )


def _result_panel(result: PartResult) -> Panel:
    j = result.judgement
    word, sentence = instruction(result)
    style = verdict_style(j)
    lines = [
        Text(sentence, style="bold", justify="center"),
        Text(_details(result), justify="center"),
    ]
    return _panel([WORDS.get(j.verdict, j.verdict.upper()), word], style, lines)


def _refusal_panel(refusal: Refusal) -> Panel:
    lines = [
        Text(f"{refusal.serial}: {refusal.why}", style="bold", justify="center"),
        Text("DO NOT RETEST: set the part aside", style="bold", justify="center"),
    ]
    return _panel(["NOT TESTED", "DO NOT RETEST"], STYLES["fail"], lines)


def _panel(words: list[str], style: str, lines: list[Text]) -> Panel:
    rows: list[str] = []
    for word in words:
        rows += [*block_letters(word), ""]
    width = max(len(row) for row in rows)
    big = Text("\n".join(row.ljust(width) for row in rows[:-1]), style=style, no_wrap=True)
    return Panel(
        Group(Align.center(big), *lines),
        box=box.HEAVY,
        border_style=style.split(" on ")[-1] if style != ABORTED_STYLE else "yellow",
        padding=(0, 1),
    )


def _details(result: PartResult) -> str:
    j = result.judgement
    soft = f" ({j.soft_bin})" if j.soft_bin else ""
    text = f"{j.device}   attempt {result.attempt}   bin {j.hard_bin}{soft}"
    if j.notes:
        text += f"\n{j.notes[0]}"
    if result.note:
        text += f"\n{result.note}"
    return text
