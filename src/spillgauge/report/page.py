"""What every spillgauge HTML page shares: the style sheet, escaping, tables, sections, figures.

The study report (:mod:`~spillgauge.report.html`), the sweep's page and the
plan's page are built from these pieces, so they look alike and each escapes
text the same way. A page is one self-contained file: the style sheet is
inline and figures are embedded as base64 ``data:`` URIs.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

__all__ = ["CAUTION", "STYLE", "escape", "figure", "grid", "render_page", "section"]

CAUTION = ("Results follow from the model's assumptions; a simulated recommendation is an "
           "input to, not a substitute for, the team's own review of an experiment that "
           "touches real users.")
STYLE = """
body{font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;color:#1a1a1a;
margin:0 auto;max-width:1180px;padding:1.5rem 1.25rem 3rem}
h1{font-size:1.6rem;margin:.2rem 0}h2{font-size:1.25rem;border-bottom:2px solid #0072B2;
padding-bottom:.2rem;margin-top:2.2rem}h3{font-size:1.05rem;margin:1.2rem 0 .4rem}
nav a{margin-right:.9rem;color:#0072B2}.meta{color:#555}
table{border-collapse:collapse;margin:.4rem 0 1rem;font-size:.9rem}
th,td{border:1px solid #d6d6d6;padding:.25rem .55rem;text-align:right;vertical-align:top}
th{background:#f2f2f2}td.text,th.text{text-align:left}tbody tr:nth-child(even){background:#fafafa}
.scroll{overflow-x:auto}.se{color:#777;font-size:.8em}
.trusted,.untrusted{font-weight:600;white-space:nowrap}.trusted{color:#005a8c}
.untrusted{color:#b34700}
tr.chosen td{background:#e6f1f8}.settings{display:flex;flex-wrap:wrap;gap:0 1.6rem}
.verdict{font-size:1.15rem;font-weight:600;margin:.2rem 0 .5rem}.box{border-left:6px solid #0072B2;
background:#f4f8fb;padding:.6rem 1rem;border-radius:0 4px 4px 0}
.box.ok{border-color:#009E73;background:#eef8f4}
.box.warn{border:2px solid #D55E00;border-left-width:6px;background:#fdf0e8}
.box.warn .verdict{color:#8f3300}.icon{font-size:1.3em;margin-right:.3rem}
.diagnostic{color:#555;font-style:italic;white-space:nowrap}
.lead{font-size:1.02rem}.label{white-space:nowrap}
figure{margin:1.2rem 0 2rem}figure img{max-width:100%;height:auto;border:1px solid #e2e2e2}
figcaption{color:#333;font-size:.92rem;margin-top:.4rem}
#caution p{font-style:italic;background:#f7f7f7;padding:.6rem 1rem;border-radius:4px}
"""


def escape(value: object) -> str:
    """Return ``str(value)`` escaped for HTML text and attribute values.

    >>> escape('<script>"x"</script>')
    '&lt;script&gt;&quot;x&quot;&lt;/script&gt;'
    """
    return html.escape(str(value), quote=True)


def grid(header: list[str], rows: list[list[str]], row_classes: list[str] | None = None,
         text_columns: int = 1) -> str:
    """Return a scrollable table; ``header`` is plain text, ``rows`` hold escaped HTML cells.

    The first ``text_columns`` columns are left-aligned text; ``row_classes``
    gives each row's class (e.g. ``"chosen"``) or ``""``.

    >>> grid(["design", "bias"], [["user", "0.1"]])
    '<div class="scroll"><table><thead><tr><th class="text">design</th><th>bias</th></tr>\
</thead><tbody><tr><td class="text">user</td><td>0.1</td></tr></tbody></table></div>'
    """
    def cls(i: int) -> str:
        return ' class="text"' if i < text_columns else ""
    head = "".join(f"<th{cls(i)}>{escape(h)}</th>" for i, h in enumerate(header))
    body = []
    for k, row in enumerate(rows):
        attr = f' class="{row_classes[k]}"' if row_classes and row_classes[k] else ""
        body.append(f"<tr{attr}>" + "".join(f"<td{cls(i)}>{c}</td>" for i, c in enumerate(row))
                    + "</tr>")
    return (f'<div class="scroll"><table><thead><tr>{head}</tr></thead>'
            f'<tbody>{"".join(body)}</tbody></table></div>')


def section(section_id: str, title: str, content: str) -> str:
    """Return a ``<section>`` with its id and escaped title around already-escaped ``content``."""
    return f'<section id="{section_id}"><h2>{escape(title)}</h2>{content}</section>'


def figure(path: str | Path, *, name: str | None = None, title: str | None = None,
           caption: str | None = None) -> str:
    """Return a ``<figure>`` embedding the PNG at ``path`` as a ``data:`` URI.

    ``name`` (default: the file's stem) makes the id ``figure-<name>``; a
    ``title`` adds a heading and is the image's alt text (else the name); a
    ``caption`` (even empty) adds a ``<figcaption>``.
    """
    path = Path(path)
    name = path.stem if name is None else name
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    heading = f"<h3>{escape(title)}</h3>" if title is not None else ""
    alt = escape(title if title is not None else name)
    below = f"<figcaption>{escape(caption)}</figcaption>" if caption is not None else ""
    return (f'<figure id="figure-{escape(name)}">{heading}'
            f'<img alt="{alt}" src="data:image/png;base64,{data}">{below}</figure>')


def render_page(title: str, meta: str, body: str, *, nav: list[str] | tuple[str, ...] = ()
                ) -> str:
    """Return a whole self-contained page: head with the style sheet, header, ``<main>``.

    ``meta`` is the header's one-line description and ``body`` the sections, both
    already-escaped HTML; ``nav`` lists the section ids linked from the header.

    >>> page = render_page("a <b>", "meta", "<section></section>", nav=["answer"])
    >>> page.startswith("<!DOCTYPE html>"), "<title>a &lt;b&gt;</title>" in page
    (True, True)
    """
    links = "".join(f'<a href="#{s}">{escape(s)}</a>' for s in nav)
    nav_html = f"<nav>{links}</nav>" if nav else ""
    return ("<!DOCTYPE html>\n"
            '<html lang="en"><head><meta charset="utf-8">'
            '<meta name="viewport" content="width=device-width, initial-scale=1">'
            f"<title>{escape(title)}</title><style>{STYLE}</style></head><body>"
            f'<header><h1>{escape(title)}</h1><p class="meta">{meta}</p>{nav_html}</header>'
            f"<main>{body}</main></body></html>\n")
