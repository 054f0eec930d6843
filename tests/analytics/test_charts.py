"""The hand-built SVG charts: well-formed, policy-safe, and every mark where its axes say.

Positions are checked against the chart's own printed tick labels (a reader's reference): the
label values and their positions give the axis map, and each reading's dot must land on its
(km, deg) through that map.
"""
from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from analytics import charts

SVG = "{http://www.w3.org/2000/svg}"

ENTRY = {
    "spec": {"source": "demo", "nominal": 0.05, "tolerance": 0.08},
    "trend": {"n": 5, "slope": -1.7e-06, "x_ref": 54640.0, "y_ref": 0.014, "slope_se": 3.9e-07,
              "residual_sd": 0.01},
    "segment_start": 3,
    "forecast": {"status": "crossing", "early_km": 66688.0, "likely_km": 80315.0,
                 "late_km": 106612.0},
}
FOUND = [(40142.0, 0.02), (44100.0, 0.16), (47379.0, 0.01), (51126.0, -0.05), (54640.0, 0.014),
         (57994.0, 0.0)]
ADJUSTED = [(47379.0, 0.05)]
ROWS = [
    {"case": "cornering", "assumptions": ["lateral acceleration: 0.5 g (default)"],
     "toe_change_new_deg": 0.12, "toe_change_measured_deg": -0.04, "toe_band_new_deg": 0.0,
     "toe_band_measured_deg": 0.03, "camber_change_new_deg": 0.10,
     "camber_change_measured_deg": 0.11, "camber_band_new_deg": 0.0,
     "camber_band_measured_deg": 0.02},
    {"case": "braking", "assumptions": ["deceleration: 0.6 g (default)"],
     "toe_change_new_deg": 0.03, "toe_change_measured_deg": -0.10, "toe_band_new_deg": 0.0,
     "toe_band_measured_deg": 0.01, "camber_change_new_deg": -0.01,
     "camber_change_measured_deg": -0.02, "camber_band_new_deg": 0.0,
     "camber_band_measured_deg": 0.0},
]
WEAR = {"km": [40142, 44100, 47379, 51126], "kind": "play", "part": "Lower ball joint",
        "play_mm": [0.1, 0.19, 0.23, 0.34], "limit_mm": 1.0, "limit_source": "workshop manual",
        "forecast": {"status": "crossing", "early_km": 78514.0, "likely_km": 92444.0}}


def angle_chart(**kw) -> str:
    args = {"title": "FL toe", "found": FOUND, "adjusted": ADJUSTED, "entry": ENTRY, "demo": True}
    return charts.angle_history_svg(**(args | kw))


def all_charts() -> list[str]:
    return [
        angle_chart(),
        charts.load_case_svg(corner="RL", rows=ROWS, demo=True),
        charts.wear_trend_svg(title="FL Lower ball joint", entry=WEAR, demo=False),
        charts.rate_histogram_svg(counts=[1, 0, 3, 5, 2], edges=[-0.05, -0.03, -0.01, 0.01, 0.03,
                                                                 0.05],
                                  pooled_mean=-0.004, title="11 vehicles"),
    ]


def texts(root: ET.Element) -> list[ET.Element]:
    return list(root.iter(f"{SVG}text"))


def number(text: str) -> float:
    return float(text.replace(",", "").replace("\u2212", "-").rstrip("°"))


def axis_maps(root: ET.Element) -> tuple[np.ndarray, np.ndarray]:
    """(slope, intercept) from value to position, for x and y: the printed tick labels' values
    paired, in order, with the tick marks drawn for them."""
    numeric = re.compile(r"^[\u2212-]?[\d,]+(\.\d+)?$")
    x_values = sorted(number(t.text) for t in texts(root)
                      if t.get("text-anchor") == "middle" and numeric.match(t.text or ""))
    y_values = sorted((number(t.text) for t in texts(root)
                       if t.get("text-anchor") == "end" and numeric.match(t.text or "")),
                      reverse=True)                  # top of the chart first
    marks = " ".join(p.get("d") for p in root.iter(f"{SVG}path") if p.get("fill") == "none")
    x_marks = sorted(float(m) for m in re.findall(r"M (\S+) \S+ v 3.5", marks))
    y_marks = sorted(float(m) for m in re.findall(r"M \S+ (\S+) h -3.5", marks))
    assert len(x_values) == len(x_marks) >= 3 and len(y_values) == len(y_marks) >= 3
    return np.polyfit(x_values, x_marks, 1), np.polyfit(y_values, y_marks, 1)


def dot_centres(d: str) -> list[tuple[float, float]]:
    """Centres of the circles in a dots path (``M x-r y a r r 0 1 0 2r 0 …``)."""
    out = []
    for m in re.finditer(r"M (\S+) (\S+) a (\S+)", d):
        out.append((float(m.group(1)) + float(m.group(3)), float(m.group(2))))
    return out


def paths(root: ET.Element, fill: str) -> list[str]:
    return [p.get("d") for p in root.iter(f"{SVG}path") if p.get("fill") == fill]


@pytest.mark.parametrize("svg", all_charts())
def test_every_chart_is_well_formed_svg_without_style_elements_or_attributes(svg):
    root = ET.fromstring(svg)
    assert root.tag == f"{SVG}svg"
    assert root.get("viewBox") and root.get("aria-label")
    for el in root.iter():
        assert el.tag != f"{SVG}style"          # the pages' CSP refuses inline <style>
        assert "style" not in el.attrib
        assert "script" not in el.tag


@pytest.mark.parametrize("svg", all_charts())
def test_every_text_starts_inside_the_chart(svg):
    root = ET.fromstring(svg)
    _, _, width, height = (float(v) for v in root.get("viewBox").split())
    for t in texts(root):
        assert 0 <= float(t.get("x")) <= width, t.text
        assert 0 <= float(t.get("y")) <= height, t.text


def test_each_reading_sits_where_the_axes_say():
    root = ET.fromstring(angle_chart())
    fx, fy = axis_maps(root)
    centres = sorted(dot_centres(paths(root, charts.INK)[0]) + dot_centres(
        paths(root, charts.UMBER)[0]))
    assert len(centres) == len(FOUND)
    for (px, py), (km, deg) in zip(centres, sorted(FOUND), strict=True):
        assert (px - fx[1]) / fx[0] == pytest.approx(km, abs=200)      # 0.1 unit ≈ 50 km here
        assert (py - fy[1]) / fy[0] == pytest.approx(deg, abs=0.003)


def test_readings_outside_the_band_are_umber_and_the_rest_ink():
    root = ET.fromstring(angle_chart())
    lo, hi = 0.05 - 0.08, 0.05 + 0.08
    outside = [r for r in FOUND if not lo <= r[1] <= hi]
    assert len(outside) == 2
    assert len(dot_centres(paths(root, charts.UMBER)[0])) == len(outside)
    assert len(dot_centres(paths(root, charts.INK)[0])) == len(FOUND) - len(outside)


def test_the_band_edges_forecast_and_sources_are_printed_as_text():
    words = " ".join(t.text for t in texts(ET.fromstring(angle_chart())))
    for expected in ("+0.13°", "\u22120.03°", "earliest", "66,688 km", "likely", "80,315 km",
                     "odometer, km", "toe, °", "band: manufacturer spec, source: demo · demo data",
                     "forecast band (95 %)", "trend", "as adjusted"):
        assert expected in words


def test_demo_labelling_follows_the_data():
    assert "demo data" in angle_chart(demo=True)
    assert "demo data" not in angle_chart(demo=False)
    assert "demo corner geometry" in charts.load_case_svg(corner="RL", rows=ROWS, demo=True)
    assert "demo" not in charts.load_case_svg(corner="RL", rows=ROWS, demo=False)
    assert "Lower ball joint · demo" in charts.wear_trend_svg(title="FL Lower ball joint",
                                                              entry=WEAR, demo=True)


def test_text_from_the_data_is_escaped():
    entry = ENTRY | {"spec": ENTRY["spec"] | {"source": "manual <p. 4> & errata"}}
    root = ET.fromstring(angle_chart(entry=entry))
    assert any("manual <p. 4> & errata" in (t.text or "") for t in texts(root))


def test_two_charts_on_one_page_never_share_an_id_and_references_resolve():
    a, b = angle_chart(), angle_chart(title="FR toe")
    ids_a = {e.get("id") for e in ET.fromstring(a).iter() if e.get("id")}
    ids_b = {e.get("id") for e in ET.fromstring(b).iter() if e.get("id")}
    assert ids_a and ids_b and not ids_a & ids_b
    for svg, ids in ((a, ids_a), (b, ids_b)):
        assert set(re.findall(r"url\(#([^)]+)\)", svg)) <= ids


def test_load_case_bars_run_from_zero_in_the_direction_and_length_of_the_change():
    root = ET.fromstring(charts.load_case_svg(corner="RL", rows=ROWS, demo=False))
    now = [r for r in root.iter(f"{SVG}rect") if r.get("fill") == charts.INK
           and float(r.get("height")) > 7.5]   # the bars, not the legend swatch
    assert len(now) == 2 * len(ROWS)          # toe panel then camber panel
    zero_lines = [ln for ln in root.iter(f"{SVG}line") if ln.get("stroke") == charts.INK_SOFT]
    toe_zero = float(zero_lines[0].get("x1"))
    toe_bars = now[:len(ROWS)]
    ends = []
    for bar, row in zip(toe_bars, ROWS, strict=True):
        x, w = float(bar.get("x")), float(bar.get("width"))
        value = row["toe_change_measured_deg"]
        start, end = (x, x + w) if value > 0 else (x + w, x)
        assert start == pytest.approx(toe_zero, abs=0.1)
        ends.append((end - toe_zero, value))
    # lengths in proportion to the changes (same scale within the panel)
    (l0, v0), (l1, v1) = ends
    assert l0 / v0 == pytest.approx(l1 / v1, rel=0.02)


def test_histogram_bars_are_in_proportion_to_the_counts_and_the_mean_is_marked():
    counts = [1, 0, 3, 5, 2]
    edges = [-0.05, -0.03, -0.01, 0.01, 0.03, 0.05]
    root = ET.fromstring(charts.rate_histogram_svg(counts=counts, edges=edges, pooled_mean=-0.004,
                                                   title="11 vehicles"))
    d = paths(root, charts.SLATE_TINT)[0]
    bars = re.findall(r"M (\S+) (\S+) V (\S+) H (\S+)", d)
    assert len(bars) == sum(1 for n in counts if n)
    heights = [float(b[1]) - float(b[2]) for b in bars]
    nonzero = [n for n in counts if n]
    for h, n in zip(heights, nonzero, strict=True):
        assert h / heights[0] == pytest.approx(n / nonzero[0], rel=0.02)
    # the umber mean line sits between the bin edges' positions in proportion
    left_edges = [float(b[0]) for b in bars]
    right_edges = [float(b[3]) for b in bars]
    x_of = np.polyfit([edges[0], edges[-1]], [left_edges[0], right_edges[-1]], 1)
    mean = [ln for ln in root.iter(f"{SVG}line") if ln.get("stroke") == charts.UMBER][0]
    assert float(mean.get("x1")) == pytest.approx(np.polyval(x_of, -0.004), abs=0.15)


def test_the_wear_chart_shows_the_limit_with_its_source_and_the_likely_crossing():
    words = " ".join(t.text for t in texts(ET.fromstring(
        charts.wear_trend_svg(title="FL Lower ball joint", entry=WEAR, demo=False))))
    assert "limit 1 mm (workshop manual)" in words
    assert "likely 92,444 km" in words
    stiff = {"km": [1000, 9000, 20000], "kind": "stiffness", "part": "Toe link inner bush",
             "stiffness_N_per_mm": [3000.0, 2900.0, 2700.0], "forecast": {}}
    assert "no manufacturer limit for bush stiffness" in charts.wear_trend_svg(
        title="RL Toe link inner bush", entry=stiff, demo=False)


@pytest.mark.parametrize("lo, hi", [(0.0, 1.0), (-0.115, 0.032), (38000.0, 172000.0),
                                    (-1.05, 0.05), (2650.0, 3030.0), (0.0001, 0.0009)])
def test_ticks_are_round_evenly_spaced_and_inside_the_range(lo, hi):
    values, decimals = charts._ticks(lo, hi, 5)
    assert 3 <= len(values) <= 11
    assert all(lo - 1e-12 <= v <= hi + 1e-12 for v in values)
    steps = np.diff(values)
    assert np.allclose(steps, steps[0])
    mantissa = steps[0] / 10 ** math.floor(math.log10(steps[0]))
    assert any(math.isclose(mantissa, m) for m in (1, 2, 2.5, 5))
    # printed with as many decimals as the step needs, no more
    assert float(f"{steps[0]:.{decimals}f}") == pytest.approx(steps[0])
    assert decimals == 0 or float(f"{steps[0]:.{decimals - 1}f}") != pytest.approx(steps[0])


def test_a_long_source_is_shortened_but_the_demo_label_stays():
    entry = ENTRY | {"spec": ENTRY["spec"] | {"source": "workshop manual chapter 4 " * 12}}
    root = ET.fromstring(angle_chart(entry=entry, demo=True))
    _, _, width, _ = (float(v) for v in root.get("viewBox").split())
    label = next(t for t in texts(root) if (t.text or "").startswith("band: manufacturer spec"))
    assert "…" in label.text and label.text.endswith(" · demo data")
    assert float(label.get("x")) + charts._text_width(label.text, 6.5) <= width



def test_a_legend_too_long_for_its_place_moves_left_to_stay_inside_the_chart():
    canvas = charts._Canvas(300.0, 50.0, "legend")
    charts._legend(canvas, 120.0, 40.0, [("found", "as found"), ("outside", "as found, outside "
                                         "the band"), ("adjusted", "as adjusted")])
    root = ET.fromstring(canvas.svg())
    last = next(t for t in texts(root) if t.text == "as adjusted")
    assert float(last.get("x")) + charts._text_width(last.text, 7.0) <= 300.0
    first = next(t for t in texts(root) if t.text == "as found")
    assert float(first.get("x")) >= 0.0
