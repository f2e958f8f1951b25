"""The report on paper: readable when the PDF is printed on A4 at 100%.

No text under 6 pt (text drawn as PDF text, and text inside the figures, which are embedded
as images: their font size times the scale they are placed at), no page left more than half
empty by a table that breaks, no raw JSON in a table, a list of contents with page numbers,
a title page naming model, data, reviewer, decision and date, and the reliability plot of
the model's own performance.

Outside references:
- the PDF is read back as a PDF reader reads it, from its content streams, following
  ISO 32000-1:2008 (PDF 1.7): 7.3 objects, 7.8.2 content streams, 8.3.4 and 8.4.4 the current
  transformation matrix (q, Q, cm), 8.8 image XObjects (Do), 9.3 and 9.4 text state and text
  objects (Tf, BT, Tm, Td, TD, T*, Tj, TJ); poppler-utils (pdftotext, pdftoppm, pdffonts, an
  independent reader) for the text, the page images and the embedded fonts;
- the reliability plot's points against scikit-learn's ``sklearn.calibration.calibration_curve``
  (10 uniform bins) on the same predictions;
- A4 is 595.276 x 841.890 pt (ISO 216: 210 x 297 mm, 72 pt to the inch).

The sample review is run once on the bundled sample model and the first 600 rows of its data
(a short time limit: the layout, not the solve, is under test).
"""

from __future__ import annotations

import datetime as dt
import re
import shutil
import subprocess
import zlib
from dataclasses import dataclass
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure as MplFigure
from matplotlib.image import imread
from matplotlib.text import Text as MplText
from sklearn.calibration import calibration_curve
from sklearn.datasets import load_wine
from sklearn.ensemble import RandomForestClassifier

from grovewise.analysis.performance import model_performance
from grovewise.report import pdf_report as pr
from grovewise.report.content import review_document
from grovewise.report.document import (Contents, Document, Figure, Heading, KeyValues, PageBreak,
                                       Paragraph, Table, Title)
from grovewise.report.figures_performance import RELIABILITY_LINE, reliability_figure
from grovewise.report.html_report import render_html
from grovewise.review import Review, ReviewInputs, Reviewer, ReviewSettings
from grovewise.sample_data import sample_paths

POPPLER = all(shutil.which(t) for t in ("pdftotext", "pdftoppm", "pdffonts"))
needs_poppler = pytest.mark.skipif(not POPPLER, reason="poppler-utils (pdftotext, pdftoppm, "
                                   "pdffonts) is not installed; `.ci/run` installs it")
SMALLEST = 6.0  # points, the floor for printed text
FIGURE_DPI = 200  # the report embeds figures at this resolution (pdf_report.FIGURE_DPI)
DATE = dt.datetime(2025, 3, 14, 9, 30, tzinfo=dt.timezone.utc)
ROWS = 600
SETTINGS = dict(depth=1, time_limit=2.0, permutation_repeats=1, permutation_rows=300,
                exactness_rows=300, proximity_rows=200, seed=1, effects_rows=150,
                interaction_rows=30, stability_resamples=0)


# --- reading the PDF as a PDF ------------------------------------------------------------------

@dataclass
class Drawn:
    """A text-showing operation or an image, as placed on its page (points, from the top)."""

    page: int
    kind: str  # "text" or "image"
    size: float  # text: the printed font size; image: the placed width
    top: float  # text: the baseline; image: the top edge
    height: float = 0.0  # image: placed height
    pixels: tuple[int, int] = (0, 0)  # image: width, height in pixels


_OBJ = re.compile(rb"(\d+)\s+0\s+obj\b")
_TOKEN = re.compile(rb"""(?P<ws>\s+|%[^\r\n]*) | (?P<str>\() | (?P<dict><<|>>)
    | (?P<hex><[0-9A-Fa-f\s]*>) | (?P<arr>[\[\]]) | (?P<name>/[^\s/\[\]()<>{}%]*)
    | (?P<num>[+-]?(?:\d+\.?\d*|\.\d+)) | (?P<op>[A-Za-z'"*][A-Za-z0-9'"*]*)""", re.X)


def _objects(data: bytes) -> dict[int, tuple[bytes, bytes | None]]:
    """Object number -> (its dictionary, its decoded stream or None)."""
    out = {}
    for m in _OBJ.finditer(data):
        body = data[m.end():data.find(b"endobj", m.end())]
        stream, s = None, body.find(b"stream")
        if s >= 0:
            if b"/FlateDecode" in body[:s]:
                stream = zlib.decompressobj().decompress(body[s + 6:].lstrip(b"\r\n"))
            body = body[:s]
        out[int(m.group(1))] = (body, stream)
    return out


def _ref(body: bytes, key: bytes) -> int | None:
    m = re.search(rb"/" + key + rb"\s+(\d+)\s+0\s+R", body)
    return int(m.group(1)) if m else None


def _tokens(data: bytes):
    """(is_operator, value): numbers as floats, names as bytes; strings, arrays and
    dictionaries as None (their contents are not needed)."""
    i = 0
    while i < len(data):
        m = _TOKEN.match(data, i)
        if m is None:
            i += 1
            continue
        if m.lastgroup == "str":  # a literal string: balanced parentheses, backslash escapes
            depth = 0
            while i < len(data):
                c = data[i:i + 1]
                i += 2 if c == b"\\" else 1
                depth += {b"(": 1, b")": -1}.get(c, 0)
                if depth == 0:
                    break
            yield False, None
            continue
        i = m.end()
        if m.lastgroup == "op":
            yield True, m.group().decode("latin-1")
        elif m.lastgroup == "num":
            yield False, float(m.group())
        elif m.lastgroup == "name":
            yield False, m.group()[1:]
        elif m.lastgroup != "ws":
            yield False, None


def _matrix(a, b, c, d, e, f) -> np.ndarray:
    return np.array([[a, b, 0.0], [c, d, 0.0], [e, f, 1.0]])


def read_pdf(path) -> tuple[int, list[Drawn]]:
    """The page count and every text-showing operation and image drawn, page by page."""
    data = open(path, "rb").read()
    objects = _objects(data)
    catalog = next(b for b, _ in objects.values() if re.search(rb"/Type\s*/Catalog", b))

    def pages(node: int) -> list[int]:
        body = objects[node][0]
        if re.search(rb"/Type\s*/Page\b(?!s)", body):
            return [node]
        kids = re.search(rb"/Kids\s*\[([^\]]*)\]", body).group(1)
        return [p for k in re.findall(rb"(\d+)\s+0\s+R", kids) for p in pages(int(k))]

    order = pages(_ref(catalog, b"Pages"))
    drawn: list[Drawn] = []
    for number, page in enumerate(order, start=1):
        body = objects[page][0]
        height = float(re.search(rb"/MediaBox\s*\[\s*\S+\s+\S+\s+\S+\s+(\S+)\s*\]", body).group(1))
        resources = objects[_ref(body, b"Resources")][0]
        images = {}
        xobjects = _ref(resources, b"XObject")
        for name, num in re.findall(rb"/([^\s/]+)\s+(\d+)\s+0\s+R", objects[xobjects][0] if xobjects else b""):
            xo = objects[int(num)][0]
            if re.search(rb"/Subtype\s*/Image", xo):
                images[name] = (int(re.search(rb"/Width\s+(\d+)", xo).group(1)),
                                int(re.search(rb"/Height\s+(\d+)", xo).group(1)))
        drawn += _page_content(objects[_ref(body, b"Contents")][1], number, height, images)
    return len(order), drawn


def _page_content(stream: bytes, page: int, page_h: float, images: dict) -> list[Drawn]:
    out: list[Drawn] = []
    ctm, saved = np.eye(3), []
    tm = line = np.eye(3)
    size = leading = 0.0
    args: list = []
    for is_op, value in _tokens(stream):
        if not is_op:
            args.append(value)
            continue
        if value == "q":
            saved.append(ctm)
        elif value == "Q":
            ctm = saved.pop()
        elif value == "cm":
            ctm = _matrix(*args[-6:]) @ ctm
        elif value == "BT":
            tm = line = np.eye(3)
        elif value == "Tf":
            size = float(args[-1])
        elif value == "TL":
            leading = float(args[-1])
        elif value == "Tm":
            tm = line = _matrix(*args[-6:])
        elif value in ("Td", "TD"):
            if value == "TD":
                leading = -args[-1]
            tm = line = _matrix(1, 0, 0, 1, *args[-2:]) @ line
        elif value == "T*":
            tm = line = _matrix(1, 0, 0, 1, 0, -leading) @ line
        elif value in ("Tj", "TJ", "'", '"'):
            m = tm @ ctm  # the text rendering matrix, less the font size (ISO 32000-1, 9.4.4)
            out.append(Drawn(page, "text", size * float(np.sqrt(abs(np.linalg.det(m[:2, :2])))),
                             page_h - m[2, 1]))
        elif value == "Do" and args and args[-1] in images:
            w, h = float(np.hypot(*ctm[0, :2])), float(np.hypot(*ctm[1, :2]))
            out.append(Drawn(page, "image", w, page_h - ctm[2, 1] - h, h, images[args[-1]]))
        args = []
    return out


def figure_text_sizes(figure: MplFigure) -> list[float]:
    """Font sizes (points at the figure's own size) of the text a drawn figure shows."""
    return [t.get_fontsize() for t in figure.findobj(MplText) if t.get_visible() and t.get_text().strip()]


def printed_figure_text(doc: Document, drawn: list[Drawn]) -> list[tuple[str, float]]:
    """Each figure's caption and its smallest text as printed: its smallest font size times
    the scale the PDF places its image at (placed width over the figure's own width). The
    images are the document's figures in reading order; their pixel widths must agree."""
    figures = [b for b in doc.blocks if isinstance(b, Figure)]
    images = [d for d in drawn if d.kind == "image"]
    assert len(images) == len(figures)
    out = []
    for block, image in zip(figures, images):
        inches = block.figure.get_figwidth()
        assert abs(image.pixels[0] - inches * FIGURE_DPI) <= 1, block.caption
        scale = image.size / (inches * 72.0)
        out.append((block.caption, min(figure_text_sizes(block.figure)) * scale))
    return out


def _run(*args) -> str:
    return subprocess.run(args, capture_output=True, text=True, check=True, timeout=60).stdout


def _page_text(path, page: int, layout: bool = False) -> str:
    text = _run("pdftotext", *(["-layout"] if layout else []), "-f", str(page), "-l", str(page), str(path), "-")
    return text if layout else " ".join(text.split())


def _body_bottom(drawn: list[Drawn], page: int) -> float:
    """The lowest baseline or image edge in the page's body (header and footer left out)."""
    ends = [d.top + d.height if d.kind == "image" else d.top for d in drawn
            if d.page == page and pr.BODY_TOP - 20 < d.top < pr.BODY_BOTTOM + 2]
    return max(ends, default=pr.BODY_TOP)


# --- the sample review -------------------------------------------------------------------------

@pytest.fixture(scope="module")
def sample(tmp_path_factory):
    """The sample reviewed through the API, its report document composed and its PDF written."""
    folder = tmp_path_factory.mktemp("paper")
    paths = sample_paths()
    model = shutil.copy(paths["forest"], folder / "model.skops")
    pd.read_csv(paths["data"]).head(ROWS).to_csv(folder / "data.csv", index=False)
    review = Review(ReviewInputs(model, folder / "data.csv", target=paths["target"]),
                    ReviewSettings(**SETTINGS, flags={"age_years": "protected"}),
                    Reviewer(name="R. Okafor", role="model validator",
                             decision="approve_with_conditions", conditions="re-review in a year"))
    review.run()
    doc = review_document(review, date=DATE)
    pdf = folder / "report.pdf"
    pages = pr.render_pdf(doc, pdf)
    n_pages, drawn = read_pdf(pdf)
    assert n_pages == pages
    return review, doc, pdf, pages, drawn


@needs_poppler
def test_every_text_in_the_pdf_prints_at_6_pt_or_more(sample):
    """Reference: the PDF's own text objects (ISO 32000-1, 9.4); pdffonts for the fonts."""
    _, _, pdf, pages, drawn = sample
    for page in range(1, pages + 1):
        sizes = [d.size for d in drawn if d.page == page and d.kind == "text"]
        assert sizes, page
        assert min(sizes) >= SMALLEST, (page, min(sizes))
    # the reader reads sizes right: the title page's title is set in TITLE_PAGE's 28 pt, the
    # footer in SMALL's 8 pt
    assert max(d.size for d in drawn if d.page == 1) == pytest.approx(pr.TITLE_PAGE.size)
    assert pytest.approx(pr.SMALL.size) in [d.size for d in drawn if d.page == pages]
    # all text is text in embedded TrueType fonts (no glyphs drawn as shapes the check misses)
    fonts = _run("pdffonts", str(pdf)).splitlines()[2:]
    assert fonts and all("TrueType" in f and re.search(r"\byes\s+yes\s+yes\b", f) for f in fonts)


def test_the_text_check_sees_text_under_6_pt(tmp_path, monkeypatch):
    """The same reading on a PDF whose footer is set in 5 pt (the renderer's SMALL font
    swapped for the test): the reader finds it, on every page."""
    monkeypatch.setattr(pr, "SMALL", pr._Font(5.0, color=pr.MUTED))
    doc = Document("t", {"date": "2025-03-14"}, [Heading("One"), PageBreak(), Heading("Two")])
    pages = pr.render_pdf(doc, tmp_path / "tiny.pdf")
    _, drawn = read_pdf(tmp_path / "tiny.pdf")
    for page in range(1, pages + 1):
        assert min(d.size for d in drawn if d.page == page) == pytest.approx(5.0)


def test_every_figure_prints_its_text_at_6_pt_or_more(sample):
    """Reference: each image's placement read from the PDF (ISO 32000-1, 8.3.4 and 8.8) times
    the font sizes of the matplotlib figure it shows."""
    _, doc, _, _, drawn = sample
    printed = printed_figure_text(doc, drawn)
    assert len(printed) >= 9  # tree, reliability, four anatomy figures, tree, three effects
    small = [(caption, round(size, 2)) for caption, size in printed if size < SMALLEST]
    assert not small


def test_the_figure_check_fails_for_a_figure_printed_too_small(tmp_path):
    """The same check on a figure too wide to print its 7 pt text at 6 pt (14 in placed in the
    6.55 in text width: 7 x 471.3 / 1008 = 3.3 pt); a narrow one is widened until it prints."""
    wide = MplFigure(figsize=(14.0, 3.0))
    wide.text(0.5, 0.5, "seven points", fontsize=7.0)
    narrow = MplFigure(figsize=(6.5, 2.0))
    narrow.text(0.5, 0.5, "six and a half points", fontsize=6.5)
    doc = Document("t", {"date": "2025-03-14"}, [Figure(wide, "wide"), Figure(narrow, "narrow", width=0.3)])
    pr.render_pdf(doc, tmp_path / "small.pdf")
    _, drawn = read_pdf(tmp_path / "small.pdf")
    (_, too_small), (_, widened) = printed_figure_text(doc, drawn)
    assert too_small == pytest.approx(7.0 * pr.TEXT_W / (14.0 * 72.0), rel=1e-3)
    assert too_small < SMALLEST
    assert widened == pytest.approx(SMALLEST, rel=1e-3)  # widened from 30% just enough


@needs_poppler
def test_every_page_renders_and_none_is_blank(sample, tmp_path):
    """Reference: poppler's pdftoppm renders each page; A4 at 50 dpi is 413 x 585 pixels."""
    _, _, pdf, pages, _ = sample
    _run("pdftoppm", "-r", "50", "-png", str(pdf), str(tmp_path / "page"))
    images = sorted(tmp_path.glob("page*.png"))
    assert len(images) == pages
    for image in images:
        pixels = imread(image)
        assert abs(pixels.shape[1] - 413) <= 1 and abs(pixels.shape[0] - 585) <= 1
        assert (pixels[..., :3].min(axis=2) < 0.6).mean() > 0.002, image.name  # ink on it


@needs_poppler
def test_the_title_page_names_model_data_reviewer_decision_and_date(sample):
    """Reference: the review's own inputs and reviewer, read back with pdftotext."""
    review, doc, pdf, _, _ = sample
    first = _page_text(pdf, 1)
    for text in ("Model review", "Model model.skops", "Data data.csv", "Reviewer R. Okafor, model validator",
                 "Decision approved with conditions", "Date 2025-03-14 09:30",
                 review.intake.model_sha256[:40]):
        assert text in first, text
    assert not any(h.text in first for h in doc.headings())  # the title page holds no section


@needs_poppler
def test_the_contents_give_each_headings_page(sample):
    """Reference: pdftotext of the page each entry names."""
    _, doc, pdf, pages, _ = sample
    contents = _page_text(pdf, 2, layout=True)
    assert "Contents" in contents
    listed = [h for h in doc.headings() if h.level <= 2]
    found = []
    for heading in listed:
        m = re.search(rf"^\s*{re.escape(heading.text)}\s+(\d+)\s*$", contents, re.M)
        assert m, heading.text
        found.append(int(m.group(1)))
    assert found == sorted(found) and 2 < found[0] and found[-1] <= pages
    texts = {p: _page_text(pdf, p) for p in set(found)}
    for heading, page in zip(listed, found):
        assert heading.text in texts[page], (heading.text, page)


@needs_poppler
def test_no_table_shows_raw_json(sample):
    """Reference: the review's own settings; a dict or list printed by Python starts with a
    brace or bracket and quotes its keys."""
    review, doc, pdf, _, _ = sample
    cells = [t for b in doc.blocks if isinstance(b, Table) for row in b.text_rows() for t in row]
    cells += [pr.format_value(v) for b in doc.blocks if isinstance(b, KeyValues) for _, v in b.rows]
    code = re.compile(r"^\s*[\[{]|[\[{]\s*['\"]|['\"]\s*[\]}]|^\s*None\s*$")
    assert cells and not [c for c in cells if code.search(c)]
    text = _run("pdftotext", "-layout", str(pdf), "-")
    assert re.search(r"^\s*flags\s+age_years: protected\s*$", text, re.M)
    assert re.search(r"^\s*group_columns\s+none\s*$", text, re.M)
    assert review.settings.flags == {"age_years": "protected"}
    assert not re.search(r"\{'|'\}|\['|\[\]", text)


def test_the_reliability_plot_shows_calibration_curve(sample):
    """Reference: sklearn.calibration.calibration_curve (10 uniform bins) of the model's
    probability of its positive class on the review rows; np.histogram for the rows per bin."""
    review, doc, _, _, drawn = sample
    classes = list(review.forest.classes_)
    proba = review.forest.predict_proba(review.data.X)[:, 1]
    hits = np.array([v == classes[1] for v in review.data.y])
    observed, predicted = calibration_curve(hits, proba, n_bins=10, strategy="uniform")
    perf = review.intake.performance
    figure = next(b.figure for b in doc.blocks if isinstance(b, Figure) and b.caption.startswith("Reliability"))
    line = next(ln for ax in figure.axes for ln in ax.lines if ln.get_gid() == RELIABILITY_LINE)
    np.testing.assert_allclose(line.get_xdata(), predicted, rtol=0, atol=1e-12)
    np.testing.assert_allclose(line.get_ydata(), observed, rtol=0, atol=1e-12)
    counts, _ = np.histogram(proba, bins=np.linspace(0, 1, 11))
    bars = [p.get_height() for ax in figure.axes for p in ax.patches if ax.get_label() == "rows per bin"]
    assert bars == counts[counts > 0].tolist()
    assert [b.count for b in perf.reliability] == bars


@needs_poppler
def test_the_reliability_plot_sits_in_the_performance_section(sample):
    """Reference: pdftotext of the page that holds the reliability table."""
    _, doc, pdf, pages, drawn = sample
    number = next(i for i, b in enumerate([b for b in doc.blocks if isinstance(b, Figure)], 1)
                  if b.caption.startswith("Reliability"))
    where = [p for p in range(1, pages + 1) if f"Figure {number}. Reliability:" in _page_text(pdf, p)]
    assert len(where) == 1
    performance = [p for p in range(1, pages + 1) if "The model's own performance" in _page_text(pdf, p)]
    assert performance and performance[-1] <= where[0] <= performance[-1] + 1
    assert any(d.kind == "image" and d.page == where[0] for d in drawn)


def test_multi_class_reliability_plot_is_confidence_calibration():
    """Reference: calibration_curve of "the largest-probability class is right" against the
    largest probability, on scikit-learn's wine data (three classes)."""
    X, y = load_wine(return_X_y=True)
    rf = RandomForestClassifier(n_estimators=20, max_depth=3, random_state=0).fit(X[::2], y[::2])
    proba = rf.predict_proba(X[1::2])
    perf = model_performance(y[1::2], proba, rf.classes_)
    figure = reliability_figure(perf)
    right = rf.classes_[np.argmax(proba, axis=1)] == y[1::2]
    observed, predicted = calibration_curve(right, proba.max(axis=1), n_bins=10)
    line = next(ln for ax in figure.axes for ln in ax.lines if ln.get_gid() == RELIABILITY_LINE)
    np.testing.assert_allclose(line.get_xdata(), predicted, atol=1e-12)
    np.testing.assert_allclose(line.get_ydata(), observed, atol=1e-12)
    assert min(figure_text_sizes(figure)) >= 6.5


@needs_poppler
def test_no_table_continuation_leaves_its_page_half_empty_in_the_sample(sample):
    """Reference: the PDF's text and images (lowest baseline or image edge of each page)."""
    _, _, pdf, pages, drawn = sample
    for page in range(2, pages + 1):
        text = _page_text(pdf, page)
        if "(continued)" in text:
            assert _body_bottom(drawn, page) >= pr.BODY_TOP + pr.BODY_H / 2, page


# --- tables on pages, on constructed documents --------------------------------------------------

def _rows_doc(n_rows: int, filler: int, after: list | None = None) -> Document:
    """A heading, ``filler`` lines of text, a table of ``n_rows`` numbered rows, then ``after``."""
    return Document("Layout", {"date": "2025-03-14"}, [
        Heading("Rows"), Paragraph("\n".join(f"filler line {i}" for i in range(filler))),
        Table(["row", "value"], [[f"row-{i:03d}", i * 1.5] for i in range(n_rows)], caption="Rows"),
        *(after or [])])


def _spill(doc: Document) -> int:
    """Rows the plain flow (no rules) would carry onto a table's last page."""
    runs = pr._runs(doc)
    flow = pr._Flow()
    flow.place_all(runs)
    table = max((i for i, r in enumerate(runs) if r.rows), key=lambda i: len(runs[i].units))
    pieces = flow.pieces[table]
    return 0 if len(pieces) < 2 else pieces[-1][2] - pieces[-1][1]


def _spilling_one_row(after: list) -> tuple[Document, int]:
    """A document whose table the plain flow breaks with one row on its second page."""
    for n_rows in range(30, 45):
        for filler in range(0, 20):
            doc = _rows_doc(n_rows, filler, after)
            if _spill(doc) == 1:
                return doc, n_rows
    raise AssertionError("no table of 30 to 44 rows spills one row")


def _rows_by_page(path, pages: int, n_rows: int) -> dict[int, list[int]]:
    where = {p: [int(m) for m in re.findall(r"\brow-(\d{3})\b", _page_text(path, p))] for p in range(1, pages + 1)}
    assert sorted(i for rows in where.values() for i in rows) == list(range(n_rows))  # each once
    return {p: rows for p, rows in where.items() if rows}


@needs_poppler
def test_a_table_spilling_one_row_before_a_page_break_fills_both_pages(tmp_path):
    """Reference: pdftotext of each page and the PDF's own text positions. Built so that the
    plain flow carries exactly one row over, and a page break follows the table."""
    doc, n = _spilling_one_row([PageBreak(), Heading("Next"), Paragraph("The next section.")])
    path = tmp_path / "spill.pdf"
    pages = pr.render_pdf(doc, path)
    _, drawn = read_pdf(path)
    rows = _rows_by_page(path, pages, n)
    assert len(rows) == 2
    (first, a), (second, b) = rows.items()
    assert second == first + 1 and min(len(a), len(b)) >= pr.MIN_ROWS
    for page in (first, second):  # neither page is more than half empty
        assert _body_bottom(drawn, page) >= pr.BODY_TOP + pr.BODY_H / 2, page
    assert "Table 1. Rows (continued)" in _page_text(path, second)


@needs_poppler
def test_a_table_keeps_at_least_three_rows_on_each_side(tmp_path):
    """Reference: pdftotext of each page. Built so that the plain flow carries one row over
    and more text follows (so that page fills anyway)."""
    doc, n = _spilling_one_row([Paragraph(" ".join(["More text follows the table."] * 200))])
    path = tmp_path / "widow.pdf"
    pages = pr.render_pdf(doc, path)
    rows = _rows_by_page(path, pages, n)
    assert len(rows) == 2 and min(len(r) for r in rows.values()) >= pr.MIN_ROWS


@needs_poppler
def test_a_short_table_moves_whole_with_its_heading(tmp_path):
    """Reference: pdftotext of each page and the PDF's own text positions. A table of ten
    rows under a heading, at the foot of a page it does not fit on."""
    table = [Heading("Short table", 2), Table(["row", "value"], [[f"row-{i:03d}", i] for i in range(10)])]

    def doc_with(filler: int) -> Document:
        return Document("Layout", {"date": "2025-03-14"},
                        [Paragraph("\n".join(f"filler line {i}" for i in range(filler))), *table])

    runs = pr._runs(doc_with(0))
    height = sum(u.height for r in runs[-2:] for u in r.units)  # the heading and the table
    # filler that leaves about half of that room at the foot of the first page
    filler = int((pr.BODY_H - height / 2) / pr.BODY.leading)
    doc = doc_with(filler)
    path = tmp_path / "short.pdf"
    pages = pr.render_pdf(doc, path)
    _, drawn = read_pdf(path)
    rows = _rows_by_page(path, pages, 10)
    assert list(rows) == [2]  # all ten rows on the second page
    assert "Short table" in _page_text(path, 2) and "Short table" not in _page_text(path, 1)
    assert _body_bottom(drawn, 1) >= pr.BODY_TOP + pr.BODY_H / 2  # the first page stays half full


def test_html_contents_list_links_every_heading_after_the_title_page():
    """Reference: Python's html.parser reads the page back."""
    doc = Document("Layout", {"model": "m.skops", "date": "2025-03-14"}, [
        Title("Layout", "sub", own_page=True), Contents(), PageBreak(), Heading("One"),
        Heading("One a", 2), Heading("One a i", 3), Heading("Two")])

    class Links(HTMLParser):
        def __init__(self):
            super().__init__()
            self.order, self.ids = [], set()

        def handle_starttag(self, tag, attrs):
            a = dict(attrs)
            if tag == "a" and a.get("href", "").startswith("#"):
                self.order.append(("link", a["href"][1:]))
            if "id" in a:
                self.ids.add(a["id"])
            if tag == "nav" or "page-break" in a.get("class", "") or tag == "header":
                self.order.append((tag if tag != "div" else "break", a.get("class", "")))

    page = Links()
    page.feed(render_html(doc))
    links = [v for k, v in page.order if k == "link"]
    assert len(links) == 3 and set(links) <= page.ids  # levels 1 and 2 only, each resolving
    kinds = [k for k, _ in page.order]
    assert kinds[:3] == ["header", "break", "nav"]  # title page, page break, then the contents
