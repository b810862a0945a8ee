"""HTML building blocks of the report pages: the style sheet, escaped and
formatted numbers, tables, figures, and embedding figures as data URIs."""

from __future__ import annotations

import html
from pathlib import Path

import numpy as np



_STYLE = """
body{font-family:Georgia,'Times New Roman',serif;max-width:60rem;margin:2rem auto;padding:0 1rem;
color:#1b1b1b;line-height:1.5;background:#fdfdfb}
h1{font-size:1.7rem;margin-bottom:.2rem}h2{font-size:1.25rem;border-bottom:1px solid #ccc;
margin-top:2.2rem}h3{font-size:1.05rem}
table{border-collapse:collapse;font-size:.85rem;margin:.5rem 0}
td,th{border-bottom:1px solid #e2e2e2;padding:.2rem .6rem;text-align:left}
th{background:#f1f1ec}
.caution{border-left:4px solid #b35806;background:#fff6ec;padding:.6rem 1rem}
.num{font-weight:bold}
figure{margin:1rem 0}figcaption{font-size:.85rem;color:#444}
.gallery{display:flex;flex-wrap:wrap;gap:.6rem}.gallery figure{width:16rem;margin:0}
.gallery img{width:16rem;height:auto;border:1px solid #ddd}
img.wide{max-width:100%;height:auto}
.small{font-size:.85rem;color:#444}
"""


def _esc(x):
    return html.escape(str(x))


def _fmt(x, digits=3):
    from ..results import format_value
    if isinstance(x, (int, np.integer)):
        return format_value(int(x), digits=max(digits, 15))
    return _esc(format_value(x, digits))


def _num(key, value, digits=3):
    return f'<span class="num" data-key="{_esc(key)}">{_fmt(value, digits)}</span>'


def embed_images(page, folder):
    """Put every relative PNG the page shows into the page itself (data URIs),
    so that the file works when copied or mailed alone; the PNGs stay in
    ``figures/`` for other uses."""
    import base64
    import html
    import re

    def inline(match):
        path = Path(folder) / html.unescape(match.group(3))
        if not path.is_file():
            return match.group(0)
        data = base64.b64encode(path.read_bytes()).decode("ascii")
        return f'{match.group(1)}"data:image/png;base64,{data}"'

    return re.sub(r"""(<img src=)(["'])([^"':]+?\.png)\2""", inline, page)


def _img(src, alt, caption, wide=True):
    cls = ' class="wide"' if wide else ""
    return (f'<figure><img src="{_esc(src)}" alt="{_esc(alt)}"{cls}>'
            f"<figcaption>{caption}</figcaption></figure>")


def _table(header, rows):
    head = "".join(f"<th>{_esc(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"
