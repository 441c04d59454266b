"""The sidebar: what to compare, where and when, what the maps show, and the share link.

Widgets write the :class:`~app.state.Selection`; the selection's validated values flow
back into the widgets, so a link, a drawn box or a rejected value all show up here.
"""

from __future__ import annotations

from typing import Any

import panel as pn
import param
from panel.viewable import Viewer

from evaluation.regions import REGIONS, region_label
from evaluation.timeaxis import MONTH_NAMES

from ..state import FIELDS, Selection
from .base import on_document, text_html
from .look import ACCENT
from .results import Results
from .runlist import run_options

__all__ = ["Controls", "SEASON_LABELS"]

SEASON_LABELS: dict[str, str] = {
    "ANN": "Annual mean (ANN)",
    "DJF": "Dec–Feb (DJF)",
    "MAM": "Mar–May (MAM)",
    "JJA": "Jun–Aug (JJA)",
    "SON": "Sep–Nov (SON)",
    **{m: m.capitalize() for m in MONTH_NAMES},
}

# Clipboard access needs a secure context (https or localhost); elsewhere fall back to a
# selected text area and the older copy command, and say so if both fail.
_COPY_JS = """
const url = window.location.href;
function done(text) { button.label = text; setTimeout(() => { button.label = "Copy link to this view"; }, 2500); }
function fallback() {
  const area = document.createElement("textarea");
  area.value = url; document.body.appendChild(area); area.select();
  let ok = false;
  try { ok = document.execCommand("copy"); } catch (e) { ok = false; }
  document.body.removeChild(area);
  done(ok ? "Link copied" : "Copy the address bar");
}
if (navigator.clipboard && window.isSecureContext) {
  navigator.clipboard.writeText(url).then(() => done("Link copied"), fallback);
} else { fallback(); }
"""


def _section(title: str) -> pn.pane.HTML:
    return pn.pane.HTML(f'<div class="gs-section-title">{text_html(title)}</div>', margin=(8, 10, 0, 10))


def _hint(text: str) -> pn.pane.HTML:
    return pn.pane.HTML(f'<div class="gs-hint">{text_html(text)}</div>', margin=(0, 10, 4, 10))


class Controls(Viewer):
    """All the controls of the selection, for the sidebar."""

    selection = param.ClassSelector(class_=Selection)
    results = param.ClassSelector(class_=Results)

    def __init__(self, **params: Any) -> None:
        super().__init__(**params)
        sel, res = self.selection, self.results
        self.variable = pn.widgets.Select(
            label="Variable", options={res.variable_info(v).label: v for v in sel.param.variable.objects}, value=sel.variable,
            css_classes=["gs-variable"],
        )
        # shown only for a variable on several levels; the options are the reference's levels
        self.level = pn.widgets.Select(label="Level", options=[""], value="", css_classes=["gs-level"], visible=False)
        self.reference = pn.widgets.Select(
            label="Reference", options=list(sel.param.reference.objects), value=sel.reference, css_classes=["gs-reference"]
        )
        self.models = pn.widgets.CheckBoxGroup(
            label="Model runs", options=self._run_options(), value=list(sel.models), inline=False, css_classes=["gs-models"]
        )
        self.region = pn.widgets.Select(
            label="Region", options=self._region_options(), value=sel.region, css_classes=["gs-region"]
        )
        self.box = pn.widgets.TextInput(
            label="Box (south, north, west, east)", placeholder="e.g. 30,60,-10,40", value=self._box_text(sel.region),
            css_classes=["gs-box"],
        )
        self.season = pn.widgets.Select(
            label="Season",
            groups={
                "Year": {SEASON_LABELS["ANN"]: "ANN"},
                "Seasons": {SEASON_LABELS[s]: s for s in ("DJF", "MAM", "JJA", "SON")},
                "Months": {SEASON_LABELS[m]: m for m in MONTH_NAMES},
            },
            value=sel.season,
            css_classes=["gs-season"],
        )
        self.period = pn.widgets.IntRangeSlider(
            label="Period", start=1900, end=2000, value=(1900, 2000), step=1, disabled=True, visible=False, css_classes=["gs-period"]
        )
        self.period_note = pn.pane.HTML("", margin=(0, 10))
        self.reset_period = pn.widgets.Button(label="Default period", color="light", width=130, height=30, disabled=True)
        self.field = pn.widgets.RadioBoxGroup(
            label="Map field", options={label: key for key, label in FIELDS.items()}, value=sel.field, inline=False,
            css_classes=["gs-field"],
        )
        self.target_grid = pn.widgets.Select(
            label="Common grid", options=self._grid_options(), value=sel.target_grid, css_classes=["gs-target-grid"],
        )
        self.copy = pn.widgets.Button(
            label="Copy link to this view", color="primary", sizing_mode="stretch_width", css_classes=["gs-copy"]
        )
        # A pick reaches the selection at once: Panel waits 50 ms after a widget's change from
        # the browser for more changes of it to send together (`_debounce`), which a menu's
        # single pick never has (50 ms of the 0.40 s of a cached change of region on the quiet machine).
        for pick in (self.variable, self.level, self.reference, self.region, self.season, self.field, self.target_grid):
            pick._debounce = 0
        self.copy.js_on_click(args={"button": self.copy}, code=_COPY_JS)
        self.copy.stylesheets = [f":host .bk-btn-primary {{ background-color: {ACCENT}; border-color: {ACCENT}; }}"]

        self.variable.param.watch(lambda e: setattr(sel, "variable", e.new), "value")
        self.reference.param.watch(lambda e: setattr(sel, "reference", e.new), "value")
        self.level.param.watch(self._level_picked, "value")
        self.models.param.watch(self._models_picked, "value")
        self.region.param.watch(self._region_picked, "value")
        self.box.param.watch(self._box_typed, "value")
        self.season.param.watch(lambda e: setattr(sel, "season", e.new), "value")
        self.period.param.watch(self._period_picked, "value_throttled")
        self.reset_period.on_click(self._period_reset)
        self.field.param.watch(lambda e: setattr(sel, "field", e.new), "value")
        self.target_grid.param.watch(self._grid_picked, "value")
        doc = pn.state.curdoc
        sel.param.watch(
            lambda *events: on_document(doc, self._show),
            ["variable", "level", "reference", "models", "region", "season", "period", "field", "target_grid", "span"],
        )
        # the files changed: the menus offer what the collection holds now
        sel.param.watch(lambda *events: on_document(doc, self._choices_changed), "choices")
        self._show()

        self._layout = pn.Column(
            _section("Compare"),
            self.variable,
            self.level,
            self.reference,
            pn.pane.HTML('<div class="gs-hint" style="margin-top:4px">Model runs</div>', margin=(0, 10)),
            self.models,
            _section("Where and when"),
            self.region,
            self.box,
            _hint("Type a box and press Enter, or drag with the box-select tool on a map."),
            self.season,
            self.period,
            pn.Row(self.period_note, pn.layout.HSpacer(), self.reset_period, sizing_mode="stretch_width"),
            _section("Maps show"),
            self.field,
            self.target_grid,
            _hint("Every run and the reference are remapped onto this regular grid before they are compared."),
            _section("Share"),
            self.copy,
            _hint("The address bar always holds the whole view: send it to a colleague to show the same picture."),
            sizing_mode="stretch_width",
        )

    # ------------------------------------------------------------------ widget -> selection
    def _grid_options(self) -> dict[str, str]:
        """Label -> URL value of every common grid the selection offers."""
        def label(value: str) -> str:
            if value == "reference":
                return "The reference's grid"
            return f"Global {value.replace('x', '° x ')}°" if value[:1].isdigit() else f"Grid of {value}"

        return {label(v): v for v in self.selection.param.target_grid.objects}

    def _grid_picked(self, event: param.parameterized.Event) -> None:
        if event.new in self.selection.param.target_grid.objects and event.new != self.selection.target_grid:
            self.selection.target_grid = event.new

    def _level_picked(self, event: param.parameterized.Event) -> None:
        if event.new in self.selection.param.level.objects and event.new != self.selection.level:
            self.selection.level = event.new

    def _models_picked(self, event: param.parameterized.Event) -> None:
        self.selection.models = list(event.new)

    def _region_picked(self, event: param.parameterized.Event) -> None:
        if event.new and event.new != self.selection.region:
            self.selection.region = event.new

    def _box_typed(self, event: param.parameterized.Event) -> None:
        text = event.new.strip()
        if not text:
            return
        self.selection.region = text if text.lower().startswith("box:") else f"box:{text}"

    def _period_picked(self, event: param.parameterized.Event) -> None:
        start, end = event.new
        self.selection.period = f"{start:04d}-{end:04d}"

    def _period_reset(self, event: param.parameterized.Event) -> None:
        if self.selection.default_period is not None:
            self.selection.period = str(self.selection.default_period)

    # ------------------------------------------------------------------ selection -> widgets
    def _choices_changed(self) -> None:
        sel, res = self.selection, self.results
        # options and value at once: a value missing from the new options is never picked for the person
        self.variable.param.update(options={res.variable_info(v).label: v for v in sel.param.variable.objects}, value=sel.variable)
        self.target_grid.param.update(options=self._grid_options(), value=sel.target_grid)
        self.reference.param.update(options=list(sel.param.reference.objects), value=sel.reference)
        # a ticked run that is gone would otherwise leave the boxes empty for a moment ("pick at least one run")
        self.models.param.update(options=self._run_options(), value=[m for m in sel.param.models.objects if m in sel.models])
        self._show()

    def _region_options(self) -> dict[str, str]:
        options = {region_label(r): r.id for r in REGIONS.values()}
        region = self.selection.region
        if region not in REGIONS:
            options[region_label(region)] = region
        return options

    def _run_options(self) -> dict[str, str]:
        """The runs to tick; an ensemble expands to its members while it is ticked (app.views.runlist)."""
        sel = self.selection
        return run_options(sel.param.models.objects, sel.models or [], self.results.ensemble_members)

    @staticmethod
    def _box_text(region: str) -> str:
        return region[4:] if region.startswith("box:") else ""

    def _show(self, *events: param.parameterized.Event) -> None:
        sel = self.selection
        self.reference.options = list(sel.param.reference.objects)
        self.reference.value = sel.reference
        self.models.options = self._run_options()
        self.models.value = [m for m in sel.param.models.objects if m in sel.models]
        self.variable.value = sel.variable
        levels = [v for v in sel.param.level.objects if v]
        self.level.param.update(options=levels or [""], value=sel.level, visible=bool(levels), disabled=not levels)
        self.region.options = self._region_options()
        self.region.value = sel.region
        if sel.region.startswith("box:"):
            self.box.value = self._box_text(sel.region)
        self.season.value = sel.season
        self.field.value = sel.field
        self.target_grid.value = sel.target_grid
        span = sel.span
        if span is None:
            # hidden, not a placeholder range: until the years are known there is no period to show
            self.period.param.update(disabled=True, visible=False)
            self.reset_period.disabled = True
            self.period_note.object = '<span class="gs-hint">checking the years…</span>'
            return
        start, end = (int(y) for y in sel.period.split("-"))
        bounds = dict(start=span.start, end=max(span.end, span.start + 1), disabled=span.start == span.end, visible=True)
        if (start, end) != tuple(self.period.value_throttled or ()):
            # The period came from elsewhere (a link, the reset button, a refused value):
            # show it.  A period the slider itself gave is not written back: by the time
            # it arrived the person may have moved the handle on, and writing the older
            # value back would leave the slider showing a period that is not used.
            # The throttled value follows, so that moving the handle back to the period
            # it last gave is still a change.
            bounds["value"] = bounds["value_throttled"] = (start, end)
        with param.edit_constant(self.period):
            self.period.param.update(**bounds)
        self.reset_period.disabled = sel.period == str(sel.default_period)
        years = end - start + 1
        self.period_note.object = f'<span class="gs-hint">{start}–{end}, {years} year{"s" if years != 1 else ""}</span>'

    def __panel__(self) -> pn.viewable.Viewable:
        return self._layout
