"""A served page lists only the scripts its document needs (app.server.serve_needed_scripts).

The bundle names are BokehJS's own ("bokeh", "bokeh-gl", "bokeh-widgets", "bokeh-tables",
"bokeh-mathjax": Bokeh's documentation, "Installation: BokehJS", and the default components
of ``bokeh.resources.Resources``); which models need which bundle follows Bokeh's and
Panel's documentation (TeX is typeset in text models with math on, WebGL is asked for by a
plot's ``output_backend``, Panel's ESM components import their code through
es-module-shims).  The served page is read over HTTP (no browser): Panel builds its script
list when it renders the page's HTML.
"""

from __future__ import annotations

import inspect
import re
import urllib.request
from pathlib import Path

import panel as pn
import pytest
from bokeh.document import Document
from bokeh.models import Div, TeX
from bokeh.plotting import figure
from browser.conftest import serving

from app.server import ESM_SHIM, TEX_BUNDLE, WEBGL_BUNDLE, needed_scripts

SAMPLE = Path(__file__).resolve().parents[1] / "sample_output" / "manifest.toml"


def _models(*objects) -> list:
    """Every Bokeh model of a document holding ``objects`` (Panel objects as their Bokeh models)."""
    document = Document()
    for obj in objects:
        document.add_root(obj.get_root(document) if hasattr(obj, "get_root") else obj)
    return list(document.models)


def test_a_plain_page_needs_none_of_the_optional_scripts() -> None:
    models = _models(figure(output_backend="canvas"), pn.pane.HTML("<b>x</b> $$a^2$$"), pn.widgets.Select(options=["a"]))
    assert needed_scripts(models) == {TEX_BUNDLE: False, WEBGL_BUNDLE: False, ESM_SHIM: False}


@pytest.mark.parametrize("make, needs", [
    # Bokeh's Div typesets TeX unless disable_math is set (Bokeh docs, "Mathematical notation")
    (lambda: Div(text=r"mass \(m\)"), TEX_BUNDLE),
    (lambda: Div(text="$$E = mc^2$$"), TEX_BUNDLE),
    # Panel's Markdown pane has math on by default (Panel reference, Markdown pane: disable_math)
    (lambda: pn.pane.Markdown("$$a^2$$"), TEX_BUNDLE),
    # a TeX model given as an axis label (Bokeh docs, "Mathematical notation": TeX)
    (lambda: figure(x_axis_label=TeX(text=r"\alpha")), TEX_BUNDLE),
    (lambda: figure(output_backend="webgl"), WEBGL_BUNDLE),
    # Panel's JSComponent is a ReactiveESM component (Panel reference, "Custom components")
    (lambda: type("Shown", (pn.custom.JSComponent,), {"_esm": "export function render() {}"})(), ESM_SHIM),
])
def test_what_each_optional_script_is_kept_for(make, needs) -> None:
    needed = needed_scripts(_models(make()))
    assert needed[needs] and sum(needed.values()) == 1, needed


def test_text_with_math_off_needs_no_tex() -> None:
    # Bokeh draws such a Div's text as written (Bokeh docs: Markup.disable_math)
    assert needed_scripts(_models(Div(text="$$x$$", disable_math=True)))[TEX_BUNDLE] is False


def test_panel_still_bundles_page_scripts_through_the_wrapped_call() -> None:
    from panel.io import server as panel_server
    from panel.io.resources import bundle_resources

    source = inspect.getsource(panel_server.server_html_page_for_session)
    assert "bundle_resources(doc.roots, resources)" in source, (
        "Panel changed how its page handler bundles scripts: app.server.serve_needed_scripts must follow")
    assert "enable_mathjax" in inspect.signature(bundle_resources).parameters


def test_the_served_page_lists_only_needed_scripts() -> None:
    from app.views.results import Results
    from evaluation.catalog import Collection

    results = Results(Collection.from_path(SAMPLE))
    try:
        with serving(results) as url, urllib.request.urlopen(url + "/", timeout=120) as reply:
            html = reply.read().decode("utf-8")
    finally:
        results.close()
    scripts = {src.split("?")[0].rsplit("/", 1)[-1] for src in re.findall(r'<script[^>]*\ssrc="([^"]+)"', html)}
    assert {"bokeh.min.js", "bokeh-widgets.min.js", "bokeh-tables.min.js", "panel.min.js", "tabulator.min.js"} <= scripts, scripts
    assert not {f"{TEX_BUNDLE}.min.js", f"{WEBGL_BUNDLE}.min.js", f"{ESM_SHIM}.min.js"} & scripts, scripts
