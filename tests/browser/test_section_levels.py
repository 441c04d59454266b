"""The vertical section's "Showing" line names the levels drawn, not the single level of the other views.

Run in headless Chromium on the sample collection.  The expected levels are read from the
reference's NetCDF file with netCDF4 directly (not through gridscore), so the line is
checked against the file, not against the code that writes it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from cfdata import netcdf_dataset

from .conftest import open_dashboard, wait_for_view

pytestmark = pytest.mark.browser


def reference_levels(manifest: Path, variable: str) -> tuple[list[float], str]:
    """The pressure levels of the sample's first reference, in hPa, as its file stores them."""
    folder = manifest.parent / "references" / "tessera-obs"
    path = next(folder.glob(f"{variable}_*.nc"))
    with netcdf_dataset(path) as ds:
        dim = next(d for d in ds.variables[variable].dimensions if getattr(ds.variables.get(d), "axis", "") == "Z"
                   or getattr(ds.variables.get(d), "standard_name", "") == "air_pressure")
        values = np.asarray(ds.variables[dim][:], dtype="float64")
        units = ds.variables[dim].units
    factor = {"Pa": 0.01, "hPa": 1.0}[units]  # 1 hPa = 100 Pa (SI, common practice)
    return [float(v) * factor for v in values], "hPa"


def showing(page) -> str:
    """The visible "Showing:" line(s) of the page, whitespace collapsed."""
    lines = page.locator(".gs-hint").filter(has_text="Showing:")
    return " | ".join(" ".join(lines.nth(i).text_content().split()) for i in range(lines.count()) if lines.nth(i).is_visible())


def test_showing_line_names_every_level_drawn(browser, served_sample: str, sample_manifest: Path) -> None:
    if not any((sample_manifest.parent / "references" / "tessera-obs").glob("ta_*.nc")):
        pytest.skip("the sample collection in use has no air temperature on levels")
    session = open_dashboard(browser, served_sample + "/?variable=ta&level=500hPa&tab=section")
    page = session.page
    wait_for_view(page, "section", timeout_ms=300_000)
    page.locator(".gs-section-scores").wait_for()
    levels, units = reference_levels(sample_manifest, "ta")
    text = showing(page)
    for _ in range(200):  # the line is written just after the drawing
        if "levels" in text:
            break
        page.wait_for_timeout(50)
        text = showing(page)
    # the count and range of the levels drawn, in the order the file stores them, with units
    assert f"{len(levels)} levels, {levels[0]:g} to {levels[-1]:g} {units}" in text, text
    assert f"({', '.join(f'{v:g}' for v in levels)} {units})" in text, text
    # not the single level chosen for the other views
    assert "at 500 hPa" not in text, text
    # the rest of the line is still the request's
    assert "against tessera-obs" in text and "ANN" in text, text
    assert session.errors() == []
    session.close()
