"""Renderings of a record for people: a self-contained HTML page and a PDF.

Both show the same things, in the same order: what the record is (title, id, version, created, hash and
whether it verified), the verdict, the margins with their states (colour and the word, so they survive
grey-scale print), charts, cautions, flags, the section results, the protocol as entered, the
signatures (printed name, meaning, time, user id, key) and the software that made the numbers. Every
page ends with the statement that this is planning support and that local codes, institutional
biosafety and licensed practice decide, and with the record hash.

The HTML page has inline CSS and inline SVG charts and no external URL, so it opens offline and can be
archived as one file; the PDF embeds PNG charts. Both are made from the stored record bytes, never from
the live assessment.
"""

from __future__ import annotations

import html
import io
import struct
import textwrap
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any
from xml.sax.saxutils import escape as xml_escape

from planner import charts
from planner.records import RecordCheck, load_record, record_hash
from planner.results import shown_flags

PLANNING_SUPPORT = (
    "Planning support only: these numbers come from published models, each with its validity range and "
    "uncertainty, and a margin is never a guarantee. Local codes, institutional biosafety and licensed "
    "practice decide."
)
_KNOWN_KEYS = {"schema", "title", "margins", "margin_states", "verdict", "flags", "cautions", "software"}
_SKIP_IN_SECTIONS = {"flags", "parameters", "series"}


# --------------------------------------------------------------------------------------------- the view
@dataclass
class Section:
    """One assessment section as shown: scalar rows, then its lists of rows as small tables."""

    name: str
    rows: list[tuple[str, str]]
    tables: list[tuple[str, list[str], list[list[str]]]] = field(default_factory=list)


_UNIT_SUFFIXES = [
    ("_osmol_per_kg", "osmol/kg"), ("_w_per_m2_k", "W/(m2 K)"), ("_c_per_min", "C/min"), ("_mol_per_kg", "mol/kg"),
    ("_mpa", "MPa"), ("_ml", "mL"), ("_min", "min"), ("_mm", "mm"), ("_c", "C"), ("_k", "K"), ("_h", "h"),
    ("_s", "s"), ("_m3", "m3"),
]


def axis_title(key: str) -> str:
    """A column key with its unit suffix as an axis title: ``pressure_mpa`` -> ``pressure [MPa]``."""
    for suffix, unit in _UNIT_SUFFIXES:
        if key.endswith(suffix) and len(key) > len(suffix):
            return f"{key[: -len(suffix)].replace('_', ' ')} [{unit}]"
    return key.replace("_", " ")


_FIRST_CURVES = ("pressure", "freeze_probability", "probability", "ice_fraction", "volume")


def _curve_rank(column: str) -> int:
    """Which curves to draw first: the position of the column's prefix in :data:`_FIRST_CURVES`."""
    return next((i for i, prefix in enumerate(_FIRST_CURVES) if column.startswith(prefix)), len(_FIRST_CURVES))


def _is_number(v: Any) -> bool:
    return v is None or (isinstance(v, int | float) and not isinstance(v, bool))


def _curve_columns(value: Any) -> list[str] | None:
    """Keys of a column table (a mapping of equally long lists of numbers), or None."""
    if not isinstance(value, dict) or len(value) < 2:
        return None
    cols = list(value)
    lengths = {len(v) if isinstance(v, list) else -1 for v in value.values()}
    if len(lengths) != 1 or min(lengths) < 2:
        return None
    if not all(_is_number(x) for v in value.values() for x in v):
        return None
    return cols


def _section(name: str, section: dict) -> tuple[Section, list[dict]]:
    rows, tables, series = [], [], []
    for key, value in section.items():
        if key in _SKIP_IN_SECTIONS:
            continue
        cols = _curve_columns(value)
        if cols is not None:
            # canonical JSON sorts keys, so choose the axis by name: temperature or time across, then the
            # quantities a reader looks for first
            x = next((c for c in cols if c.startswith(("temperature", "time"))), cols[0])
            rest = sorted((c for c in cols if c != x), key=lambda c, cols=cols: (_curve_rank(c), cols.index(c)))
            for y in rest[:2]:
                series.append({"title": f"{name}: {axis_title(y)} against {axis_title(x)}", "x_label": axis_title(x),
                               "y_label": axis_title(y), "x": value[x], "y": value[y], "section": name})
            rows.append((key, f"{len(value[x])} points of " + ", ".join(cols) + " (charted)"))
        elif isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
            headers = list(dict.fromkeys(k for v in value for k in v))
            tables.append((key, headers, [[fmt(v.get(h)) for h in headers] for v in value]))
        elif isinstance(value, dict):
            rows += [(f"{key}.{k}", fmt(v)) for k, v in value.items()]
        else:
            rows.append((key, fmt(value)))
    for s in section.get("series", []) or []:
        if isinstance(s, dict) and isinstance(s.get("x"), list) and isinstance(s.get("y"), list):
            series.append({**s, "section": name})
    return Section(name, rows, tables), series


@dataclass
class RecordView:
    """What a rendering shows, taken from the record bytes (plain strings and lists, nothing computed)."""

    title: str
    record_id: str
    version: int
    created: str
    record_hash: str
    verified: bool | None
    verification: list[str]
    supersedes: dict | None
    verdict_state: str
    verdict_reasons: list[str]
    margins: list[dict]
    cautions: list[dict]
    flags: list[dict]
    sections: list[Section]
    series: list[dict]
    protocol_name: str
    protocol_text: str
    signatures: list[dict]
    software: dict
    notes: list[str] = field(default_factory=list)


def fmt(value: Any) -> str:
    """A number as people read it (4 significant digits), anything else as text; None as a dash."""
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.4g}"
    if isinstance(value, list | dict):
        text = str(value)
        return text if len(text) <= 120 else text[:117] + "…"
    return str(value)


def record_view(data: bytes, check: RecordCheck | None = None) -> RecordView:
    """Collect what the renderings show from a record's stored bytes (refuses a malformed record)."""
    record = load_record(data)
    body = record["body"]
    a = body["assessment"]
    margins = a.get("margin_states")
    if margins is None and isinstance(a.get("margins"), list):
        margins = a["margins"]
    margins = [m for m in (margins or []) if isinstance(m, dict)]
    sections, series = [], []
    for name, section in a.items():
        if name in _KNOWN_KEYS or not isinstance(section, dict):
            continue
        shown, curves = _section(name, section)
        sections.append(shown)
        series += curves
    verdict = a.get("verdict") or {}
    status = {s.index: s for s in check.signatures} if check else {}
    signatures = []
    for i, sig in enumerate(record["signatures"]):
        s = status.get(i)
        signatures.append({**sig, "status": s.status if s else "not checked", "reason": s.reason if s else ""})
    return RecordView(
        title=str(a.get("title") or body["protocol"]["name"]),
        record_id=body["record_id"],
        version=body["version"],
        created=body["created"],
        record_hash=record_hash(bytes(data)),
        verified=None if check is None else check.ok,
        verification=[] if check is None else check.problems + check.notes,
        supersedes=body["supersedes"],
        verdict_state=str(verdict.get("state", "not-judged")),
        verdict_reasons=[str(r) for r in verdict.get("reasons", [])],
        margins=margins,
        cautions=[c for c in a.get("cautions", []) if isinstance(c, dict)],
        flags=shown_flags([f for f in a.get("flags", []) if isinstance(f, dict)]),
        sections=sections,
        series=series,
        protocol_name=str(body["protocol"]["name"]),
        protocol_text=body["protocol"]["text"],
        signatures=signatures,
        software=body["software"],
    )


def _unit(unit: Any) -> str:
    """A margin's unit as printed: a ratio or probability (unit ``1``) has none."""
    return "" if unit in (None, "", "1") else str(unit)


def _word(state: str) -> str:
    return charts.STATE_WORDS.get(state, state)


def _verification_word(view: RecordView) -> str:
    if view.verified is None:
        return "signatures not checked"
    return "verified: every signature valid" if view.verified else "NOT VERIFIED"


def _chart_list(view: RecordView) -> list[tuple[str, Any]]:
    out = []
    mc = charts.margins_chart(view.margins)
    if mc is not None:
        out.append(("Margins between their thresholds", mc))
    for s in view.series:
        x_title = f"{s.get('x_label', 'x')}" + (f" [{s['x_unit']}]" if s.get("x_unit") else "")
        y_title = f"{s.get('y_label', 'y')}" + (f" [{s['y_unit']}]" if s.get("y_unit") else "")
        title = str(s.get("title") or s.get("name") or s["section"])
        out.append((title, charts.series_chart(s["x"], s["y"], x_title, y_title, title)))
    return out


# ------------------------------------------------------------------------------------------------- HTML
_CSS = """
body{font-family:"DejaVu Sans",Arial,Helvetica,sans-serif;margin:2em auto;max-width:60em;color:#000;line-height:1.35}
h1{font-size:1.5em;margin-bottom:.2em}h2{font-size:1.15em;border-bottom:1px solid #000;margin-top:1.6em}
table{border-collapse:collapse;width:100%;margin:.4em 0}th,td{border:1px solid #555;padding:.25em .45em;
text-align:left;vertical-align:top;font-size:.92em}th{background:#eee}
.state{font-weight:bold;white-space:nowrap}.mono{font-family:"DejaVu Sans Mono",monospace;font-size:.85em;
word-break:break-all}pre{background:#f6f6f6;border:1px solid #999;padding:.6em;white-space:pre-wrap;
font-size:.85em}.banner{border:2px solid #000;padding:.5em;font-weight:bold}.bad{background:#6b0000;color:#fff}
.good{background:#cdebc5}.caution{border-left:6px solid #000;padding:.2em .6em;margin:.5em 0}
footer{margin-top:2em;border-top:2px solid #000;padding-top:.5em;font-size:.9em}
.chart svg{max-width:100%;height:auto}
@media print{body{margin:0;max-width:none}.chart{page-break-inside:avoid}}
"""


def _state_cell(state: str) -> str:
    fill, ink = charts.STATE_COLOURS.get(state, ("#ffffff", "#000000"))
    return f'<td class="state" style="background:{fill};color:{ink}">{html.escape(_word(state))}</td>'


def render_html(data: bytes, check: RecordCheck | None = None) -> str:
    """The record as one self-contained HTML page (inline CSS and SVG, no external URL)."""
    v = record_view(data, check)
    e = html.escape
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{e(v.title)} – protocol record v{v.version}</title>",
        f"<style>{_CSS}</style></head><body>",
        f"<h1>{e(v.title)}</h1>",
        "<table><tbody>",
        f'<tr><th>Record</th><td class="mono">{e(v.record_id)}</td><th>Version</th><td>{v.version}</td></tr>',
        f"<tr><th>Created (UTC)</th><td>{e(v.created)}</td><th>Protocol file</th><td>{e(v.protocol_name)}</td></tr>",
        f'<tr><th>Record hash</th><td class="mono" colspan="3">sha256:{e(v.record_hash)}</td></tr>',
        "</tbody></table>",
    ]
    cls = "good" if v.verified else "bad" if v.verified is False else ""
    out.append(f'<p class="banner {cls}">{e(_verification_word(v))}</p>')
    if v.verification:
        out.append("<ul>" + "".join(f"<li>{e(p)}</li>" for p in v.verification) + "</ul>")
    if v.supersedes:
        s = v.supersedes
        out.append(
            f"<p><b>Corrects version {s['version']}</b> (sha256:<span class=\"mono\">{e(s['record_hash'])}</span>). "
            f"Reason: {e(s['reason'])}</p>"
        )
    out += ["<h2>Verdict</h2>", "<table><tbody><tr><th>Overall</th>", _state_cell(v.verdict_state), "</tr></tbody></table>"]
    if v.verdict_reasons:
        out.append("<ul>" + "".join(f"<li>{e(r)}</li>" for r in v.verdict_reasons) + "</ul>")
    out += [
        "<h2>Margins</h2>",
        "<table><thead><tr><th>Margin</th><th>Value</th><th>Watch at</th><th>Stop at</th><th>Better</th>"
        "<th>State</th><th>Policy</th></tr></thead><tbody>",
    ]
    for m in v.margins:
        unit = e(_unit(m.get("unit")))
        out.append(
            f"<tr><td>{e(str(m.get('label') or m.get('name')))}</td><td>{e(fmt(m.get('value')))} {unit}</td>"
            f"<td>{e(fmt(m.get('watch')))}</td><td>{e(fmt(m.get('stop')))}</td><td>{e(fmt(m.get('better')))}</td>"
            f"{_state_cell(str(m.get('state', 'not-judged')))}<td>{e(fmt(m.get('policy')))}</td></tr>"
        )
    out.append("</tbody></table>")
    out.append("<h2>Charts</h2>")
    for title, chart in _chart_list(v):
        out.append(f'<figure class="chart"><figcaption>{e(title)}</figcaption>{charts.to_svg(chart)}</figure>')
    out.append("<h2>Cautions</h2>")
    for c in v.cautions:
        out.append(
            f'<div class="caution"><b>{e(str(c.get("title", "")))}</b><br>{e(str(c.get("text", "")))}'
            f'<br><small>Source: {e(str(c.get("citation") or c.get("source", "")))}</small></div>'
        )
    out.append("<h2>Flags</h2>")
    if v.flags:
        out.append("<table><thead><tr><th>Flag</th><th>What</th><th>Source</th></tr></thead><tbody>")
        out += [
            f"<tr><td>{e(str(f.get('code')))}</td><td>{e(str(f.get('message')))}</td><td>{e(fmt(f.get('source')))}</td></tr>"
            for f in v.flags
        ]
        out.append("</tbody></table>")
    else:
        out.append("<p>No flags: every model was used inside its range.</p>")
    out.append("<h2>Section results</h2>")
    for sec in v.sections:
        out.append(f"<h3>{e(sec.name)}</h3><table><tbody>")
        out += [f"<tr><th>{e(k)}</th><td>{e(val)}</td></tr>" for k, val in sec.rows]
        out.append("</tbody></table>")
        for key, headers, rows in sec.tables:
            out.append(f"<p><b>{e(sec.name)}.{e(key)}</b></p><table><thead><tr>")
            out += [f"<th>{e(h)}</th>" for h in headers]
            out.append("</tr></thead><tbody>")
            out += ["<tr>" + "".join(f"<td>{e(c)}</td>" for c in row) + "</tr>" for row in rows]
            out.append("</tbody></table>")
    out += [f"<h2>Protocol as entered ({e(v.protocol_name)})</h2>", f"<pre>{e(v.protocol_text)}</pre>"]
    out += [
        "<h2>Signatures</h2>",
        "<table><thead><tr><th>#</th><th>Printed name</th><th>Meaning</th><th>Signed (UTC)</th><th>User id</th>"
        "<th>Key</th><th>Check</th></tr></thead><tbody>",
    ]
    for i, s in enumerate(v.signatures, start=1):
        out.append(
            f"<tr><td>{i}</td><td>{e(s['printed_name'])}</td><td>{e(s['meaning'])}</td><td>{e(s['signed'])}</td>"
            f"<td>{e(s['user_id'])}</td><td class=\"mono\">{e(s['key_fingerprint'])}</td>"
            f"<td>{e(s['status'])}{(' – ' + e(s['reason'])) if s['reason'] else ''}</td></tr>"
        )
    out.append("</tbody></table>")
    out += [
        "<h2>Software and data</h2>",
        f"<p>coldmargin {e(str(v.software.get('version')))}</p>",
        "<table><thead><tr><th>Data file</th><th>SHA-256</th></tr></thead><tbody>",
    ]
    out += [
        f'<tr><td>{e(name)}</td><td class="mono">{e(str(digest))}</td></tr>'
        for name, digest in sorted((v.software.get("data_files") or {}).items())
    ]
    out.append("</tbody></table>")
    out += [
        f"<footer><p><b>{e(PLANNING_SUPPORT)}</b></p>",
        f'<p>Record hash <span class="mono">sha256:{e(v.record_hash)}</span></p></footer>',
        "</body></html>",
    ]
    return "\n".join(out)


# -------------------------------------------------------------------------------------------------- PDF
@lru_cache(maxsize=1)
def _fonts() -> tuple[str, str, str]:
    """Register a Unicode TrueType font family (DejaVu if installed, else reportlab's own Vera)."""
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    candidates = [
        ("/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf", "/usr/share/fonts/truetype/dejavu/DejaVuSans-Bold.ttf",
         "/usr/share/fonts/truetype/dejavu/DejaVuSansMono.ttf"),
    ]
    import reportlab

    vera = Path(reportlab.__file__).parent / "fonts"
    candidates.append((str(vera / "Vera.ttf"), str(vera / "VeraBd.ttf"), str(vera / "Vera.ttf")))
    for regular, bold, mono in candidates:
        if all(Path(p).exists() for p in (regular, bold, mono)):
            pdfmetrics.registerFont(TTFont("CM-Regular", regular))
            pdfmetrics.registerFont(TTFont("CM-Bold", bold))
            pdfmetrics.registerFont(TTFont("CM-Mono", mono))
            pdfmetrics.registerFontFamily("CM-Regular", normal="CM-Regular", bold="CM-Bold")
            return "CM-Regular", "CM-Bold", "CM-Mono"
    return "Helvetica", "Helvetica-Bold", "Courier"


def _wrap_to_width(text: str, font: str, size: float, width: float) -> list[str]:
    """Break ``text`` into lines no wider than ``width`` points in ``font`` at ``size``."""
    from reportlab.pdfbase.pdfmetrics import stringWidth

    lines, line = [], ""
    for word in text.split():
        trial = f"{line} {word}".strip()
        if line and stringWidth(trial, font, size) > width:
            lines.append(line)
            line = word
        else:
            line = trial
    return [*lines, line] if line else lines


def _png_size(png: bytes) -> tuple[int, int]:
    width, height = struct.unpack(">II", png[16:24])
    return width, height


def render_pdf(data: bytes, check: RecordCheck | None = None) -> bytes:
    """The record as a PDF (A4), charts embedded as PNG; every page carries the planning-support
    statement and the record hash in its footer."""
    from reportlab.lib import colors
    from reportlab.lib.pagesizes import A4
    from reportlab.lib.styles import ParagraphStyle
    from reportlab.lib.units import mm
    from reportlab.platypus import (
        Image,
        KeepTogether,
        Paragraph,
        SimpleDocTemplate,
        Spacer,
        Table,
        TableStyle,
    )

    v = record_view(data, check)
    regular, bold, mono = _fonts()
    base = ParagraphStyle("base", fontName=regular, fontSize=9, leading=11.5)
    small = ParagraphStyle("small", parent=base, fontSize=7.5, leading=9.5)
    mono_style = ParagraphStyle("mono", parent=base, fontName=mono, fontSize=7, leading=8.6)
    h1 = ParagraphStyle("h1", parent=base, fontName=bold, fontSize=15, leading=19, spaceAfter=4)
    h2 = ParagraphStyle("h2", parent=base, fontName=bold, fontSize=11.5, leading=14, spaceBefore=9, spaceAfter=3,
                        keepWithNext=1)
    x = xml_escape

    def p(text: str, style=base) -> Paragraph:
        return Paragraph(x(text), style)

    def table(rows, widths, header=True, extra=()) -> Table:
        t = Table(rows, colWidths=widths, repeatRows=1 if header else 0)
        style = [
            ("GRID", (0, 0), (-1, -1), 0.5, colors.HexColor("#555555")),
            ("VALIGN", (0, 0), (-1, -1), "TOP"),
            ("LEFTPADDING", (0, 0), (-1, -1), 3),
            ("RIGHTPADDING", (0, 0), (-1, -1), 3),
        ]
        if header:
            style.append(("BACKGROUND", (0, 0), (-1, 0), colors.HexColor("#eeeeee")))
        t.setStyle(TableStyle(style + list(extra)))
        return t

    page_width = A4[0] - 36 * mm
    story: list = [p(v.title, h1)]
    story.append(table([
        [p("Record"), Paragraph(x(v.record_id), mono_style), p("Version"), p(str(v.version))],
        [p("Created (UTC)"), p(v.created), p("Protocol file"), p(v.protocol_name)],
        [p("Record hash"), Paragraph("sha256:" + x(v.record_hash), mono_style), "", ""],
    ], [28 * mm, 72 * mm, 26 * mm, page_width - 126 * mm], header=False, extra=[("SPAN", (1, 2), (3, 2))]))
    story.append(Spacer(1, 4))
    ok_fill = "#cdebc5" if v.verified else "#6b0000" if v.verified is False else "#ffffff"
    ok_ink = "#ffffff" if v.verified is False else "#000000"
    banner = ParagraphStyle("banner", parent=base, fontName=bold, textColor=colors.HexColor(ok_ink))
    story.append(table([[Paragraph(x(_verification_word(v)), banner)]], [page_width], header=False,
                       extra=[("BACKGROUND", (0, 0), (-1, -1), colors.HexColor(ok_fill)), ("BOX", (0, 0), (-1, -1), 1.5, colors.black)]))
    story += [p("• " + line, small) for line in v.verification]
    if v.supersedes:
        s = v.supersedes
        story.append(p(f"Corrects version {s['version']} (sha256:{s['record_hash']}). Reason: {s['reason']}", small))

    def state_para(state: str) -> tuple[Paragraph, str]:
        fill, ink = charts.STATE_COLOURS.get(state, ("#ffffff", "#000000"))
        style = ParagraphStyle("st", parent=base, fontName=bold, textColor=colors.HexColor(ink))
        return Paragraph(x(_word(state)), style), fill

    story.append(p("Verdict", h2))
    para, fill = state_para(v.verdict_state)
    story.append(table([[p("Overall"), para]], [30 * mm, page_width - 30 * mm], header=False,
                       extra=[("BACKGROUND", (1, 0), (1, 0), colors.HexColor(fill))]))
    story += [p("• " + r, small) for r in v.verdict_reasons]

    story.append(p("Margins", h2))
    rows = [[p(h) for h in ("Margin", "Value", "Watch at", "Stop at", "Better", "State", "Policy")]]
    fills = []
    for i, m in enumerate(v.margins, start=1):
        para, fill = state_para(str(m.get("state", "not-judged")))
        fills.append(("BACKGROUND", (5, i), (5, i), colors.HexColor(fill)))
        rows.append([
            p(str(m.get("label") or m.get("name"))), p(f"{fmt(m.get('value'))} {_unit(m.get('unit'))}"),
            p(fmt(m.get("watch"))), p(fmt(m.get("stop"))), p(fmt(m.get("better"))), para, p(fmt(m.get("policy"))),
        ])
    widths = [page_width - 133 * mm, 25 * mm, 18 * mm, 18 * mm, 17 * mm, 35 * mm, 20 * mm]
    story.append(table(rows, widths, extra=fills))

    heading = [p("Charts", h2)]  # kept on the page of the first chart
    for title, chart in _chart_list(v):
        png = charts.to_png(chart, scale=2.0)
        w, h = _png_size(png)
        draw_w = min(page_width, w / 2 * 0.75)  # 2x pixels at 96 px/in, drawn at 72 pt/in
        story.append(KeepTogether([*heading, p(title, small),
                                   Image(io.BytesIO(png), width=draw_w, height=draw_w * h / w)]))
        heading = []
    story += heading

    heading = [p("Cautions", h2)]  # kept on the page of the first caution
    for c in v.cautions:
        story.append(KeepTogether([
            *heading, Paragraph("<b>" + x(str(c.get("title", ""))) + "</b>", base), p(str(c.get("text", ""))),
            p("Source: " + str(c.get("citation") or c.get("source", "")), small), Spacer(1, 3),
        ]))
        heading = []
    story += heading

    story.append(p("Flags", h2))
    if v.flags:
        rows = [[p("Flag"), p("What"), p("Source")]]
        rows += [[p(str(f.get("code"))), p(str(f.get("message"))), p(fmt(f.get("source")))] for f in v.flags]
        story.append(table(rows, [28 * mm, page_width - 68 * mm, 40 * mm]))
    else:
        story.append(p("No flags: every model was used inside its range."))

    story.append(p("Section results", h2))
    tiny = ParagraphStyle("tiny", parent=base, fontSize=6.5, leading=8)
    for sec in v.sections:
        rows = [[Paragraph("<b>" + x(sec.name) + "</b>", base), ""]] + [[p(k, small), p(val, small)] for k, val in sec.rows]
        story.append(table(rows, [60 * mm, page_width - 60 * mm], extra=[("SPAN", (0, 0), (1, 0))]))
        for key, headers, body_rows in sec.tables:
            story.append(p(f"{sec.name}.{key}", small))
            n = len(headers)
            story.append(table([[p(h, tiny) for h in headers]] + [[p(c, tiny) for c in r] for r in body_rows],
                               [page_width / n] * n))
        story.append(Spacer(1, 3))

    story.append(p(f"Protocol as entered ({v.protocol_name})", h2))
    lines = []
    for line in v.protocol_text.splitlines() or [""]:
        lines += textwrap.wrap(line, 110, subsequent_indent="    ", drop_whitespace=False, replace_whitespace=False) or [""]
    story += [Paragraph(x(line).replace(" ", "&nbsp;") or "&nbsp;", mono_style) for line in lines]

    story.append(p("Signatures", h2))
    rows = [[p(h) for h in ("#", "Printed name", "Meaning", "Signed (UTC)", "User id", "Check")]]
    for i, s in enumerate(v.signatures, start=1):
        rows.append([p(str(i)), p(s["printed_name"]), p(s["meaning"]), p(s["signed"]), p(s["user_id"]),
                     p(s["status"] + (f" – {s['reason']}" if s["reason"] else ""), small)])
        rows.append(["", Paragraph("key " + x(s["key_fingerprint"]), mono_style), "", "", "", ""])
    spans = [("SPAN", (1, r), (5, r)) for r in range(2, len(rows), 2)]
    story.append(table(rows, [8 * mm, 45 * mm, 20 * mm, 42 * mm, 25 * mm, page_width - 140 * mm], extra=spans))

    story.append(p("Software and data", h2))
    story.append(p(f"coldmargin {v.software.get('version')}"))
    rows = [[p("Data file"), p("SHA-256")]]
    rows += [[p(n, small), Paragraph(x(str(d)), mono_style)] for n, d in sorted((v.software.get("data_files") or {}).items())]
    story.append(table(rows, [50 * mm, page_width - 50 * mm]))

    def footer(canvas, doc) -> None:
        canvas.saveState()
        canvas.setLineWidth(1)
        canvas.line(18 * mm, 22 * mm, A4[0] - 18 * mm, 22 * mm)
        text = canvas.beginText(18 * mm, 18 * mm)
        text.setFont(bold, 7)
        for line in _wrap_to_width(PLANNING_SUPPORT, bold, 7, A4[0] - 36 * mm):
            text.textLine(line)
        text.setFont(mono, 6.5)
        text.textLine(f"record sha256:{v.record_hash}   page {doc.page}")
        canvas.drawText(text)
        canvas.restoreState()

    buffer = io.BytesIO()
    doc = SimpleDocTemplate(
        buffer, pagesize=A4, leftMargin=18 * mm, rightMargin=18 * mm, topMargin=16 * mm, bottomMargin=28 * mm,
        title=f"{v.title} – protocol record v{v.version}", author=", ".join(s["printed_name"] for s in v.signatures),
        subject=f"coldmargin record {v.record_id}", creator="coldmargin",
    )
    doc.build(story, onFirstPage=footer, onLaterPages=footer)
    return buffer.getvalue()
