"""Building blocks of report.html: the style sheet, escaping, aligned tables, interval cells,
agent swatches and figures with their captions.

Every string that comes from run folders or the command line (agent, env and run names,
error messages, provenance) goes through :func:`esc`; :class:`Raw` marks the few cells that
are already-built markup.
"""

from __future__ import annotations

import base64
import html
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from seedsweep.runner.present import text

STYLE = """
:root{--ink:#1f1f1f;--muted:#5a5a5a;--line:#d9d9d9;--soft:#f5f5f2}
*{box-sizing:border-box}
body{font:15px/1.5 system-ui,-apple-system,"Segoe UI",sans-serif;color:var(--ink);
 margin:0 auto;max-width:1120px;padding:1.2em 18px 3em}
h1{font-size:1.55em;margin:.2em 0 .1em} h2{font-size:1.2em;margin:2em 0 .5em;
 padding-bottom:.2em;border-bottom:1px solid var(--line)} h3{font-size:1.02em;margin:1.4em 0 .4em}
p{margin:.45em 0} .lede{color:var(--muted);margin-bottom:1em}
code{background:var(--soft);padding:0 .25em;border-radius:3px;overflow-wrap:anywhere}
.tw{max-width:100%;overflow-x:auto;margin:.5em 0 1em}
table{border-collapse:collapse;font-variant-numeric:tabular-nums;font-size:.9em}
th,td{padding:.3em .65em;border-bottom:1px solid var(--line);vertical-align:top}
th{font-weight:600;border-bottom:2px solid #9a9a9a;background:#fafafa}
.r{text-align:right} .l{text-align:left;overflow-wrap:anywhere}
.pt,.ci,.n,.nm{white-space:nowrap} .ci,.n{color:var(--muted);font-size:.92em}
.sw{display:inline-block;width:.8em;height:.8em;border-radius:2px;margin-right:.4em;
 vertical-align:-.05em;border:1px solid rgba(0,0,0,.35)}
.notes{color:var(--muted);font-size:.9em;margin:.2em 0 1em;padding-left:1.2em}
.flag{font-weight:600;color:#7a4b00}
figure{margin:1em 0 1.6em} figure img{display:block;max-width:100%;height:auto;
 border:1px solid #eee}
figcaption{color:var(--muted);font-size:.88em;margin-top:.45em;max-width:60em}
nav.toc{font-size:.9em;color:var(--muted);margin:.6em 0 0} nav.toc a{color:inherit;
 margin-right:.9em}
.verdict{border:3px solid var(--ink);border-radius:6px;padding:.8em 1.1em;margin:1em 0 1.5em;
 background:#fbfbf8}
.verdict h2{margin:.1em 0 .5em;border:0;font-size:1.25em}
.verdict ol{list-style:none;padding:0;margin:0}
.verdict ol>li{border-left:6px solid;padding:.35em .8em;margin:.6em 0;background:#fff}
.badge{display:inline-block;font-weight:700;letter-spacing:.04em;text-transform:uppercase;
 padding:.05em .5em;border-radius:3px;margin-right:.35em;border:2px solid}
.verdict li.v-better{border-left-color:#0b5d9e}
.v-better .badge{color:#fff;background:#0b5d9e;border-color:#0b5d9e}
.verdict li.v-worse{border-left:9px double #a8400b}
.v-worse .badge{color:#fff;background:#a8400b;border-color:#a8400b}
.verdict li.v-insufficient{border-left:6px dashed #7d7d7d}
.v-insufficient .badge{color:#333;background:#fff;border-color:#7d7d7d;border-style:dashed}
.verdict li.v-cannot{border-left:6px dotted #7d7d7d}
.v-cannot .badge{color:#333;background:#fff;border-color:#7d7d7d;border-style:dotted}
.vline{font-size:1.05em} .why{margin:.2em 0} .evidence{font-size:.88em;color:var(--muted);
 overflow-wrap:anywhere}
.warn{border:2px solid #a8400b;background:#fff6ef;padding:.4em .7em;border-radius:4px}
.warn::before{content:"\\26A0  ";font-weight:700}
.hint{background:var(--soft);padding:.5em .8em;border-radius:4px}
.bad{color:#a00}
"""

NUMBER = re.compile(r"^[+-]?(\d[\d,]*\.?\d*|\.\d+)([eE][+-]?\d+)?%?$|^[+-]?(inf|nan)$")


class Raw(str):
    """A cell that is already markup (built here from escaped parts)."""


def esc(value: Any) -> str:
    return html.escape(str(value), quote=True)


def is_numeric(cell: Any) -> bool:
    """A number, or a number with its interval / count: right-aligned."""
    if isinstance(cell, int | float) and not isinstance(cell, bool):
        return True
    if isinstance(cell, Raw):
        return 'class="pt"' in cell or cell.startswith('<span class="num">')
    return bool(NUMBER.match(str(cell).strip()))


def interval_cell(iv: Any, raw: bool = False, n: int | None = None, flag: str = "",
                  signed: bool = False) -> Raw:
    """``point [low, high] (n)`` in spans that may wrap between them on a narrow page."""
    point, low, high = (iv["point"], iv["low"], iv["high"]) if isinstance(iv, Mapping) \
        else (iv.point, iv.low, iv.high)
    if raw:
        p, ci = f"{point:.4g}", f"[{low:.4g}, {high:.4g}]"
    else:
        p, ci = f"{point:{'+' if signed else ''}.3f}", f"[{low:.3f}, {high:.3f}]"
    if not flag and low == high:
        flag = text.ZERO_WIDTH_NOTE
    count = f' <span class="n">({n})</span>' if n is not None else ""
    mark = f' <span class="flag" title="{esc(flag)}">no spread</span>' if flag else ""
    return Raw(f'<span class="pt">{esc(p)}</span> <span class="ci">{esc(ci)}</span>'
               f"{count}{mark}")


def random_cell(ref: Any) -> Raw:
    """The random score as every table shows it (:func:`text.random_score`)."""
    point, ci = text.random_score(ref).split(" ", 1)
    return Raw(f'<span class="pt">{esc(point)}</span> <span class="ci">{esc(ci)}</span>')


def swatch(label: str, colours: Mapping[str, str]) -> Raw:
    colour = colours.get(label)
    box = f'<span class="sw" style="background:{colour}"></span>' if colour else ""
    return Raw(f'<span class="nm">{box}{esc(label)}</span>')


def table(header: Sequence[str], rows: Iterable[Sequence[Any]],
          align: Sequence[str] | None = None) -> str:
    """A table in a box that scrolls by itself if it ever is wider than the page. Columns
    whose cells are all numbers (or intervals) are right-aligned, with their header; all
    others left-aligned. ``align``: "l"/"r" per column to override."""
    rows = [list(r) for r in rows]
    if align is None:
        align = []
        for j in range(len(header)):
            cells = [r[j] for r in rows if j < len(r) and str(r[j]) not in ("", "-")]
            align.append("r" if cells and all(is_numeric(c) for c in cells) else "l")

    def cell(tag: str, j: int, value: Any) -> str:
        body = value if isinstance(value, Raw) else esc(value)
        return f'<{tag} class="{align[j]}">{body}</{tag}>'

    head = "".join(cell("th", j, h) for j, h in enumerate(header))
    body = "".join("<tr>" + "".join(cell("td", j, c) for j, c in enumerate(r)) + "</tr>"
                   for r in rows)
    return f'<div class="tw"><table><thead><tr>{head}</tr></thead><tbody>{body}</tbody>' \
           "</table></div>"


def notes(items: Iterable[str]) -> str:
    items = [i for i in items if i]
    if not items:
        return ""
    return '<ul class="notes">' + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>"


def figure(figures: Mapping[str, tuple[bytes, bytes]], name: str, alt: str,
           caption: str) -> str:
    """The figure as an embedded PNG with its caption (what every band and bar is)."""
    if name not in figures:
        return "<p><em>figures were not made (--no-figures)</em></p>"
    data = base64.b64encode(figures[name][0]).decode("ascii")
    return (f'<figure id="fig-{esc(name)}"><img alt="{esc(alt)}" '
            f'src="data:image/png;base64,{data}"><figcaption>{esc(caption)} '
            f"<code>figures/{esc(name)}.png</code>, <code>.svg</code></figcaption></figure>")
