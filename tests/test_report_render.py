"""The report's document model, its HTML and PDF renderers, and atomic writes.

The PDF is read back with poppler-utils (pdftotext, pdfinfo, pdftoppm, pdffonts), an
independent reader, so the checks see what a reviewer's PDF viewer sees.
"""

from __future__ import annotations

import base64
import glob
import os
import re
import shutil
import signal
import struct
import subprocess
import sys
import textwrap
from datetime import datetime, timezone
from html.parser import HTMLParser
from itertools import combinations
from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure as MplFigure
from matplotlib.image import imread

from grovewise.errors import SettingError
from grovewise.report import pdf_report
from grovewise.report.atomic import atomic_path, write_atomic
from grovewise.report.document import (Code, Document, Figure, Heading, KeyValues, PageBreak, Paragraph,
                                       Table, Title, format_value)
from grovewise.report.html_report import render_html, write_html
from grovewise.report.pdf_report import render_pdf

SRC = Path(__file__).resolve().parents[1] / "src"
HOSTILE = "<script>alert(1)</script>"
QUOTED = "bmi \"adjusted\" & 'weight'"
LONG_ROWS = 120
FIG_INCHES = (6.4, 3.6)
POPPLER = {tool: shutil.which(tool) for tool in ("pdftotext", "pdfinfo", "pdftoppm", "pdffonts")}
needs_poppler = pytest.mark.skipif(
    not all(POPPLER[t] for t in ("pdftotext", "pdfinfo", "pdftoppm")),
    reason="poppler-utils (pdftotext, pdfinfo, pdftoppm) is not installed; `.ci/run` installs it")


def _figure() -> MplFigure:
    fig = MplFigure(figsize=FIG_INCHES, layout="constrained")
    ax = fig.add_subplot()
    ax.barh(["age", HOSTILE, QUOTED], [0.31, 0.22, 0.12], color="#2c5d6f")
    ax.set_xlabel("mean decrease in impurity")
    return fig


def _document() -> Document:
    rows = [[f"row-{i:03d}", i, 1.0 / (i + 1), (i * 37 % 11) * 0.25, i % 4 == 0] for i in range(LONG_ROWS)]
    rows[5][0] = HOSTILE
    return Document(
        title=f"Review of {QUOTED}",
        meta={"model": f"clinic_forest.skops {HOSTILE}", "data": "clinic_patients.csv",
              "hashes": {"model": "a1" * 32, "data": "b2" * 32},
              "date": datetime(2025, 3, 14, 9, 30, tzinfo=timezone.utc), "reviewer": "Dana O'Neil & team"},
        blocks=[
            Title("Sign-off report", f"Forest of 200 trees {HOSTILE}"),
            Heading("Summary", 1),
            Paragraph("The ensemble and its surrogate were reviewed on the data given. " * 6
                      + "An unbroken token " + "z" * 140 + " must wrap.\nA forced break.\n\nA new paragraph $x$."),
            Paragraph("Fidelity is measured on the data given; rules do not replace the model's validation.",
                      "caution"),
            Paragraph("Values are rounded to four significant digits.", "note"),
            KeyValues([("Depth", "3"), ("Seed", "7"), (f"Flag {HOSTILE}", QUOTED)], caption="Settings"),
            Heading("Anatomy", 1),
            Heading(f"Flagged feature {HOSTILE}", 2),
            Figure(_figure(), caption=f"Importance of {QUOTED}", width=0.8),
            Table(["feature", "index", "share", "gain", "flagged"], rows, caption="Usage per feature",
                  formats=[None, None, ".3f", ".2f", None]),
            Heading("Surrogate rules", 1),
            Code("if 0.42*age - 1.3*bmi <= 0.7:\n    class = healthy\nelse:\n    class = at risk  " + "# note " * 30),
            PageBreak(),
            Heading("How to reproduce", 1),
            Paragraph("Run the review again from its manifest."),
        ])


@pytest.fixture(scope="module")
def doc() -> Document:
    return _document()


@pytest.fixture(scope="module")
def rendered_pdf(tmp_path_factory, doc) -> tuple[Path, int]:
    path = tmp_path_factory.mktemp("pdf") / "report.pdf"
    return path, render_pdf(doc, path)


def _run(*args: str) -> str:
    return subprocess.run(args, capture_output=True, text=True, check=True, timeout=60).stdout


def _page_text(path: Path, page: int) -> str:
    return " ".join(_run("pdftotext", "-f", str(page), "-l", str(page), str(path), "-").split())


# --- document model ---------------------------------------------------------------------------

def test_table_rejects_ragged_rows_and_unknown_alignment():
    with pytest.raises(SettingError, match="row 1 has 1 cells"):
        Table(["a", "b"], [[1, 2], [3]], caption="ragged")
    with pytest.raises(SettingError, match="align"):
        Table(["a"], [[1]], align=["middle"])
    with pytest.raises(SettingError, match="Heading level"):
        Heading("x", 4)


def test_cells_format_numbers_and_default_alignment():
    table = Table(["name", "n", "share"], [["a", 3, 0.123456], ["b", np.int64(12), None]], formats=[None, None, ".1%"])
    # Python's format mini-language: ".1%" multiplies by 100 (docs.python.org, Format Specification).
    assert table.text_rows() == [["a", "3", "12.3%"], ["b", "12", ""]]
    assert table.alignments() == ["left", "right", "right"]
    assert format_value(0.123456) == "0.1235" and format_value(float("nan")) == "n/a"
    assert format_value(np.bool_(True)) == "yes"


# --- HTML -------------------------------------------------------------------------------------

class _Collector(HTMLParser):
    """Tags, attributes and the text of each heading, as a browser's parser sees them."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[str] = []
        self.attrs: list[dict] = []
        self.headings: list[str] = []
        self._heading: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.append(dict(attrs))
        if tag in ("h1", "h2", "h3", "h4"):
            self._heading = []

    def handle_endtag(self, tag):
        if tag in ("h1", "h2", "h3", "h4") and self._heading is not None:
            self.headings.append("".join(self._heading))
            self._heading = None

    def handle_data(self, data):
        if self._heading is not None:
            self._heading.append(data)


def test_html_escapes_every_user_string(doc):
    page = render_html(doc)
    parsed = _Collector()
    parsed.feed(page)
    assert "<script" not in page.lower()
    assert "script" not in parsed.tags
    # html.escape(quote=True) maps & < > " ' to &amp; &lt; &gt; &quot; &#x27; (Python docs, html module).
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "bmi &quot;adjusted&quot; &amp; &#x27;weight&#x27;" in page
    assert QUOTED not in page
    # Decoded by an HTML parser, the hostile strings come back as plain text, unchanged.
    assert f"Flagged feature {HOSTILE}" in parsed.headings
    assert any(a.get("alt") == f"Importance of {QUOTED}" for a in parsed.attrs)
    assert 'http-equiv="Content-Security-Policy"' in page


def test_html_has_headings_contents_and_embedded_figure(doc):
    page = render_html(doc)
    parsed = _Collector()
    parsed.feed(page)
    for heading in doc.headings():
        assert heading.text in parsed.headings
    ids = {a["id"] for a in parsed.attrs if "id" in a}
    links = [a["href"] for a in parsed.attrs if a.get("href", "").startswith("#")]
    assert len(links) == sum(h.level <= 2 for h in doc.headings())
    assert all(link[1:] in ids for link in links)
    sources = [a["src"] for a in parsed.attrs if "src" in a]
    assert len(sources) == 1 and sources[0].startswith("data:image/png;base64,")
    png = base64.b64decode(sources[0].split(",", 1)[1])
    # PNG specification (W3C / ISO 15948): 8-byte signature, then IHDR with big-endian width, height.
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and png[12:16] == b"IHDR"
    width, height = struct.unpack(">II", png[16:24])
    assert (width, height) == (round(FIG_INCHES[0] * 150), round(FIG_INCHES[1] * 150))
    assert "http://" not in page and "https://" not in page  # nothing to fetch


def test_write_html_writes_the_rendered_page(tmp_path, doc):
    path = write_html(doc, tmp_path / "report.html")
    assert path.read_text(encoding="utf-8") == render_html(doc)


# --- PDF --------------------------------------------------------------------------------------

@needs_poppler
def test_pdf_pages_size_and_metadata(rendered_pdf):
    path, pages = rendered_pdf
    info = _run("pdfinfo", "-isodates", str(path))
    assert re.search(r"^Pages:\s+(\d+)$", info, re.M).group(1) == str(pages)
    assert pages >= 4  # the long table alone fills more than two pages
    # ISO 216: A4 is 210 x 297 mm = 595.276 x 841.890 pt at 72 pt per inch.
    assert re.search(r"^Page size:\s+595\.27\d? x 841\.89 pts \(A4\)", info, re.M)
    assert re.search(r"^Title:\s+Review of bmi \"adjusted\" & 'weight'$", info, re.M)
    assert re.search(r"^Author:\s+Dana O'Neil & team$", info, re.M)
    assert re.search(r"^Subject:\s+Forest of 200 trees <script>", info, re.M)
    assert re.search(r"^CreationDate:\s+2025-03-14T09:30:00(Z|\+00:?00)$", info, re.M)


@needs_poppler
def test_pdf_text_is_selectable_and_complete(rendered_pdf, doc):
    path, pages = rendered_pdf
    text = " ".join(_run("pdftotext", str(path), "-").split())
    for heading in doc.headings():
        assert heading.text in text
    assert "z" * 140 in text.replace(" ", "")  # the unbroken token is wrapped, not cut
    for number in range(1, pages + 1):
        assert f"Page {number} of {pages}" in _page_text(path, number)
    if POPPLER["pdffonts"]:
        fonts = _run("pdffonts", str(path)).splitlines()[2:]
        assert fonts and all("TrueType" in f and "DejaVu" in f for f in fonts)  # real text, not Type 3 glyphs


@needs_poppler
def test_pdf_table_continues_with_its_header(rendered_pdf):
    path, pages = rendered_pdf
    texts = [_page_text(path, p) for p in range(1, pages + 1)]
    where = {i: [p for p, t in enumerate(texts, 1) if re.search(rf"\brow-{i:03d}\b", t)] for i in range(LONG_ROWS)}
    where.pop(5)  # this row's label is the hostile string
    assert all(len(p) == 1 for p in where.values())  # every row exactly once: none lost or repeated
    first, last = where[0][0], where[LONG_ROWS - 1][0]
    assert last >= first + 2
    for page in range(first + 1, last + 1):
        assert "Table 1. Usage per feature (continued)" in texts[page - 1]
        assert "feature index share gain flagged" in texts[page - 1]
    # The last row in full: share 1/120 to ".3f", gain (119 * 37 mod 11) * 0.25 to ".2f", 119 mod 4 != 0.
    assert "row-119 119 0.008 0.75 no" in texts[last - 1]


@needs_poppler
def test_pdf_text_stays_inside_margins_without_overlaps(rendered_pdf):
    path, _ = rendered_pdf
    out = _run("pdftotext", "-bbox", str(path), "-")
    pattern = r'xMin="([\d.]+)" yMin="([\d.]+)" xMax="([\d.]+)" yMax="([\d.]+)"'
    for page in out.split("<page ")[1:]:
        boxes = [tuple(map(float, m)) for m in re.findall(pattern, page)]
        assert boxes
        assert min(b[0] for b in boxes) >= pdf_report.MARGIN_X - 0.5
        assert max(b[2] for b in boxes) <= pdf_report.PAGE_W - pdf_report.MARGIN_X + 0.5
        assert min(b[1] for b in boxes) > 20 and max(b[3] for b in boxes) < pdf_report.PAGE_H - 20
        for a, b in combinations(boxes, 2):
            overlap_x = min(a[2], b[2]) - max(a[0], b[0])
            overlap_y = min(a[3], b[3]) - max(a[1], b[1])
            assert overlap_x <= 0.5 or overlap_y <= 0.5, (a, b)


@needs_poppler
def test_pdf_pages_render_to_non_blank_images(rendered_pdf, tmp_path):
    path, pages = rendered_pdf
    _run("pdftoppm", "-r", "50", "-png", str(path), str(tmp_path / "page"))
    images = sorted(glob.glob(str(tmp_path / "page*.png")))
    assert len(images) == pages
    for image in images:
        pixels = imread(image)
        # A4 at 50 dpi is 413 x 585 pixels (ISO 216 size, 25.4 mm per inch).
        assert abs(pixels.shape[1] - 413) <= 1 and abs(pixels.shape[0] - 585) <= 1
        assert (pixels[..., :3].min(axis=2) < 0.6).mean() > 0.002  # ink on the page


def test_pdf_is_reproducible_for_a_fixed_date(tmp_path, doc, rendered_pdf):
    again = tmp_path / "again.pdf"
    render_pdf(doc, again)
    assert again.read_bytes() == rendered_pdf[0].read_bytes()


# --- atomic writes ----------------------------------------------------------------------------

def _leftovers(folder: Path) -> list[str]:
    return [p.name for p in folder.iterdir() if p.name.endswith(".part")]


def test_write_atomic_replaces_and_keeps_usual_permissions(tmp_path):
    target = tmp_path / "notes.txt"
    write_atomic(target, "first")
    write_atomic(target, b"second \xff")
    assert target.read_bytes() == b"second \xff"
    assert _leftovers(tmp_path) == []
    if os.name == "posix":
        mask = os.umask(0o022)
        os.umask(mask)
        assert target.stat().st_mode & 0o777 == 0o666 & ~mask  # POSIX open(2): mode less the umask


def test_failure_inside_atomic_path_keeps_previous_file(tmp_path):
    target = tmp_path / "report.pdf"
    target.write_bytes(b"previous report")
    with pytest.raises(RuntimeError, match="midway"):
        with atomic_path(target) as temp:
            temp.write_bytes(b"half a new rep")
            raise RuntimeError("midway")
    assert target.read_bytes() == b"previous report"
    assert _leftovers(tmp_path) == []


def test_failed_flush_keeps_previous_file(tmp_path, monkeypatch):
    target = tmp_path / "report.html"
    target.write_bytes(b"previous")

    def disk_full(fd):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "fsync", disk_full)
    with pytest.raises(OSError, match="No space"):
        write_atomic(target, "new content")
    assert target.read_bytes() == b"previous"
    assert _leftovers(tmp_path) == []


def test_atomic_path_names_a_missing_folder(tmp_path):
    with pytest.raises(SettingError, match="does not exist"):
        write_atomic(tmp_path / "absent" / "report.pdf", "x")


def test_render_pdf_failing_midway_keeps_previous_file(tmp_path, monkeypatch, doc):
    target = tmp_path / "report.pdf"
    target.write_bytes(b"%PDF previous")
    real, calls = pdf_report._draw_page, []

    def fail_on_second_page(ops):
        calls.append(1)
        if len(calls) == 2:
            raise RuntimeError("renderer failed midway")
        return real(ops)

    monkeypatch.setattr(pdf_report, "_draw_page", fail_on_second_page)
    with pytest.raises(RuntimeError, match="midway"):
        render_pdf(doc, target)
    assert target.read_bytes() == b"%PDF previous"
    assert _leftovers(tmp_path) == []


def _kill_midway(script: str, folder: Path) -> None:
    """Run ``script`` until it prints "midway", then SIGKILL it."""
    env = {**os.environ, "PYTHONPATH": str(SRC), "MPLBACKEND": "Agg"}
    child = subprocess.Popen([sys.executable, "-c", textwrap.dedent(script)], stdout=subprocess.PIPE,
                             stderr=subprocess.PIPE, text=True, env=env)
    try:
        line = child.stdout.readline()
        assert line.strip() == "midway", child.stderr.read()
        assert _leftovers(folder)  # the new content is being written beside the target
        child.send_signal(signal.SIGKILL)
        assert child.wait(timeout=30) == -signal.SIGKILL
    finally:
        if child.poll() is None:
            child.kill()
        child.stdout.close()
        child.stderr.close()


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="SIGKILL exists on POSIX systems only")
def test_process_killed_while_writing_a_large_file_keeps_previous_file(tmp_path):
    target = tmp_path / "big.bin"
    previous = np.random.default_rng(0).bytes(1 << 20)
    target.write_bytes(previous)
    _kill_midway(f"""
        import time
        from grovewise.report.atomic import atomic_path
        with atomic_path({str(target)!r}) as temp:
            with open(temp, "wb") as handle:
                handle.write(b"n" * (32 << 20))
                handle.flush()
                print("midway", flush=True)
                time.sleep(60)
                handle.write(b"end")
        """, tmp_path)
    assert target.read_bytes() == previous


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="SIGKILL exists on POSIX systems only")
def test_process_killed_while_rendering_a_pdf_keeps_previous_report(tmp_path):
    target = tmp_path / "report.pdf"
    target.write_bytes(b"%PDF previous report")
    _kill_midway(f"""
        import time
        from grovewise.report import pdf_report
        from grovewise.report.document import Document, Heading, PageBreak
        real, calls = pdf_report._draw_page, []
        def slow(ops):
            calls.append(1)
            if len(calls) == 2:
                print("midway", flush=True)
                time.sleep(60)
            return real(ops)
        pdf_report._draw_page = slow
        doc = Document("t", {{"date": "2025-03-14"}}, [Heading("one"), PageBreak(), Heading("two")])
        pdf_report.render_pdf(doc, {str(target)!r})
        """, tmp_path)
    assert target.read_bytes() == b"%PDF previous report"
