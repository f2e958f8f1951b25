"""A report :class:`~grovewise.report.document.Document` as one self-contained HTML5 page.

Nothing is fetched: the style sheet is inline and figures are embedded as base64 PNG.
Every string from the document passes through :func:`html.escape` (quotes included), and
a Content-Security-Policy forbids scripts, so a feature called ``<script>`` stays text.
"""

from __future__ import annotations

import base64
import html
import io
import os
from pathlib import Path

from .atomic import write_atomic
from .document import (Code, Contents, Document, Figure, Heading, KeyValues, PageBreak, Paragraph, Table,
                       Title, format_value)

FIGURE_DPI = 150
CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'"
ALIGN_CLASS = {"left": "l", "right": "r", "center": "c"}

STYLE = """
:root { --ink: #1d2730; --muted: #5b6670; --rule: #d5dbe0; --accent: #2c5d6f;
        --paper: #ffffff; --wash: #f4f6f8; --warn: #b7791f; --warn-wash: #fbf4e6; }
* { box-sizing: border-box; }
html { background: #eef1f3; }
body { margin: 0 auto; max-width: 58rem; padding: 3rem 4rem 4rem; background: var(--paper);
       color: var(--ink); font: 15px/1.55 "DejaVu Sans", "Segoe UI", "Helvetica Neue", Arial, sans-serif; }
header.front { border-bottom: 2px solid var(--accent); padding-bottom: 1.25rem; margin-bottom: 1.5rem; }
header.title-page { padding-top: 2rem; }
h1.title { font-size: 1.9rem; line-height: 1.2; margin: 0 0 .35rem; letter-spacing: -.01em; }
p.subtitle { color: var(--muted); font-size: 1.05rem; margin: 0 0 1.1rem; }
dl.meta, dl.kv { display: grid; grid-template-columns: minmax(8rem, max-content) 1fr; margin: 0;
                 column-gap: 1.25rem; }
dl.meta dt, dl.kv dt { color: var(--muted); font-weight: 600; font-size: .86rem; padding: .28rem 0; }
dl.meta dd, dl.kv dd { margin: 0; padding: .28rem 0; font-size: .9rem; overflow-wrap: anywhere; }
dl.kv dt, dl.kv dd { border-top: 1px solid var(--rule); }
nav.toc { background: var(--wash); padding: .9rem 1.4rem 1rem; margin: 0 0 2rem; border-radius: 3px; }
nav.toc .toc-label { font-weight: 700; font-size: .8rem; text-transform: uppercase; letter-spacing: .08em;
                     color: var(--muted); margin: 0 0 .4rem; }
nav.toc ol { margin: 0; padding-left: 1.3rem; } nav.toc ol ol { padding-left: 1.1rem; }
nav.toc li { margin: .12rem 0; } nav.toc a { color: var(--ink); text-decoration: none; }
nav.toc a:hover { text-decoration: underline; }
h2, h3, h4 { line-height: 1.25; break-after: avoid; page-break-after: avoid; }
h2 { font-size: 1.35rem; color: var(--accent); margin: 2.2rem 0 .7rem; padding-bottom: .25rem;
     border-bottom: 1px solid var(--rule); }
h3 { font-size: 1.1rem; margin: 1.6rem 0 .5rem; }
h4 { font-size: .98rem; color: var(--muted); margin: 1.3rem 0 .4rem; }
p { margin: 0 0 .75rem; overflow-wrap: anywhere; }
p.note { color: var(--muted); font-size: .88rem; font-style: italic; }
aside.caution { border-left: 4px solid var(--warn); background: var(--warn-wash); padding: .7rem 1rem .2rem;
                margin: 0 0 1rem; break-inside: avoid; }
aside.caution .caution-label { font-weight: 700; font-size: .78rem; text-transform: uppercase;
                               letter-spacing: .08em; color: var(--warn); margin-bottom: .3rem; }
.caption { color: var(--muted); font-size: .86rem; margin: 0 0 .4rem; }
.table-wrap { overflow-x: auto; margin: 0 0 1.2rem; }
table { border-collapse: collapse; width: auto; min-width: 50%; font-size: .86rem; }
caption { caption-side: top; text-align: left; color: var(--muted); font-size: .86rem; padding-bottom: .4rem; }
th, td { padding: .3rem .7rem; border-bottom: 1px solid var(--rule); vertical-align: top;
         overflow-wrap: anywhere; }
th { border-bottom: 1.5px solid var(--ink); font-weight: 700; background: var(--paper); }
td { font-variant-numeric: tabular-nums; }
tbody tr:last-child td { border-bottom: 1.5px solid var(--ink); }
.l { text-align: left; } .r { text-align: right; } .c { text-align: center; }
figure { margin: 1rem auto 1.4rem; break-inside: avoid; }
figure img { display: block; width: 100%; height: auto; }
figcaption { color: var(--muted); font-size: .86rem; margin-top: .4rem; }
pre.code { background: var(--wash); border: 1px solid var(--rule); padding: .8rem 1rem; margin: 0 0 1.1rem;
           font: 12.5px/1.5 "DejaVu Sans Mono", Menlo, Consolas, monospace; white-space: pre-wrap;
           overflow-wrap: anywhere; }
footer.end { margin-top: 3rem; padding-top: .6rem; border-top: 1px solid var(--rule); color: var(--muted);
             font-size: .8rem; display: flex; justify-content: space-between; gap: 1rem; }
.page-break { height: 0; }
@media print {
  @page { size: A4; margin: 18mm 16mm 20mm; }
  html { background: none; }
  body { max-width: none; padding: 0; font-size: 10pt; }
  nav.toc { background: none; border: 1px solid var(--rule); }
  .table-wrap { overflow: visible; }
  thead { display: table-header-group; }
  tr, pre.code, aside.caution, figure { break-inside: avoid; page-break-inside: avoid; }
  .page-break { break-before: page; page-break-before: always; }
  a { color: inherit; text-decoration: none; }
}
"""


def render_html(doc: Document) -> str:
    """Render ``doc`` as a self-contained HTML5 page.

    Parameters
    ----------
    doc : Document
        The report; its strings are plain text and are all escaped here.

    Returns
    -------
    str
        The whole page: inline style sheet, header with the particulars, a table of
        contents from the headings, the blocks, and figures as ``data:`` PNG images.
    """
    title, body = doc.front()
    captions = doc.numbered_captions()
    anchors = _anchors(body)
    placed = any(isinstance(b, Contents) for b in body)  # else the contents follow the front
    parts = [_head(doc), "<body>", _front(doc, title), "" if placed else _toc(body, anchors), "<main>"]
    parts += [_toc(body, anchors, b) if isinstance(b, Contents) else _block(b, captions, anchors)
              for b in body]
    parts += ["</main>", _footer(doc), "</body>", "</html>", ""]
    return "\n".join(parts)


def write_html(doc: Document, path: str | os.PathLike) -> Path:
    """Render ``doc`` and write it atomically to ``path`` (UTF-8); return the path."""
    return write_atomic(path, render_html(doc))


def _e(text: object) -> str:
    return html.escape(str(text), quote=True)


def _head(doc: Document) -> str:
    return "\n".join([
        "<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
        f'<meta http-equiv="Content-Security-Policy" content="{CSP}">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        '<meta name="generator" content="Grovewise">',
        f"<title>{_e(doc.title)}</title>", f"<style>{STYLE}</style>", "</head>",
    ])


def _front(doc: Document, title: Title) -> str:
    rows = "".join(f"<div><dt>{_e(k)}</dt><dd>{_e(v)}</dd></div>" for k, v in doc.meta_rows())
    parts = ['<header class="front title-page">' if title.own_page else '<header class="front">',
             f'<h1 class="title">{_e(title.text)}</h1>']
    if title.subtitle:
        parts.append(f'<p class="subtitle">{_e(title.subtitle)}</p>')
    if rows:
        parts.append(f'<dl class="meta">{rows}</dl>')
    parts.append("</header>")
    if title.own_page:
        parts.append('<div class="page-break" aria-hidden="true"></div>')
    return "\n".join(parts)


def _anchors(blocks: list) -> dict[int, str]:
    return {id(b): f"sec-{i}" for i, b in enumerate(x for x in blocks if isinstance(x, Heading))}


def _toc(blocks: list, anchors: dict[int, str], contents: Contents | None = None) -> str:
    """The contents as nested lists of links: each heading below level 1 listed under the
    level-1 heading before it."""
    contents = contents or Contents()
    items: list[tuple[Heading, list[Heading]]] = []
    for heading in contents.entries(blocks):
        if heading.level == 1 or not items:
            items.append((heading, []))
        else:
            items[-1][1].append(heading)
    if not items:
        return ""

    def link(h: Heading) -> str:
        return f'<a href="#{anchors[id(h)]}">{_e(h.text)}</a>'

    label = _e(contents.title)
    lines = [f'<nav class="toc" aria-label="{label}">', f'<p class="toc-label">{label}</p>', "<ol>"]
    for heading, children in items:
        sub = "".join(f"<li>{link(c)}</li>" for c in children)
        lines.append(f"<li>{link(heading)}" + (f"<ol>{sub}</ol>" if sub else "") + "</li>")
    lines += ["</ol>", "</nav>"]
    return "\n".join(lines)


def _block(block: object, captions: dict[int, str], anchors: dict[int, str]) -> str:
    caption = captions.get(id(block), "")
    if isinstance(block, Heading):
        tag = f"h{block.level + 1}"
        return f'<{tag} id="{anchors[id(block)]}">{_e(block.text)}</{tag}>'
    if isinstance(block, Title):
        subtitle = f'<p class="subtitle">{_e(block.subtitle)}</p>' if block.subtitle else ""
        return f'<h2 class="title">{_e(block.text)}</h2>{subtitle}'
    if isinstance(block, Paragraph):
        return _paragraph(block)
    if isinstance(block, KeyValues):
        rows = "".join(f"<div><dt>{_e(format_value(k))}</dt><dd>{_e(format_value(v))}</dd></div>"
                       for k, v in block.rows)
        head = f'<p class="caption">{_e(caption)}</p>' if caption else ""
        return f'{head}<dl class="kv">{rows}</dl>'
    if isinstance(block, Table):
        return _table(block, caption)
    if isinstance(block, Figure):
        return _figure(block, caption)
    if isinstance(block, Code):
        head = f'<p class="caption">{_e(caption)}</p>' if caption else ""
        return f'{head}<pre class="code"><code>{_e(chr(10).join(block.lines()))}</code></pre>'
    if isinstance(block, PageBreak):
        return '<div class="page-break" aria-hidden="true"></div>'
    raise TypeError(f"The report cannot show a block of type {type(block).__name__}.")


def _paragraph(block: Paragraph) -> str:
    css = ' class="note"' if block.style == "note" else ""
    paras = "".join(f"<p{css}>" + "<br>".join(_e(line) for line in lines) + "</p>"
                    for lines in block.paragraphs())
    if block.style == "caution":
        return f'<aside class="caution" role="note"><p class="caution-label">Caution</p>{paras}</aside>'
    return paras


def _table(block: Table, caption: str) -> str:
    cls = [ALIGN_CLASS[a] for a in block.alignments()]
    head = "".join(f'<th scope="col" class="{c}">{_e(h)}</th>' for h, c in zip(block.header, cls))
    body = "".join("<tr>" + "".join(f'<td class="{c}">{_e(t)}</td>' for t, c in zip(row, cls)) + "</tr>"
                   for row in block.text_rows())
    cap = f"<caption>{_e(caption)}</caption>" if caption else ""
    return (f'<div class="table-wrap"><table>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{body}</tbody></table></div>")


def _figure(block: Figure, caption: str) -> str:
    buffer = io.BytesIO()
    block.figure.savefig(buffer, format="png", dpi=FIGURE_DPI, facecolor="white")
    data = base64.b64encode(buffer.getvalue()).decode("ascii")
    cap = f"<figcaption>{_e(caption)}</figcaption>" if caption else ""
    return (f'<figure style="width: {100.0 * block.width:.1f}%">'
            f'<img src="data:image/png;base64,{data}" alt="{_e(block.caption or "figure")}">{cap}</figure>')


def _footer(doc: Document) -> str:
    left = _e(doc.title)
    right = _e(doc.date_text())
    return f'<footer class="end"><span>{left}</span><span>{right}</span></footer>'
