"""Messages for the person: link values that fell back to a default, runs left out.

Every message is plain text; it may repeat a value from a link or a file, so it is
escaped before it reaches the page (holoviz/panel#5516).
"""

from __future__ import annotations

from typing import Any

import panel as pn
import param
from panel.viewable import Viewer

from ..state import Selection
from .base import on_document, text_html

__all__ = ["Notices"]


class Notices(Viewer):
    """The current notices above the views, with a button that clears them."""

    selection = param.ClassSelector(class_=Selection)

    def __init__(self, **params: Any) -> None:
        super().__init__(**params)
        self._text = pn.pane.HTML("", sizing_mode="stretch_width", margin=(4, 10))
        self._dismiss = pn.widgets.Button(label="Dismiss", color="light", width=90, height=32, margin=(8, 10))
        self._dismiss.on_click(lambda event: self.selection.dismiss())
        self._layout = pn.Row(self._text, self._dismiss, sizing_mode="stretch_width", visible=False)
        doc = pn.state.curdoc
        self.selection.param.watch(lambda *events: on_document(doc, self._show), "notices")
        self._show()

    def _show(self, *events: param.parameterized.Event) -> None:
        notices = self.selection.notices
        self._layout.visible = bool(notices)
        items = "".join(f"<div>{text_html(n)}</div>" for n in notices[-6:])
        self._text.object = f'<div class="gs-notice" role="status">{items}</div>' if notices else ""

    def __panel__(self) -> pn.viewable.Viewable:
        return self._layout
