"""Tolerance bands for display: a value (or a history of values) placed against nominal ± tolerance.

The band drawn on screen spans the spec's lower … upper limit and sits in the middle third of a
scale from ``lower − width`` to ``upper + width``; a value past the scale is pinned to its edge and
marked off scale. ``bay.js`` mirrors :func:`place` for live display while typing.
"""
from __future__ import annotations

from dataclasses import dataclass

from inspections.models import AlignmentSpec, Platform
from inspections.models.catalogue import CORNER_AXLE

QUANTITY_LABELS = {"toe": "toe", "camber": "camber", "caster": "caster", "sai": "SAI"}
STATE_WORDS = {"inside": "inside band", "below": "under band", "above": "over band",
               "nospec": "no spec entered"}


@dataclass(frozen=True)
class Band:
    axle: str
    quantity: str
    nominal_deg: float
    tolerance_deg: float
    source: str
    derived: str = ""  # how the band was derived when not entered directly

    @property
    def lower_deg(self) -> float:
        return self.nominal_deg - self.tolerance_deg

    @property
    def upper_deg(self) -> float:
        return self.nominal_deg + self.tolerance_deg

    def as_json(self) -> dict:
        return {"nominal": self.nominal_deg, "tolerance": self.tolerance_deg,
                "lower": self.lower_deg, "upper": self.upper_deg, "source": self.source,
                "derived": self.derived}


def bands_of(platform: Platform) -> dict[tuple[str, str], Band]:
    """Per-wheel bands of a platform keyed by (axle, quantity).

    A per-wheel toe band missing while a total-toe band exists is derived as total ÷ 2 and says so.
    """
    specs = {(s.axle, s.quantity): s for s in AlignmentSpec.objects.filter(platform=platform)}
    bands: dict[tuple[str, str], Band] = {}
    for (axle, quantity), s in specs.items():
        if quantity in {"toe", "camber", "caster", "sai"}:
            bands[(axle, quantity)] = Band(axle, quantity, s.nominal_deg, s.tolerance_deg, s.source)
    for axle in ("front", "rear"):
        total = specs.get((axle, "total_toe"))
        if (axle, "toe") not in bands and total is not None:
            bands[(axle, "toe")] = Band(axle, "toe", total.nominal_deg / 2, total.tolerance_deg / 2,
                                        total.source, derived="half of the total-toe spec")
    return bands


def place(value: float | None, band: Band | None) -> dict:
    """Where a value sits against its band, as percentages of the drawn scale."""
    if band is None:
        return {"state": "nospec", "word": STATE_WORDS["nospec"], "value": value}
    width = band.upper_deg - band.lower_deg
    lo, hi = band.lower_deg - width, band.upper_deg + width
    out = {"band_left": 100 / 3, "band_width": 100 / 3, "lower": band.lower_deg,
           "upper": band.upper_deg, "nominal": band.nominal_deg, "source": band.source,
           "derived": band.derived, "value": value, "nominal_pos": 50.0}
    if value is None:
        out.update(state="", word="")
        return out
    pos = 100 * (value - lo) / (hi - lo)
    state = "inside" if band.lower_deg <= value <= band.upper_deg else (
        "below" if value < band.lower_deg else "above")
    out.update(marker=min(max(pos, 0.0), 100.0), offscale=not 0 <= pos <= 100, state=state,
               word=STATE_WORDS[state])
    return out


def reading_rows(sessions, bands: dict[tuple[str, str], Band]) -> list[dict]:
    """History against the band: one row per corner and quantity, one marker per session.

    ``sessions`` are oldest first; the last one is drawn strongest and its value printed.
    """
    rows = []
    for corner in ("FL", "FR", "RL", "RR"):
        axle = CORNER_AXLE[corner]
        for quantity in ("toe", "camber", "caster", "sai"):
            band = bands.get((axle, quantity))
            marks = []
            for i, session in enumerate(sessions):
                reading = next((r for r in session.readings.all() if r.corner == corner), None)
                value = getattr(reading, f"{quantity}_deg", None) if reading else None
                if value is None:
                    continue
                p = place(value, band)
                p["age"] = len(sessions) - 1 - i
                p["session"] = session
                marks.append(p)
            if not marks and quantity in {"caster", "sai"}:
                continue
            rows.append({"corner": corner, "quantity": quantity,
                         "label": QUANTITY_LABELS[quantity], "band": place(None, band),
                         "marks": marks, "latest": marks[-1] if marks else None})
    return rows
