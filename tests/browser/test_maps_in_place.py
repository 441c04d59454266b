"""The maps are plain Bokeh models that a new season updates in place, in headless Chromium.

A small collection of real NetCDF files (a reference and a run on a 10-degree grid, three
years of monthly means) is served; what the page draws is read from its Bokeh document:
each map's figure, image renderer, data source and colour mapper, and the image's values.

Expected numbers come from the files through xarray alone: a season's climatology is the
mean over years of the season means weighted by month length (the xarray documentation's
example "Calculating Seasonal Averages from Time Series of Monthly Means", with
``time.dt.days_in_month``; standard calendar), and the maps' shared colour range is the
smallest and largest value of both fields (numpy ``nanmin``/``nanmax``).
"""

from __future__ import annotations

import re
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from app.views.results import Results
from evaluation.catalog import Collection

from .conftest import PAGE_MODELS_JS, open_dashboard, serving, wait_for_view

pytestmark = pytest.mark.browser

#: Every map of the page: its models' ids, title (and the type of Bokeh's title text: "str"
#: or a text model), image (row 0 = southernmost) and colour range, sorted by title.
MAPS_JS = """() => {
  const out = [];
  for (const m of """ + PAGE_MODELS_JS + """) {
    if (!m.renderers || !m.title) continue;
    const r = m.renderers.find(r => r.glyph && r.glyph.type === "Image");
    if (!r) continue;
    const data = r.data_source.data;
    const column = data instanceof Map ? data.get("image") : data.image;
    if (!column || column.length === 0) continue;
    const image = column[0];
    const text = m.title.text;
    out.push({
      title: typeof text === "string" ? text : text.text,
      title_type: typeof text === "string" ? "str" : text.type,
      ids: [m.id, r.id, r.data_source.id, r.glyph.color_mapper.id],
      shape: Array.from(image.shape),
      values: Array.from(image, v => Number.isNaN(v) ? null : v),
      range: [r.glyph.color_mapper.low, r.glyph.color_mapper.high],
    });
  }
  return out.sort((a, b) => a.title.localeCompare(b.title));
}"""


def _write(path: Path, offset: float) -> Path:
    from cfdata import write_cf

    path.parent.mkdir(parents=True, exist_ok=True)
    return write_cf(path, variable="tas", dlat=10.0, years=3, start_year=2001, offset=offset)


def _climatology(path: Path, season: str) -> np.ndarray:
    """Month-length-weighted season means per year, averaged over the years (as the xarray documentation's example computes them)."""
    with xr.open_dataset(path) as ds:
        tas = ds["tas"].load()
    tas = tas if season == "ANN" else tas.where(tas["time"].dt.season == season, drop=True)
    days = tas["time"].dt.days_in_month
    yearly = (tas * days).groupby("time.year").sum() / days.groupby("time.year").sum()
    return yearly.mean("year").sortby("lat").sortby("lon").transpose("lat", "lon").values


def _maps(page, *, season: str, differ_from: list | None = None, timeout_s: float = 60) -> list[dict]:
    """The page's maps once its context line names ``season`` (and the values changed)."""
    deadline = time.monotonic() + timeout_s
    while True:
        line = page.locator(".gs-hint", has_text="Showing:")  # the view's context line (one tab is drawn)
        context = line.first.inner_text() if line.count() else ""
        found = page.evaluate(MAPS_JS)
        if f" · {season} · " in context and len(found) == 2 and not page.locator(".gs-view-maps.pn-loading").count():
            if differ_from is None or all(a["values"] != b["values"] for a, b in zip(found, differ_from, strict=True)):
                return found
        assert time.monotonic() < deadline, (context, [m["title"] for m in found])
        page.wait_for_timeout(50)


def _check(drawn: dict, expected: np.ndarray) -> None:
    assert drawn["shape"] == list(expected.shape)
    values = np.array([np.nan if v is None else v for v in drawn["values"]], dtype="float64").reshape(drawn["shape"])
    # single precision on the page: IEEE 754 binary32 keeps 24 bits, a relative 6e-8
    np.testing.assert_allclose(values, expected, rtol=2e-7, atol=0)


def test_a_season_change_updates_the_maps_in_place(browser, tmp_path: Path) -> None:
    root = tmp_path / "c"
    ref = _write(root / "references" / "ref" / "data.nc", 0.0)
    run = _write(root / "runs" / "a" / "data.nc", 1.5)
    # read before the server starts: netCDF-C is not thread-safe, the server reads meanwhile
    expected = {(name, season): _climatology(path, season) for name, path in (("ref", ref), ("a", run)) for season in ("ANN", "JJA")}
    results = Results(Collection.from_path(root))
    with serving(results) as url:
        session = open_dashboard(browser, url + "/?field=model_mean&season=ANN&period=2001-2003")
        page = session.page
        wait_for_view(page, "maps")
        annual = _maps(page, season="ANN")
        assert [m["title"] for m in annual] == ["a mean", "ref mean"]
        _check(annual[0], expected["a", "ANN"])
        _check(annual[1], expected["ref", "ANN"])
        # a known cell, spelled out: 45 N, 5 E on the 10-degree grid (row 13, column 18)
        lat, lon = np.arange(-85.0, 90.0, 10.0), np.arange(-175.0, 180.0, 10.0)
        row, column = int(np.flatnonzero(lat == 45.0)[0]), int(np.flatnonzero(lon == 5.0)[0])
        assert annual[1]["values"][row * annual[1]["shape"][1] + column] == pytest.approx(expected["ref", "ANN"][row, column], rel=2e-7)
        # one colour range for both means: the smallest and largest value of the two fields
        both = np.stack([expected["ref", "ANN"], expected["a", "ANN"]])
        for m in annual:
            assert m["range"] == pytest.approx([np.nanmin(both), np.nanmax(both)], rel=1e-6)

        page.locator(".gs-season select").select_option(label="Jun–Aug (JJA)")
        summer = _maps(page, season="JJA", differ_from=annual)
        # the same figures, renderers, sources and colour mapper: updated, not drawn anew
        assert [m["ids"] for m in summer] == [m["ids"] for m in annual]
        _check(summer[0], expected["a", "JJA"])
        _check(summer[1], expected["ref", "JJA"])
        both = np.stack([expected["ref", "JJA"], expected["a", "JJA"]])
        for m in summer:
            assert m["range"] == pytest.approx([np.nanmin(both), np.nanmax(both)], rel=1e-6)
        assert "season=JJA" in page.url  # the link follows
        assert session.errors() == []
        session.close()
    results.close()


def test_cached_maps_come_with_the_first_document(browser, tmp_path: Path) -> None:
    """A page opened on maps another page has already computed gets them in its first
    document (Bokeh's PULL-DOC-REPLY message holds the image glyphs), not in a later patch."""
    root = tmp_path / "c"
    ref = _write(root / "references" / "ref" / "data.nc", 0.0)
    _write(root / "runs" / "a" / "data.nc", 1.5)
    expected = _climatology(ref, "ANN")
    results = Results(Collection.from_path(root))
    address = "/?field=model_mean&season=ANN&period=2001-2003"
    with serving(results) as url:
        first = open_dashboard(browser, url + address)
        wait_for_view(first.page, "maps")
        _maps(first.page, season="ANN")
        first.close()

        context = browser.new_context(viewport={"width": 1500, "height": 1000})
        page = context.new_page()
        frames: list[str] = []
        page.on("websocket", lambda ws: ws.on("framereceived", lambda payload: frames.append(payload if isinstance(payload, str) else "")))
        page.goto(url + address, wait_until="domcontentloaded")
        wait_for_view(page, "maps")
        drawn = _maps(page, season="ANN")
        _check(drawn[1], expected)
        # Bokeh's protocol sends a message as header, metadata and content frames
        header = next(i for i, f in enumerate(frames) if '"msgtype":"PULL-DOC-REPLY"' in f.replace(" ", ""))
        content = frames[header + 2]
        images = re.findall(r'"glyph":\{"type":"object","name":"Image","id":"[^"]+"', content)  # the renderers' glyphs
        assert len(images) == 2, re.findall(r'.{60}"name":"Image".{60}', content)
        context.close()
    results.close()
