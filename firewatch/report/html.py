"""The report as one self-contained HTML file: the same document as the PDF, the chart inline as SVG.

Prints on A4 or Letter (``@page``); every piece of text from the log is escaped.
"""

from __future__ import annotations

import html
import io
from pathlib import Path

from firewatch.report.chart import chart_figure
from firewatch.report.document import ChartBlock, Document, Fields, Table
from firewatch.report.text import unbreakable

__all__ = ["render_html", "write_html"]

_CSS = """
@page { size: %(paper)s; margin: 14mm 15mm 16mm 15mm; }
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; font-size: 9.5pt; color: #111; max-width: 190mm; margin: 1em auto; }
h1 { font-size: 17pt; margin: 0; }
.sub { color: #333; float: right; margin-top: 4pt; }
header { border-bottom: 1.5pt solid #000; padding-bottom: 3pt; margin-bottom: 6pt; }
dl { display: grid; grid-template-columns: 10em 1fr 10em 1fr; gap: 2pt 8pt; margin: 0 0 8pt 0; }
dt { color: #555; } dd { margin: 0; }
h2 { font-size: 11.5pt; margin: 12pt 0 3pt 0; break-after: avoid; }
table { border-collapse: collapse; width: 100%%; }
th { text-align: left; color: #555; font-weight: normal; border-bottom: 0.8pt solid #555; }
td, th { padding: 1.5pt 4pt 1.5pt 0; vertical-align: top; }
td.r, th.r { text-align: right; }
tr.mark td { font-weight: bold; }
tr.group td { border-top: 0.5pt solid #bbb; }
p.note, figcaption { color: #555; font-size: 8.5pt; margin: 3pt 0; }
figure { margin: 4pt 0; } figure svg { width: 100%%; height: auto; }
footer { border-top: 1pt solid #000; margin-top: 14pt; padding-top: 4pt; font-size: 8pt; }
footer .caution { font-weight: bold; } footer code { font-size: 8pt; word-break: break-all; }
"""


def _e(text: str) -> str:
    return html.escape(text or "", quote=True)


def _cell(text: str) -> str:
    """Escaped, with a number kept on one line with its unit and a date with its time (as in the PDF)."""
    return " ".join(_e(piece).replace(" ", "&nbsp;") for piece in unbreakable(text or ""))


def _chart_svg(doc: Document) -> str:
    fig = chart_figure(doc.record.chart, doc.clock, doc.units, width_mm=180.0, height_mm=100.0)
    buf = io.StringIO()
    import matplotlib

    with matplotlib.rc_context({"svg.fonttype": "none", "svg.hashsalt": "firewatch"}):
        fig.savefig(buf, format="svg")
    svg = buf.getvalue()
    return svg[svg.index("<svg"):]  # drop the XML prolog and doctype: the SVG sits inside HTML


def _table(t: Table) -> str:
    out = [f"<h2>{_e(t.title)}</h2>"]
    if not t.rows:
        out.append(f"<p>{_e(t.empty)}</p>")
    else:
        head = "".join(f'<th class="{a}">{_e(h)}</th>' for h, _, a in t.columns)
        out.append(f"<table><thead><tr>{head}</tr></thead><tbody>")
        marks = t.marks or [False] * len(t.rows)
        groups = t.groups or [False] * len(t.rows)
        for row, mark, group in zip(t.rows, marks, groups):
            cls = " ".join(c for c, on in (("mark", mark), ("group", group)) if on)
            cells = "".join(f'<td class="{a}">{_cell(text)}</td>' for text, (_, _, a) in zip(row, t.columns))
            out.append(f'<tr class="{cls}">{cells}</tr>' if cls else f"<tr>{cells}</tr>")
        out.append("</tbody></table>")
    if t.note:
        out.append(f'<p class="note">{_e(t.note)}</p>')
    return "\n".join(out)


def _fields(f: Fields) -> str:
    return "<dl>" + "".join(f"<dt>{_e(k)}</dt><dd>{_cell(v)}</dd>" for k, v in f.items) + "</dl>"


def render_html(doc: Document, paper: str = "a4") -> str:
    """The whole report as an HTML string."""
    r = doc.record
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{_e('Firing record: ' + (r.kiln or r.site_name) + ' (' + r.log_name + ')')}</title>",
        f'<meta name="generator" content="{_e(doc.produced.split(" · ")[0])}">',
        f'<meta name="firewatch-readings-sha256" content="{_e(r.digest)}">',
        f"<style>{_CSS % {'paper': 'A4' if paper == 'a4' else 'letter'}}</style></head><body>",
        f'<header><span class="sub">{_e(doc.subtitle)}</span><h1>{_e(doc.title)}</h1></header>',
        _fields(doc.header),
    ]
    for block in doc.blocks:
        if isinstance(block, ChartBlock):
            parts.append(f"<figure>{_chart_svg(doc)}<figcaption>{_e(block.caption)}</figcaption></figure>")
        elif isinstance(block, Table):
            parts.append(_table(block))
        elif isinstance(block, Fields):
            parts.append(_fields(block))
    parts.append("<footer>" + "".join(f'<p class="caution">{_e(c)}</p>' for c in doc.cautions))
    parts.append(f"<p><code>{_e(doc.digest_line)}</code></p><p>{_e(doc.produced)}</p></footer>")
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"


def write_html(doc: Document, path: str | Path, paper: str = "a4") -> None:
    Path(path).write_text(render_html(doc, paper), encoding="utf-8")
