"""The Taylor diagram's close-up in headless Chromium, on the sample collection.

On near-surface air temperature every run lies close to the reference point, so a close-up
is drawn beside the whole diagram.  What the page draws is read from its Bokeh document:
the points of both plots, the close-up's ranges and frame, and every label with its anchor,
alignment and font.  Outside references:

- the points' positions against numpy: the area-weighted spatial standard deviations and
  pattern correlation of the climatologies the dashboard compares (cos φ weights, exactly
  proportional to the cell areas R² Δsin φ Δλ of a regular grid), placed at radius σ_f/σ_r
  and angle arccos R (Taylor 2001, J. Geophys. Res. 106, 7183-7192, fig. 2);
- the centred RMS difference shown with each point against numpy's directly computed
  E' of the two fields, which is the law of cosines E'² = σ_f² + σ_r² − 2 σ_f σ_r R
  (Taylor 2001, eq. 2);
- the labels of the close-up's arcs on their curves: a correlation label on the ray at
  angle arccos R, a centred-RMS label at distance E' from the reference point, a
  standard-deviation label at radius σ (or under the R = 1 axis at x = σ);
- the labels' sizes measured by the browser itself (canvas measureText with the glyphs'
  font): no two overlap, all lie inside the frame, and no name covers another point.
"""

from __future__ import annotations

import math
import os
from itertools import combinations
from pathlib import Path

import numpy as np
import pytest

from .conftest import open_dashboard, wait_for_view

pytestmark = pytest.mark.browser

#: where a run by hand keeps its screenshots to look at (unset: none are kept)
NOTES = Path(os.environ["GRIDSCORE_SCREENSHOTS"]) if os.environ.get("GRIDSCORE_SCREENSHOTS") else None

#: Every plot of the page with its ranges, frame and the data of its Scatter and Text glyphs.
_PLOTS_JS = """() => {
  const out = [];
  for (const doc of Bokeh.documents) {
    const models = doc.all_models ?? doc._all_models?.values() ?? [];
    for (const m of models) {
      if (m.x_range === undefined || m.renderers === undefined || m.title == null) continue;
      const title = typeof m.title === "string" ? m.title : (m.title.text || "");
      const glyphs = [];
      for (const r of m.renderers) {
        if (r.type !== "GlyphRenderer") continue;
        const d = r.data_source.data;
        const get = (k) => { const v = d instanceof Map ? d.get(k) : d[k]; return v ? Array.from(v) : null; };
        const g = r.glyph;
        const val = (p) => (p && typeof p === "object" && "value" in p) ? p.value : p;
        glyphs.push({type: g.type, x: get("x"), y: get("y"), text: get("text"), model: get("model"), crmse: get("crmse"),
                     align: val(g.text_align), baseline: val(g.text_baseline), font: val(g.text_font), size: val(g.text_font_size),
                     marker_size: val(g.size)});
      }
      out.push({title, x: [m.x_range.start, m.x_range.end], y: [m.y_range.start, m.y_range.end],
                width: m.inner_width ?? m.frame_width, height: m.inner_height ?? m.frame_height, glyphs});
    }
  }
  return out;
}"""

#: Width and height in pixels of each text in a font, measured by the browser.
_MEASURE_JS = """([texts, font]) => {
  const ctx = document.createElement("canvas").getContext("2d");
  ctx.font = font;
  return texts.map((t) => { const m = ctx.measureText(t); return [m.width, m.fontBoundingBoxAscent + m.fontBoundingBoxDescent]; });
}"""


def plots(page) -> list[dict]:
    for _ in range(500):
        found = page.evaluate(_PLOTS_JS)
        if any(p["title"].startswith("Close-up") for p in found) and all(p["width"] for p in found):
            return found
        page.wait_for_timeout(20)
    return page.evaluate(_PLOTS_JS)


def numpy_taylor(results, reference: str, names: list[str], period: str, *, normalised: bool) -> dict[str, tuple[float, float, float]]:
    """``name -> (x, y, E')`` (in units of the reference's standard deviation when
    ``normalised``), with numpy alone from the climatologies on the common grid (the run's
    is masked like the reference's)."""
    ref = results.map_field(reference, "tas", period, "ANN", "climatology", reference, "", "").transpose("lat", "lon")
    r_all = np.asarray(ref.values, dtype="float64")
    out = {}
    for name in names:
        run = results.map_field(reference, "tas", period, "ANN", "climatology", name, "", "").transpose("lat", "lon")
        f = np.asarray(run.values, dtype="float64")
        lat = np.asarray(run["lat"].values, dtype="float64")
        assert np.allclose(np.diff(lat), np.diff(lat)[0])  # a regular grid: cos φ ∝ cell area
        w = np.broadcast_to(np.cos(np.deg2rad(lat))[:, None], f.shape)
        ok = np.isfinite(f) & np.isfinite(r_all)
        w, f, r = w[ok], f[ok], r_all[ok]
        fa, ra = f - np.average(f, weights=w), r - np.average(r, weights=w)
        sf, sr = np.sqrt(np.average(fa**2, weights=w)), np.sqrt(np.average(ra**2, weights=w))
        corr = np.average(fa * ra, weights=w) / (sf * sr)
        e = np.sqrt(np.average((fa - ra) ** 2, weights=w))
        unit = sr if normalised else 1.0
        out[name] = (sf / unit * corr, sf / unit * math.sqrt(max(1.0 - corr * corr, 0.0)), e / unit)
    return out, float(sr)


def boxes_of(page, labels: list[dict], scale: float, origin: tuple[float, float]) -> list[tuple[str, tuple[float, float, float, float]]]:
    """Pixel boxes (left, bottom, right, top; y up) of every label from its anchor, alignment
    and the browser's measured size of its text."""
    out = []
    for glyph in labels:
        font = f"{glyph['size']} {glyph['font']}"
        sizes = page.evaluate(_MEASURE_JS, [glyph["text"], font])
        for x, y, text, (w, h) in zip(glyph["x"], glyph["y"], glyph["text"], sizes, strict=True):
            px, py = (x - origin[0]) * scale, (y - origin[1]) * scale
            left = {"left": px, "right": px - w, "center": px - w / 2}[glyph["align"]]
            # Bokeh's text_baseline: the anchor at the text's bottom, top or middle (y up on the plot)
            bottom = {"bottom": py, "top": py - h, "middle": py - h / 2, "alphabetic": py - 0.2 * h}[glyph["baseline"]]
            out.append((text, (left, bottom, left + w, bottom + h)))
    return out


def overlap(a, b, slack: float = 0.5) -> bool:
    return min(a[2], b[2]) - max(a[0], b[0]) > slack and min(a[3], b[3]) - max(a[1], b[1]) > slack


#: The default runs on the normalised scale; in the variable's units with every run and an
#: ensemble's mean, whose members crowd around it.
CASES = {
    "normalised": ("normalised", ""),
    "absolute-with-ensemble": ("absolute", "&models=larkspur-2,pumice-ctl,tidewell-3,cobble-b,fennel%20(ensemble%20mean)"),
}


@pytest.mark.parametrize("case", list(CASES))
def test_close_up_places_every_run_by_std_and_correlation(browser, served_sample: str, sample_manifest: Path, screenshots: Path, case: str) -> None:
    from app.views.results import Results
    from evaluation.catalog import Collection

    period = "1991-2020"
    scale_key, models = CASES[case]
    normalised = scale_key == "normalised"
    session = open_dashboard(browser, served_sample + f"/?variable=tas&tab=taylor&taylor={scale_key}&period={period}&season=ANN&region=global{models}")
    page = session.page
    page.set_viewport_size({"width": 1600, "height": 1000})
    wait_for_view(page, "taylor", timeout_ms=300_000)
    found = plots(page)
    whole = next(p for p in found if p["title"].startswith("Taylor diagram"))
    close = next(p for p in found if p["title"].startswith("Close-up"))
    page.wait_for_timeout(500)
    page.screenshot(path=str(screenshots / f"taylor-close-up-{case}.png"), full_page=True)
    if NOTES is not None and NOTES.is_dir():
        page.screenshot(path=str(NOTES / f"after-taylor-test-{case}.png"), full_page=True)

    def positions(plot) -> dict[str, tuple[float, float, float]]:
        return {name: (x, y, e) for g in plot["glyphs"] if g["type"] == "Scatter" and g["model"]
                for name, x, y, e in zip(g["model"], g["x"], g["y"], g["crmse"], strict=True)}

    drawn, zoomed = positions(whole), positions(close)
    reference = "tessera-obs"
    runs = [n for n in drawn if n != reference]
    assert {"larkspur-2", "pumice-ctl", "tidewell-3"} <= set(runs)
    assert zoomed == drawn  # the close-up shows the same points at the same places
    results = Results(Collection.from_path(sample_manifest))
    try:
        expected, ref_std = numpy_taylor(results, reference, runs, period, normalised=normalised)
    finally:
        results.close()
    ref_x = 1.0 if normalised else ref_std
    tolerance = 1e-6 * ref_x
    assert drawn[reference][:2] == pytest.approx((ref_x, 0.0), abs=tolerance)
    for name in runs:
        x, y, e = expected[name]
        assert drawn[name][0] == pytest.approx(x, abs=tolerance), name
        assert drawn[name][1] == pytest.approx(y, abs=tolerance), name
        # Taylor (2001) eq. 2: the centred RMS difference is the distance to the reference point
        assert drawn[name][2] == pytest.approx(e, abs=tolerance), name
        assert math.hypot(x - ref_x, y) == pytest.approx(e, abs=tolerance), name

    # the close-up: equal scales, every point whole inside the frame
    (x0, x1), (y0, y1) = close["x"], close["y"]
    scale = close["width"] / (x1 - x0)
    assert close["height"] / (y1 - y0) == pytest.approx(scale, rel=0.01)
    assert max(x1 - x0, y1) < 0.4 * whole["x"][1]  # a real close-up: a small part of the diagram
    for name, (x, y, _) in zoomed.items():
        radius = 7.0 / scale  # half the largest marker (13 px) and a pixel
        assert x0 + radius <= x <= x1 - radius and y0 + radius <= y <= y1 - radius, name

    # the arcs' labels lie on their curves (Taylor 2001 geometry)
    labels = [g for g in close["glyphs"] if g["type"] == "Text"]
    kinds = {"R": 0, "E": 0, "σ": 0}
    for glyph in labels:
        for x, y, text in zip(glyph["x"], glyph["y"], glyph["text"], strict=True):
            if text.startswith("R="):
                assert math.atan2(y, x) == pytest.approx(math.acos(float(text[2:])), rel=1e-9), text
                kinds["R"] += 1
            elif text.startswith("E′="):
                assert math.hypot(x - ref_x, y) == pytest.approx(float(text[3:]), rel=1e-9), text
                kinds["E"] += 1
            elif text.startswith("σ="):
                value = float(text[2:])
                assert (y < 0 and x == pytest.approx(value, rel=1e-12)) or math.hypot(x, y) == pytest.approx(value, rel=1e-9), text
                kinds["σ"] += 1
    assert all(n >= 2 for n in kinds.values()), kinds
    # every point is named beside it (an ensemble's members are its mean's cloud, not named)
    names = {t for g in labels for t in g["text"]}
    assert {n for n in zoomed if not n.startswith("fennel-r")} <= names

    # no two labels overlap, all inside the frame, no name covers another point
    boxes = boxes_of(page, labels, scale, (x0, y0))
    for (a, box_a), (b, box_b) in combinations(boxes, 2):
        assert not overlap(box_a, box_b), (a, b, box_a, box_b)
    for text, box in boxes:
        assert box[0] >= -0.5 and box[1] >= -0.5 and box[2] <= close["width"] + 0.5 and box[3] <= close["height"] + 0.5, (text, box)
    for text, box in boxes:
        for name, (x, y, _) in zoomed.items():
            if name == text:
                continue
            px, py = (x - x0) * scale, (y - y0) * scale
            assert not overlap(box, (px - 5, py - 5, px + 5, py + 5)), (text, name)
    assert session.errors() == []
    session.close()
