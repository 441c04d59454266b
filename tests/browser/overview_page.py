"""What the overview draws, read from the page's Bokeh views (shared by the overview tests).

The texts of a Bokeh plot are painted on a canvas, so the page holds no element per label.
The glyph views do hold each text's screen position (``sx``, ``sy``), its font and its
alignment; the browser's own ``measureText`` gives its width.  From these the tests build
the box every label covers on the screen, as the person sees it.
"""

from __future__ import annotations

from typing import Any

#: Every plot of the overview: its frame, its canvas and the box of every text it paints,
#: and every dot (Scatter glyph) with its screen position and hover columns.
OVERVIEW_JS = """
() => {
  const views = [];
  const walk = (v) => { views.push(v); for (const c of (v.child_views || [])) walk(c); };
  for (const v of Object.values(Bokeh.index)) walk(v);
  const inside = (v) => { let e = v.el; while (e) { if (e.classList && e.classList.contains('gs-view-overview')) return true;
                                                     e = e.parentElement || (e.getRootNode && e.getRootNode().host); } return false; };
  const plots = views.filter(v => v.model.x_range !== undefined && v.model.renderers !== undefined && v.frame !== undefined && inside(v));
  const ctx = document.createElement('canvas').getContext('2d');
  const out = [];
  for (const pv of plots) {
    const r = pv.el.getBoundingClientRect();
    const f = pv.frame.bbox;
    const plot = {title: (pv.model.title && pv.model.title.text) || '', canvas: [r.x, r.y, r.x + r.width, r.y + r.height],
                  frame: [r.x + f.x, r.y + f.y, r.x + f.x + f.width, r.y + f.y + f.height], texts: [], dots: []};
    for (const rv of pv.renderer_views.values()) {
      const g = rv.glyph;
      if (!g || !g.sx) continue;
      const name = g.model.constructor.__name__;
      if (name === 'Text') {
        for (let i = 0; i < g.sx.length; i++) {
          const text = String(g.text.get ? g.text.get(i) : g.text[i]);
          ctx.font = g.visuals.text.font_value(i);
          const px = parseFloat(ctx.font.match(/([0-9.]+)px/)[1]);
          const lines = text.split('\\n');
          const w = Math.max(...lines.map(l => ctx.measureText(l).width));
          const h = px * 1.2 * lines.length;
          const align = g.visuals.text.text_align.get(i);
          const x0 = align === 'left' ? g.sx[i] : align === 'right' ? g.sx[i] - w : g.sx[i] - w / 2;
          const y0 = g.sy[i] - h / 2;  // HoloViews labels are centred vertically ('middle')
          plot.texts.push({text, box: [r.x + x0, r.y + y0, r.x + x0 + w, r.y + y0 + h]});
        }
      } else if (name === 'Scatter') {
        const data = rv.model.data_source.data;
        for (let i = 0; i < g.sx.length; i++) {
          const row = {};
          for (const k of Object.keys(data)) row[k] = String(data[k][i]);
          plot.dots.push({x: r.x + g.sx[i], y: r.y + g.sy[i], row});
        }
      }
    }
    out.push(plot);
  }
  return out;
}
"""


def overview_plots(page: Any) -> list[dict[str, Any]]:
    return page.evaluate(OVERVIEW_JS)


def overlaps(a: list[float], b: list[float], slack: float = 0.5) -> bool:
    """Whether two boxes ``[x0, y0, x1, y1]`` share more than ``slack`` pixels each way."""
    return min(a[2], b[2]) - max(a[0], b[0]) > slack and min(a[3], b[3]) - max(a[1], b[1]) > slack


def showing(page: Any) -> str:
    """The "Showing" line on display (hidden tabs are not drawn)."""
    lines = page.locator(".gs-hint").filter(has_text="Showing:")
    texts = [lines.nth(i).inner_text() for i in range(lines.count()) if lines.nth(i).is_visible()]
    assert len(texts) == 1, texts
    return " ".join(texts[0].split())
