"""The page: places the controls, the notices and the views in a template.

Layout only; what each part shows lives in :mod:`app.views`, the selection in
:mod:`app.state`.
"""

from __future__ import annotations

import panel as pn

from .state import TABS, Selection
from .views.about import About
from .views.base import ResultView
from .views.budget import BudgetView, budget_available
from .views.controls import Controls
from .views.cycle import CycleView
from .views.look import INK, load_extensions, page_template
from .views.maps import MapsView
from .views.notices import Notices
from .views.overview import OverviewView
from .views.profiles import ZonalMeanView
from .views.results import Results
from .views.scores import ScoresView
from .views.section import SectionView
from .views.series import SeriesView
from .views.taylor import TaylorView

__all__ = ["VIEWS", "available_tabs", "build"]

#: The result views in tab order.
VIEWS: tuple[type[ResultView], ...] = (
    MapsView, ZonalMeanView, SectionView, SeriesView, CycleView, ScoresView, TaylorView, OverviewView, BudgetView,
)


def available_tabs(results: Results) -> list[str]:
    """The tabs this collection can fill (the energy budget needs its four fluxes, the
    vertical section a variable on levels)."""
    needs = {BudgetView: budget_available, SectionView: lambda r: any(r.levels(v) for v in r.variables())}
    return [v.tab for v in VIEWS if v not in needs or needs[v](results)]


def build(selection: Selection, results: Results) -> pn.template.BaseTemplate:
    """The whole page of one session."""
    load_extensions()
    views = [view(selection=selection, results=results) for view in VIEWS if view.tab in selection.param.tab.objects]
    tabs = pn.Tabs(*[(TABS[v.tab], v) for v in views], dynamic=True, sizing_mode="stretch_width", margin=(0, 4), css_classes=["gs-tabs"])
    order = [v.tab for v in views]
    tabs.active = order.index(selection.tab)

    def tab_picked(event) -> None:
        selection.tab = order[event.new]

    def tab_set(event) -> None:
        tabs.active = order.index(event.new)
        for view in views:
            view.update()

    tabs.param.watch(tab_picked, "active")
    selection.param.watch(tab_set, "tab")

    template = page_template(
        title="gridscore",
        header_background=INK,
        header_color="#f8fafc",
        sidebar_width=340,
        collapsed_sidebar=False,
        # No header spinner: the template's default is one indicator object shared by every
        # session and set on every event of any session (Panel's global busy state), so each
        # event patched every open page, and it spun, repainting, while anyone was waiting.
        # Each view shows its own still "Computing…" while it waits (look.STILL_LOADING).
        busy_indicator=None,
    )
    template.sidebar.append(Controls(selection=selection, results=results))
    template.sidebar.append(About(results=results))
    template.main.append(pn.Column(Notices(selection=selection), tabs, sizing_mode="stretch_width"))
    return template
