"""Small HTML building blocks: every interpolated string is escaped, images are inline data URIs,
and nothing refers to the network."""
from __future__ import annotations

import base64
import html
import math
from collections.abc import Iterable, Sequence
from typing import Any

__all__ = ["esc", "page", "image", "table", "status_badge", "fmt"]

_CSS = """
body{font-family:"DejaVu Sans",Arial,sans-serif;font-size:15px;line-height:1.4;margin:1.5em;
color:#111;max-width:1250px}
h1{font-size:1.5em;margin-bottom:.2em}h2{font-size:1.2em;margin-top:1.4em;border-bottom:1px solid #bbb}
table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid #ccc;padding:3px 7px;
text-align:left;vertical-align:top}th{background:#eee}td.num{text-align:right;font-variant-numeric:tabular-nums}
.ok{background:#cfe8f7}.suspect{background:#fde6b0}.failed{background:#f6c6b0}.skipped{background:#eee}
.badge{font-weight:bold;padding:2px 8px;border-radius:4px}.warn{color:#a03c00;font-weight:bold}
img{max-width:100%;height:auto;display:block;margin:.4em 0}.note{color:#555}
"""

#: Checks on load that every image decoded; the result goes to ``body[data-images]`` (read by
#: the browser test and visible to anyone debugging the page).
_IMAGE_CHECK = """<script>
window.addEventListener("load", function () {
  var imgs = Array.prototype.slice.call(document.images);
  var bad = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); });
  document.body.setAttribute("data-images", bad.length ? "broken:" + bad.length : "ok:" + imgs.length);
});
</script>"""


def esc(value: Any) -> str:
    """``value`` as text with ``& < > " '`` escaped; a missing value (None, NaN) is blank."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    return html.escape(str(value), quote=True)


def fmt(value: Any, spec: str = ".4g") -> str:
    """A number formatted with ``spec`` (— for missing/NaN), anything else escaped."""
    if value is None:
        return "—"
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        number = value
    else:
        try:
            number = float(value)
        except (TypeError, ValueError):
            return esc(value)
    if isinstance(number, float) and not math.isfinite(number):
        return "—"
    text = format(number, spec)
    # no "-0.000": a value that rounds to zero is written as zero
    return format(0.0, spec) if float(text) == 0 else text


def status_badge(status: str) -> str:
    """The verdict as a coloured badge."""
    return f'<span class="badge {esc(status)}">{esc(str(status).upper())}</span>'


def image(png: bytes, alt: str) -> str:
    """An ``<img>`` with ``png`` embedded as a base64 data URI."""
    data = base64.b64encode(png).decode("ascii")
    return f'<img src="data:image/png;base64,{data}" alt="{esc(alt)}">'


def table(header: Sequence[str], rows: Iterable[Sequence[str]], *,
          row_classes: Iterable[str] | None = None) -> str:
    """An HTML table; ``header`` is escaped here, ``rows`` cells must already be HTML (use
    :func:`esc`/:func:`fmt`)."""
    head = "".join(f"<th>{esc(h)}</th>" for h in header)
    classes = list(row_classes) if row_classes is not None else None
    body = []
    for i, row in enumerate(rows):
        cls = f' class="{esc(classes[i])}"' if classes else ""
        body.append(f"<tr{cls}>" + "".join(f"<td>{c}</td>" for c in row) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def page(title: str, body: str) -> str:
    """A whole self-contained HTML document (``title`` escaped here, ``body`` already HTML)."""
    return (f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
            f"<title>{esc(title)}</title><style>{_CSS}</style></head>\n<body>\n{body}\n"
            f"{_IMAGE_CHECK}\n</body></html>\n")
