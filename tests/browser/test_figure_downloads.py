"""The PNG and SVG figure downloads once matplotlib is loaded only at the first download.

The server starts without HoloViews' matplotlib backend (it cost the start of the first
page 0.6-0.8 s); HoloViews drops without a word the options an element is given for a
backend not loaded yet, so a download must still carry the view's own matplotlib options
(its line colours), not HoloViews' default colour cycle.
"""

from __future__ import annotations

import io
import re
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path
from urllib.parse import parse_qs, urlparse

import pytest
from PIL import Image

from .conftest import open_dashboard, wait_for_view

#: The 8 bytes every PNG file starts with (W3C PNG specification, 2nd ed., section 5.2).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def test_page_is_built_without_the_matplotlib_backend() -> None:
    # a fresh process: what a server imports to build its first page (Python's own module table)
    code = (
        "import sys\n"
        "import app.server, app.dashboard\n"
        "from app.views.look import load_extensions\n"
        "load_extensions()\n"
        "print(sorted(m for m in sys.modules if m.startswith('holoviews.plotting.mpl') or m == 'matplotlib.pyplot'))\n"
    )
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300,
                          cwd=Path(__file__).resolve().parents[2])
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip() == "[]"


def _download(page, css: str) -> tuple[str, bytes]:
    with page.expect_download(timeout=60_000) as info:
        page.locator(css).first.locator("button, a").first.click()
    d = info.value
    return d.suggested_filename, Path(d.path()).read_bytes()


def _stroke_colours(svg: bytes) -> set[str]:
    """Every stroke colour of an SVG file (matplotlib writes them in ``style`` attributes)."""
    colours = set()
    for element in ET.fromstring(svg).iter():
        style = element.get("style", "")
        colours.update(c.lower() for c in re.findall(r"stroke:\s*(#[0-9a-fA-F]{6})", style))
        if element.get("stroke", "").startswith("#"):
            colours.add(element.get("stroke").lower())
    return colours


@pytest.mark.browser
def test_figure_downloads_carry_the_views_matplotlib_options(browser, served_sample: str, sample_manifest: Path) -> None:
    from app.views.results import Results
    from evaluation.catalog import Collection

    session = open_dashboard(browser, served_sample + "/?tab=series")
    page = session.page
    wait_for_view(page, "series")
    page.locator(".gs-download-png button").first.wait_for()
    request = {k: v[0] for k, v in parse_qs(urlparse(page.url).query).items()}

    # the SVG first: the download that loads matplotlib must already carry the options
    name, svg = _download(page, ".gs-download-svg")
    assert name.endswith(".svg") and ET.fromstring(svg).tag.endswith("svg")
    name, png = _download(page, ".gs-download-png")
    assert name.endswith(".png") and png[:8] == PNG_SIGNATURE
    image = Image.open(io.BytesIO(png))
    image.load()  # Pillow decodes the whole file: a truncated one raises
    assert image.format == "PNG" and image.width > 400 and image.height > 200

    # the colours the page gives each source (the sidebar's swatches): the reference's and
    # every shown run's line must be drawn in them in the file
    results = Results(Collection.from_path(sample_manifest))
    try:
        wanted = {results.colour(request["reference"]), *(results.colour(m) for m in request["models"].split(","))}
    finally:
        results.close()
    assert wanted <= _stroke_colours(svg), (wanted, _stroke_colours(svg))
    assert session.errors() == []
    session.close()


def test_diverging_palette_is_matplotlibs_rdbu_r() -> None:
    # the page's signed-field palette, now taken from Bokeh's ColorBrewer colours, against
    # matplotlib's RdBu_r (the reference library; the palette was made from it before)
    import matplotlib
    import numpy as np

    from app.views.look import DIVERGING

    expected = matplotlib.colormaps["RdBu_r"](np.linspace(0.0, 1.0, 256))[:, :3]
    got = np.array([matplotlib.colors.to_rgb(c) for c in DIVERGING])
    assert got.shape == expected.shape
    assert np.abs(got - expected).max() <= 1.0 / 255 + 1e-12  # one step of an 8-bit channel (rounding)
    assert DIVERGING[0] == matplotlib.colors.to_hex(expected[0]) and DIVERGING[-1] == matplotlib.colors.to_hex(expected[-1])
