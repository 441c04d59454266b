"""The page: places the controls, the notices and the views in a template.

Layout only; what each part shows lives in :mod:`app.views`, the selection in
:mod:`app.state`.
"""

from __future__ import annotations

import panel as pn

from .state import TABS, Selection
from .views.about import About
from .views.base import ResultView, on_document
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


#: What a tab that is not always offered needs, as the notice says when it is gone.
_NEEDS = {SectionView.tab: "a variable on vertical levels", BudgetView.tab: "the four fluxes of the energy budget"}


def build(selection: Selection, results: Results) -> pn.template.BaseTemplate:
    """The whole page of one session."""
    load_extensions()
    # A view is made when its tab is first shown; until then its tab holds an empty column.
    # Making all nine views (about 120 Panel objects, their download buttons the dearest) was
    # 0.2-0.8 CPU-s of the event loop per page, for tabs most pages never open.
    made: dict[str, ResultView] = {}
    holders: dict[str, pn.Column] = {}

    def holder(tab: str) -> pn.Column:
        if tab not in holders:
            holders[tab] = pn.Column(sizing_mode="stretch_width", margin=0)
        return holders[tab]

    def show(tab: str) -> None:
        if tab not in made:
            made[tab] = next(v for v in VIEWS if v.tab == tab)(selection=selection, results=results)
            holder(tab).objects = [made[tab]]

    order = list(selection.param.tab.objects)
    show(selection.tab)
    tabs = pn.Tabs(*[(TABS[t], holder(t)) for t in order], dynamic=True, sizing_mode="stretch_width", margin=(0, 4), css_classes=["gs-tabs"])
    tabs.active = order.index(selection.tab)

    def tab_picked(event) -> None:
        if event.new < len(order):
            selection.tab = order[event.new]

    def tab_set(event) -> None:
        show(event.new)
        tabs.active = order.index(event.new)
        for shown in made.values():
            shown.update()

    def offer_tabs() -> None:
        """The files changed: offer the tabs the collection can fill now (on the document)."""
        wanted = available_tabs(results)
        if wanted == order:
            return
        gone = selection.tab not in wanted
        before = selection.tab
        order[:] = wanted
        selection.param.tab.objects = list(wanted)
        selection.param.tab.default = wanted[0]
        tabs[:] = [(TABS[t], holder(t)) for t in wanted]
        if gone:
            selection.tab = wanted[0]  # its watcher shows that tab and draws it
            selection.notify(f"No longer in the collection: {_NEEDS.get(before, 'what the ' + TABS[before] + ' tab needs')} "
                             f"(the {TABS[before]} tab is gone; showing {TABS[wanted[0]]}).")
        else:
            tabs.active = order.index(selection.tab)

    tabs.param.watch(tab_picked, "active")
    selection.param.watch(tab_set, "tab")
    doc = pn.state.curdoc
    # refresh_options (after each new look at the files) bumps `choices`
    selection.param.watch(lambda *events: on_document(doc, offer_tabs), "choices")

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
