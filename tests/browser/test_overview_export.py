"""The overview's PNG export (matplotlib, drawn on the server) is readable in a report: no
colour bar or legend eating the width, the names in a narrow margin, and every text dark
enough on the paper it is printed on."""

from __future__ import annotations

import io

import matplotlib
import numpy as np
import pandas as pd
import pytest

from .test_overview_size import RUNS, VARIABLES, invented_scores

matplotlib.use("Agg")


def _luminance(colour) -> float:
    """Relative luminance (WCAG 2.1, definition of relative luminance)."""
    rgb = np.array(matplotlib.colors.to_rgb(colour))
    lin = np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2])


def contrast(a, b) -> float:
    """WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05)."""
    la, lb = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def test_contrast_formula_on_known_pairs() -> None:
    # WCAG 2.1: black on white is 21:1, a colour on itself 1:1
    assert contrast("#000000", "#ffffff") == pytest.approx(21.0, rel=1e-9)
    assert contrast("#777777", "#777777") == pytest.approx(1.0)


@pytest.mark.parametrize("by", ["season", "region"])
def test_png_export_has_no_legend_and_readable_text(by: str) -> None:
    import holoviews as hv

    from app.state import Request
    from app.views.look import load_matplotlib
    from app.views.overview import _BAND, OverviewView, overview_table

    load_matplotlib()  # what the page's PNG download loads first
    regions = ("global", "tropics", "nh-extratropics", "sh-extratropics", "arctic", "antarctic", "land", "ocean") if by == "region" else ("global",)
    seasons = ("ANN", "DJF", "MAM", "JJA", "SON") if by == "season" else ("ANN",)
    tidy = invented_scores(regions, seasons)
    request = Request(variable="tas", reference="obs-a", models=tuple(RUNS), region="global", season="ANN", period="1991-2020",
                      field="difference", overview_by=by)
    data = {"table": overview_table(tidy, pd.DataFrame(columns=["model", "variable", "level", "region", "season"]), by), "by": by}
    view = OverviewView.__new__(OverviewView)  # export_figure draws from data alone
    figure = view.export_figure(data, request)
    plot = hv.renderer("matplotlib").get_plot(figure)
    fig = plot.state
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig).draw()
    axes = [a for a in fig.axes if a.get_visible()]
    assert len(axes) == len(VARIABLES)  # one panel per variable; no colour bar, no legend axes
    assert all(a.get_legend() is None for a in axes)
    width = fig.get_window_extent().width
    renderer = fig.canvas.get_renderer()
    names = [t for t in axes[0].get_yticklabels() if t.get_text()]
    margin = max(t.get_window_extent(renderer).width for t in names)
    assert margin < 0.25 * width  # the names take a margin, not half the figure
    texts = [t for a in axes for t in (*a.texts, a.title, *a.get_xticklabels(), *a.get_yticklabels()) if t.get_text().strip()]
    texts += [t for t in fig.texts if t.get_text().strip()]
    assert texts
    for text in texts:
        # on white paper or a run's light band; WCAG 2.1 AA asks 4.5:1 for small text
        worst = min(contrast(text.get_color(), "#ffffff"), contrast(text.get_color(), _BAND))
        assert worst >= 4.5, (text.get_text(), text.get_color(), worst)
    buffer = io.BytesIO()
    hv.save(figure, buffer, fmt="png", backend="matplotlib", dpi=72)
    assert buffer.getvalue()[:8] == b"\x89PNG\r\n\x1a\n"
