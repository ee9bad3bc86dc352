"""One self-contained HTML page for a lot: every plot embedded as a base64 PNG, a little
inline CSS, no script and nothing fetched from the network, so it opens from a USB stick or an
e-mail attachment. The same PNGs are written beside it for slides and tickets.
"""

from __future__ import annotations

import base64
import datetime as dt
from dataclasses import dataclass
from html import escape
from pathlib import Path

from sequencer import __version__
from sequencer.model.errors import StoreError
from sequencer.model.judgesettings import FIGURE_INFO
from sequencer.report.data import Lot, bound_column, value_column
from sequencer.report.lotsummary import (
    BIN_HEAD,
    CAPABILITY_HEAD,
    STANDING_HEAD,
    YIELD_HEAD,
    BinRow,
    Standing,
    YieldRow,
    bin_cells,
    bins,
    capability_cells,
    figure_value,
    long_label,
    reported_figures,
    standing,
    standing_cells,
    standings,
    yield_cells,
    yields,
)
from sequencer.report.plotstyle import Plot
from sequencer.store.atomic import replace_file

CSS = """
body { font-family: sans-serif; color: #222; background: #fff; max-width: 72rem;
       margin: 1.5rem auto; padding: 0 1rem; line-height: 1.4; }
h1 { font-size: 1.5rem; margin-bottom: 0.2rem; } h2 { font-size: 1.15rem; margin-top: 2rem;
     border-bottom: 1px solid #ccc; padding-bottom: 0.2rem; }
table { border-collapse: collapse; margin: 0.5rem 0; font-size: 0.9rem; }
th, td { border: 1px solid #ccc; padding: 0.2rem 0.5rem; text-align: right; }
th { background: #f2f2f2; } td.t, th.t { text-align: left; }
tr.fail td { color: #8a1c1c; } tr.guard td { color: #6a4a00; }
figure { margin: 1rem 0; } figcaption { font-size: 0.85rem; color: #555; }
img { max-width: 100%; height: auto; border: 1px solid #eee; }
.note { background: #fff7e0; border: 1px solid #e0c070; padding: 0.4rem 0.7rem; }
.small { font-size: 0.85rem; color: #555; }
"""

METHOD = """
<p>Capability per figure against the recipe's limits, from the devices' last results with a
plain value (lower bounds "at least" are left out): Cp = (USL &minus; LSL)/6s,
Cpk = min(USL &minus; mean, mean &minus; LSL)/3s, one side only where the recipe gives one limit;
s is the sample standard deviation (NIST/SEMATECH e-Handbook of Statistical Methods, 6.1.6).
The 95 % interval of Cpk is Bissell's normal approximation,
Cpk &plusmn; z&middot;sqrt(1/(9n) + Cpk&sup2;/(2(n &minus; 1))). The fallout in ppm is what a normal
distribution with the lot's mean and s puts outside the limits; "seen ppm" is what the lot put
there. Both assume a stable, normal process: a handful of parts gives a wide interval.</p>
<p>Yield counts the devices in pass-class hard bins, each device once with its last result.
Under the guarded decision rule a result within U = k&middot;u of a limit is in the guard band,
neither passed nor failed; the hatched bands in the histograms use the lot's median U. Soft bin
numbers (also in the STDF file) are: the recipe's named bins 1, 2, 3 ... in recipe order; the
judge's words from 1000 (e.g. short 1005) and per-figure reasons from 1100 (e.g. regulated
current below min 1101); any other name 20000 + a CRC-32 of its text.</p>
"""


@dataclass(frozen=True)
class ReportFiles:
    html: Path
    pngs: tuple[Path, ...]


def write_report(lot: Lot, plots: list[Plot], out: Path) -> ReportFiles:
    """report.html and one PNG per plot in the folder `out`."""
    # Each file replaced whole (a kill or a full disk mid-write left a 0-byte report.html and a
    # cut PNG, the previous report lost); the page last, so it never names a picture not there.
    try:
        out.mkdir(parents=True, exist_ok=True)
        pngs = []
        for plot in plots:
            path = out / f"{plot.name}.png"
            replace_file(path, plot.png)
            pngs.append(path)
        html = out / "report.html"
        replace_file(html, page(lot, plots).encode("utf-8"))
    except OSError as exc:
        raise StoreError(f"{out}: the report cannot be written ({exc.strerror})") from None
    return ReportFiles(html, tuple(pngs))


def page(lot: Lot, plots: list[Plot]) -> str:
    by_name = {p.name: p for p in plots}
    hists = [p for p in plots if p.name.startswith("hist-")]
    devices = [p for p in plots if p.name.startswith("device-")]
    now = dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>Lot report {escape(lot.name)}</title><style>{CSS}</style></head><body>",
        f"<h1>Lot report: {escape(lot.name)}</h1>",
        f'<p class="small">{escape(lot.product)} &middot; {len(lot.runs)} run(s) &middot; '
        f"written {now} by ccbench {escape(__version__)}</p>",
        *[f'<p class="note">{escape(n)}</p>' for n in lot.notes],
        "<h2>Yield</h2>",
        yield_table(yields(lot)),
        _image(by_name.get("yield")),
        "<h2>Bins</h2>",
        bin_table(bins(lot)),
        _image(by_name.get("bins")),
        "<h2>Figures closest to their limits</h2>",
        standing_table(standings(lot)),
        "<h2>I-V curves</h2>",
        _image(by_name.get("iv-lot")),
        "<h2>Capability</h2>",
        capability_table([standing(lot, f) for f in reported_figures(lot)]),
        METHOD,
        "<h2>Histograms</h2>",
        *[_image(p) for p in hists],
    ]
    if devices:
        parts += ["<h2>Devices asked for</h2>", *[_image(p) for p in devices]]
    parts += ["<h2>Every device</h2>", device_table(lot), "<h2>Runs</h2>", run_table(lot)]
    parts.append("</body></html>")
    return "\n".join(x for x in parts if x)


def _image(plot: Plot | None) -> str:
    if plot is None:
        return ""
    data = base64.b64encode(plot.png).decode("ascii")
    return (
        f'<figure><img src="data:image/png;base64,{data}" alt="{escape(plot.title)}" '
        f'width="{plot.width_px}" height="{plot.height_px}">'
        f"<figcaption>{escape(plot.title)}: {escape(plot.caption)}</figcaption></figure>"
    )


def _table(head: list[str], rows: list[list[str]], classes: list[str] | None = None) -> str:
    """A table whose first column is text (left) and the rest numbers (right)."""
    cells = "".join(_cell("th", k, h) for k, h in enumerate(head))
    body = []
    for n, row in enumerate(rows):
        tr = f' class="{classes[n]}"' if classes and classes[n] else ""
        tds = "".join(_cell("td", k, c) for k, c in enumerate(row))
        body.append(f"<tr{tr}>{tds}</tr>")
    return f"<table><tr>{cells}</tr>{''.join(body)}</table>"


def _cell(tag: str, k: int, text: str) -> str:
    left = ' class="t"' if k == 0 else ""
    return f"<{tag}{left}>{escape(str(text))}</{tag}>"


def yield_table(rows: list[YieldRow]) -> str:
    return _table(list(YIELD_HEAD), [yield_cells(r) for r in rows])


def bin_table(rows: list[BinRow]) -> str:
    classes = ["" if r.klass == "pass" else "fail" for r in rows]
    return _table(list(BIN_HEAD), [bin_cells(r) for r in rows], classes)


def standing_table(rows: list[Standing]) -> str:
    classes = ["fail" if r.margin < 0 else "" for r in rows]
    cells = [standing_cells(r, long_label) for r in rows]
    return _table(list(STANDING_HEAD), cells, classes)


def capability_table(rows: list[Standing]) -> str:
    return _table(list(CAPABILITY_HEAD), [capability_cells(r, long_label) for r in rows])


MAX_DEVICE_ROWS = 2000  # beyond this the page gets slow; devices.csv has them all


def device_table(lot: Lot) -> str:
    figures = reported_figures(lot)
    head = ["device", "run", "channel", "verdict", "hard bin", "soft bin"]
    head += [FIGURE_INFO[f][2] for f in figures] + ["reasons"]
    body, classes = [], []
    for d in lot.devices.head(MAX_DEVICE_ROWS).to_dict("records"):
        cells = [str(d["device"]) + ("" if d["final"] else " (superseded)"), str(d["run"] + 1)]
        cells += [_int(d["channel"]), d["verdict"], str(d["hard_bin"]), d["soft_bin"]]
        for f in figures:
            shown = figure_value(f, d[value_column(f)])
            cells.append(("≥ " if d[bound_column(f)] else "") + shown)
        cells.append(d["reasons"])
        body.append(cells)
        classes.append({"fail": "fail", "guard-band": "guard"}.get(d["verdict"], ""))
    more = len(lot.devices) - MAX_DEVICE_ROWS
    note = f'<p class="small">and {more} more: see devices.csv</p>' if more > 0 else ""
    return _table(head, body, classes) + note


def _int(x) -> str:
    try:
        return str(int(x))
    except (TypeError, ValueError):
        return ""


def run_table(lot: Lot) -> str:
    head = ["run", "folder", "lot", "status", "started", "finished", "station", "instrument"]
    head += ["operator", "recipe", "recipe SHA-256 (first 16)"]
    body = [
        [
            str(r["run"] + 1),
            r["folder"],
            r["lot"] or "",
            r["status"] or "",
            r["started"] or "",
            r["finished"] or "",
            r["station"] or "",
            r["identity"] or "",
            r["operator"] or "",
            r["recipe_file"] or "",
            str(r["recipe_sha256"] or "")[:16],
        ]
        for r in lot.runs.to_dict("records")
    ]
    return _table(head, body)
