"""Charts as SVG strings (matplotlib, Agg), made once and used by pages and PDFs alike.

Text stays text (``svg.fonttype = "none"``) so pages stay searchable and PDFs copyable. Every
chart takes plain data (lists and the analysis payload's dicts), never the ORM. Angles in degrees
(ISO 8855 signs: toe + is toe-in), distances in km, play in mm.

The look: readings as ink dots on a pale slate tolerance band, the trend as a slate line with a
hatched prediction band, anything outside the band in umber — the same palette as the pages.
"""
from __future__ import annotations

import hashlib
import io
import math
import re
from collections.abc import Sequence

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from analytics.core.drift import LineTrend  # noqa: E402

INK = "#17212b"
INK_SOFT = "#3f4a55"
SLATE = "#12505a"
SLATE_TINT = "#d3e4e1"
UMBER = "#8f3a0c"
RULE = "#bdb7a9"
PAPER = "#fffefb"

_RC = {
    "svg.fonttype": "none",
    "font.family": "DejaVu Sans",
    "font.size": 8.5,
    "axes.edgecolor": RULE,
    "axes.labelcolor": INK_SOFT,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "xtick.color": INK_SOFT,
    "ytick.color": INK_SOFT,
    "axes.facecolor": PAPER,
    "figure.facecolor": PAPER,
}


def _rc(salt: str, **extra) -> dict:
    """Our look; a per-chart salt keeps element ids stable yet unique when charts share a page."""
    return _RC | {"svg.hashsalt": f"fleetsvc:{salt}"} | extra


def _svg(fig) -> str:
    buf = io.StringIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]  # drop the XML prologue so it embeds inline
    # Element ids (patch_1, text_3…) repeat from chart to chart: prefix them so that several
    # charts inline in one page or PDF never share an id. Stable: derived from the content.
    prefix = "c" + hashlib.sha1(text.encode()).hexdigest()[:8] + "-"
    text = re.sub(r'\bid="([^"]+)"', lambda m: f'id="{prefix}{m.group(1)}"', text)
    return re.sub(r'(url\(#|href="#)([^)"]+)', lambda m: f"{m.group(1)}{prefix}{m.group(2)}", text)


def _note(ax, text: str) -> None:
    ax.annotate(text, xy=(0, 0), xycoords="axes fraction", xytext=(0, -30),
                textcoords="offset points", fontsize=7, color=INK_SOFT, va="top")


def angle_history_svg(*, title: str, found: Sequence[tuple[float, float]],
                      adjusted: Sequence[tuple[float, float]], entry: dict, demo: bool) -> str:
    """One corner's angle over the odometer against its tolerance band, with the forecast.

    ``found``/``adjusted``: (odometer km, angle deg) of as-found and as-adjusted readings;
    ``entry``: the payload's ``drift["FL.toe"]`` (``spec``, ``trend``, ``forecast``).
    """
    with plt.rc_context(_rc(f"angle:{title}")):
        fig, ax = plt.subplots(figsize=(6.2, 2.5))
        spec = entry.get("spec") or {}
        trend = entry.get("trend")
        fc = entry.get("forecast") or {}
        xs = [k for k, _ in found] + [k for k, _ in adjusted]
        x_lo = min(xs) if xs else 0.0
        x_hi = max(xs) if xs else 1.0
        ahead = max(fc.get(k) or 0.0 for k in ("early_km", "likely_km", "late_km")) if fc else 0.0
        x_end = max(x_hi + 0.25 * max(x_hi - x_lo, 10_000.0), min(ahead, x_hi + 60_000.0))
        if spec:
            lo = spec["nominal"] - spec["tolerance"]
            hi = spec["nominal"] + spec["tolerance"]
            ax.axhspan(lo, hi, color=SLATE_TINT, zorder=0, lw=0)
            ax.axhline(spec["nominal"], color=SLATE, lw=0.8, ls=(0, (4, 3)), zorder=1)
            for edge in (lo, hi):
                ax.axhline(edge, color=SLATE, lw=1.1, zorder=1)
            ax.text(1.0, hi, f" {hi:+.2f}°", transform=ax.get_yaxis_transform(), va="center",
                    fontsize=7, color=SLATE)
            ax.text(1.0, lo, f" {lo:+.2f}°", transform=ax.get_yaxis_transform(), va="center",
                    fontsize=7, color=SLATE)
        else:
            lo = hi = None
        if trend:
            line = LineTrend(**trend)
            start = x_lo if entry.get("segment_start", 0) == 0 else trend["x_ref"] - 5000.0
            x = np.linspace(min(start, trend["x_ref"]), x_end, 60)
            b_lo, centre, b_hi = line.band(x)
            ax.fill_between(x, b_lo, b_hi, facecolor="none", edgecolor=SLATE, hatch="////",
                            lw=0, alpha=0.45, zorder=2, label="forecast band (95 %)")
            ax.plot(x, centre, color=SLATE, lw=1.6, zorder=3, label="trend")
        if found:
            fx, fy = zip(*found, strict=True)
            out = [(lo is not None) and not (lo <= v <= hi) for v in fy]
            ax.scatter(fx, fy, s=16, color=[UMBER if o else INK for o in out], zorder=4,
                       label="as found")
        if adjusted:
            ax_, ay = zip(*adjusted, strict=True)
            ax.scatter(ax_, ay, s=26, marker="D", facecolor=PAPER, edgecolor=SLATE, lw=1.2,
                       zorder=5, label="as adjusted")
        for key, word in (("early_km", "earliest"), ("likely_km", "likely")):
            if fc.get(key) and fc["early_km"] and fc[key] <= x_end:
                ax.axvline(fc[key], color=UMBER, lw=0.9, ls=(0, (1, 2)), zorder=1)
                ax.text(fc[key], 1.0, f"{word}\n{fc[key]:,.0f} km", transform=ax.get_xaxis_transform(),
                        fontsize=6.5, color=UMBER, ha="center", va="bottom")
        ax.set_xlim(x_lo - 0.02 * (x_end - x_lo), x_end)
        ax.set_xlabel("odometer, km")
        ax.set_ylabel(f"{title.split()[-1]}, °")
        ax.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda v, _: f"{v:,.0f}"))
        ax.set_title(title, loc="left", fontsize=9.5, color=INK, fontweight="bold")
        ax.legend(loc="upper left", bbox_to_anchor=(0, -0.22), ncol=4, frameon=False, fontsize=7)
        src = spec.get("source") if spec else None
        label = f"band: manufacturer spec, source: {src}" if src else "no spec entered: no band"
        if demo:
            label += " · demo data"
        ax.text(0, 1.0, label, transform=ax.transAxes, fontsize=6.5, color=INK_SOFT, va="bottom",
                ha="left", position=(0, 1.13))
        return _svg(fig)


def load_case_svg(*, corner: str, rows: Sequence[dict], demo: bool) -> str:
    """Toe and camber change under each load case, now (measured parts) against new.

    ``rows``: the payload's ``compliance[corner]["rows"]``; bars are the changes (deg), the
    whiskers the ± play bands.
    """
    with plt.rc_context(_rc(f"load:{corner}")):
        fig, axes = plt.subplots(1, 2, figsize=(6.2, 2.3), sharey=True)
        cases = [r["case"] for r in rows]
        y = np.arange(len(cases))
        h = 0.36
        for ax, q, label in ((axes[0], "toe", "toe change, ° (+ toward toe-in)"),
                             (axes[1], "camber", "camber change, °")):
            new = [r[f"{q}_change_new_deg"] for r in rows]
            now = [r[f"{q}_change_measured_deg"] for r in rows]
            e_new = [r[f"{q}_band_new_deg"] for r in rows]
            e_now = [r[f"{q}_band_measured_deg"] for r in rows]
            ax.barh(y - h / 2, new, h, color=SLATE_TINT, edgecolor=SLATE, lw=0.8, label="as new",
                    xerr=e_new, error_kw={"ecolor": SLATE, "lw": 0.8, "capsize": 2})
            ax.barh(y + h / 2, now, h, color=INK, label="now (measured parts)",
                    xerr=e_now, error_kw={"ecolor": UMBER, "lw": 0.9, "capsize": 2})
            ax.axvline(0, color=INK_SOFT, lw=0.8)
            ax.set_xlabel(label)
            ax.tick_params(axis="y", length=0)
            lim = max([abs(v) + e for v, e in zip(new + now, e_new + e_now, strict=True)] + [1e-3])
            ax.set_xlim(-1.15 * lim, 1.15 * lim)
        axes[0].set_yticks(y, cases)
        axes[0].invert_yaxis()
        axes[0].set_title(f"{corner}: change under load", loc="left", fontsize=9.5, color=INK,
                          fontweight="bold")
        axes[0].legend(loc="upper left", bbox_to_anchor=(0, -0.3), ncol=2, frameon=False, fontsize=7)
        note = "load cases use default accelerations (assumptions)"
        if demo:
            note += " · demo corner geometry"
        axes[1].text(1.0, -0.45, note, transform=axes[1].transAxes, fontsize=6.5,
                     color=INK_SOFT, ha="right", va="top")
        return _svg(fig)


def wear_trend_svg(*, title: str, entry: dict, demo: bool) -> str:
    """A part's play (mm) or bush stiffness (N/mm) over the odometer, against its limit."""
    with plt.rc_context(_rc(f"wear:{title}")):
        fig, ax = plt.subplots(figsize=(4.2, 2.1))
        km = entry["km"]
        if entry["kind"] == "play":
            vals, unit = entry["play_mm"], "play, mm"
            limit = entry.get("limit_mm")
        else:
            vals, unit = entry["stiffness_N_per_mm"], "stiffness, N/mm"
            limit = None
        fc = entry.get("forecast") or {}
        ax.plot(km, vals, color=INK, lw=1.0, marker="o", ms=3.5, zorder=3)
        x_end = max(km)
        if limit:
            for k in ("early_km", "likely_km"):
                if fc.get(k):
                    x_end = max(x_end, min(fc[k], max(km) + 40_000))
            ax.axhline(limit, color=UMBER, lw=1.2)
            ax.text(0, limit, f"limit {limit:g} mm ({entry.get('limit_source') or 'no source'})",
                    transform=ax.get_yaxis_transform(), fontsize=6.5, color=UMBER, va="bottom")
            ax.axhspan(limit, max(limit * 1.15, max(vals) * 1.05), color="#f6e3d6", lw=0, zorder=0)
            if fc.get("early_km") and fc.get("likely_km"):
                ax.plot([fc["early_km"], fc["likely_km"]], [limit, limit], color=UMBER, lw=4,
                        solid_capstyle="butt", alpha=0.6)
                ax.text(fc["likely_km"], limit, f" likely {fc['likely_km']:,.0f} km", fontsize=6.5,
                        color=UMBER, va="top")
        elif entry["kind"] == "stiffness":
            ax.text(0, 1.0, "no manufacturer limit for bush stiffness: trend only",
                    transform=ax.transAxes, fontsize=6.5, color=INK_SOFT, va="bottom")
        span = x_end - min(km)
        ax.set_xlim(min(km) - 0.03 * span, x_end + 0.05 * max(span, 1.0))
        ax.set_xlabel("odometer, km")
        ax.set_ylabel(unit)
        ax.xaxis.set_major_formatter(matplotlib.ticker.FuncFormatter(lambda v, _: f"{v:,.0f}"))
        ax.set_title(title + (" · demo" if demo else ""), loc="left", fontsize=9, color=INK,
                     fontweight="bold", pad=12)
        return _svg(fig)


def rate_histogram_svg(*, counts: Sequence[int], edges: Sequence[float], pooled_mean: float | None,
                       title: str) -> str:
    """A compact histogram of per-vehicle drift rates (deg / 10,000 km), pooled mean marked."""
    with plt.rc_context(_rc(f"hist:{title}", **{"font.size": 7})):
        fig, ax = plt.subplots(figsize=(2.6, 0.95))
        widths = np.diff(edges)
        ax.bar(edges[:-1], counts, widths, align="edge", color=SLATE_TINT, edgecolor=SLATE, lw=0.6)
        if pooled_mean is not None and math.isfinite(pooled_mean):
            ax.axvline(pooled_mean, color=UMBER, lw=1.2)
        ax.axvline(0, color=INK_SOFT, lw=0.6, ls=":")
        ax.set_yticks([])
        ax.spines["left"].set_visible(False)
        ax.set_title(title, loc="left", fontsize=7, color=INK_SOFT)
        return _svg(fig)
