"""What a name from outside may hold, and how text from outside is printed on one line.

Source and ensemble names come from command lines, manifests and folder names; they end up
in every table, export and page.  A name is refused when it holds a control character, a
character that changes the direction of the text around it (the "Trojan Source" class,
CVE-2021-42574: U+202E makes a terminal show the rest of a table row reversed) or an
invisible one (two runs ``a`` and ``a`` + U+200B would be two rows that read the same), or
when it ends like the rows gridscore makes itself (``x (ensemble mean)``, ``x (members'
min)``, ``x (reference)``), which a reader would take for those, or when it is longer than
:data:`MAX_NAME` characters.  Zero-width (non-)joiners
(U+200C, U+200D) are allowed: scripts such as Persian need them in words.
"""

from __future__ import annotations

import re
import unicodedata
from collections.abc import Iterable

__all__ = ["MAX_NAME", "UNSAFE", "name_problem", "printable", "repeated", "reserved_suffixes", "same_name"]

#: The longest name: enough for any run's name; longer ones overflow report tables (a LaTeX
#: column wider than the page), the file names of downloads (255 bytes on common file
#: systems) and spreadsheet cells (at most 32 767 characters in Excel), and nobody reads
#: them in a legend.
MAX_NAME = 200

#: Control characters (C0, C1, line and paragraph separators), direction marks, embeddings,
#: overrides and isolates, and invisible characters (zero-width space, word joiner,
#: invisible operators, byte-order mark).
UNSAFE = re.compile(r"[\x00-\x1f\x7f-\x9f\u061c\u200b\u200e\u200f\u2028-\u202e\u2060-\u2069\ufeff]")


def reserved_suffixes() -> tuple[str, ...]:
    """The endings of the rows gridscore names itself (ensemble means and spreads, a
    reference renamed beside a run of its name)."""
    from .ensembles import MEAN_SUFFIX, SPREAD_STATS

    return (MEAN_SUFFIX, *SPREAD_STATS.values(), " (reference)")


def name_problem(name: str) -> str | None:
    """Why ``name`` cannot name a source or an ensemble, or None when it can."""
    if not name.strip():
        return "is empty"
    if len(name) > MAX_NAME:
        return f"is {len(name)} characters long, more than the {MAX_NAME} a name may have"
    bad = UNSAFE.search(name)
    if bad:
        return f"holds the control, direction or invisible character {printable(bad.group(0))}"
    for suffix in reserved_suffixes():
        if name.endswith(suffix):
            return f"ends in '{suffix.strip()}', as the rows gridscore makes itself do"
    return None


def same_name(name: str) -> str:
    """What ``name`` reads as: its Unicode canonical composition (NFC).  ``'métis'`` typed
    with one character ``é`` and a folder name ``'métis'`` stored as ``e`` and a combining
    accent (as macOS stores names) are one name: two rows of them would read the same."""
    return unicodedata.normalize("NFC", name)


def repeated(names: Iterable[str]) -> list[str]:
    """The names (sorted, each once) that read the same as another of ``names`` (:func:`same_name`)."""
    first: dict[str, str] = {}
    twice: set[str] = set()
    for name in names:
        key = same_name(name)
        if key in first:
            twice.add(first[key])
        else:
            first[key] = name
    return sorted(twice)


def printable(text: object) -> str:
    """``text`` with every :data:`UNSAFE` character written as its escape (``\\x1b``, ``\\u202e``)."""
    return UNSAFE.sub(lambda m: m.group(0).encode("unicode_escape").decode("ascii"), str(text))
