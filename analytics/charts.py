"""Charts as compact SVG strings, drawn on demand by pages and PDFs alike.

Each chart is written directly as a few dozen SVG elements (no plotting library): drawing one
takes about a millisecond, so nothing has to be drawn ahead or cached, and WeasyPrint lays the
owner PDF out quickly. Text stays text (``<text>`` elements) so pages stay searchable and PDFs
copyable. Presentation is in SVG attributes only — no ``<style>`` element, no ``style``
attribute — so the charts also pass the pages' Content-Security-Policy.

Every chart takes plain data (lists and the analysis payload's dicts), never the ORM. Angles in
degrees (ISO 8855 signs: toe + is toe-in), distances in km, play in mm, stiffness in N/mm.
Coordinates are in the chart's own viewBox units (about 1 pt each at the size drawn); pages and
the PDF scale the chart to their column width.

The look: readings as ink dots on a pale slate tolerance band, the trend as a slate line with a
hatched prediction band, anything outside the band in umber — the same palette as the pages.
"""
from __future__ import annotations

import hashlib
import math
from collections.abc import Iterable, Sequence
from html import escape

import numpy as np

from analytics.core.drift import LineTrend

INK = "#17212b"
INK_SOFT = "#3f4a55"
SLATE = "#12505a"
SLATE_TINT = "#d3e4e1"
UMBER = "#8f3a0c"
UMBER_TINT = "#f6e3d6"
RULE = "#bdb7a9"
PAPER = "#fffefb"

FONT = "DejaVu Sans, sans-serif"
MINUS = "\u2212"
WIDE = 460.0  # viewBox width of the vehicle charts (angle, load, wear): one text scale for all
TICK = 8.0  # tick-label size on the vehicle charts


# ----------------------------------------------------------------------------- primitives


def _n(v: float) -> str:
    """A coordinate, to 0.1 unit (enough at the size drawn, and short)."""
    s = f"{v:.1f}"
    if s.endswith(".0"):
        s = s[:-2]
    return "0" if s == "-0" else s


def _text_width(text: str, size: float) -> float:
    """Approximate advance width of ``text`` in DejaVu Sans at ``size`` (same units)."""
    em = 0.0
    for ch in text:
        if ch in " .,:;'!|()[]ijlftrI·":
            em += 0.34
        elif ch.isdigit():
            em += 0.64
        elif ch in "+=<>~" or ch == MINUS:
            em += 0.84
        elif ch.isupper() or ch in "mwMW%…":
            em += 0.78
        else:
            em += 0.6
    return em * size


def _fit(text: str, size: float, room: float) -> str:
    """``text``, cut with "…" if wider than ``room`` (a long source; it is listed in full on the
    page and in the PDF's sources)."""
    if _text_width(text, size) <= room:
        return text
    while text and _text_width(text + "…", size) > room:
        text = text[:-1]
    return text.rstrip() + "…"


def _num(value: float, decimals: int, *, thousands: bool = False, sign: bool = False) -> str:
    """A number as printed on charts: a true minus sign, optional thousands separators / plus."""
    body = f"{abs(value):,.{decimals}f}" if thousands else f"{abs(value):.{decimals}f}"
    zero = float(body.replace(",", "")) == 0.0
    if value < 0 and not zero:
        return MINUS + body
    return ("+" + body) if sign else body


def _step_decimals(step: float) -> int:
    d = 0
    while d < 8 and abs(step * 10**d - round(step * 10**d)) > 1e-6 * step * 10**d:
        d += 1
    return d


def _ticks(lo: float, hi: float, target: int = 5) -> tuple[list[float], int]:
    """Round tick values inside ``[lo, hi]`` (1, 2, 2.5 or 5 × 10^k apart) and their decimals."""
    span = hi - lo
    if not (math.isfinite(span) and span > 0):
        return [lo], 2
    raw = span / max(target, 1)
    mag = 10.0 ** math.floor(math.log10(raw))
    step = 10.0 * mag
    for m in (1.0, 2.0, 2.5, 5.0):
        if m * mag >= raw * 0.999:
            step = m * mag
            break
    k0, k1 = math.ceil(lo / step - 1e-9), math.floor(hi / step + 1e-9)
    values = [0.0 if abs(k * step) < step * 1e-9 else k * step for k in range(k0, k1 + 1)]
    return values, _step_decimals(step)


def _fitting_ticks(lo: float, hi: float, length: float, size: float, *, thousands: bool = False,
                   target: int = 6) -> tuple[list[float], list[str]]:
    """Ticks along a horizontal axis of ``length`` units whose labels do not touch."""
    while True:
        values, dec = _ticks(lo, hi, target)
        labels = [_num(v, dec, thousands=thousands) for v in values]
        widest = max((_text_width(s, size) for s in labels), default=0.0)
        if target <= 2 or len(values) * (widest + 1.5 * size) <= length:
            return values, labels
        target -= 1


class _Scale:
    """A linear map from data ``[d0, d1]`` to chart units ``[p0, p1]``."""

    def __init__(self, d0: float, d1: float, p0: float, p1: float) -> None:
        if not d1 > d0:
            d0, d1 = d0 - 1.0, d1 + 1.0
        self.d0, self.d1, self.p0, self.p1 = d0, d1, p0, p1
        self.k = (p1 - p0) / (d1 - d0)

    def __call__(self, v: float) -> float:
        return self.p0 + (v - self.d0) * self.k

    def inside(self, v: float) -> bool:
        return self.d0 <= v <= self.d1


def _padded(values: Iterable[float], frac: float = 0.05) -> tuple[float, float]:
    vals = [v for v in values if v is not None and math.isfinite(v)]
    if not vals:
        return 0.0, 1.0
    lo, hi = min(vals), max(vals)
    if hi > lo:
        pad = frac * (hi - lo)
    else:
        pad = max(abs(lo) * 0.1, 0.05)
    return lo - pad, hi + pad


class _Canvas:
    """Collects SVG elements; :meth:`svg` wraps them with the viewBox, font and background."""

    def __init__(self, width: float, height: float, label: str) -> None:
        self.width, self.height, self.label = width, height, label
        self.items: list[str] = []
        self.defs: list[str] = []

    def add(self, element: str) -> None:
        self.items.append(element)

    def line(self, x1: float, y1: float, x2: float, y2: float, stroke: str, width: float = 1.0,
             dash: str | None = None) -> None:
        extra = f' stroke-dasharray="{dash}"' if dash else ""
        self.add(f'<line x1="{_n(x1)}" y1="{_n(y1)}" x2="{_n(x2)}" y2="{_n(y2)}" '
                 f'stroke="{stroke}" stroke-width="{width:g}"{extra}/>')

    def rect(self, x: float, y: float, w: float, h: float, fill: str, stroke: str | None = None,
             width: float = 0.8) -> None:
        if w < 0:
            x, w = x + w, -w
        if h < 0:
            y, h = y + h, -h
        edge = f' stroke="{stroke}" stroke-width="{width:g}"' if stroke else ""
        self.add(f'<rect x="{_n(x)}" y="{_n(y)}" width="{_n(w)}" height="{_n(h)}" '
                 f'fill="{fill}"{edge}/>')

    def path(self, d: str, *, fill: str = "none", stroke: str | None = None, width: float = 1.0,
             extra: str = "") -> None:
        edge = f' stroke="{stroke}" stroke-width="{width:g}"' if stroke else ""
        self.add(f'<path d="{d}" fill="{fill}"{edge}{extra}/>')

    def text(self, x: float, y: float, text: str, *, size: float = 8.5, fill: str = INK_SOFT,
             anchor: str = "start", bold: bool = False, rotate: bool = False) -> None:
        attrs = f'x="{_n(x)}" y="{_n(y)}" font-size="{size:g}"'
        if fill != INK_SOFT:
            attrs += f' fill="{fill}"'
        if anchor != "start":
            attrs += f' text-anchor="{anchor}"'
        if bold:
            attrs += ' font-weight="bold"'
        if rotate:
            attrs += f' transform="rotate(-90 {_n(x)} {_n(y)})"'
        self.add(f"<text {attrs}>{escape(text, quote=False)}</text>")

    def svg(self) -> str:
        body = "".join(self.items)
        defs = "".join(self.defs)
        if defs:
            # Ids must be unique when several charts share a page: derive them from the content.
            tag = "c" + hashlib.sha1((defs + body).encode()).hexdigest()[:10]
            body, defs = body.replace("@ID", tag), defs.replace("@ID", tag)
            defs = f"<defs>{defs}</defs>"
        w, h = _n(self.width), _n(self.height)
        return (f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" '
                f'height="{h}" role="img" aria-label="{escape(self.label)}" '
                f'font-family="{FONT}" fill="{INK_SOFT}">{defs}'
                f'<rect width="{w}" height="{h}" fill="{PAPER}"/>{body}</svg>')


def _dots(points: Iterable[tuple[float, float]], r: float) -> str:
    """One path of circles (radius ``r``) at the given chart points."""
    return "".join(f"M {_n(x - r)} {_n(y)} a {r:g} {r:g} 0 1 0 {2 * r:g} 0 "
                   f"a {r:g} {r:g} 0 1 0 {-2 * r:g} 0 Z " for x, y in points).strip()


def _diamonds(points: Iterable[tuple[float, float]], r: float) -> str:
    """One path of diamonds (half-diagonal ``r``) at the given chart points."""
    return "".join(f"M {_n(x)} {_n(y - r)} L {_n(x + r)} {_n(y)} L {_n(x)} {_n(y + r)} "
                   f"L {_n(x - r)} {_n(y)} Z " for x, y in points).strip()


def _polyline(xs: Sequence[float], ys: Sequence[float]) -> str:
    return " ".join(f"{_n(x)},{_n(y)}" for x, y in zip(xs, ys, strict=True))


def _x_axis(c: _Canvas, sx: _Scale, y: float, *, size: float, thousands: bool,
            label: str | None, label_size: float = 8.0) -> None:
    """Bottom axis line at ``y`` with ticks, tick labels and an optional axis label."""
    c.line(sx.p0, y, sx.p1, y, RULE, 0.8)
    values, labels = _fitting_ticks(sx.d0, sx.d1, sx.p1 - sx.p0, size, thousands=thousands)
    # a label that would stick out of the chart is left off (its tick with it)
    kept = [(v, s) for v, s in zip(values, labels, strict=True)
            if 0.0 <= sx(v) - _text_width(s, size) / 2 and sx(v) + _text_width(s, size) / 2 <= c.width]
    values, labels = [v for v, _ in kept], [s for _, s in kept]
    marks = "".join(f"M {_n(sx(v))} {_n(y)} v 3.5 " for v in values).strip()
    if marks:
        c.path(marks, stroke=INK_SOFT, width=0.8)
    for v, s in zip(values, labels, strict=True):
        c.text(sx(v), y + 3.5 + size + 1, s, size=size, anchor="middle")
    if label:
        c.text((sx.p0 + sx.p1) / 2, y + 3.5 + size + 3 + label_size + 1.5, label,
               size=label_size, anchor="middle")


def _y_ticks(lo: float, hi: float, size: float) -> tuple[list[float], list[str], float]:
    values, dec = _ticks(lo, hi, 5)
    labels = [_num(v, dec) for v in values]
    return values, labels, max((_text_width(s, size) for s in labels), default=0.0)


def _y_axis(c: _Canvas, sy: _Scale, x: float, values: Sequence[float], labels: Sequence[str],
            *, size: float) -> None:
    c.line(x, sy.p0, x, sy.p1, RULE, 0.8)
    marks = "".join(f"M {_n(x)} {_n(sy(v))} h -3.5 " for v in values).strip()
    if marks:
        c.path(marks, stroke=INK_SOFT, width=0.8)
    for v, s in zip(values, labels, strict=True):
        c.text(x - 5.5, sy(v) + size * 0.35, s, size=size, anchor="end")


def _legend(c: _Canvas, x: float, y: float, entries: Sequence[tuple[str, str]],
            size: float = 7.0) -> None:
    """A one-row legend at baseline ``y``: (swatch kind, text) pairs, swatches drawn here;
    moved left if it would run past the chart's right edge."""
    total = sum(18 + _text_width(text, size) + 14 for _, text in entries) - 14
    x = max(2.0, min(x, c.width - 2.0 - total))
    for kind, text in entries:
        mid = y - size * 0.35
        if kind == "hatch":
            c.rect(x, mid - 3.5, 14, 7, "url(#@ID-hatch)")
        elif kind == "trend":
            c.line(x, mid, x + 14, mid, SLATE, 1.6)
        elif kind == "found":
            c.path(_dots([(x + 7, mid)], 2.2), fill=INK)
        elif kind == "outside":
            c.path(_dots([(x + 7, mid)], 2.2), fill=UMBER)
        elif kind == "adjusted":
            c.path(_diamonds([(x + 7, mid)], 3.2), fill=PAPER, stroke=SLATE, width=1.2)
        elif kind == "new":
            c.rect(x, mid - 3.5, 14, 7, SLATE_TINT, SLATE, 0.8)
        elif kind == "now":
            c.rect(x, mid - 3.5, 14, 7, INK)
        c.text(x + 18, y, text, size=size)
        x += 18 + _text_width(text, size) + 14


def _hatch_def(c: _Canvas) -> None:
    c.defs.append('<pattern id="@ID-hatch" width="5" height="5" patternUnits="userSpaceOnUse">'
                  f'<path d="M 0 5 L 5 0 M -1 1 L 1 -1 M 4 6 L 6 4" stroke="{SLATE}" '
                  'stroke-width="0.8" stroke-opacity="0.6"/></pattern>')


def _spread_labels(wanted: list[float], min_gap: float, lo: float, hi: float) -> list[float]:
    """Positions near ``wanted`` (sorted order kept) at least ``min_gap`` apart within [lo, hi]."""
    if not wanted:
        return []
    order = sorted(range(len(wanted)), key=lambda i: wanted[i])
    pos = [wanted[i] for i in order]
    for i in range(1, len(pos)):
        pos[i] = max(pos[i], pos[i - 1] + min_gap)
    shift = max(0.0, pos[-1] - hi)
    pos = [p - shift for p in pos]
    for i in range(len(pos) - 2, -1, -1):
        pos[i] = min(pos[i], pos[i + 1] - min_gap)
    shift = max(0.0, lo - pos[0])
    pos = [p + shift for p in pos]
    out = [0.0] * len(pos)
    for k, i in enumerate(order):
        out[i] = pos[k]
    return out


# ----------------------------------------------------------------------------- charts


def angle_history_svg(*, title: str, found: Sequence[tuple[float, float]],
                      adjusted: Sequence[tuple[float, float]], entry: dict, demo: bool) -> str:
    """One corner's angle over the odometer against its tolerance band, with the forecast.

    ``found``/``adjusted``: (odometer km, angle deg) of as-found and as-adjusted readings;
    ``entry``: the payload's ``drift["FL.toe"]`` (``spec``, ``trend``, ``forecast``). Drawn: the
    tolerance band (nominal dashed, edges labelled in deg), the trend line and its hatched 95 %
    prediction band, readings (as found: dots, umber when outside the band; as adjusted:
    diamonds), and the earliest / likely forecast crossings (km) as dotted umber lines.
    """
    spec = entry.get("spec") or {}
    trend = entry.get("trend")
    fc = entry.get("forecast") or {}
    xs = [k for k, _ in found] + [k for k, _ in adjusted]
    x_lo = min(xs) if xs else 0.0
    x_hi = max(xs) if xs else 1.0
    ahead = max(fc.get(k) or 0.0 for k in ("early_km", "likely_km", "late_km")) if fc else 0.0
    x_end = max(x_hi + 0.25 * max(x_hi - x_lo, 10_000.0), min(ahead, x_hi + 60_000.0))
    x_min = x_lo - 0.02 * (x_end - x_lo)

    ys = [v for _, v in found] + [v for _, v in adjusted]
    lo = hi = None
    if spec:
        lo = spec["nominal"] - spec["tolerance"]
        hi = spec["nominal"] + spec["tolerance"]
        ys += [lo, hi]
    band = None
    if trend:
        line = LineTrend(**trend)
        start = x_lo if entry.get("segment_start", 0) == 0 else trend["x_ref"] - 5000.0
        tx = np.linspace(max(min(start, trend["x_ref"]), x_min), x_end, 25)
        band = (tx, *line.band(tx))
        ys += [float(band[1].min()), float(band[3].max())]
    y_lo, y_hi = _padded(ys)

    angle = title.split()[-1]
    crossings = [(fc[k], word) for k, word in (("early_km", "earliest"), ("likely_km", "likely"))
                 if fc.get(k) and fc.get("early_km") and x_min <= fc[k] <= x_end]
    src = spec.get("source") if spec else None
    head = "band: manufacturer spec, source: " if src else "no spec entered: no band"
    tail = " · demo data" if demo else ""
    y_vals, y_labels, y_w = _y_ticks(y_lo, y_hi, TICK)
    left = 16.0 + y_w + 7.0
    label_x = left + _text_width(title, 9.5) * 1.08 + 10.0
    label_own_row = label_x + _text_width(head + (src or "") + tail, 6.5) > WIDE - 4.0
    room = WIDE - 4.0 - (left if label_own_row else label_x) - _text_width(head + tail, 6.5)
    label = head + (_fit(src, 6.5, room) if src else "") + tail
    top = (47.0 if crossings else 32.0) + (10.0 if label_own_row else 0.0)
    bottom = top + 125.0
    right = WIDE - (40.0 if spec else 10.0)
    sx = _Scale(x_min, x_end, left, right)
    sy = _Scale(y_lo, y_hi, bottom, top)

    words = [f"{title} over the odometer"]
    if spec:
        words.append(f"band {_num(lo, 2, sign=True)}° to {_num(hi, 2, sign=True)}°")
    c = _Canvas(WIDE, bottom + 46.0, "; ".join(words))

    if spec:
        c.rect(left, sy(hi), right - left, sy(lo) - sy(hi), SLATE_TINT)
        c.line(left, sy(spec["nominal"]), right, sy(spec["nominal"]), SLATE, 0.8, dash="3.2 2.4")
        for edge in (lo, hi):
            c.line(left, sy(edge), right, sy(edge), SLATE, 1.1)
        y_hi_label, y_lo_label = sy(hi), sy(lo)
        if y_lo_label - y_hi_label < 8.0:
            mid = (y_lo_label + y_hi_label) / 2
            y_hi_label, y_lo_label = mid - 4.0, mid + 4.0
        c.text(right + 2.5, y_hi_label + 2.5, f"{_num(hi, 2, sign=True)}°", size=7, fill=SLATE)
        c.text(right + 2.5, y_lo_label + 2.5, f"{_num(lo, 2, sign=True)}°", size=7, fill=SLATE)
    for km, _word in crossings:
        c.line(sx(km), top, sx(km), bottom, UMBER, 0.9, dash="0.9 1.8")
    legend: list[tuple[str, str]] = []
    if band is not None:
        tx, b_lo, centre, b_hi = band
        px = [sx(v) for v in tx]
        outline = _polyline(px + px[::-1], [sy(v) for v in b_lo] + [sy(v) for v in b_hi[::-1]])
        _hatch_def(c)
        c.add(f'<polygon points="{outline}" fill="url(#@ID-hatch)"/>')
        c.add(f'<polyline points="{_polyline(px, [sy(v) for v in centre])}" fill="none" '
              f'stroke="{SLATE}" stroke-width="1.6"/>')
        legend += [("hatch", "forecast band (95 %)"), ("trend", "trend")]
    if found:
        inside = [(sx(k), sy(v)) for k, v in found if lo is None or lo <= v <= hi]
        outside = [(sx(k), sy(v)) for k, v in found if lo is not None and not lo <= v <= hi]
        if inside:
            c.path(_dots(inside, 2.2), fill=INK)
            legend.append(("found", "as found"))
        if outside:
            c.path(_dots(outside, 2.2), fill=UMBER)
            legend.append(("outside", "as found, outside the band"))
    if adjusted:
        c.path(_diamonds([(sx(k), sy(v)) for k, v in adjusted], 3.2), fill=PAPER, stroke=SLATE,
               width=1.2)
        legend.append(("adjusted", "as adjusted"))

    _y_axis(c, sy, left, y_vals, y_labels, size=TICK)
    _x_axis(c, sx, bottom, size=TICK, thousands=True, label="odometer, km")
    c.text(9.0, (top + bottom) / 2, f"{angle}, °", size=8, anchor="middle", rotate=True)
    if crossings:
        lines = [(sx(km), word, f"{_num(km, 0, thousands=True)} km") for km, word in crossings]
        gap = max(_text_width(s, 6.5) for _, w, s in lines) + 6.0
        placed = _spread_labels([x for x, _, _ in lines], gap, left + gap / 2, WIDE - gap / 2)
        for x, (_, word, km_text) in zip(placed, lines, strict=True):
            c.text(x, top - 11.0, word, size=6.5, fill=UMBER, anchor="middle")
            c.text(x, top - 3.0, km_text, size=6.5, fill=UMBER, anchor="middle")
    c.text(left, 12.0, title, size=9.5, fill=INK, bold=True)
    if label_own_row:
        c.text(left, 23.0, label, size=6.5)
    else:
        c.text(label_x, 12.0, label, size=6.5)
    _legend(c, left, bottom + 40.0, legend)
    return c.svg()


def load_case_svg(*, corner: str, rows: Sequence[dict], demo: bool) -> str:
    """Toe and camber change under each load case, now (measured parts) against new.

    ``rows``: the payload's ``compliance[corner]["rows"]``; bars are the changes (deg), the
    whiskers the ± play bands (deg).
    """
    cases = [r["case"] for r in rows]
    case_w = max((_text_width(s, 8) for s in cases), default=0.0)
    left = case_w + 12.0
    gap = 22.0
    panel = (WIDE - 8.0 - left - gap) / 2
    top, row_h = 22.0, 26.0
    bottom = top + row_h * max(len(rows), 1)
    c = _Canvas(WIDE, bottom + 58.0, f"{corner}: toe and camber change under load, now against new")
    h = row_h * 0.36
    for i, (q, label) in enumerate((("toe", "toe change, ° (+ toward toe-in)"),
                                    ("camber", "camber change, °"))):
        x0 = left + i * (panel + gap)
        new = [r[f"{q}_change_new_deg"] for r in rows]
        now = [r[f"{q}_change_measured_deg"] for r in rows]
        e_new = [r[f"{q}_band_new_deg"] for r in rows]
        e_now = [r[f"{q}_band_measured_deg"] for r in rows]
        lim = 1.15 * max([abs(v) + e for v, e in zip(new + now, e_new + e_now, strict=True)]
                         + [1e-3])
        sx = _Scale(-lim, lim, x0, x0 + panel)
        whiskers_new, whiskers_now = [], []
        for k in range(len(rows)):
            yc = top + row_h * (k + 0.5)
            c.rect(sx(0), yc - h, sx(new[k]) - sx(0), h, SLATE_TINT, SLATE, 0.8)
            c.rect(sx(0), yc, sx(now[k]) - sx(0), h, INK)
            for v, e, y, out in ((new[k], e_new[k], yc - h / 2, whiskers_new),
                                 (now[k], e_now[k], yc + h / 2, whiskers_now)):
                if e > 0:
                    a, b = sx(v - e), sx(v + e)
                    out.append(f"M {_n(a)} {_n(y)} H {_n(b)} M {_n(a)} {_n(y - 2)} v 4 "
                               f"M {_n(b)} {_n(y - 2)} v 4")
        if whiskers_new:
            c.path(" ".join(whiskers_new), stroke=SLATE, width=0.8)
        if whiskers_now:
            c.path(" ".join(whiskers_now), stroke=UMBER, width=0.9)
        c.line(sx(0), top, sx(0), bottom, INK_SOFT, 0.8)
        _x_axis(c, sx, bottom, size=TICK, thousands=False, label=label)
    for k, case in enumerate(cases):
        c.text(left - 6.0, top + row_h * (k + 0.5) + 2.8, case, size=8, anchor="end")
    c.text(left, 13.0, f"{corner}: change under load", size=9.5, fill=INK, bold=True)
    _legend(c, left, bottom + 40.0, [("new", "as new"), ("now", "now (measured parts)")])
    note = "load cases use default accelerations (assumptions)"
    if demo:
        note += " · demo corner geometry"
    c.text(WIDE - 8.0, bottom + 53.0, note, size=6.5, anchor="end")
    return c.svg()


def wear_trend_svg(*, title: str, entry: dict, demo: bool) -> str:
    """A part's play (mm) or bush stiffness (N/mm) over the odometer (km), against its limit.

    ``entry``: the payload's ``wear[key]``. With a play limit: the limit line, the region past it
    shaded, and the forecast's earliest–likely crossing as a thick umber bar on the limit.
    """
    km = [float(k) for k in entry["km"]]
    if entry["kind"] == "play":
        vals, unit = [float(v) for v in entry["play_mm"]], "play, mm"
        limit = entry.get("limit_mm")
    else:
        vals, unit = [float(v) for v in entry["stiffness_N_per_mm"]], "stiffness, N/mm"
        limit = None
    fc = entry.get("forecast") or {}
    x_end = max(km)
    if limit:
        for k in ("early_km", "likely_km"):
            if fc.get(k):
                x_end = max(x_end, min(fc[k], max(km) + 40_000))
    span = x_end - min(km)
    x_min, x_max = min(km) - 0.03 * span, x_end + 0.05 * max(span, 1.0)
    shade_top = max(limit * 1.15, max(vals) * 1.05) if limit else None
    y_lo, y_hi = _padded(vals + ([limit, shade_top] if limit else []))
    if limit:
        y_hi = shade_top  # the shaded region reaches the top of the plot

    full_title = title + (" · demo" if demo else "")
    note = None if limit or entry["kind"] != "stiffness" else \
        "no manufacturer limit for bush stiffness: trend only"
    top = 30.0 if note else 22.0
    bottom = top + 100.0
    y_vals, y_labels, y_w = _y_ticks(y_lo, y_hi, TICK)
    left = 16.0 + y_w + 7.0
    right = WIDE - 20.0
    sx = _Scale(x_min, x_max, left, right)
    sy = _Scale(y_lo, y_hi, bottom, top)
    label = f"{full_title}: {unit} over the odometer"
    if limit:
        label += f", limit {limit:g} mm"
    c = _Canvas(WIDE, bottom + 32.0, label)

    if limit:
        c.rect(left, sy(shade_top), right - left, sy(limit) - sy(shade_top), UMBER_TINT)
        c.line(left, sy(limit), right, sy(limit), UMBER, 1.2)
        c.text(left + 3.0, sy(limit) - 3.0,
               _fit(f"limit {limit:g} mm ({entry.get('limit_source') or 'no source'})", 6.5,
                    right - left - 6.0), size=6.5, fill=UMBER)
        if fc.get("early_km") and fc.get("likely_km"):
            a = sx(min(max(fc["early_km"], x_min), x_max))
            b = sx(min(max(fc["likely_km"], x_min), x_max))
            c.line(a, sy(limit), b, sy(limit), UMBER, 4)
            text = f"likely {_num(fc['likely_km'], 0, thousands=True)} km"
            tx = min(b + 3.0, right - _text_width(text, 6.5))
            c.text(tx, sy(limit) + 10.0, text, size=6.5, fill=UMBER)
    points = [(sx(k), sy(v)) for k, v in zip(km, vals, strict=True)]
    c.add(f'<polyline points="{" ".join(f"{_n(x)},{_n(y)}" for x, y in points)}" fill="none" '
          f'stroke="{INK}" stroke-width="1"/>')
    c.path(_dots(points, 1.9), fill=INK)

    _y_axis(c, sy, left, y_vals, y_labels, size=TICK)
    _x_axis(c, sx, bottom, size=TICK, thousands=True, label="odometer, km")
    c.text(9.0, (top + bottom) / 2, unit, size=8, anchor="middle", rotate=True)
    c.text(left, 12.0, full_title, size=9, fill=INK, bold=True)
    if note:
        c.text(left, 23.0, note, size=6.5)
    return c.svg()


def rate_histogram_svg(*, counts: Sequence[int], edges: Sequence[float], pooled_mean: float | None,
                       title: str) -> str:
    """A compact histogram of per-vehicle drift rates (deg / 10,000 km), pooled mean marked.

    ``counts``: vehicles per bin; ``edges``: the ``len(counts) + 1`` bin edges (deg / 10,000 km);
    ``pooled_mean``: the platform's pooled rate (umber line), if pooled. A dotted line marks 0.
    """
    width, left, right, top, bottom = 200.0, 4.0, 194.0, 14.0, 62.0
    lo, hi = float(edges[0]), float(edges[-1])
    pad = 0.05 * (hi - lo)
    marks = [lo, hi, 0.0] + ([pooled_mean] if pooled_mean is not None and
                             math.isfinite(pooled_mean) else [])
    x0, x1 = min(marks) - pad, max(marks) + pad
    sx = _Scale(x0, x1, left, right)
    peak = max(max(counts, default=0), 1)
    sy = _Scale(0.0, peak * 1.05, bottom, top)
    label = f"drift rates, deg per 10,000 km: {title}"
    if pooled_mean is not None and math.isfinite(pooled_mean):
        label += f"; pooled mean {_num(pooled_mean, 4, sign=True)}"
    c = _Canvas(width, bottom + 16.0, label)
    bars = []
    for n, a, b in zip(counts, edges[:-1], edges[1:], strict=True):
        if n:
            bars.append(f"M {_n(sx(a))} {_n(bottom)} V {_n(sy(n))} H {_n(sx(b))} V {_n(bottom)} Z")
    if bars:
        c.path(" ".join(bars), fill=SLATE_TINT, stroke=SLATE, width=0.6)
    if pooled_mean is not None and math.isfinite(pooled_mean):
        c.line(sx(pooled_mean), top, sx(pooled_mean), bottom, UMBER, 1.2)
    c.line(sx(0.0), top, sx(0.0), bottom, INK_SOFT, 0.6, dash="0.6 1.2")
    _x_axis(c, sx, bottom, size=7, thousands=False, label=None)
    c.text(left, 9.0, title, size=7)
    return c.svg()
