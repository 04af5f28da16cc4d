"""``report.html`` (one self-contained file, images embedded) and ``report.md``.

The HTML is readable in a browser and printable (A4/Letter via print CSS); every text from the
data is escaped with :func:`html.escape`. The Markdown version refers to the run's image files
by relative path, for pasting into other documents.
"""

from __future__ import annotations

import base64
import html
import re
from pathlib import Path

from mapdrift.atomic import write_text
from mapdrift.brief.content import Brief, Figure, Section, Table, phrase
from mapdrift.safetext import clean

__all__ = ["render_html", "render_markdown", "write_report"]

_CSS = """
:root { --ink:#1d2330; --muted:#5b6475; --rule:#d9dde5; --accent:#2f5d8a; --warn:#8a5a00; }
* { box-sizing: border-box; }
body { font: 15px/1.5 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif;
       color: var(--ink); max-width: 1040px; margin: 2rem auto; padding: 0 1.25rem; }
h1 { font-size: 1.9rem; margin: 0 0 .2rem; } h2 { font-size: 1.3rem; margin-top: 2.2rem;
     border-bottom: 2px solid var(--rule); padding-bottom: .25rem; }
.sub { color: var(--muted); margin: 0 0 1rem; }
.headline { display: grid; grid-template-columns: repeat(auto-fit, minmax(180px, 1fr)); gap: .75rem;
            margin: 1.2rem 0; }
.metric { border: 1px solid var(--rule); border-left: 4px solid var(--accent); padding: .6rem .8rem; }
.metric b { display: block; font-size: 1.6rem; line-height: 1.2; }
.metric span { color: var(--muted); font-size: .9rem; }
.notice { border: 1px solid #e3c67a; background: #fff8e6; color: var(--warn); padding: .6rem .8rem; }
figure { margin: 1rem 0; } figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: .9rem; }
table { border-collapse: collapse; width: 100%; font-size: .88rem; margin: .6rem 0 1rem; }
th, td { border-bottom: 1px solid var(--rule); padding: .3rem .45rem; text-align: left; vertical-align: top; }
th { background: #f3f5f8; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
caption { caption-side: bottom; text-align: left; color: var(--muted); font-size: .85rem; padding-top: .3rem; }
dl.method { display: grid; grid-template-columns: 14rem 1fr; gap: .25rem 1rem; }
dl.method dt { font-weight: 600; } dl.method dd { margin: 0; }
footer { margin-top: 3rem; color: var(--muted); font-size: .85rem; }
@page { size: A4; margin: 14mm; }
@media print { body { margin: 0; max-width: none; font-size: 10.5pt; }
  h2, h2 + p, section > p { break-after: avoid; }
  figure, .metric, tr, dl.method dt, dl.method dd { break-inside: avoid; }
  figure img { max-height: 150mm; width: auto; } }
"""

_MIME = {
    ".png": "image/png",
    ".gif": "image/gif",
    ".jpg": "image/jpeg",
    ".jpeg": "image/jpeg",
    ".svg": "image/svg+xml",
}


def _e(text: object) -> str:
    return html.escape(str(text), quote=True)


#: Pictures larger than this are linked (relative to the run folder), not embedded, so the
#: report of a national-scale run stays small enough to open and to e-mail.
EMBED_MAX_BYTES = 1_500_000


def _img(fig: Figure, root: Path | None = None) -> str:
    alt = _e(fig.alt or fig.caption)
    size = fig.path.stat().st_size
    if root is not None and size > EMBED_MAX_BYTES and fig.path.is_relative_to(root):
        rel = fig.path.relative_to(root).as_posix()
        return (
            f'<figure><a href="{_e(rel)}"><img src="{_e(rel)}" alt="{alt}"></a>'
            f"<figcaption>{_e(fig.caption)} ({_e(rel)}, {size / 1e6:.1f} MB, beside this "
            "report)</figcaption></figure>"
        )
    data = base64.b64encode(fig.path.read_bytes()).decode("ascii")
    mime = _MIME.get(fig.path.suffix.lower(), "application/octet-stream")
    return (
        f'<figure><img src="data:{mime};base64,{data}" alt="{alt}">'
        f"<figcaption>{_e(fig.caption)}</figcaption></figure>"
    )


def _is_num(v: object) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool)


def _fmt(v: object) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        if v != v:  # NaN
            return ""
        if v != 0 and abs(v) < 0.01:  # small p-values keep two significant digits
            return f"{v:.2g}"
        return f"{v:,.2f}" if abs(v) < 1e6 else f"{v:,.0f}"
    return str(v)


def _table_html(t: Table) -> str:
    df = t.df.head(t.max_rows)
    head = "".join(f"<th>{_e(c)}</th>" for c in df.columns)
    rows = []
    for rec in df.itertuples(index=False):
        cells = "".join(
            f'<td class="num">{_e(_fmt(v))}</td>' if _is_num(v) else f"<td>{_e(_fmt(v))}</td>"
            for v in rec
        )
        rows.append(f"<tr>{cells}</tr>")
    more = ""
    if len(t.df) > t.max_rows:
        more = f" Showing {t.max_rows} of {len(t.df)} rows" + (
            f"; all in {t.csv_name}." if t.csv_name else "."
        )
    return (
        f"<table><caption>{_e(t.caption)}{_e(more)}</caption><thead><tr>{head}</tr></thead>"
        f"<tbody>{''.join(rows)}</tbody></table>"
    )


def _section_html(s: Section, root: Path | None = None) -> str:
    parts = [f'<section id="{_e(s.key)}"><h2>{_e(s.title)}</h2>']
    parts += [f"<p>{_e(p)}</p>" for p in s.paragraphs]
    if s.bullets:
        parts.append("<ul>" + "".join(f"<li>{_e(b)}</li>" for b in s.bullets) + "</ul>")
    parts += [_img(f, root) for f in s.figures if f.path.exists()]
    parts += [_table_html(t) for t in s.tables]
    parts.append("</section>")
    return "\n".join(parts)


def render_html(brief: Brief, root: Path | None = None) -> str:
    """The report as one HTML document with embedded images (large ones linked under ``root``)."""
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(brief.title)}</title><style>{_CSS}</style></head><body>",
        f"<header><h1>{_e(brief.title)}</h1>",
    ]
    sub = " · ".join(x for x in (brief.subtitle, brief.author, brief.date) if x)
    if sub:
        out.append(f'<p class="sub">{_e(sub)}</p>')
    out.append("</header>")
    if brief.warning:
        out.append(f'<p class="notice" role="note">{_e(brief.warning)}</p>')
    if brief.headline:
        out.append('<section id="answer"><h2>The answer</h2><div class="headline">')
        for k, v in brief.headline:
            label = phrase(k, v)[len(v) + 1 :]
            out.append(f'<div class="metric"><b>{_e(v)}</b><span>{_e(label)}</span></div>')
        out.append("</div></section>")
    out += [_section_html(s, root) for s in brief.sections]
    if brief.method:
        out.append('<section id="method"><h2>Method</h2><dl class="method">')
        out += [f"<dt>{_e(k)}</dt><dd>{_e(v)}</dd>" for k, v in brief.method]
        out.append("</dl></section>")
    out.append('<section id="cautions"><h2>Cautions</h2><ul>')
    out += [f"<li>{_e(c)}</li>" for c in brief.cautions]
    out.append("</ul></section>")
    if brief.source:
        out.append(f"<footer>Source: {_e(brief.source)}. Made with mapdrift.</footer>")
    out.append("</body></html>")
    return "\n".join(out) + "\n"


def _md_escape(text: object) -> str:
    """Text from the data as inert Markdown: one line, no emphasis, links, HTML or tables, and
    no heading, list or rule at the start of a line."""
    s = clean(str(text))
    for ch in ("\\", "|", "*", "_", "`", "<", ">", "[", "]", "#", "~", "!"):
        s = s.replace(ch, "\\" + ch)
    if s[:1] in ("-", "+", "="):
        s = "\\" + s
    return re.sub(r"^(\d+)([.)])(?=\s|$)", r"\1\\\2", s)


def _table_md(t: Table) -> str:
    df = t.df.head(t.max_rows)
    lines = [
        "| " + " | ".join(_md_escape(c) for c in df.columns) + " |",
        "|" + "---|" * len(df.columns),
    ]
    for rec in df.itertuples(index=False):
        lines.append("| " + " | ".join(_md_escape(_fmt(v)) for v in rec) + " |")
    lines.append("")
    more = ""
    if len(t.df) > t.max_rows:
        more = f" Showing {t.max_rows} of {len(t.df)} rows" + (
            f"; all in {t.csv_name}." if t.csv_name else "."
        )
    lines.append(f"*{_md_escape(t.caption + more)}*")
    return "\n".join(lines)


def render_markdown(brief: Brief, root: Path) -> str:
    """The report as Markdown; images are linked relative to ``root`` (the run folder)."""
    out = [f"# {_md_escape(brief.title)}", ""]
    sub = " · ".join(x for x in (brief.subtitle, brief.author, brief.date) if x)
    if sub:
        out += [_md_escape(sub), ""]
    if brief.warning:
        out += [f"> **{_md_escape(brief.warning)}**", ""]
    if brief.headline:
        out += (
            ["## The answer", ""]
            + [
                f"- **{_md_escape(v)}** {_md_escape(phrase(k, v)[len(v) + 1 :])}"
                for k, v in brief.headline
            ]
            + [""]
        )
    for s in brief.sections:
        out += [f"## {_md_escape(s.title)}", ""]
        out += [_md_escape(p) + "\n" for p in s.paragraphs]
        out += [f"- {_md_escape(b)}" for b in s.bullets] + ([""] if s.bullets else [])
        for f in s.figures:
            if f.path.exists():
                rel = (
                    f.path.relative_to(root).as_posix()
                    if f.path.is_relative_to(root)
                    else f.path.name
                )
                out += [
                    f"![{_md_escape(f.alt or f.caption)}]({rel})",
                    "",
                    f"*{_md_escape(f.caption)}*",
                    "",
                ]
        for t in s.tables:
            out += [_table_md(t), ""]
    if brief.method:
        out += (
            ["## Method", ""]
            + [f"- **{_md_escape(k)}**: {_md_escape(v)}" for k, v in brief.method]
            + [""]
        )
    out += ["## Cautions", ""] + [f"- {_md_escape(c)}" for c in brief.cautions] + [""]
    if brief.source:
        out += [f"Source: {_md_escape(brief.source)}. Made with mapdrift.", ""]
    return "\n".join(out)


def write_report(brief: Brief, html_path: Path, md_path: Path, *, root: Path) -> tuple[Path, Path]:
    """Write both report files atomically."""
    write_text(html_path, render_html(brief, root))
    write_text(md_path, render_markdown(brief, root))
    return html_path, md_path
