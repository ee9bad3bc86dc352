"""The verdict of one part, big enough to read from across the bench (rich, at the edge).

The word and the bin number are drawn in block letters five rows high, on green for a part that
goes to a pass-class bin, on red for any other bin, and on yellow for an aborted test (test it
again); the serial, the attempt, the soft bin and the first reason follow in plain text. Without
colour (a log file, NO_COLOR) the letters alone still tell the result.
"""

from __future__ import annotations

from rich import box
from rich.align import Align
from rich.console import Group
from rich.panel import Panel
from rich.text import Text

from sequencer.judge.engine import Judgement

# Five rows per glyph, '#' for ink; our own letters, only those the verdicts and bins need.
GLYPHS = {
    "A": (" ### ", "#   #", "#####", "#   #", "#   #"),
    "B": ("#### ", "#   #", "#### ", "#   #", "#### "),
    "D": ("#### ", "#   #", "#   #", "#   #", "#### "),
    "E": ("#####", "#    ", "#### ", "#    ", "#####"),
    "F": ("#####", "#    ", "#### ", "#    ", "#    "),
    "G": (" ####", "#    ", "#  ##", "#   #", " ####"),
    "I": ("###", " # ", " # ", " # ", "###"),
    "L": ("#    ", "#    ", "#    ", "#    ", "#####"),
    "N": ("#   #", "##  #", "# # #", "#  ##", "#   #"),
    "O": (" ### ", "#   #", "#   #", "#   #", " ### "),
    "P": ("#### ", "#   #", "#### ", "#    ", "#    "),
    "R": ("#### ", "#   #", "#### ", "#  # ", "#   #"),
    "S": (" ####", "#    ", " ### ", "    #", "#### "),
    "T": ("#####", "  #  ", "  #  ", "  #  ", "  #  "),
    "U": ("#   #", "#   #", "#   #", "#   #", " ### "),
    "0": (" ### ", "#  ##", "# # #", "##  #", " ### "),
    "1": ("  #  ", " ##  ", "  #  ", "  #  ", " ### "),
    "2": (" ### ", "#   #", "  ## ", " #   ", "#####"),
    "3": ("#### ", "    #", " ### ", "    #", "#### "),
    "4": ("#   #", "#   #", "#####", "    #", "    #"),
    "5": ("#####", "#    ", "#### ", "    #", "#### "),
    "6": (" ### ", "#    ", "#### ", "#   #", " ### "),
    "7": ("#####", "    #", "   # ", "  #  ", "  #  "),
    "8": (" ### ", "#   #", " ### ", "#   #", " ### "),
    "9": (" ### ", "#   #", " ####", "    #", " ### "),
    " ": ("  ", "  ", "  ", "  ", "  "),
    "?": (" ### ", "#   #", "  ## ", "     ", "  #  "),
}
INK = "█"
WORDS = {"pass": "PASS", "fail": "FAIL", "guard-band": "GUARD BAND", "aborted": "ABORTED"}
STYLES = {"pass": "bold white on green", "fail": "bold white on red"}
ABORTED_STYLE = "bold black on yellow"


def block_letters(text: str) -> list[str]:
    """`text` as five rows of block letters (unknown characters as '?')."""
    glyphs = [GLYPHS.get(c, GLYPHS["?"]) for c in text.upper()]
    return [" ".join(g[row] for g in glyphs).replace("#", INK) for row in range(5)]


def verdict_style(judgement: Judgement) -> str:
    if judgement.verdict == "aborted":
        return ABORTED_STYLE
    return STYLES["pass" if judgement.bin_class == "pass" else "fail"]


def verdict_panel(judgement: Judgement, attempt: int, note: str = "") -> Panel:
    """The big verdict of one tested part, with its bin and what to do with it."""
    style = verdict_style(judgement)
    word = WORDS.get(judgement.verdict, judgement.verdict.upper())
    rows = [*block_letters(word), ""]
    if judgement.hard_bin is not None:
        rows += block_letters(f"BIN {judgement.hard_bin}")
    width = max(len(row) for row in rows)
    big = Text("\n".join(row.ljust(width) for row in rows), style=style, no_wrap=True)
    return Panel(
        Group(Align.center(big), Text(_details(judgement, attempt, note), justify="center")),
        box=box.HEAVY,
        border_style=style.split(" on ")[-1],
        padding=(1, 2),
    )


def _details(judgement: Judgement, attempt: int, note: str) -> str:
    soft = f" ({judgement.soft_bin})" if judgement.soft_bin else ""
    where = f"bin {judgement.hard_bin}{soft}" if judgement.hard_bin is not None else "no bin"
    lines = [f"{judgement.device}   attempt {attempt}   {where}"]
    if judgement.notes:
        lines.append(judgement.notes[0])
    if note:
        lines.append(note)
    return "\n".join(lines)
