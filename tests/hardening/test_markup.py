"""Names reach Bokeh/Panel markup as text: the helpers every view uses for tooltips and titles.

Checked with the renderers themselves: Panel's Markdown parser (the one that turns a
widget's ``description`` into HTML) and HoloViews' Bokeh renderer (which formats titles).
"""

from __future__ import annotations

import holoviews as hv
import numpy as np
import pytest
from panel.pane.markup import Markdown

from app.views.base import plot_title, text_tooltip
from app.views.look import load_extensions

from .hostile import ATTRIBUTE_IMG, FOLDER_BRACES, FOLDER_IMG, FORMULA, MANIFEST_SCRIPT, MANIFEST_SVG

NAMES = [FOLDER_IMG, FOLDER_BRACES, MANIFEST_SCRIPT, MANIFEST_SVG, ATTRIBUTE_IMG, FORMULA,
         "[x](javascript:alert(1))", "*bold* `code` \\ & &amp; <b>", "{0} {} {{ }}"]


@pytest.mark.parametrize("name", NAMES)
def test_a_tooltip_is_plain_text(name: str) -> None:
    # the parser Panel applies to a widget's description (panel/widgets/base.py)
    parser = Markdown._get_parser("markdown-it", (), Markdown.hard_line_break)
    html = parser.render(text_tooltip(f"Download '{name}'"))
    assert "<img" not in html and "<script" not in html and "<svg" not in html and "<a " not in html
    assert "<em>" not in html and "<code>" not in html
    # what the page shows, once the entities are read: the name as written
    import html as html_module

    assert html_module.unescape(html.removeprefix("<p>").rstrip().removesuffix("</p>")) == f"Download '{name}'"


@pytest.mark.parametrize("name", NAMES)
def test_a_plot_title_keeps_braces(name: str) -> None:
    load_extensions()
    element = hv.Image(np.zeros((2, 2))).opts(title=plot_title(f"{name} mean"), backend="bokeh")
    figure = hv.render(element, backend="bokeh")
    assert figure.title.text == f"{name} mean"
