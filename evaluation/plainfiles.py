"""Table files written with the standard library only: the tidy score table as CSV or JSON,
its provenance beside it, and atomic writes.

:mod:`evaluation.export` writes every format and builds on these; a warm ``gridscore
score`` that finds its table in the cache writes it with this module alone (no pandas,
about 0.5 s of imports on a shared 2-core machine).  The CSV and JSON written here are
byte for byte those :func:`evaluation.export.write_table` writes from a DataFrame.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
import shutil
import tempfile
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

from .errors import InputError

__all__ = [
    "KEY_COLUMNS",
    "TIDY_COLUMNS",
    "TABLE_FORMATS",
    "check_table_path",
    "provenance_bytes",
    "sidecar_path",
    "spreadsheet_text",
    "tidy_bytes",
    "write_tidy",
]

#: The identifying columns of a score: one wide-table row per combination.
KEY_COLUMNS: tuple[str, ...] = ("model", "reference", "variable", "level", "region", "season", "period")
#: The contract columns of the tidy score table, in order.
TIDY_COLUMNS: tuple[str, ...] = (*KEY_COLUMNS, "metric", "value", "units")
#: Table formats by file extension (without the dot).
TABLE_FORMATS: tuple[str, ...] = ("csv", "xlsx", "md", "tex", "html", "json")


#: Characters that make a spreadsheet read a cell as a formula (OWASP, "CSV Injection").
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_text(value: Any) -> Any:
    """A text cell that a spreadsheet shows as text: a leading ``'`` before a formula sign.

    Notes
    -----
    Follows the OWASP guidance on CSV injection: text beginning with ``=``, ``+``, ``-``,
    ``@``, a tab or a carriage return gets a single quote in front (a run named
    ``=HYPERLINK(...)`` stays a name); a carriage return becomes a line feed.  Only text
    is changed: numbers (``-1.5`` in the value column), NaN and ``None`` are returned as
    they are.
    """
    if not isinstance(value, str):
        return value
    # A carriage return is written as a line feed, which the CSV writer quotes; a lone CR
    # left unquoted would end the row for readers that take it as a line end (pandas).
    value = value.replace("\r\n", "\n").replace("\r", "\n")
    return "'" + value if value.startswith(_FORMULA_START) else value


def _json_text(record: Any) -> str:
    return json.dumps(record, indent=2, ensure_ascii=False, allow_nan=False, default=str)


def _format_of(fmt: str, *, file: str | None = None) -> str:
    key = fmt.lower().lstrip(".")
    if key not in TABLE_FORMATS:
        shown = f".{key}" if key else "no extension"
        raise InputError(
            f"unknown table format {shown!r}" if key else "the output file has no extension",
            file=file,
            remedy=f"use one of {', '.join('.' + f for f in TABLE_FORMATS)}",
        )
    return key


def check_table_path(path: str | os.PathLike[str]) -> None:
    """Raise :class:`InputError` when the extension of ``path`` is not a table format."""
    _format_of(Path(path).suffix, file=str(path))


def provenance_bytes(provenance: Mapping[str, Any] | None) -> bytes:
    """The provenance record as the JSON file written beside a CSV table (UTF-8)."""
    return (_json_text(dict(provenance or {})) + "\n").encode("utf-8")


def sidecar_path(path: str | os.PathLike[str]) -> Path:
    """Where :func:`write_table` puts the provenance of a CSV file: ``<name>.provenance.json``."""
    path = Path(path)
    return path.with_name(f"{path.stem}.provenance.json")




# --------------------------------------------------------------------------------------
# the tidy table from plain columns (a cached table: {column: [values]})
# --------------------------------------------------------------------------------------


def _cell(value: Any) -> Any:
    """A CSV cell as pandas writes it: NaN empty, floats by ``repr()``, text made safe."""
    if isinstance(value, float):
        return "" if math.isnan(value) else repr(value)
    if value is None:
        return ""
    return spreadsheet_text(value)


def tidy_bytes(columns: Mapping[str, Sequence[Any]], fmt: str, *, provenance: Mapping[str, Any] | None) -> bytes:
    """The tidy table given as ``{column: values}`` (:data:`TIDY_COLUMNS`) as ``csv`` or ``json``.

    The same bytes as :func:`evaluation.export.table_bytes` for that table as a DataFrame;
    other formats are refused with ``ValueError`` (they need pandas: use ``table_bytes``).
    """
    key = _format_of(fmt)
    rows = list(zip(*(columns[c] for c in TIDY_COLUMNS), strict=True))
    if key == "csv":
        out = io.StringIO()
        writer = csv.writer(out, lineterminator="\n")
        writer.writerow([spreadsheet_text(c) for c in TIDY_COLUMNS])
        writer.writerows([_cell(v) for v in row] for row in rows)
        return out.getvalue().encode("utf-8")
    if key == "json":
        scores = [{c: (None if isinstance(v, float) and math.isnan(v) else v) for c, v in zip(TIDY_COLUMNS, row, strict=True)} for row in rows]
        return _json_text({"provenance": dict(provenance or {}), "scores": scores}).encode("utf-8")
    raise ValueError(f"tidy_bytes writes csv and json, not {key}")


def write_tidy(columns: Mapping[str, Sequence[Any]], path: str | os.PathLike[str], *, provenance: Mapping[str, Any] | None) -> Path:
    """:func:`evaluation.export.write_table` for a ``.csv`` or ``.json`` path and a table of plain columns."""
    path = Path(path)
    key = _format_of(path.suffix, file=str(path))
    writes = [(path, _bytes_writer(tidy_bytes(columns, key, provenance=provenance)))]
    if key == "csv":
        writes.append((sidecar_path(path), _bytes_writer(provenance_bytes(provenance))))
    _atomic_write(writes)
    return path


# --------------------------------------------------------------------------------------
# atomic writes
# --------------------------------------------------------------------------------------


def _bytes_writer(data: bytes) -> Callable[[str], None]:
    def write(target: str) -> None:
        with open(target, "wb") as handle:
            handle.write(data)

    return write


def _atomic_write(writes: Sequence[tuple[Path, Callable[[str], None]]]) -> None:
    """Write each ``(path, writer)`` to a temporary file beside ``path``, then move them all.

    Every temporary file is complete and flushed to disk before any target is replaced;
    on failure all temporary files are removed and no target is touched.
    """
    # Each temporary file sits in a temporary folder of its own next to the target, not
    # loose in the target folder: after a failed lazy NetCDF write, dask tasks still in
    # flight reopen the file by name and would recreate a removed loose file.  Once the
    # folder is gone they cannot.
    folders: list[str] = []
    staged: list[tuple[str, Path]] = []
    try:
        for path, writer in writes:
            parent = path.parent if str(path.parent) else Path(".")
            if not parent.is_dir():
                raise InputError(
                    "the folder does not exist" if not parent.exists() else "is not a folder",
                    file=str(parent),
                    remedy="create the folder first or choose another output path",
                )
            try:
                folders.append(tempfile.mkdtemp(dir=parent, prefix=f".{path.name}.", suffix=".part"))
                temporary = os.path.join(folders[-1], path.name)
                writer(temporary)
                _settle(temporary, path)
            except OSError as error:
                raise _unwritable(path, error) from error
            staged.append((temporary, path))
        for temporary, path in staged:
            try:
                os.replace(temporary, path)
            except OSError as error:
                raise _unwritable(path, error) from error
    finally:
        for folder in folders:
            shutil.rmtree(folder, ignore_errors=True)


def _settle(temporary: str, path: Path) -> None:
    # A replaced report keeps the mode the old file had, a new one gets the usual
    # rw-r--r--.  (Applying the umask would mean reading it, which changes it for the
    # whole process: unsafe while the server runs threads.)
    try:
        mode = path.stat().st_mode & 0o777
    except OSError:
        mode = 0o644
    os.chmod(temporary, mode)
    handle = os.open(temporary, os.O_RDONLY)
    try:
        os.fsync(handle)  # the data are on disk before the rename makes them visible
    finally:
        os.close(handle)


def _unwritable(path: Path, error: OSError) -> InputError:
    reason = error.strerror or str(error) or type(error).__name__
    return InputError(
        f"cannot write the file ({reason})",
        file=str(path),
        remedy="choose a folder you may write to, with free space",
    )
