"""The pieces of a report page: the stylesheet, escaping, numbers, tables, the document, and writing a page."""

from __future__ import annotations

import html
import math
from pathlib import Path
from typing import TYPE_CHECKING, Any


if TYPE_CHECKING:  # pragma: no cover
    import os


from .verdict import NightVerdict


#: How each comparison-star status of the ensemble reads on the page.
STATUS_WORDS = {
    "kept": "kept",
    "variable": "rejected: it varies",
    "catalog_offset": "rejected: far from its catalogue magnitude",
    "too_few_points": "rejected: too few points",
    "not_comparison": "not a comparison star",
}


#: Colours of the verdict bar (Okabe & Ito 2008, as in :mod:`varstar.plots`); the word is always written too.
VERDICT_COLOURS = {"good": "#009E73", "fair": "#E69F00", "poor": "#D55E00"}


CSS = """
:root { color-scheme: light; }
body { font-family: system-ui, -apple-system, "Segoe UI", Roboto, sans-serif; margin: 0; color: #1a1a1a;
       background: #fff; line-height: 1.45; }
main { max-width: 62rem; margin: 0 auto; padding: 0.8rem 1rem 3rem; }
h1 { font-size: 1.45rem; margin: 0.6rem 0 0.4rem; overflow-wrap: anywhere; }
h2 { font-size: 1.2rem; margin-top: 2rem; border-bottom: 1px solid #ccc; }
h3 { font-size: 1.05rem; margin-top: 1.4rem; }
#verdict { font-size: 1.15rem; padding: 0.6rem 0.9rem; border-left: 0.5rem solid #777; background: #f4f4f4; }
#verdict.good { border-left-color: #009E73; } #verdict.fair { border-left-color: #E69F00; }
#verdict.poor { border-left-color: #D55E00; }
.tag { display: inline-block; padding: 0 0.4rem; border-radius: 0.3rem; color: #000; font-weight: 600; }
.tag.good { background: #9fd9c6; } .tag.fair { background: #f3d08a; } .tag.poor { background: #eeb08c; }
figure { margin: 1rem 0; }
figure img { max-width: 100%; height: auto; display: block; border: 1px solid #eee; }
figcaption { font-size: 0.9rem; color: #444; }
.scroll { overflow-x: auto; -webkit-overflow-scrolling: touch; max-width: 100%; }
table { border-collapse: collapse; font-size: 0.9rem; margin: 0.4rem 0; }
th, td { padding: 0.25rem 0.55rem; border-bottom: 1px solid #ddd; text-align: left; vertical-align: top; }
th { background: #f0f0f0; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
td.why { min-width: 14rem; }
td a { white-space: nowrap; }
tr[data-status="kept"] td:first-child { border-left: 0.3rem solid #0072B2; }
tr[data-status]:not([data-status="kept"]) td:first-child { border-left: 0.3rem solid #D55E00; }
pre { white-space: pre-wrap; overflow-wrap: anywhere; background: #f7f7f7; padding: 0.6rem; font-size: 0.85rem; }
details { margin: 0.6rem 0; }
.night { border-top: 1px dashed #bbb; padding-top: 0.3rem; }
.note { color: #444; font-size: 0.92rem; }
@media (max-width: 40rem) { main { padding: 0.5rem; } table { font-size: 0.82rem; } }
"""


def esc(value: Any) -> str:
    """``value`` as text, escaped for HTML content and attribute values."""
    return html.escape(str(value), quote=True)


def num(value: Any, spec: str = ".3f") -> str:
    """A number formatted with ``spec``, or "n/a" for None, NaN or text that is not a number."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return "n/a"
    return "n/a" if not math.isfinite(v) else format(v, spec)


def html_table(headers: list[str], rows: list[list[Any]], *, table_id: str = "", row_attrs: list[dict[str, str]] | None = None,
           numeric: set[int] | None = None, raw_cols: set[int] | None = None, caption: str = "",
           wide: set[int] | None = None) -> str:
    """A ``<table>`` in a sideways-scrolling box; every cell escaped except the columns in ``raw_cols``
    (which hold HTML this module built from escaped parts)."""
    numeric, raw_cols, wide = numeric or set(), raw_cols or set(), wide or set()
    head = "".join(f'<th scope="col">{esc(h)}</th>' for h in headers)
    body = []
    for i, row in enumerate(rows):
        attrs = "".join(f' {k}="{esc(v)}"' for k, v in (row_attrs[i] if row_attrs else {}).items())
        cells = []
        for j, v in enumerate(row):
            cls = ' class="num"' if j in numeric else ' class="why"' if j in wide else ""
            cells.append(f"<td{cls}>{v if j in raw_cols else esc(v)}</td>")
        body.append(f"<tr{attrs}>{''.join(cells)}</tr>")
    tid = f' id="{esc(table_id)}"' if table_id else ""
    cap = f"<caption>{esc(caption)}</caption>" if caption else ""
    return (f'<div class="scroll"><table{tid}>{cap}<thead><tr>{head}</tr></thead>'
            f"<tbody>{''.join(body)}</tbody></table></div>")


def document(title: str, body: str) -> str:
    """The whole page around ``body``: doctype, language, charset, viewport, the inline CSS."""
    return (
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
        "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
        f"<title>{esc(title)}</title>\n<style>{CSS}</style>\n</head>\n<body>\n<main>\n{body}\n</main>\n</body>\n</html>\n"
    )


def html_list(items: list[str]) -> str:
    return "<ul>" + "".join(f"<li>{esc(i)}</li>" for i in items) + "</ul>" if items else ""


def night_id(label: str) -> str:
    """The id of a night's section on the archive page."""
    return f"night-{label}"


def check_rows(report: dict[str, Any]) -> list[list[Any]]:
    rows = []
    for band, b in sorted((report.get("bands") or {}).items()):
        for sid, c in sorted((b.get("check_stars") or {}).items()):
            rms, pred = c.get("rms"), c.get("predicted_rms")
            ratio = float(rms) / float(pred) if rms is not None and pred else None
            rows.append([sid, band, c.get("n", 0), num(c.get("mean")), num(rms, ".4f"), num(pred, ".4f"),
                         num(ratio, ".2f"), num(c.get("offset_from_catalog"), "+.3f")])
    return rows


CHECK_HEADERS = ["check star", "band", "points", "mean (mag)", "measured rms (mag)", "predicted rms (mag)",
                 "measured / predicted", "mean − catalogue (mag)"]


def band_rows(report: dict[str, Any]) -> list[list[Any]]:
    rows = []
    for band, b in sorted((report.get("bands") or {}).items()):
        reasons = ", ".join(f"{k.replace('_', ' ')} {v}" for k, v in sorted((b.get("flag_reasons") or {}).items()))
        t = b.get("target") or {}
        rows.append([band, b.get("n_exposures", 0), b.get("n_used", 0), b.get("n_flagged", 0), reasons or "—",
                     len(b.get("comparisons_kept") or []), len(b.get("comparisons_rejected") or []),
                     num(b.get("calibration_err"), ".4f"),
                     f"{num(t.get('mag_min'))} – {num(t.get('mag_max'))}" if t.get("n") else "—",
                     num(t.get("median_mag_err"), ".4f")])
    return rows


BAND_HEADERS = ["band", "exposures", "used", "flagged", "flagged for", "comparisons kept", "rejected",
                "calibration error (mag)", "target range (mag)", "target median error (mag)"]


def verdict_tag(v: NightVerdict) -> str:
    return f'<span class="tag {v.verdict}">{esc(v.verdict)}</span>'


def write_page(html_text: str, path: str | os.PathLike[str]) -> Path:
    """Write a page (UTF-8) through :func:`varstar.export.write_atomic`, the one writer of result files.

    Returns the path written; raises :class:`varstar.errors.OutputError` as
    :func:`~varstar.export.write_atomic` does (nothing partial is left).
    """
    from ..export import write_atomic

    return write_atomic(path, html_text.encode("utf-8"))
