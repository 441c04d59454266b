"""Colours, palettes and page styling shared by every view.

The dashboard's look is its own: a deep-ink header, a warm paper background and one teal
accent; sequential fields in a perceptually uniform palette, signed fields (differences,
trends) in a diverging palette centred on zero.
"""

from __future__ import annotations

import functools

import matplotlib
import numpy as np
from bokeh.palettes import Viridis256

# The server has no display; choose the file-only backend before pyplot is imported
# anywhere (HoloViews imports it when its matplotlib backend loads).
matplotlib.use("Agg")

import holoviews as hv  # noqa: E402
import panel as pn  # noqa: E402

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
    "run_colour",
]

INK = "#14283a"
ACCENT = "#0f7c78"
PAPER = "#f6f4ef"
#: Perceptually uniform and readable in grey print and by colour-blind readers.
SEQUENTIAL = list(Viridis256)
#: Blue-white-red with a white centre, so that "no difference" reads as blank paper
#: (colorcet's diverging maps have a tinted centre).
DIVERGING = [matplotlib.colors.to_hex(c) for c in matplotlib.colormaps["RdBu_r"](np.linspace(0.0, 1.0, 256))]
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
    """Load Panel's Tabulator and HoloViews' two backends once per process.

    Bokeh draws the page; matplotlib draws the PNG and SVG figure downloads on the server
    (Bokeh's own export needs a browser driver, which a server should not depend on).
    """
    pn.extension("tabulator", raw_css=[STYLESHEET], notifications=True, sizing_mode="stretch_width")
    hv.extension("bokeh", "matplotlib", logo=False)
    hv.Store.set_current_backend("bokeh")
    # Plots on a plain canvas, not WebGL (HoloViews' default): our glyphs are a few thousand
    # at most (images are not drawn by WebGL anyway), and where WebGL runs in software
    # (headless, remote desktops, no graphics driver) copying its pixels onto the page cost
    # 1.5 of the 3.4 CPU-s Chromium spent opening the maps (CDP profile: Bokeh's blit_webgl).
    hv.renderer("bokeh").webgl = False
