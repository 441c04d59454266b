"""The one exception type for bad input.

Every problem a person can fix (a missing file, an unknown calendar, a variable that is
absent, periods that do not overlap) is raised as :class:`InputError`.  It carries the
file, the problem and the remedy so that the command line can print a single line and
the dashboard a single notice; neither ever shows a traceback.
"""

from __future__ import annotations

from collections.abc import Iterable
from os import PathLike

__all__ = ["InputError"]


class InputError(ValueError):
    """Bad input that the user can fix.

    Parameters
    ----------
    problem
        What is wrong, in a few words ("no time coordinate").
    file
        The file (or files, or source name) the problem is in; ``None`` when it is about
        the request itself (for instance an unknown season).
    remedy
        What to do about it ("add a CF `units` attribute such as 'days since 1850-01-01'").
    """

    def __init__(
        self,
        problem: str,
        *,
        file: str | PathLike[str] | Iterable[str | PathLike[str]] | None = None,
        remedy: str | None = None,
    ) -> None:
        if file is not None and not isinstance(file, (str, PathLike)):
            items = [str(f) for f in file]
            file = items[0] if len(items) == 1 else f"{items[0]} (+{len(items) - 1} more)"
        self.file = None if file is None else str(file)
        self.problem = problem.rstrip(".")
        self.remedy = None if remedy is None else remedy.rstrip(".")
        super().__init__(self.message)

    @property
    def message(self) -> str:
        """The whole message on one line: ``file: problem; remedy`` (control and direction
        characters from file names or attributes escaped: ``evaluation.names.printable``)."""
        from .names import printable

        text = self.problem if self.file is None else f"{self.file}: {self.problem}"
        if self.remedy:
            text += f" — {self.remedy}"
        return printable(" ".join(text.split()))

    def __str__(self) -> str:
        return self.message
