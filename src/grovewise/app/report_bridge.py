"""Where the window gets the report from: whatever the report package offers.

The report package composes a review into a document and renders it (HTML, PDF). The
window needs two things from it: a way to write the report files and, for the Sign-off
page's preview, the PDF itself, made the same way. It uses ``export_report(review, folder,
formats)`` (from ``grovewise.report`` or ``grovewise.report.content``), or else the composer
``review_document(review)`` with ``write_html`` and ``render_pdf``.
"""

from __future__ import annotations

import importlib
import os
import shutil
import tempfile
from pathlib import Path

from ..errors import GrovewiseError

FORMATS = ("html", "pdf")
_COMPOSERS = ("compose_report", "compose", "review_document", "build_document", "document_for")


def _composer():
    try:
        content = importlib.import_module("grovewise.report.content")
    except ImportError:
        return None
    for name in _COMPOSERS:
        fn = getattr(content, name, None)
        if callable(fn):
            return fn
    return None


def _exporter():
    for module in ("grovewise.report", "grovewise.report.content"):
        try:
            mod = importlib.import_module(module)
        except ImportError:
            continue
        fn = getattr(mod, "export_report", None)
        if callable(fn):
            return fn
    return None


def available() -> bool:
    return _exporter() is not None or _composer() is not None


def preview_pdf(review, path) -> Path | None:
    """Write the report of ``review`` as a PDF at ``path``, as :func:`export_report` writes it
    (for the window's preview); None when this version cannot write reports yet."""
    if not available():
        return None
    path = Path(path)
    folder = Path(tempfile.mkdtemp(prefix=".report-", dir=path.parent))  # beside: one rename
    try:
        pdfs = [p for p in export_report(review, folder, ("pdf",)) if p.suffix == ".pdf"]
        if not pdfs:
            raise GrovewiseError("the report writer of this version wrote no PDF for the "
                                 "preview; export the report as HTML instead.")
        os.replace(pdfs[0], path)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    return path


def export_report(review, folder, formats=FORMATS) -> list[Path]:
    """Write the report of ``review`` into ``folder`` in ``formats``; returns the files."""
    formats = tuple(formats)
    bad = [f for f in formats if f not in FORMATS]
    if bad:
        raise GrovewiseError(f"report format(s) {', '.join(bad)} are not known; use html or pdf.")
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    export = _exporter()
    if export is not None:
        out = export(review, folder, formats)
        return [Path(p) for p in (out.values() if isinstance(out, dict) else out or [])]
    compose = _composer()
    if compose is None:
        raise GrovewiseError("this version of Grovewise cannot write reports yet (the report "
                             "composer, grovewise.report.content, is missing); save the review "
                             "and export it with a version that has it.")
    doc = compose(review)
    written = []
    if "html" in formats:
        from ..report.html_report import write_html

        written.append(write_html(doc, folder / "report.html"))
    if "pdf" in formats:
        from ..report.pdf_report import render_pdf

        render_pdf(doc, folder / "report.pdf")
        written.append(folder / "report.pdf")
    return written
