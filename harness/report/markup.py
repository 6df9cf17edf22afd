"""The report's blocks written as Markdown or as one HTML page, with every quoted string
escaped for the format it goes into.

A page is a list of blocks (tuples): ``("h", level, text)``, ``("p", text)``,
``("pre", text)``, ``("table", header, rows, bold cells as a set of (row, col))``,
``("img", path, caption)`` and ``("verdict", word, text)`` (the headline: ``PASS``,
``FAIL`` or ``INCOMPLETE`` and its sentence). Texts are plain: backend names, paths, messages
and notes come from backends and files, so the renderers escape them (Markdown: inline
HTML, table pipes, emphasis and code marks; HTML: ``html.escape``), never the callers.
"""

from __future__ import annotations

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
        elif tag == "pre":
            out.append(markdown_fence(block[1]))
        elif tag == "table":
            _, header, rows, bold = block
            out.append(markdown_table(header, rows, bold))
        elif tag == "img":
            out.append(f"![{escape_markdown(alt_text(block[2]))}]({_relative_link(block[1], md_path)})\n\n"
                       f"*{escape_markdown(block[2])}*")
    return "\n\n".join(out) + "\n"


#: The page's style: readable widths, tables that scroll sideways on their own, text blocks
#: that wrap instead of hiding lines in a scrolling box, images at their drawn size.
PAGE_STYLE = (
    "body{font-family:system-ui,sans-serif;max-width:1500px;margin:1.5em auto;padding:0 1.2em;color:#222;"
    "line-height:1.45}"
    "h1{margin-bottom:.2em}h2{margin-top:1.6em;border-bottom:1px solid #ddd;padding-bottom:.2em}"
    ".verdict{font-size:1.5em;font-weight:bold;padding:.5em .8em;border-radius:6px;margin:.6em 0}"
    ".verdict.PASS{background:#e3f4e1;color:#1d5e1a}.verdict.FAIL{background:#fbe3e1;color:#8a1c12}"
    ".verdict.INCOMPLETE{background:#fff2cc;color:#6b4e00}"
    ".table-wrap{overflow-x:auto}table{border-collapse:collapse;margin:.8em 0}"
    "td,th{border:1px solid #ccc;padding:.25em .6em;text-align:right;vertical-align:top}"
    "td.text,th.text{text-align:left}td.short{white-space:nowrap}th{background:#f3f3f3}"
    "pre{background:#f7f7f7;padding:1em;white-space:pre-wrap;word-break:break-word}"
    "figure{margin:1.2em 0}img{max-width:100%;height:auto}figcaption{color:#444;max-width:75em;margin-top:.3em}"
)


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
    """Return the blocks as one HTML page (every text escaped with :func:`html.escape`); image
    sources are relative to ``html_path``'s folder."""
    esc = html.escape
    body = []
    for block in blocks:
        tag = block[0]
        if tag == "h":
            body.append(f"<h{block[1]}>{esc(block[2])}</h{block[1]}>")
        elif tag == "verdict":
            word = block[1] if block[1] in ("PASS", "FAIL", "INCOMPLETE") else "FAIL"
            body.append(f'<p class="verdict {word}">{esc(block[1])}: {esc(block[2])}</p>')
        elif tag == "p":
            body.append(f"<p>{esc(block[1])}</p>")
        elif tag == "pre":
            body.append(f"<pre>{esc(block[1])}</pre>")
        elif tag == "table":
            body.append(_html_table(*block[1:]))
        elif tag == "img":
            src = esc(_relative_link(block[1], html_path))
            body.append(f'<figure><img src="{src}" alt="{esc(alt_text(block[2]))}"/><figcaption>{esc(block[2])}'
                        f"</figcaption></figure>")
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n<title>fftgauge report</title>\n"
            f"<style>{PAGE_STYLE}</style>\n</head>\n<body>\n" + "\n".join(body) + "\n</body>\n</html>\n")
