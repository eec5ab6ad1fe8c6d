"""Building blocks of the HTML report: escaped text, tables, embedded figures, style, script.

Every piece of text that reaches the page goes through :func:`esc`
(``html.escape`` with quotes).  Figures are embedded as base64 PNG data
URIs, so the report is one file with no external resource; the page's
content-security policy forbids loading anything else (``default-src
'none'``), so a browser would refuse a stray reference rather than fetch it.

The inline script only observes the page: on load it counts the figures
that decoded (``naturalWidth > 0``) into ``data-figures-loaded`` /
``data-figures-total`` on ``<body>``, and it records uncaught errors in
``data-script-errors`` — for automated checks of the file in a browser.
"""

from __future__ import annotations

import base64
import html
import math
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path

__all__ = ["CSP", "CSS", "SCRIPT", "esc", "figure", "items", "kv_table", "num", "point_text",
           "seconds", "table"]

CSP = ("default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
       "script-src 'unsafe-inline'; base-uri 'none'; form-action 'none'")

CSS = """
:root { --ink: #1d1d1f; --muted: #55585e; --rule: #d6d8dc; --warn-bg: #fff4e0;
        --warn-edge: #b86e00; --bad-bg: #fde8e8; --bad-edge: #a11d1d; --ok-edge: #2a7a3b; }
* { box-sizing: border-box; }
body { margin: 0 auto; max-width: 1080px; padding: 1.2rem 1.6rem 3rem; color: var(--ink);
       font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; }
h1 { font-size: 1.6rem; margin: 0.6rem 0 0.2rem; }
h2 { font-size: 1.25rem; margin: 2.2rem 0 0.6rem; padding-bottom: 0.2rem;
     border-bottom: 2px solid var(--rule); }
h3 { font-size: 1.02rem; margin: 1.3rem 0 0.4rem; }
p.sub { color: var(--muted); margin: 0 0 1rem; }
nav { font-size: 0.9rem; margin: 0.8rem 0 0; }
nav a { margin-right: 0.9rem; color: #1f4f8f; }
.caution { border: 2px solid var(--warn-edge); background: var(--warn-bg); border-radius: 6px;
           padding: 0.7rem 1rem; margin: 1rem 0; }
.caution strong { color: var(--warn-edge); }
.refused { border-left: 5px solid var(--bad-edge); background: var(--bad-bg);
           padding: 0.6rem 1rem; margin: 0.8rem 0; }
.fine { border-left: 5px solid var(--ok-edge); padding: 0.3rem 1rem; margin: 0.8rem 0; }
table { border-collapse: collapse; margin: 0.4rem 0 1rem; font-size: 0.88rem; }
th, td { border-bottom: 1px solid var(--rule); padding: 0.25rem 0.6rem; text-align: left;
         vertical-align: top; }
th { background: #f3f4f6; font-weight: 600; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
code, .mono { font-family: ui-monospace, "DejaVu Sans Mono", monospace; font-size: 0.85rem;
              overflow-wrap: anywhere; }
figure { margin: 1rem 0 1.6rem; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 0.88rem; margin-top: 0.3rem; }
.missing { color: var(--muted); font-style: italic; }
ul.lines li { margin: 0.25rem 0; }
.fail { color: var(--bad-edge); font-weight: 600; }
.pass { color: var(--ok-edge); }
@media print { nav { display: none; } h2 { break-after: avoid; } figure { break-inside: avoid; } }
"""

SCRIPT = """
(function () {
  var errors = [];
  function show() {
    if (document.body && errors.length) {
      document.body.setAttribute('data-script-errors', errors.join(' | '));
    }
  }
  window.onerror = function (message, source, line) {
    errors.push(String(message) + ' (line ' + line + ')');
    show();
    return false;
  };
  window.addEventListener('load', function () {
    var images = document.images, loaded = 0;
    for (var i = 0; i < images.length; i++) {
      if (images[i].complete && images[i].naturalWidth > 0) { loaded++; }
    }
    document.body.dataset.figuresLoaded = String(loaded);
    document.body.dataset.figuresTotal = String(images.length);
    show();
  });
})();
"""


def esc(value: object) -> str:
    """``value`` as HTML text (``None`` as an empty string)."""
    return "" if value is None else html.escape(str(value), quote=True)


def num(value: object, digits: int = 4) -> str:
    """A number with ``digits`` significant digits; ``—`` for None or NaN."""
    if value is None or isinstance(value, bool):
        return "—" if value is None else str(value)
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return str(value)
    if math.isnan(v):
        return "—"
    if v.is_integer() and abs(v) < 1e9:
        return str(int(v))
    return f"{v:.{digits}g}"


def seconds(value: float | None) -> str:
    """A duration in s, min or h."""
    if value is None:
        return "—"
    if value < 120:
        return f"{value:.2f} s"
    if value < 7200:
        return f"{value / 60:.1f} min"
    return f"{value / 3600:.2f} h"


def table(head: Sequence[str], rows: Iterable[Sequence[object]], *,
          numeric: Sequence[int] = (), raw: Sequence[int] = ()) -> str:
    """An HTML table; cells are escaped unless their column is in ``raw`` (trusted markup)."""
    cls = lambda k: ' class="n"' if k in numeric else ""  # noqa: E731
    out = ["<table><thead><tr>"]
    out += [f"<th{cls(k)}>{esc(h)}</th>" for k, h in enumerate(head)]
    out.append("</tr></thead><tbody>")
    for row in rows:
        out.append("<tr>" + "".join(f"<td{cls(k)}>{c if k in raw else esc(c)}</td>"
                                    for k, c in enumerate(row)) + "</tr>")
    out.append("</tbody></table>")
    return "".join(out)


def kv_table(pairs: Iterable[tuple[str, object]], *, raw: bool = False) -> str:
    """A two-column table of labels and values."""
    rows = "".join(f"<tr><th>{esc(k)}</th><td>{v if raw else esc(v)}</td></tr>" for k, v in pairs)
    return f"<table><tbody>{rows}</tbody></table>"


def items(lines: Iterable[object], *, css: str = "lines") -> str:
    """An unordered list of escaped lines."""
    body = "".join(f"<li>{esc(line)}</li>" for line in lines)
    return f'<ul class="{css}">{body}</ul>' if body else ""


def figure(path: Path | None, *, alt: str, caption: str, missing: str = "") -> str:
    """A PNG embedded as a data URI with its caption, or a note that the figure is not there."""
    if path is None or not path.is_file():
        return f'<p class="missing">{esc(missing or f"figure not in the run folder: {alt}")}</p>'
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{esc(alt)}">'
            f"<figcaption>{esc(caption)}</figcaption></figure>")


def point_text(values: Mapping[str, object] | None) -> str:
    """``a = 1, b = 2`` for a point."""
    return ", ".join(f"{k} = {num(v)}" for k, v in (values or {}).items())
