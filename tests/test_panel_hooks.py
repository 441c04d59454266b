"""The one private Panel attribute the sidebar relies on still means what it did.

The sidebar's menus set ``_debounce = 0`` (app/views/controls.py) so that a pick reaches the
server at once.  Panel documents no option for it; if Panel renames or stops using the
attribute, setting it would silently do nothing, so this test fails instead.
Source: Panel 1.9 ``panel/reactive.py`` (``Syncable._debounce``, the delay in ms given to
``doc.add_timeout_callback`` when a change comes from the browser).
"""

import inspect

import panel as pn
import panel.reactive


def test_panel_still_delays_browser_changes_by_debounce():
    assert isinstance(panel.reactive.Syncable._debounce, int)
    # the delay is what Panel schedules the processing of a browser change with
    assert "add_timeout_callback(cb, self._debounce)" in inspect.getsource(panel.reactive.Syncable)


def test_sidebar_menus_send_a_pick_without_delay():
    from app.views import controls

    source = inspect.getsource(controls)
    assert "pick._debounce = 0" in source
    # the widgets it is set on inherit the attribute from Syncable
    for widget in (pn.widgets.Select(options=["a"]), pn.widgets.RadioBoxGroup(options=["a"]), pn.widgets.RadioButtonGroup(options=["a"])):
        assert widget._debounce == panel.reactive.Syncable._debounce
