"""The run checkboxes of the sidebar: an ensemble is one entry that expands to its members."""

from __future__ import annotations

from collections.abc import Callable, Sequence

from evaluation.ensembles import MEAN_SUFFIX

__all__ = ["MEMBER_MARK", "run_options"]

#: What a member's label starts with, under its ensemble's entry.
MEMBER_MARK = "↳ "


def run_options(names: Sequence[str], selected: Sequence[str], members: Callable[[str], Sequence[str]]) -> dict[str, str]:
    """Label -> run name for the run checkboxes, in the order of ``names``.

    An ensemble's mean (``"<name> (ensemble mean)"``) is one entry labelled with its member
    count; its members follow it, marked with :data:`MEMBER_MARK`, only while the ensemble or
    one of its members is ticked (ticking the ensemble expands it, so a member can be added
    as a line of its own).  Labels are plain text (Bokeh draws checkbox labels as text).
    """
    member_of = {m: name for name in names for m in members(name)}
    chosen = set(selected)
    out: dict[str, str] = {}
    for name in names:
        ensemble = member_of.get(name)
        if ensemble is None:
            count = len(members(name))
            out[f"{name[: -len(MEAN_SUFFIX)]} (ensemble mean of {count})" if count and name.endswith(MEAN_SUFFIX) else name] = name
        elif ensemble in chosen or name in chosen:
            out[f"{MEMBER_MARK}{name}"] = name
    return out
