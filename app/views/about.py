"""What is being served: the collection's title, description and sources.

Every text here comes from the manifest or the files and is escaped (shown as text).
"""

from __future__ import annotations

from typing import Any

import panel as pn
import param
from panel.viewable import Viewer

from .base import text_html
from .results import Results

__all__ = ["About"]


class About(Viewer):
    """A small card in the sidebar describing the collection."""

    results = param.ClassSelector(class_=Results)

    def __init__(self, **params: Any) -> None:
        super().__init__(**params)
        collection = self.results.collection
        title = str(getattr(collection, "title", "") or "Collection")
        description = str(getattr(collection, "description", "") or "")
        rows = []
        for role, sources in (("Reference", collection.references), ("Run", collection.models)):
            for src in sources:
                note = str(getattr(src, "description", "") or "")
                colour = self.results.colour(src.name)
                swatch = f'<span style="display:inline-block;width:10px;height:10px;border-radius:2px;background:{colour};margin-right:6px"></span>'
                rows.append(
                    f'<li title="{text_html(note)}">{swatch}<b>{text_html(src.name)}</b> '
                    f'<span class="gs-hint">{role.lower()}</span>'
                    + (f'<div class="gs-hint" style="margin-left:16px">{text_html(note)}</div>' if note else "")
                    + "</li>"
                )
        body = (
            f'<div class="gs-section-title" style="margin-left:0">About this collection</div>'
            f'<div class="gs-about-title">{text_html(title)}</div>'
            + (f'<div class="gs-hint">{text_html(description)}</div>' if description else "")
            + f'<details style="margin-top:6px"><summary class="gs-hint">{len(rows)} sources</summary>'
            f'<ul style="padding-left:4px;list-style:none;margin:4px 0">{"".join(rows)}</ul></details>'
        )
        from evaluation.engine import dashboard_link

        link = dashboard_link()
        if link:  # computations run on a dask.distributed cluster: show where to watch them
            body += (
                f'<div class="gs-hint" style="margin-top:6px">Computing on a dask cluster: '
                f'<a href="{text_html(link)}" target="_blank" rel="noopener">dask dashboard</a></div>'
            )
        self._pane = pn.pane.HTML(body, sizing_mode="stretch_width", margin=(12, 10))

    def __panel__(self) -> pn.viewable.Viewable:
        return self._pane
