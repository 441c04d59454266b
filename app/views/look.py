"""Colours, palettes and page styling shared by every view.

The dashboard's look is its own: a deep-ink header, a warm paper background and one teal
accent; sequential fields in a perceptually uniform palette, signed fields (differences,
trends) in a diverging palette centred on zero.
"""

from __future__ import annotations

import functools
import threading

import holoviews as hv
import panel as pn
from bokeh.palettes import RdBu11, Viridis256, interp_palette

__all__ = [
    "ACCENT",
    "BETTER",
    "MUTED",
    "WORSE",
    "INK",
    "PAPER",
    "SEQUENTIAL",
    "DIVERGING",
    "REFERENCE_COLOUR",
    "RUN_COLOURS",
    "STILL_LOADING",
    "STYLESHEET",
    "load_extensions",
    "load_matplotlib",
    "page_template",
    "run_colour",
]

INK = "#14283a"
ACCENT = "#0f7c78"
PAPER = "#f6f4ef"
#: Perceptually uniform and readable in grey print and by colour-blind readers.
SEQUENTIAL = list(Viridis256)
#: Blue-white-red with a white centre, so that "no difference" reads as blank paper
#: (colorcet's diverging maps have a tinted centre): ColorBrewer's 11 RdBu colours, blue
#: first, spread linearly over 256 (matplotlib's ``RdBu_r`` made the same way, to within one
#: step of 255; taken from Bokeh so that the server does not import matplotlib to start).
DIVERGING = list(interp_palette(RdBu11, 256))
REFERENCE_COLOUR = "#111111"
#: The overview's two sides of the median run: smaller error (the accent teal) and larger
#: error (a burnt orange); apart for colour-blind readers (blue–orange axis) and dark enough
#: for white paper, light enough never to carry text.
BETTER = "#0f7c78"
WORSE = "#c0571b"
#: Text that says "nothing here" (a run without the variable): grey, yet 5:1 on white (WCAG AA).
MUTED = "#5f6673"
#: Distinct, colour-blind-safe line colours for runs (Okabe & Ito 2008 without black).
RUN_COLOURS = ("#0072b2", "#d55e00", "#009e73", "#cc79a7", "#e69f00", "#56b4e9", "#f0e442")

STYLESHEET = f"""
:root {{
  --gs-ink: {INK};
  --gs-accent: {ACCENT};
  --gs-paper: {PAPER};
}}
body {{ background: var(--gs-paper); }}
.gs-card {{
  background: #ffffff;
  border: 1px solid #e4e0d6;
  border-radius: 10px;
  box-shadow: 0 1px 2px rgba(20, 40, 58, 0.06);
  padding: 6px 10px;
}}
.gs-section-title {{
  font-size: 11px; letter-spacing: 0.08em; text-transform: uppercase;
  color: #6b7280; margin: 10px 0 0 4px; font-weight: 600;
}}
.gs-hint {{ color: #6b7280; font-size: 12px; line-height: 1.35; }}
.gs-caption {{ color: #374151; font-size: 13px; line-height: 1.45; }}
.gs-notice {{
  border-left: 4px solid #c2410c; background: #fff7ed; color: #7c2d12;
  padding: 6px 10px; border-radius: 6px; font-size: 13px;
}}
.gs-error {{
  border-left: 4px solid #b91c1c; background: #fef2f2; color: #7f1d1d;
  padding: 8px 12px; border-radius: 6px; font-size: 13px;
}}
.gs-empty {{ color: #6b7280; font-style: italic; padding: 16px; }}
.gs-about-title {{ font-weight: 600; color: var(--gs-ink); }}
"""


#: A view's loading state, drawn still: a pale veil and the word "Computing…".  Panel's
#: spinner is an SVG whose rotation never stops; in a browser that paints in software (a
#: headless one, a remote desktop, a machine without graphics acceleration) it repainted
#: the view at every frame and cost 0.3 CPU-s per second per waiting page, measured in
#: headless Chromium: ten pages waiting for a busy server used more CPU than the server.
#: Set on the element that gets ``loading=True`` (the rules live in its shadow root).
STILL_LOADING = """
:host(.pn-loading):before, :host(.pn-loading.pn-arc):before, :host(.pn-loading.pn-arcs):before,
:host(.pn-loading.pn-bar):before, :host(.pn-loading.pn-dots):before, :host(.pn-loading.pn-petal):before {
  -webkit-mask-image: none !important; mask-image: none !important;
  background-color: transparent !important;
  content: "Computing…" !important;
  width: auto !important; height: auto !important;
  top: 60px !important; transform: translate(-50%, 0) !important;
  color: #374151; font-size: 14px; letter-spacing: 0.02em;
  padding: 6px 14px; border-radius: 6px; background: #ffffff !important; border: 1px solid #e4e0d6;
}
"""


def run_colour(index: int) -> str:
    """The line colour of the ``index``-th selected run (cycles after seven)."""
    return RUN_COLOURS[index % len(RUN_COLOURS)]


@functools.cache
def load_extensions() -> None:
    """Load Panel's Tabulator and HoloViews' Bokeh backend once per process.

    Bokeh draws the page; matplotlib draws the PNG and SVG figure downloads on the server
    (Bokeh's own export needs a browser driver, which a server should not depend on), and
    is loaded at the first download (:func:`load_matplotlib`): importing it and HoloViews'
    matplotlib backend cost the server's start 0.6-0.8 s before the first page.
    """
    # no notifications: nothing here sends one, and their area is a script, a stylesheet and a model per page
    pn.extension("tabulator", raw_css=[STYLESHEET], sizing_mode="stretch_width")
    hv.extension("bokeh", logo=False)
    hv.Store.set_current_backend("bokeh")
    # Plots on a plain canvas, not WebGL (HoloViews' default): our glyphs are a few thousand
    # at most (images are not drawn by WebGL anyway), and where WebGL runs in software
    # (headless, remote desktops, no graphics driver) copying its pixels onto the page cost
    # 1.5 of the 3.4 CPU-s Chromium spent opening the maps (CDP profile: Bokeh's blit_webgl).
    hv.renderer("bokeh").webgl = False


def page_template(**options: object) -> pn.template.BaseTemplate:
    """The page's frame: Panel's plain template (header, sidebar, main) without its web font.

    Bootstrap's template loaded Bootstrap's script and stylesheets, which nothing here uses;
    the plain one cost Chromium 0.3 CPU-s less per page (2.19 -> 1.86 CPU-s to the first maps,
    the browser processes' CPU times, load 5).  Its font comes from Google's servers, a
    request that fails on a closed network: left out, the page uses the browser's sans-serif.
    """
    template = pn.template.VanillaTemplate(**options)
    # Panel reads the template's outside resources from this attribute of the instance
    template._resources = {kind: {} for kind in ("css", "js", "js_modules", "tarball")}
    return template


#: Set once HoloViews' matplotlib backend is loaded; the lock lets one first call load it
#: while another waits (two pages' first downloads at once on the server's threads).
_MATPLOTLIB_LOADED = threading.Event()
_MATPLOTLIB_LOCK = threading.Lock()


def load_matplotlib() -> None:
    """Load HoloViews' matplotlib backend (for the PNG/SVG downloads) once per process.

    Call it before the figure to export is built: HoloViews drops, without a word, the
    options an element is given for a backend that is not loaded yet.  Bokeh stays the
    backend of the page (loading makes matplotlib the current backend for a moment).
    """
    if _MATPLOTLIB_LOADED.is_set():
        return
    with _MATPLOTLIB_LOCK:
        if _MATPLOTLIB_LOADED.is_set():
            return
        import matplotlib

        # No display on a server: the file-only backend, chosen before pyplot is imported.
        matplotlib.use("Agg")
        load_extensions()
        try:
            hv.extension("matplotlib", logo=False)
        finally:
            hv.Store.set_current_backend("bokeh")
        _MATPLOTLIB_LOADED.set()
