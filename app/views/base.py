"""What every result view shares: drawing the published request, off the event loop.

A view computes only while its tab is on display, shows a loading indicator meanwhile,
drops results that a newer request has overtaken, and turns an
:class:`~evaluation.errors.InputError` into a readable notice instead of a traceback.
Views that draw a figure also offer it as PNG and SVG, drawn on the server by
HoloViews' matplotlib backend from the same elements the page shows.
"""

from __future__ import annotations

import functools
import html
import io
import logging
import re
import weakref
from collections.abc import Callable, Hashable
from typing import Any, ClassVar

import holoviews as hv
import panel as pn
import param
from panel.viewable import Viewer

from evaluation.errors import InputError
from evaluation.regions import region_label

from ..state import Request, Selection
from .look import STILL_LOADING, load_matplotlib
from .results import Results

__all__ = [
    "PageGate", "ResultView", "caption", "error_box", "figure_pane", "gate_page", "on_document", "plot_title", "safe_filename", "text_html",
    "text_tooltip",
]

log = logging.getLogger("gridscore.app")
#: The ASCII punctuation characters CommonMark allows to be backslash-escaped.
_MARKDOWN_PUNCTUATION = re.compile(r"([!-/:-@\[-`{-~])")


def text_html(text: Any) -> str:
    """Text from a file or a person, escaped for an HTML pane (holoviz/panel#5516)."""
    return html.escape(str(text), quote=True)


def plot_title(text: Any) -> str:
    """A plot title holding names from files or a manifest, kept literal.

    HoloViews formats titles with ``str.format`` (``{label}``, ``{group}``): a ``{`` or
    ``}`` in a run's name would be read as a field (a KeyError that breaks the maps).
    Doubling the braces keeps them as they are.
    """
    return str(text).replace("{", "{{").replace("}", "}}")


def text_tooltip(text: Any) -> str:
    """A widget tooltip (``description``) that shows ``text`` as written.

    Panel renders a widget's ``description`` as Markdown with raw HTML allowed, so a name
    such as ``<img src=x onerror=...>`` would run in the page.  CommonMark lets every
    ASCII punctuation character be escaped with a backslash and then shows it literally,
    which turns the whole text into plain text (no HTML, links or emphasis).
    """
    return _MARKDOWN_PUNCTUATION.sub(r"\\\1", " ".join(str(text).split()))


def figure_pane(figure: Any, **options: Any) -> pn.pane.HoloViews:
    """A HoloViews figure as a pane whose axes belong to this figure alone.

    Panel links the axes of every HoloViews pane of a page whose dimensions look alike
    (``linked_axes``, on by default): the zonal mean's range of values would become the
    time series' and the seasonal cycle's, squashing their lines into a thin band.  Plots
    inside one figure (the maps of a layout) still share their axes through HoloViews'
    own ``shared_axes``.
    """
    options.setdefault("sizing_mode", "stretch_width")
    return pn.pane.HoloViews(figure, linked_axes=False, **options)


def caption(text: str) -> pn.pane.HTML:
    """A short explanation under a view's title (``text`` is our own, escaped anyway)."""
    return pn.pane.HTML(f'<div class="gs-caption">{text_html(text)}</div>', margin=(0, 10, 6, 10))


def error_box(text: str) -> pn.pane.HTML:
    return pn.pane.HTML(f'<div class="gs-error">{text_html(text)}</div>', margin=10)


class PageGate:
    """Holds back model changes of one session until its page has loaded in the browser.

    Panel drops the property changes made after the browser has pulled the document but
    before the page reports that it has loaded, taking them to be part of a document that
    was already sent (seen here: a view left in its loading state for good).  Changes
    made in that window are therefore queued and applied once the page has loaded.
    """

    def __init__(self) -> None:
        self.loaded = False
        self.pending: list[Callable[[], None]] = []

    def open(self) -> None:
        self.loaded = True
        pending, self.pending = self.pending, []
        # Each change in a tick of its own, in order: made in one go they reach the browser
        # as one patch, and a small change (the period's years) would appear only once the
        # heaviest (a view's plots, seconds to render) had been drawn.
        doc = pn.state.curdoc
        for change in pending:
            if doc is None or getattr(doc, "session_context", None) is None:
                change()
            else:
                doc.add_next_tick_callback(change)

    def close(self, session_context: Any) -> None:
        """Forget the queued changes of a session that ended before its page loaded.

        The queued callbacks refer to the session's views and so to its document; left
        in place they would keep every object of the session alive (panel#4116).
        """
        self.pending = []


_GATES: weakref.WeakKeyDictionary[Any, PageGate] = weakref.WeakKeyDictionary()


def gate_page() -> None:
    """Start holding back this session's model changes until its page has loaded."""
    doc = pn.state.curdoc
    if doc is None or getattr(doc, "session_context", None) is None:
        return
    gate = _GATES[doc] = PageGate()
    pn.state.onload(gate.open)
    doc.on_session_destroyed(gate.close)


def on_document(doc: Any, change: Callable[[], None]) -> None:
    """Make model changes under the session's document lock, once the page has loaded.

    Coroutines run without the document lock; their changes are handed to Bokeh as a
    next-tick callback instead.  Before the page has loaded they wait in the session's
    :class:`PageGate`.  Outside a server the change is made at once.
    """
    if doc is None or getattr(doc, "session_context", None) is None:
        change()
        return
    gate = _GATES.get(doc)
    if gate is not None and not gate.loaded:
        gate.pending.append(change)
    else:
        doc.add_next_tick_callback(change)


def safe_filename(*parts: str) -> str:
    """A download file name from names that come from the manifest (no path, no odd signs)."""
    joined = "_".join(p for p in parts if p)
    return re.sub(r"[^A-Za-z0-9._-]+", "-", joined).strip("-.") or "gridscore"


def _once_per_drawing(figure: Callable[..., Any]) -> Callable[..., Any]:
    """``figure`` made once per drawing: :meth:`ResultView._show` asks for it twice (inside
    ``draw`` and to know whether the figure can be downloaded); building the HoloViews
    elements again cost the event loop a tenth of a second per maps drawing."""

    @functools.wraps(figure)
    def once(self: ResultView, data: Any, request: Request) -> Any:
        drawing = self.__dict__.get("_drawing")
        if drawing is None or drawing[0] is not data or drawing[1] != request:
            return figure(self, data, request)
        if len(drawing) == 2:
            drawing.append(figure(self, data, request))
        return drawing[2]

    once._once_per_drawing = True  # type: ignore[attr-defined]
    return once


class ResultView(Viewer):
    """Base of the views that draw one request.

    Subclasses set :attr:`tab` and implement :meth:`load` (async, fetching through
    :class:`Results`) and :meth:`draw` (on the event loop).  A subclass that returns a
    HoloViews object from :meth:`figure` gets PNG and SVG downloads.
    """

    tab: ClassVar[str] = ""
    title: ClassVar[str] = ""
    explanation: ClassVar[str] = ""
    #: Which parts of the selection this view depends on (shown above the drawing).
    uses: ClassVar[tuple[str, ...]] = ("variable", "reference", "region", "season", "period")

    selection = param.ClassSelector(class_=Selection)
    results = param.ClassSelector(class_=Results)

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        own = cls.__dict__.get("figure")
        if own is not None and not getattr(own, "_once_per_drawing", False):
            cls.figure = _once_per_drawing(own)

    def __init__(self, **params: Any) -> None:
        super().__init__(**params)
        self._generation = 0
        self._drawn: Hashable | None = None
        self._last: tuple[Any, Request] | None = None
        self._body = pn.Column(sizing_mode="stretch_width", min_height=320, css_classes=[f"gs-view-{self.tab}"],
                               stylesheets=[STILL_LOADING])
        self._doc = pn.state.curdoc
        self._context = pn.pane.HTML("", margin=(0, 10, 4, 10), sizing_mode="stretch_width")
        self._figure_buttons = pn.Row(*self._figure_downloads(), width=160, height=44, visible=False)
        self.selection.param.watch(self._changed, ["request", "tab"])
        self._layout = pn.Column(
            pn.Row(pn.pane.HTML(f"<h3 style='margin:4px 0'>{text_html(self.title)}</h3>", margin=(0, 10)),
                   pn.layout.HSpacer(), self._figure_buttons, sizing_mode="stretch_width"),
            caption(self.explanation),
            self._context,
            *self.controls(),
            self._body,
            sizing_mode="stretch_width",
        )

    # ------------------------------------------------------------------ for subclasses
    def controls(self) -> list[pn.viewable.Viewable]:
        """Widgets of this view only (not part of the shared link)."""
        return []

    def key(self, request: Request) -> Hashable:
        """What the drawing depends on; a new request with the same key is not redrawn."""
        return request

    async def load(self, request: Request) -> Any:
        raise NotImplementedError

    async def alternatives(self, request: Request) -> list[str]:
        """The other references of the request's comparison (drawn as the references' spread)."""
        results = self.results
        args = (request.reference, request.variable, request.period, request.level, request.target_grid)
        return await results.fetch(("alternatives",) + args, results.alternatives, *args)

    def ready(self, request: Request) -> Any | None:
        """What :meth:`load` would return, if it is at hand without computing (else None)."""
        return None

    def draw(self, data: Any, request: Request) -> pn.viewable.Viewable:
        raise NotImplementedError

    def figure(self, data: Any, request: Request) -> hv.core.Dimensioned | None:
        """The view's figure as HoloViews elements (used for the PNG/SVG downloads)."""
        return None

    def context(self, request: Request) -> str:
        """One line saying what is shown: the parts of the request in :attr:`uses`."""
        parts = []
        if "variable" in self.uses:
            info = self.results.variable_info(request.variable)
            parts.append(f"{info.long_name} ({request.variable})" if info.long_name else request.variable)
            if request.level:
                parts[-1] += f" at {request.level}"
        if "reference" in self.uses:
            parts.append(f"against {request.reference}")
        if "models" in self.uses:
            parts.append(", ".join(request.models))
        if "region" in self.uses:
            parts.append(region_label(request.region))
        if "season" in self.uses:
            parts.append(request.season)
        if "period" in self.uses:
            parts.append(request.period)
        return " · ".join(parts)

    def has_figure(self, data: Any, request: Request) -> bool:
        """Whether the PNG/SVG downloads have a figure to draw (a view whose :meth:`figure` is
        costly and not what the page shows answers without building it)."""
        return self.figure(data, request) is not None

    def export_figure(self, data: Any, request: Request) -> hv.core.Dimensioned | None:
        """What the PNG/SVG downloads draw with matplotlib; by default :meth:`figure`."""
        return self.figure(data, request)

    def figure_name(self, request: Request) -> str:
        return safe_filename(self.tab, request.variable, request.reference, request.region, request.season, request.period)

    # ------------------------------------------------------------------ refreshing
    def _changed(self, event: param.parameterized.Event) -> None:
        self.update()

    def update(self, *, force: bool = False) -> None:
        """Redraw if this view is on display and its request changed."""
        request = self.selection.request
        if request is None or self.selection.tab != self.tab:
            return
        # drawn from files of an older generation: drawn again, even if hidden meanwhile
        if not force and (self.results.generation, self.key(request)) == self._drawn:
            return
        ready = self.ready(request)
        if ready is not None:
            self._generation += 1
            generation, files = self._generation, self.results.generation
            if not self._layout._models:
                # Not on a page yet (the page being built, or a tab not shown before): numbers
                # already computed are drawn now, into the page's first document, instead of an
                # empty view that a second message fills.  Files that changed meanwhile are
                # caught by the session's look at them, which draws again.
                self._show(("data", ready), request, generation, files)
                return
            # On the page: drawn in the next tick, without the loading state and the look at the
            # files first (the look's thread hop, two ticks and the "Computing…" message took
            # 10-70 ms of a cached change of region at load 3); the look follows, and files
            # that changed meanwhile draw the view again from the new files.
            self._drawn = None  # a request back to what is on the page meanwhile draws it again (see refresh)
            on_document(self._doc, lambda: self._show(("data", ready), request, generation, files))
            pn.state.execute(functools.partial(self._look_after, files))
            return
        pn.state.execute(self.refresh)

    async def _look_after(self, files: int) -> None:
        """After drawing numbers at hand from generation ``files`` of the input files: the shared
        look at the files, and the view drawn again if they changed."""
        try:
            now = await self.results.fresh()
        except Exception:  # the session's own look reports a failing look
            log.exception("view %s could not look at the input files", self.tab)
            return
        if now != files:
            on_document(self._doc, self.update)

    async def refresh(self) -> None:
        """Load the current request off the loop, then draw it; a newer refresh wins."""
        request = self.selection.request
        if request is None:
            return
        self._generation += 1
        generation = self._generation
        # What is on the page is no longer what was asked last: a request that goes back to
        # it while this one loads (a period moved and moved back) must be drawn again, or
        # this older answer, the newest started, would stay on the page.
        self._drawn = None
        on_document(self._doc, lambda: setattr(self._body, "loading", True))
        files = self.results.generation
        try:
            # one shared look at the input files (off the loop): never draw from files that changed
            files = await self.results.fresh()
            outcome: tuple[str, Any] = ("data", await self.load(request))
        except InputError as error:
            outcome = ("error", error.message)
        except Exception as error:  # a bug must not take the page down; the log has details
            log.exception("view %s failed for %s", self.tab, request)
            outcome = ("error", f"This view could not be drawn ({type(error).__name__}: {error}).")
        if generation == self._generation:
            on_document(self._doc, lambda: self._show(outcome, request, generation, files))

    def _show(self, outcome: tuple[str, Any], request: Request, generation: int, files: int = 0) -> None:
        """Put the drawing on the page (under the document lock)."""
        if generation != self._generation:
            return
        if self.selection.tab != self.tab:
            # The person moved to another tab meanwhile.  A hidden tab's models are detached
            # from the document, and Panel would give new ones stylesheets from its CDN
            # (a request that fails offline); draw when the tab is shown again instead.
            self._drawn = None
            return
        kind, value = outcome
        if kind == "data":
            self.__dict__["_drawing"] = [value, request]  # figure() made once (_once_per_drawing)
            try:
                shown = self.draw(value, request)
                self._last = (value, request)
                self._figure_buttons.visible = self.has_figure(value, request)
            except Exception as error:
                log.exception("view %s could not draw %s", self.tab, request)
                kind, value = "error", f"This view could not be drawn ({type(error).__name__}: {error})."
            finally:
                self.__dict__["_drawing"] = None
        if kind == "error":
            shown = error_box(value)
            self._last = None
            self._figure_buttons.visible = False
        if not (len(self._body.objects) == 1 and self._body.objects[0] is shown):  # a drawing updated in place is already there
            self._body.objects = [shown]
        self._context.object = f'<div class="gs-hint"><b>Showing:</b> {text_html(self.context(request))}</div>'
        self._drawn = (files, self.key(request))
        for button in self._figure_buttons:
            button.filename = f"{self.figure_name(request)}.{button.filename.rsplit('.', 1)[-1]}"
        self._body.loading = False

    # ------------------------------------------------------------------ figure downloads
    def _figure_downloads(self) -> list[pn.widgets.FileDownload]:
        buttons = []
        for fmt in ("png", "svg"):
            button = pn.widgets.FileDownload(
                callback=self._figure_callback(fmt),
                filename=f"figure.{fmt}",
                label=fmt.upper(),
                color="light",
                width=70,
                height=34,
                margin=(4, 4),
                description=text_tooltip(f"Download this figure as {fmt.upper()} (drawn on the server for reports)"),
                css_classes=[f"gs-download-{fmt}"],
            )
            buttons.append(button)
        return buttons

    def _figure_callback(self, fmt: str):
        def make() -> io.BytesIO:
            if self._last is None:
                raise InputError("nothing drawn yet", remedy="wait until the figure is on the page")
            data, request = self._last
            load_matplotlib()  # first download of the process: before the figure gets its options
            figure = self.export_figure(data, request)
            buffer = io.BytesIO()
            # Plot building is not thread-safe (holoviz/holoviews#6162): this runs on the
            # event loop, like the drawing of the page itself.
            options = {"dpi": 150} if fmt == "png" else {}
            hv.save(figure, buffer, fmt=fmt, backend="matplotlib", **options)
            buffer.seek(0)
            return buffer

        return make

    def __panel__(self) -> pn.viewable.Viewable:
        return self._layout
