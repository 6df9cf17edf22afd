"""The report's blocks written as Markdown or as one HTML page, with every quoted string
escaped for the format it goes into.

A page is a list of blocks (tuples): ``("h", level, text)``, ``("p", text)``,
``("pre", text)``, ``("table", header, rows, bold cells as a set of (row, col))``,
``("img", path, caption)``, ``("ul", items)`` (a bulleted list) and ``("verdict", word, text)`` (the headline: ``PASS``,
``FAIL`` or ``INCOMPLETE`` and its sentence). Texts are plain: backend names, paths, messages
and notes come from backends and files, so the renderers escape them (Markdown: inline
HTML, table pipes, emphasis and code marks; HTML: ``html.escape``), never the callers.
"""

from __future__ import annotations

import base64
import html
import os
import re
import urllib.parse
from typing import Any

#: Characters with a meaning in Markdown text (CommonMark's punctuation that starts
#: emphasis, code, links, headings, list items, strike-through or table cells), escaped with a backslash.
_MARKDOWN_SPECIAL = re.compile(r"([\\`*_\[\]|~])")

#: What makes a line a heading, a list item or a thematic break when it starts the text.
_MARKDOWN_LINE_START = re.compile(r"^(\s*)([#+\-=]|\d+[.)])")


def escape_markdown(text: Any, block: bool = True) -> str:
    """Return ``text`` as Markdown that shows it literally on one line.

    ``&``, ``<`` and ``>`` become entities (so ``<img src=x onerror=...>`` is shown, not
    run), Markdown's punctuation (``\\ ` * _ [ ] | ~``) is backslash-escaped (CommonMark,
    "Backslash escapes"; in a GitHub table ``\\|`` keeps a cell whole), line breaks become
    spaces, and where the text starts a block (``block``: a paragraph or heading, not a
    table cell) a leading ``#``, ``+``, ``-``, ``=`` or ``1.`` that would make it a heading
    or a list item is escaped too.

    Examples
    --------
    >>> escape_markdown("a|b <i>`x`</i>")
    'a\\\\|b &lt;i&gt;\\\\`x\\\\`&lt;/i&gt;'
    """
    text = str(text).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    text = re.sub(r"\s*[\r\n]+\s*", " ", text)
    text = _MARKDOWN_SPECIAL.sub(r"\\\1", text)
    if not block:
        return text
    return _MARKDOWN_LINE_START.sub(lambda m: m.group(1) + m.group(2)[:-1] + "\\" + m.group(2)[-1], text)


def markdown_table(header: list[str], rows: list[list[str]], bold: set[tuple[int, int]] = frozenset()) -> str:
    """Return a Markdown (GitHub) table of plain-text cells, each escaped
    (:func:`escape_markdown`); the cells in ``bold`` ((row, column) pairs) are bold."""
    def cell(text: Any, strong: bool = False) -> str:
        shown = escape_markdown(text, block=False)
        return f"**{shown}**" if strong and shown else shown

    lines = ["| " + " | ".join(cell(h) for h in header) + " |", "|" + "|".join("---" for _ in header) + "|"]
    lines += ["| " + " | ".join(cell(c, (i, j) in bold) for j, c in enumerate(row)) + " |"
              for i, row in enumerate(rows)]
    return "\n".join(lines)


def markdown_fence(text: str, info: str = "text") -> str:
    """Return ``text`` as a fenced code block whose fence is longer than any run of backticks
    inside, so that the text cannot close it."""
    longest = max((len(m) for m in re.findall(r"`+", text)), default=0)
    fence = "`" * max(3, longest + 1)
    return f"{fence}{info}\n{text}\n{fence}"


def _relative_link(path: str, page_path: str) -> str:
    """Return ``path`` relative to the folder of ``page_path``, as a URL path (percent-encoded)."""
    base = os.path.dirname(os.path.abspath(page_path))
    rel = os.path.relpath(os.path.abspath(path), base).replace(os.sep, "/")
    return urllib.parse.quote(rel)


def alt_text(caption: str) -> str:
    """Return the first sentence of an image's caption (up to its first colon or full stop), as
    the image's short alternative text."""
    return re.split(r"[:.] ", caption, maxsplit=1)[0]


def render_markdown(blocks: list[tuple], md_path: str) -> str:
    """Return the blocks as Markdown; image links are relative to ``md_path``'s folder."""
    out = []
    for block in blocks:
        tag = block[0]
        if tag == "h":
            out.append(f"{'#' * block[1]} {escape_markdown(block[2])}")
        elif tag == "verdict":
            out.append(f"## {block[1]}: {escape_markdown(block[2])}")
        elif tag == "p":
            out.append(escape_markdown(block[1]))
        elif tag == "ul":
            out.append("\n".join(f"- {escape_markdown(item, block=False)}" for item in block[1]))
        elif tag == "pre":
            out.append(markdown_fence(block[1]))
        elif tag == "table":
            _, header, rows, bold = block
            out.append(markdown_table(header, rows, bold))
        elif tag == "img":
            out.append(f"![{escape_markdown(alt_text(block[2]))}]({_relative_link(block[1], md_path)})\n\n"
                       f"*{escape_markdown(block[2])}*")
    return "\n\n".join(out) + "\n"


#: The page's style: readable widths, tables that scroll sideways on their own (on a phone
#: too), text blocks that wrap instead of hiding lines in a scrolling box, images no wider
#: than the page; on paper (``@media print``) the full width, no contents list, small table
#: text that may wrap (a table cannot scroll on paper), tables, plots and text blocks kept
#: whole on a page, the verdict's colours printed.
PAGE_STYLE = (
    "body{font-family:system-ui,sans-serif;max-width:1500px;margin:1.5em auto;padding:0 1.2em;color:#222;"
    "line-height:1.45;overflow-wrap:break-word}"
    "h1{margin-bottom:.2em}h2{margin-top:1.6em;border-bottom:1px solid #ddd;padding-bottom:.2em}"
    "nav ul{margin:.3em 0;padding-left:0;list-style:none}nav li{display:inline-block;margin-right:1em}"
    ".verdict{font-size:1.5em;font-weight:bold;padding:.5em .8em;border-radius:6px;margin:.6em 0}"
    ".verdict.PASS{background:#e3f4e1;color:#1d5e1a}.verdict.FAIL{background:#fbe3e1;color:#8a1c12}"
    ".verdict.INCOMPLETE{background:#fff2cc;color:#6b4e00}"
    ".table-wrap{overflow-x:auto;max-width:100%}table{border-collapse:collapse;margin:.8em 0}"
    "td,th{border:1px solid #ccc;padding:.25em .6em;text-align:right;vertical-align:top}"
    "td.text,th.text{text-align:left}td:not(.text),td.short{white-space:nowrap}th{background:#f3f3f3}"
    "pre{background:#f7f7f7;padding:1em;white-space:pre-wrap;word-break:break-word}"
    "figure{margin:1.2em 0}img{max-width:100%;height:auto}figcaption{color:#444;max-width:75em;margin-top:.3em}"
    "@media (max-width:600px){body{padding:0 .6em;margin-top:.6em}.verdict{font-size:1.15em}"
    "pre{padding:.5em;font-size:.8em}td,th{padding:.2em .4em}}"
    "@page{margin:1.5cm}"
    "@media print{body{max-width:none;margin:0;padding:0;font-size:10pt;color:#000}nav{display:none}"
    ".table-wrap{overflow:visible}table{font-size:7.5pt}th{background:#eee}"
    "td,th,td:not(.text),td.short{white-space:normal;padding:.1em .3em;word-break:break-word}"
    "figure,table,pre,.verdict{break-inside:avoid}h2,h3{break-after:avoid}"
    ".verdict{border:1px solid #000;-webkit-print-color-adjust:exact;print-color-adjust:exact}"
    "pre{background:none;border:1px solid #ccc}}"
)

#: Media types of the plot formats, for ``data:`` URIs (IANA media types image/png, image/svg+xml).
IMAGE_TYPES = {".png": "image/png", ".svg": "image/svg+xml"}


def data_uri(path: str) -> str:
    """Return the image file at ``path`` as a ``data:`` URI (RFC 2397, base64), so that a page
    carries its plots inside.

    Raises
    ------
    ValueError
        When the file's extension is not one of :data:`IMAGE_TYPES`.
    OSError
        When the file cannot be read.
    """
    mime = IMAGE_TYPES.get(os.path.splitext(path)[1].lower())
    if mime is None:
        raise ValueError(f"{path!r}: a page embeds only {', '.join(IMAGE_TYPES)} images")
    with open(path, "rb") as fh:
        return f"data:{mime};base64," + base64.b64encode(fh.read()).decode("ascii")


def section_id(text: str) -> str:
    """Return the anchor name of a section heading: ``Pick: the ranking`` -> ``pick-the-ranking``."""
    return "-".join(re.findall(r"[a-z0-9]+", text.lower())) or "section"


def _html_table(header: list[str], rows: list[list[str]], bold: set[tuple[int, int]]) -> str:
    esc = html.escape

    def numeric(text: str) -> bool:
        return bool(re.fullmatch(r"[-+]?[\d.,]+(e[-+]?\d+)?( ?[a-zµ%/]+)?|-|", text.strip(), re.I))

    text_cols = {j for j in range(len(header)) if not all(numeric(str(r[j])) for r in rows if j < len(r))}
    head = "".join(f'<th class="text">{esc(str(h))}</th>' if j in text_cols else f"<th>{esc(str(h))}</th>"
                   for j, h in enumerate(header))
    lines = []
    for i, row in enumerate(rows):
        cells = []
        for j, c in enumerate(row):
            inner = f"<strong>{esc(str(c))}</strong>" if (i, j) in bold else esc(str(c))
            short = " short" if len(str(c)) <= 24 else ""
            cells.append(f'<td class="text{short}">{inner}</td>' if j in text_cols else f"<td>{inner}</td>")
        lines.append("<tr>" + "".join(cells) + "</tr>")
    return (f'<div class="table-wrap"><table>\n<thead><tr>{head}</tr></thead>\n<tbody>\n' + "\n".join(lines)
            + "\n</tbody>\n</table></div>")


def render_html(blocks: list[tuple], html_path: str) -> str:
    """Return the blocks as one self-contained HTML page: every text escaped with
    :func:`html.escape`, every plot inside the page as a ``data:`` URI (:func:`data_uri`), no
    address outside the page (the only links are the contents list's ``#`` anchors), a
    viewport for phones and a print stylesheet (:data:`PAGE_STYLE`).

    ``html_path`` is where the page goes; it names nothing inside the page (kept for the
    renderers' common signature).

    Raises
    ------
    OSError
        When a plot file cannot be read.
    """
    esc = html.escape
    body, contents, used = [], [], set()
    for block in blocks:
        tag = block[0]
        if tag == "h" and block[1] == 2:
            anchor = section_id(block[2])
            while anchor in used:
                anchor += "-more"
            used.add(anchor)
            contents.append(f'<li><a href="#{anchor}">{esc(block[2])}</a></li>')
            body.append(f'<h2 id="{anchor}">{esc(block[2])}</h2>')
        elif tag == "h":
            body.append(f"<h{block[1]}>{esc(block[2])}</h{block[1]}>")
        elif tag == "verdict":
            word = block[1] if block[1] in ("PASS", "FAIL", "INCOMPLETE") else "FAIL"
            body.append(f'<p class="verdict {word}">{esc(block[1])}: {esc(block[2])}</p>')
        elif tag == "p":
            body.append(f"<p>{esc(block[1])}</p>")
        elif tag == "ul":
            body.append("<ul>" + "".join(f"<li>{esc(item)}</li>" for item in block[1]) + "</ul>")
        elif tag == "pre":
            body.append(f"<pre>{esc(block[1])}</pre>")
        elif tag == "table":
            body.append(_html_table(*block[1:]))
        elif tag == "img":
            body.append(f'<figure><img src="{esc(data_uri(block[1]))}" alt="{esc(alt_text(block[2]))}"/>'
                        f"<figcaption>{esc(block[2])}</figcaption></figure>")
    if len(contents) > 1:
        at = next((i for i, b in enumerate(body) if b.startswith('<p class="verdict')), 0) + 1
        body.insert(at, '<nav aria-label="contents"><ul>' + "".join(contents) + "</ul></nav>")
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"/>\n<title>fftgauge report</title>\n"
            f"<style>{PAGE_STYLE}</style>\n</head>\n<body>\n" + "\n".join(body) + "\n</body>\n</html>\n")
