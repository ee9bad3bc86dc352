"""The HTML report opens from disk: one file, every image embedded and decodable."""

from __future__ import annotations

import base64
import io
import struct
from html.parser import HTMLParser

import pytest
from rich.console import Console

from sequencer.cli.main import main
from sequencer.report.data import load_lot
from sequencer.report.lotsummary import lot_yield, percent, reported_figures

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


class Page(HTMLParser):
    """Collects images, links, scripts and the text of table cells."""

    def __init__(self) -> None:
        super().__init__()
        self.images: list[dict[str, str]] = []
        self.tags: list[str] = []
        self.cells: list[str] = []
        self._in_cell = False

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        if tag == "img":
            self.images.append({k: v or "" for k, v in attrs})
        self._in_cell = tag in ("td", "th")

    def handle_endtag(self, tag):
        self._in_cell = False

    def handle_data(self, data):
        if self._in_cell:
            self.cells.append(data)


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height from the IHDR chunk, which the PNG standard puts first."""
    assert data[:8] == PNG_SIGNATURE
    length, kind = struct.unpack(">I4s", data[8:16])
    assert (length, kind) == (13, b"IHDR")
    return struct.unpack(">II", data[16:24])


@pytest.fixture(scope="module")
def report(lot_folder, tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    console = Console(file=io.StringIO(), width=120)
    argv = ["report", str(lot_folder), "--out", str(out), "--device", "FK2611-07-016"]
    assert main([*argv, "--device", "FK2611-07-004"], console=console) == 0
    page = Page()
    page.feed((out / "report.html").read_text(encoding="utf-8"))
    return out, page, console.file.getvalue()


def test_every_image_is_embedded_and_decodes(report):
    out, page, _ = report
    assert page.images
    for img in page.images:
        prefix = "data:image/png;base64,"
        assert img["src"].startswith(prefix)
        data = base64.b64decode(img["src"][len(prefix) :], validate=True)
        assert png_size(data) == (int(img["width"]), int(img["height"]))
        assert img["alt"]
    beside = sorted(p.name for p in out.glob("*.png"))
    assert len(beside) == len(page.images)
    embedded = {base64.b64decode(i["src"].split(",", 1)[1]) for i in page.images}
    assert {p.read_bytes() for p in out.glob("*.png")} == embedded


def test_the_page_needs_no_network_and_no_script(report):
    out, page, _ = report
    text = (out / "report.html").read_text(encoding="utf-8")
    assert "script" not in page.tags and "link" not in page.tags and "iframe" not in page.tags
    assert "http://" not in text and "https://" not in text and "url(" not in text


def test_every_plot_is_there(lot_folder, report):
    out, _, said = report
    lot = load_lot([lot_folder])
    names = {p.stem for p in out.glob("*.png")}
    wanted = {"iv-lot", "bins", "yield", "device-FK2611-07-016", "device-FK2611-07-004"}
    wanted |= {f"hist-{f}" for f in reported_figures(lot)}
    assert names == wanted
    assert "report.html" in said and "PNG files" in said


def test_tables_state_the_lots_yield_and_capability(lot_folder, report):
    _, page, _ = report
    lot = load_lot([lot_folder])
    assert percent(lot_yield(lot).fraction) in page.cells
    assert "regulated current (IP)" in page.cells
    assert "Cpk (95 %)" in page.cells
    assert "FK2611-07-016" in page.cells


def test_dollar_signs_in_names_are_drawn_as_text(tmp_path):
    # A lot or serial such as '$\frac{$' once ended the report in a math-parser error.
    from tests.report.conftest import lot_parts, write_run

    lot = "$\\frac{$"
    folder = write_run(tmp_path / "lot", lot, lot_parts(lot), "2026-11-02T10:00:00+00:00")
    console = Console(file=io.StringIO(), width=120)
    argv = ["report", str(folder), "--out", str(tmp_path / "r"), "--device", f"{lot}-002"]
    assert main(argv, console=console) == 0, console.file.getvalue()
    assert (tmp_path / "r" / "report.html").stat().st_size > 0
