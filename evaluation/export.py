"""Write score tables and fields for reports, each with its provenance.

Tables go out as CSV, XLSX, Markdown, LaTeX, HTML or JSON; fields as CF NetCDF.  Every
file write is atomic (a temporary file in the target folder, then :func:`os.replace`), so a
failed write never leaves a half-written report behind.  The ``*_bytes`` functions return
the same content in memory for the dashboard's downloads.

The formats that people read (Markdown, LaTeX, HTML) show the *wide* table, one column per
metric, rounded for reading; the machine formats keep every value at full precision (CSV,
JSON) or at 16 significant digits (XLSX, the most openpyxl writes).
"""

from __future__ import annotations

import glob
import html
import importlib.metadata
import io
import json
import math
import os
import tempfile
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any, Protocol

import jinja2
import numpy as np
import pandas as pd
import xarray as xr

from .errors import InputError
from .metrics import METRICS
from .plainfiles import (  # the parts the warm cached path of the command line shares, without pandas
    KEY_COLUMNS,
    TABLE_FORMATS,
    TIDY_COLUMNS,
    _atomic_write,
    _bytes_writer,
    _format_of,
    _json_text,
    check_table_path,
    provenance_bytes,
    sidecar_path,
    spreadsheet_text,
)

__all__ = [
    "KEY_COLUMNS",
    "METRIC_ORDER",
    "TABLE_FORMATS",
    "check_table_path",
    "csv_bytes",
    "spreadsheet_text",
    "TIDY_COLUMNS",
    "field_bytes",
    "number_style",
    "provenance",
    "provenance_bytes",
    "provenance_for",
    "sidecar_path",
    "table_bytes",
    "wide_table",
    "write_field",
    "write_table",
]

#: The metric keys in registry order (evaluation.metrics.METRICS), the order the wide
#: table shows them in; metrics outside the registry follow in order of first appearance.
METRIC_ORDER: tuple[str, ...] = tuple(METRICS)

#: Packages whose versions identify the software that made a result.
_SOFTWARE = ("gridscore", "xarray", "numpy", "dask", "pandas", "cftime", "xarray-regrid")
_CONVENTIONS = "CF-1.10"


class SourceLike(Protocol):
    """What :func:`provenance` needs of a source (``evaluation.scoring.Source`` fits)."""

    name: str
    role: str
    paths: Sequence[str | os.PathLike[str]]


# --------------------------------------------------------------------------------------
# provenance
# --------------------------------------------------------------------------------------


def provenance(
    *,
    sources: Iterable[SourceLike],
    variable: str,
    period: object,
    seasons: Iterable[str],
    regions: Mapping[str, str] | Iterable[str],
    regrid: str,
    extra: Mapping[str, Any] | None = None,
) -> dict[str, Any]:
    """Describe how a result was made: when, with which software, from which files.

    Parameters
    ----------
    sources
        The model and reference sources compared; each needs ``.name``, ``.role``
        (``"model"`` or ``"reference"``) and ``.paths`` (file names or glob patterns).
    variable
        The compared variable.
    period
        The period used, as ``"YYYY-YYYY"`` or an object whose ``str()`` gives that.
    seasons
        The seasons scored.
    regions
        Region id -> definition text; a plain list of ids is taken with empty definitions.
    regrid
        The remapping method (``"conservative"`` or ``"bilinear"``).
    extra
        More top-level entries (``notes``, for instance); they override the computed ones.

    Returns
    -------
    dict
        JSON-ready: ``created`` (UTC, ISO 8601), ``software`` (package -> version),
        ``inputs`` (one entry per file: source, role, absolute path, size in bytes,
        modification time), ``variable``, ``period``, ``seasons``, ``regions``,
        ``regrid``, ``reference`` (the name of the reference source) and the ``extra``
        entries.

    Notes
    -----
    Patterns are expanded with :func:`glob.glob` (``**`` included).  A path or pattern
    that matches no file is still listed, with ``size`` and ``modified`` set to ``None``,
    so that the record shows what was asked for.  No sources give an empty ``inputs``
    list and ``reference`` ``None``.
    """
    sources = list(sources)
    inputs = [entry for source in sources for entry in _file_identities(source)]
    references = [s.name for s in sources if s.role == "reference"]
    if isinstance(regions, Mapping):
        region_text = {str(k): str(v) for k, v in regions.items()}
    else:
        region_text = {str(r): "" for r in regions}
    record: dict[str, Any] = {
        "created": datetime.now(UTC).isoformat(timespec="seconds"),
        "software": {name: _version(name) for name in _SOFTWARE},
        "inputs": inputs,
        "variable": variable,
        "period": str(period),
        "seasons": [str(s) for s in seasons],
        "regions": region_text,
        "regrid": regrid,
        "reference": references[0] if len(references) == 1 else (references or None),
    }
    record.update(extra or {})
    return record


def provenance_for(record: Mapping[str, Any], sources: Iterable[str]) -> dict[str, Any]:
    """The record of a table that holds only some of the sources of ``record``.

    ``inputs`` keeps the files of ``sources``; the per-source entries (``remapping``,
    ``variable_names``, ``omitted``) and ``references`` keep theirs.  Everything else
    (software, choices, notes) is the same for every source and stays.  A dashboard table
    of the ticked runs thereby lists the files its numbers come from, as ``gridscore
    score`` does for the runs it was given.
    """
    keep = {str(s) for s in sources}
    out = dict(record)
    out["inputs"] = [dict(i) for i in record.get("inputs", []) if i.get("source") in keep]
    for key in ("remapping", "variable_names"):
        if isinstance(record.get(key), Mapping):
            out[key] = {k: v for k, v in record[key].items() if k in keep}
    if isinstance(record.get("omitted"), list):
        out["omitted"] = [dict(o) for o in record["omitted"] if o.get("source") in keep]
    if isinstance(record.get("references"), list):
        out["references"] = [r for r in record["references"] if r in keep]
    return out


def _version(package: str) -> str:
    try:
        return importlib.metadata.version(package)
    except importlib.metadata.PackageNotFoundError:
        return "not installed"


def _file_identities(source: SourceLike) -> Iterator[dict[str, Any]]:
    for pattern in source.paths:
        pattern = os.path.expanduser(os.fspath(pattern))
        matches = sorted(glob.glob(pattern, recursive=True)) or [pattern]
        for path in matches:
            try:
                stat = os.stat(path)
            except OSError:
                size, modified = None, None
            else:
                size = stat.st_size
                modified = datetime.fromtimestamp(stat.st_mtime, UTC).isoformat(timespec="seconds")
            yield {
                "source": source.name,
                "role": source.role,
                "path": os.path.abspath(path),
                "size": size,
                "modified": modified,
            }


def _flat_items(value: Any, prefix: str = "") -> Iterator[tuple[str, str]]:
    # Hand-written because pandas.json_normalize flattens nested dicts but leaves lists of
    # records (``inputs``) as one cell; reports want one key/value line per leaf.
    if isinstance(value, Mapping):
        for key, item in value.items():
            yield from _flat_items(item, f"{prefix}.{key}" if prefix else str(key))
    elif isinstance(value, (list, tuple)) and any(isinstance(v, (Mapping, list, tuple)) for v in value):
        for number, item in enumerate(value, start=1):
            yield from _flat_items(item, f"{prefix}[{number}]")
    elif isinstance(value, (list, tuple)):
        yield prefix, ", ".join(str(v) for v in value)
    else:
        yield prefix, "" if value is None else str(value)


def _provenance_frame(record: Mapping[str, Any] | None) -> pd.DataFrame:
    rows = list(_flat_items(record or {}))
    return pd.DataFrame(rows, columns=["key", "value"], dtype=object)


# --------------------------------------------------------------------------------------
# tables
# --------------------------------------------------------------------------------------


def _key_columns(table: pd.DataFrame) -> list[str]:
    """The identifying columns: the score contract's, or (for other tidy tables such as the
    energy budget's ``model, period, metric, value, units``) every column but the values."""
    if any(c in table.columns for c in ("reference", "region", "season")):
        return list(KEY_COLUMNS)
    return [c for c in table.columns if c not in ("metric", "value", "units")]


def _columns(table: pd.DataFrame) -> list[str]:
    return [*_key_columns(table), "metric", "value", "units"]


def _tidy(tidy: pd.DataFrame) -> pd.DataFrame:
    """The contract columns of ``tidy`` in contract order, ``period`` as text."""
    if not isinstance(tidy, pd.DataFrame):
        raise InputError(
            f"a score table must be a pandas DataFrame, not {type(tidy).__name__}",
            remedy="pass the table returned by Comparison.scores",
        )
    columns = _columns(tidy)
    missing = [c for c in columns if c not in tidy.columns]
    if missing:
        raise InputError(
            f"the score table lacks the columns {', '.join(missing)}",
            remedy=f"give it the columns {', '.join(TIDY_COLUMNS)} (as Comparison.scores does)",
        )
    table = tidy.loc[:, columns].reset_index(drop=True)
    # Period objects and strings must print the same way in every format.
    return table.assign(period=table["period"].map(str), value=pd.to_numeric(table["value"]))


def _metric_order(metrics: Iterable[str]) -> list[str]:
    present = list(dict.fromkeys(metrics))
    known = [m for m in METRIC_ORDER if m in present]
    return known + [m for m in present if m not in METRIC_ORDER]


def wide_table(tidy: pd.DataFrame) -> pd.DataFrame:
    """One row per model x reference x variable x level x region x season x period, one column per metric.

    Parameters
    ----------
    tidy
        The tidy score table (contract columns).

    Returns
    -------
    pandas.DataFrame
        The key columns, then one float column per metric in :data:`METRIC_ORDER`
        (metrics outside it follow in order of first appearance).  Rows keep the order in
        which their keys first appear in ``tidy``.

    Raises
    ------
    InputError
        When columns are missing or a key x metric combination occurs twice.

    Notes
    -----
    NaN values stay NaN; a metric missing for some row is NaN there.  An empty table gives
    an empty frame with the key columns only.  Units are not part of the wide table (they
    differ per metric and variable); the report formats list them separately.
    """
    table = _tidy(tidy)
    keys = _key_columns(table)
    if table.empty:
        return pd.DataFrame({k: pd.Series(dtype=object) for k in keys})
    try:
        wide = table.pivot(index=keys, columns="metric", values="value")
    except ValueError as error:  # pandas refuses duplicate index/column pairs
        raise InputError(
            "the score table holds the same model, reference, variable, level, region, season, "
            "period and metric more than once",
            remedy="drop the duplicate rows before exporting",
        ) from error
    rows = pd.MultiIndex.from_frame(table[keys].drop_duplicates())
    wide = wide.reindex(index=rows, columns=_metric_order(table["metric"]))
    wide.columns.name = None
    return wide.reset_index()


def _units_table(table: pd.DataFrame) -> pd.DataFrame:
    """Variable x metric -> units, for the report formats' legend."""
    if "variable" not in table.columns:  # e.g. the energy budget: one unit per metric
        table = table.assign(variable="")
    if table.empty:
        return pd.DataFrame({"variable": pd.Series(dtype=object)})
    joined = (
        table.groupby(["variable", "metric"], sort=False)["units"]
        .agg(lambda u: ", ".join(dict.fromkeys(str(x) for x in u.dropna())))
        .unstack("metric")
    )
    joined = joined.reindex(columns=_metric_order(table["metric"])).reset_index()
    joined.columns.name = None
    return joined.fillna("")


#: Significant digits of the largest value of a column (the others get as many decimals).
_DIGITS = 4
#: Below this largest magnitude a column is written in scientific notation.
_SMALLEST_FIXED = 1e-3
#: p-values are read against thresholds such as 0.05: three decimals, and below 0.001 only
#: "< 0.001" (common practice in reporting p-values; a p-value is never exactly zero).
_P_FLOOR = 0.001


def number_style(values: Iterable[float], metric: str) -> tuple[Callable[[float], str], str]:
    """How one column of numbers is written for reading: ``(text of a value, Excel format)``.

    Every value of a column gets the same number of decimals: four significant digits of
    the column's largest magnitude (so ``283.1`` and ``284.0``, never ``284`` beside
    ``283.1``).  Columns whose largest magnitude is below 0.001 (fluxes in kg m-2 s-1) are
    written in scientific notation with four significant digits; p-values with three
    decimals and ``< 0.001`` below that.

    Notes
    -----
    NaN values are ignored when choosing; a column of only NaN (or zeros) gets three
    decimals.  Negative zero is written without its sign.
    """
    if metric.endswith("pvalue"):
        def pvalue(v: float) -> str:
            return f"< {_P_FLOOR:g}" if v < _P_FLOOR else f"{v:.3f}"

        return pvalue, f'[<{_P_FLOOR:g}]"< {_P_FLOOR:g}";0.000'
    finite = [abs(float(v)) for v in values if pd.notna(v) and np.isfinite(float(v))]
    top = max(finite, default=0.0)
    if 0.0 < top < _SMALLEST_FIXED:
        return (lambda v: f"{v:.{_DIGITS - 1}e}"), "0." + "0" * (_DIGITS - 1) + "E+00"
    decimals = 3 if top == 0.0 else min(8, max(0, _DIGITS - 1 - math.floor(math.log10(top))))

    def fixed(v: float) -> str:
        text = f"{v:.{decimals}f}"
        return text[1:] if text.startswith("-") and float(text) == 0.0 else text

    return fixed, "0" if decimals == 0 else "0." + "0" * decimals


def _display_frame(tidy: pd.DataFrame, *, missing: str) -> pd.DataFrame:
    """The wide table as text rounded for reading, NaN shown as ``missing``.

    Decimals are chosen per metric column and variable (:func:`number_style`), so that a
    column of one variable reads with one precision.
    """
    wide = wide_table(tidy)
    shown = wide.astype(object)
    keys = _key_columns(tidy)
    groups = wide["variable"].map(str) if "variable" in wide.columns else pd.Series("", index=wide.index)
    if "model" in wide.columns:
        # an ensemble's spread (members' std) is far smaller than the values beside it: it gets
        # decimals of its own, or a 0.008 K spread would read 0.0 in a column of 287.2 K means
        from .ensembles import SPREAD_STATS

        spread = wide["model"].map(str).str.endswith(SPREAD_STATS["std"])
        groups = groups + spread.map({True: "\x00spread", False: ""})
    for column in wide.columns[len(keys) :]:
        texts = pd.Series(missing, index=wide.index, dtype=object)
        for _, rows in wide[column].groupby(groups, sort=False):
            write = number_style(rows.to_numpy(), str(column))[0]
            texts[rows.index] = [missing if pd.isna(v) else write(float(v)) for v in rows]
        shown[column] = texts
    for column in keys:
        shown[column] = wide[column].map(str)
    return shown


def _compact(shown: pd.DataFrame, keys: Sequence[str]) -> tuple[pd.DataFrame, dict[str, str]]:
    """The shown table without the key columns that hold one value (the model's excepted),
    and those values (for a caption); an empty ``level`` is left out altogether."""
    constant = {k: str(shown[k].iloc[0]) for k in keys if k != "model" and k in shown and len(shown) and shown[k].nunique() == 1}
    return shown.drop(columns=list(constant)), {k: v for k, v in constant.items() if v}


def _caption(constant: Mapping[str, str]) -> str:
    """``reference ref_obs; variable tas; ...`` for the columns a compact table leaves out."""
    return "; ".join(f"{k.replace('_', ' ')} {v}" for k, v in constant.items())


def _title(record: Mapping[str, Any] | None) -> str:
    record = record or {}
    parts = [str(record[k]) for k in ("variable", "period") if record.get(k)]
    return "Scores" + (f": {', '.join(parts)}" if parts else "")


def csv_bytes(table: pd.DataFrame) -> bytes:
    """A table as CSV with its text cells safe for spreadsheets (:func:`spreadsheet_text`).

    Notes
    -----
    Numeric columns are written as they are, at full precision (pandas writes floats
    with ``repr()``, which reads back to the identical double); NaN is an empty cell.
    """
    safe = table.copy()
    for column in safe.columns:
        if not pd.api.types.is_numeric_dtype(safe[column]):
            safe[column] = safe[column].map(spreadsheet_text)
    safe.columns = [spreadsheet_text(str(c)) for c in safe.columns]
    return safe.to_csv(index=False, lineterminator="\n").encode("utf-8")


def _csv_bytes(table: pd.DataFrame) -> bytes:
    return csv_bytes(table)


def _json_bytes(table: pd.DataFrame, record: Mapping[str, Any] | None) -> bytes:
    # Not DataFrame.to_json: it rounds to at most 15 significant digits.  json.dumps
    # writes repr() of each float (full precision); NaN becomes null, valid JSON.
    scores = table.astype(object).where(table.notna(), None).to_dict(orient="records")
    return _json_text({"provenance": dict(record or {}), "scores": scores}).encode("utf-8")


def _xlsx_bytes(table: pd.DataFrame, record: Mapping[str, Any] | None) -> bytes:
    buffer = io.BytesIO()
    with pd.ExcelWriter(buffer, engine="openpyxl") as writer:
        table.to_excel(writer, sheet_name="scores", index=False)
        wide = wide_table(table)
        wide.to_excel(writer, sheet_name="wide", index=False)
        _number_formats(writer.sheets["scores"], writer.sheets["wide"], table, wide)
        _provenance_frame(record).to_excel(writer, sheet_name="provenance", index=False)
        for sheet in writer.sheets.values():
            _defuse_formulas(sheet)
    return buffer.getvalue()


def _number_formats(tidy_sheet: Any, wide_sheet: Any, table: pd.DataFrame, wide: pd.DataFrame) -> None:
    """Excel number formats as the read formats round (:func:`number_style`), per metric
    and variable; the cells keep every digit of the value."""
    if table.empty:
        return
    variable = table["variable"].map(str) if "variable" in table.columns else pd.Series("", index=table.index)
    styles = {
        key: number_style(rows.to_numpy(), key[1])[1]
        for key, rows in table["value"].groupby([variable, table["metric"].map(str)], sort=False)
    }
    value_column = table.columns.get_loc("value") + 1
    for row, key in enumerate(zip(variable, table["metric"].map(str), strict=True), start=2):
        tidy_sheet.cell(row=row, column=value_column).number_format = styles[key]
    wide_variable = wide["variable"].map(str) if "variable" in wide.columns else pd.Series("", index=wide.index)
    for column in wide.columns[len(_key_columns(table)) :]:
        index = wide.columns.get_loc(column) + 1
        for row, name in enumerate(wide_variable, start=2):
            style = styles.get((name, str(column)))
            if style:
                wide_sheet.cell(row=row, column=index).number_format = style


def _defuse_formulas(sheet: Any) -> None:
    # openpyxl stores any text starting with "=" as a formula, so a run named "=1+1" (or
    # worse, "=HYPERLINK(...)") would be evaluated by the spreadsheet; keep such text text.
    for row in sheet.iter_rows():
        for cell in row:
            if cell.data_type == "f":
                cell.data_type = "s"


def _markdown_bytes(table: pd.DataFrame, record: Mapping[str, Any] | None) -> bytes:
    def markdown(frame: pd.DataFrame, align: Sequence[str]) -> str:
        # tabulate writes cell text as is: a "|" inside a name would end the cell early
        # and a line break would end the table.
        # Markdown passes HTML through to the page that shows it: names are escaped.
        text = frame.astype(object).map(lambda v: html.escape(" ".join(str(v).split("\n")), quote=False).replace("|", "\\|"))
        return text.to_markdown(index=False, disable_numparse=True, colalign=tuple(align))

    keys = _key_columns(table)
    shown, constant = _compact(_display_frame(table, missing="–"), keys)
    n_keys = len([k for k in keys if k in shown.columns])
    units = _units_table(table)
    prov = _provenance_frame(record)
    parts = [
        f"# {html.escape(' '.join(_title(record).split()), quote=False)}",
        *([html.escape(' '.join(f"For every row: {_caption(constant)}.".split()), quote=False)] if constant else []),
        markdown(shown, ["left"] * n_keys + ["right"] * (shown.shape[1] - n_keys)),
        "## Units",
        markdown(units, ["left"] * units.shape[1]),
        "## Provenance",
        markdown(prov, ["left", "left"]),
    ]
    return ("\n\n".join(parts) + "\n").encode("utf-8")


def _latex_bytes(table: pd.DataFrame, record: Mapping[str, Any] | None) -> bytes:
    # "--" is LaTeX's en dash and stays plain ASCII.
    keys = _key_columns(table)
    shown, constant = _compact(_display_frame(table, missing="--"), keys)
    key_columns = [k for k in keys if k in shown.columns]
    # a floating table with a caption naming what every row shares (a standard document
    # with \usepackage{booktabs} compiles it as it is); the metric columns in blocks that
    # each fit the text width, every block repeating the key columns, stacked in the float
    caption = f"Scores: {_caption(constant)}" if constant else _title(record)
    blocks = []
    for metrics in _latex_blocks(shown, key_columns):
        styler = (
            shown[[*key_columns, *metrics]].style.hide(axis="index").format(escape="latex").format_index(escape="latex", axis="columns")
        )
        blocks.append(styler.to_latex(hrules=True, column_format="l" * len(key_columns) + "r" * len(metrics)))
    # as many blocks to a float as fit the page height; more floats, captioned as parts
    per_float = max(1, int(_LATEX_HEIGHT_PT // ((len(shown) + 1) * _LATEX_LINE_PT + _LATEX_BLOCK_PT)))
    floats = [blocks[i:i + per_float] for i in range(0, len(blocks), per_float)]
    tabular = ""
    for number, group in enumerate(floats, start=1):
        part = f" (part {number} of {len(floats)})" if len(floats) > 1 else ""
        tabular += (
            "\\begin{table}\n\\centering\n\\caption{" + _latex_text(" ".join(caption.split()) + part) + "}\n"
            + "\\small\n\\setlength{\\tabcolsep}{4pt}\n"
            + "\\par\\medskip\n".join(group) + "\\end{table}\n"
        )
    # "<" and ">" print as other glyphs in LaTeX's default font encoding ("< 0.001")
    tabular = _latex_unicode(tabular.replace("<", r"\textless{}").replace(">", r"\textgreater{}"))
    comment = [f"% {' '.join(_title(record).split())}", "% needs \\usepackage{booktabs}"]
    if "\\gsglyph{" in tabular:
        comment += ["% names hold characters pdflatex cannot set: it prints their code points ([U+03A9]);",
                    "% xelatex or lualatex, with a font that has them, print the characters", _LATEX_GLYPH]
    units = _units_table(table)
    for _, row in units.iterrows():
        pairs = ", ".join(f"{m} {u}" for m, u in row.iloc[1:].items() if u)
        # a line break in a name would end the comment and turn the rest into LaTeX
        comment.append(" ".join(f"% units of {row['variable']}: {pairs}".split()))
    comment.append("% provenance:")
    for key, value in _flat_items(record or {}):
        # A line break in a value would end the comment and turn the rest into LaTeX.
        comment.append(f"%   {key}: {' '.join(value.splitlines())}")
    return ("\n".join(comment) + "\n" + tabular).encode("utf-8")


#: The text width of LaTeX's standard ``article`` class at 10 pt (345 pt, Lamport, "LaTeX",
#: 2nd ed., sec. C.5.3); the table is set in ``\small`` (9 pt), where a digit of Computer
#: Modern is 4.6 pt wide (value from memory; taken for every character), with
#: ``\tabcolsep`` = 4 pt (8 pt around a column).
_LATEX_WIDTH_PT, _LATEX_CHAR_PT, _LATEX_COLUMN_PT = 345.0, 4.6, 8.0
#: The page height a float may fill (the article class's text height at 10 pt is 550-592 pt
#: by paper size; the caption and some slack taken off), a table line in \small (11 pt
#: baseline skip) and what a block adds besides its lines (rules, \medskip).
_LATEX_HEIGHT_PT, _LATEX_LINE_PT, _LATEX_BLOCK_PT = 480.0, 11.0, 14.0


def _latex_blocks(shown: pd.DataFrame, key_columns: Sequence[str]) -> list[list[str]]:
    """The metric columns of ``shown`` in consecutive groups that fit the text width beside
    the key columns (at least one metric per group).

    Hand-written: pandas' ``to_latex`` has no column wrapping, and ``longtable`` or
    ``\resizebox`` would need packages a plain document lacks (or shrink the text).
    """

    def width(column: str) -> float:
        texts = [str(column), *(str(v) for v in shown[column])]
        return max(len(t) for t in texts) * _LATEX_CHAR_PT + _LATEX_COLUMN_PT

    base = sum(width(k) for k in key_columns)
    blocks: list[list[str]] = []
    used = base
    for metric in [c for c in shown.columns if c not in key_columns]:
        if blocks and blocks[-1] and used + width(metric) <= _LATEX_WIDTH_PT:
            blocks[-1].append(metric)
            used += width(metric)
        else:
            blocks.append([metric])
            used = base + width(metric)
    return blocks or [[]]


#: LaTeX's special characters (Lamport, "LaTeX", 2nd ed., sec. 2.2.1 and C.2) as text.
_LATEX_SPECIAL = {
    "\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}", "^": r"\textasciicircum{}",
}


#: Characters that pdflatex sets in a standard document (``\\usepackage[T1]{fontenc}`` or the
#: default encoding, with the text companion symbols every LaTeX since 2020 loads): Latin-1,
#: Latin Extended-A, dashes, quotes and the ellipsis (LaTeX's utf8 input definitions; common
#: practice).  Any other character (Greek, CJK, emoji) stops pdflatex with "Unicode character
#: not set up for use with LaTeX".
_LATEX_SETS = frozenset("\u2013\u2014\u2018\u2019\u201c\u201d\u2026")
#: The characters below U+0180 that pdflatex does not set, with or without T1 (found by
#: compiling every character from U+00A0 to U+017F with TeX Live 2022): Ħ ħ ĸ Ŀ ŀ ŉ Ŧ ŧ ſ.
_LATEX_UNSET = frozenset("\u0126\u0127\u0138\u013f\u0140\u0149\u0166\u0167\u017f")
#: Writes such a character: itself under xelatex and lualatex, its code point under pdflatex
#: (which then never sees the character: the argument is dropped unexpanded).
_LATEX_GLYPH = (r"\ifdefined\gsglyph\else\DeclareRobustCommand{\gsglyph}[2]"
                r"{\ifdefined\XeTeXrevision#2\else\ifdefined\directlua#2\else[U+#1]\fi\fi}\fi")


def _latex_unicode(text: str) -> str:
    """``text`` with every character pdflatex cannot set written as ``\\gsglyph{HEX}{c}``."""
    return "".join(c if (ord(c) < 0x180 and c not in _LATEX_UNSET) or c in _LATEX_SETS else f"\\gsglyph{{{ord(c):04X}}}{{{c}}}"
                   for c in text)


def _latex_text(text: str) -> str:
    """Text with LaTeX's special characters escaped, for the caption (pandas escapes the
    cells itself but offers no function for other text)."""
    return "".join(_LATEX_SPECIAL.get(c, c) for c in text)


_HTML = jinja2.Environment(autoescape=True).from_string(
    """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>{{ title }}</title>
<style>
body { font-family: sans-serif; margin: 2em; }
table { border-collapse: collapse; margin-bottom: 2em; }
th, td { border-bottom: 1px solid #ccc; padding: 0.2em 0.6em; text-align: right; white-space: nowrap; }
th:nth-child(-n+{{ n_keys }}), td:nth-child(-n+{{ n_keys }}) { text-align: left; }
table.legend th, table.legend td { text-align: left; }
</style>
</head>
<body>
<h1>{{ title }}</h1>
{{ scores|safe }}
<h2>Units</h2>
{{ units|safe }}
<h2>Provenance</h2>
{{ provenance|safe }}
</body>
</html>
"""
)


def _html_bytes(table: pd.DataFrame, record: Mapping[str, Any] | None) -> bytes:
    def html(frame: pd.DataFrame, classes: str) -> str:
        # pandas escapes every cell and header (escape=True), so the template may insert
        # these tables with |safe; everything else in the page is escaped by jinja2.
        return frame.to_html(index=False, escape=True, border=0, classes=classes)

    text = _HTML.render(
        title=_title(record),
        n_keys=len(_key_columns(table)),
        scores=html(_display_frame(table, missing="–"), "scores"),
        units=html(_units_table(table), "legend"),
        provenance=html(_provenance_frame(record), "legend"),
    )
    return text.encode("utf-8")


def table_bytes(tidy: pd.DataFrame, fmt: str, *, provenance: Mapping[str, Any] | None) -> bytes:
    """The score table in one of :data:`TABLE_FORMATS`, as bytes (UTF-8 for the text formats).

    Parameters
    ----------
    tidy
        The tidy score table (contract columns; other columns are left out).
    fmt
        ``csv``, ``xlsx``, ``md``, ``tex``, ``html`` or ``json`` (a leading dot is allowed).
    provenance
        The record from :func:`provenance`; ``None`` for none.

    Returns
    -------
    bytes
        - ``csv``: the tidy table only, full precision (provenance goes to a sidecar file
          in :func:`write_table`, so that ``pandas.read_csv`` reads the file as is).
        - ``xlsx``: sheets ``scores`` (tidy), ``wide`` and ``provenance`` (key/value);
          numbers carry 16 significant digits (openpyxl's writer; Excel computes with 15).
        - ``md``: the wide table, a units legend and the provenance as pipe tables.
        - ``tex``: a booktabs ``tabular`` of the wide table, provenance as ``%`` comments.
        - ``html``: a standalone page with the wide table, units and provenance.
        - ``json``: ``{"provenance": {...}, "scores": [one object per tidy row]}``.

    Raises
    ------
    InputError
        For an unknown format or a table without the contract columns.

    Notes
    -----
    NaN is an empty cell in CSV and XLSX, ``null`` in JSON, "–" in Markdown and HTML and
    "--" in LaTeX.  The read formats round to 4 significant digits (p-values to 3
    decimals).  An empty table gives the header (and the provenance) only.
    """
    key = _format_of(fmt)
    table = _tidy(tidy)
    if key == "csv":
        return _csv_bytes(table)
    if key == "json":
        return _json_bytes(table, provenance)
    if key == "xlsx":
        return _xlsx_bytes(table, provenance)
    if key == "md":
        return _markdown_bytes(table, provenance)
    if key == "tex":
        return _latex_bytes(table, provenance)
    return _html_bytes(table, provenance)


def write_table(
    tidy: pd.DataFrame, path: str | os.PathLike[str], *, provenance: Mapping[str, Any] | None
) -> Path:
    """Write the score table to ``path`` in the format its extension names.

    Parameters
    ----------
    tidy
        The tidy score table.
    path
        Target file ending in ``.csv``, ``.xlsx``, ``.md``, ``.tex``, ``.html`` or ``.json``.
    provenance
        The record from :func:`provenance`.  For ``.csv`` it is written beside the table
        as ``<name>.provenance.json``; the other formats hold it inside.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    InputError
        For another extension, a missing or unwritable folder, or a table without the
        contract columns.  No file is created or changed then.

    Notes
    -----
    The content is built in memory first and written atomically, so an existing file is
    either replaced whole or left as it was.  See :func:`table_bytes` for NaN and empty
    tables.
    """
    path = Path(path)
    key = _format_of(path.suffix, file=str(path))
    data = table_bytes(tidy, key, provenance=provenance)
    writes = [(path, _bytes_writer(data))]
    if key == "csv":
        writes.append((sidecar_path(path), _bytes_writer(provenance_bytes(provenance))))
    _atomic_write(writes)
    return path


# --------------------------------------------------------------------------------------
# fields
# --------------------------------------------------------------------------------------


def _cf_dataset(field: xr.DataArray | xr.Dataset, record: Mapping[str, Any] | None) -> xr.Dataset:
    """A copy of ``field`` ready for ``to_netcdf``: global attributes, clean encodings."""
    if isinstance(field, xr.DataArray):
        name = field.name if field.name is not None else (record or {}).get("variable") or "field"
        ds = field.to_dataset(name=str(name))
    elif isinstance(field, xr.Dataset):
        ds = field
    else:
        raise InputError(
            f"a field must be an xarray DataArray or Dataset, not {type(field).__name__}",
            remedy="pass a field from Comparison (climatology, difference, trend_map, ...)",
        )
    # Encodings inherited from the files read (chunk sizes, packing, source path) may not
    # fit the derived field; let xarray choose afresh, which also encodes cftime times with
    # their own calendar.
    ds = _udunits_trend(_climatology_time(_cf_coordinates(ds.drop_encoding().copy(deep=False)), record))
    for name, variable in ds.variables.items():
        variable.attrs = _netcdf_attrs(variable.attrs)
        if name in ds.coords and variable.dtype.kind == "f":
            # CF: coordinate variables hold no missing values, so no _FillValue for them.
            variable.encoding["_FillValue"] = None
        elif name in ds.data_vars and variable.dtype.kind in "fiu":
            variable.encoding.update(zlib=True, complevel=4)
    record = dict(record or {})
    created = record.get("created") or datetime.now(UTC).isoformat(timespec="seconds")
    line = f"{created}: written by gridscore {_version('gridscore')} (evaluation.export)"
    history = str(ds.attrs.get("history", "")).rstrip("\n")
    attrs = _netcdf_attrs(ds.attrs)
    attrs.update(
        Conventions=_CONVENTIONS,
        history=f"{history}\n{line}" if history else line,
        provenance=_json_text(record),
    )
    ds.attrs = attrs
    return ds


#: CF attributes of the coordinates of a regular grid (CF-1.10 sections 4.1, 4.2 and 7.1).
_AXES: dict[str, dict[str, str]] = {
    "lat": {"standard_name": "latitude", "long_name": "latitude", "units": "degrees_north", "axis": "Y"},
    "lon": {"standard_name": "longitude", "long_name": "longitude", "units": "degrees_east", "axis": "X"},
}


def _cf_coordinates(ds: xr.Dataset) -> xr.Dataset:
    """1-D ``lat``/``lon`` with their CF attributes and bounds; ``cell_area`` as the cell measure.

    Notes
    -----
    Fields cut from a comparison lose the ``lat_bnds``/``lon_bnds`` of their grid (they
    have another dimension); they are inferred half-way between the centres, which is exact
    for the regular target grids of a comparison.  Other coordinates are left as they are.
    """
    from .grids import infer_bounds

    for name, attrs in _AXES.items():
        if name not in ds.dims or name not in ds.coords or ds[name].ndim != 1:
            continue
        bounds = str(ds[name].attrs.get("bounds") or f"{name}_bnds")
        if bounds not in ds.variables:
            ds = ds.assign_coords({bounds: ((name, "nv"), infer_bounds(ds[name].values, kind=name))})
        ds = ds.assign_coords({name: (name, ds[name].values, {**ds[name].attrs, **attrs, "bounds": bounds})})
    if "cell_area" in ds.coords:
        ds["cell_area"].attrs = {"standard_name": "cell_area", "units": "m2", **ds["cell_area"].attrs}
        for variable in ds.data_vars.values():
            if set(ds["cell_area"].dims) <= set(variable.dims):
                variable.attrs.setdefault("cell_measures", "area: cell_area")
    return ds


def _climatology_time(ds: xr.Dataset, record: Mapping[str, Any] | None) -> xr.Dataset:
    """A climatological time axis (CF-1.10 section 7.4) for a field reduced over a period.

    A map of a comparison holds the mean (or trend) of one season over the years of a
    period and has no time axis left; CF describes such a field with a time axis of one
    step whose ``climatology`` bounds run from the start of the first season to the end of
    the last one (DJF starts in the December before the first label year).

    Notes
    -----
    Fields that keep a time axis, or whose ``period``/``season`` attributes (else the
    provenance's ``period`` and single season) are missing or unreadable, are returned
    unchanged.  Trend fields (units per decade) get no ``cell_methods``: CF names no
    method for a trend over years.
    """
    import cftime

    from .timeaxis import SEASONS, parse_period, parse_season

    if "time" in ds.dims or "time" in ds.variables or not ds.data_vars:
        return ds
    attrs = next(iter(ds.data_vars.values())).attrs
    seasons = list((record or {}).get("seasons") or [])
    try:
        period = parse_period(str(attrs.get("period") or (record or {}).get("period") or ""))
        season = parse_season(str(attrs.get("season") or (seasons[0] if len(seasons) == 1 else "")))
    except InputError:
        return ds
    months = SEASONS[season]
    first_year = period.start - 1 if months[0] > months[-1] else period.start  # DJF: the December before

    def month_start(year: int, month: int) -> Any:  # month may run past 12
        return cftime.datetime(year + (month - 1) // 12, (month - 1) % 12 + 1, 1, calendar="standard")

    start = month_start(first_year, months[0])
    first_end = month_start(first_year, months[0] + len(months))
    end = month_start(period.end - (1 if months[0] > months[-1] else 0), months[0] + len(months))
    units = f"days since {start.year:04d}-{start.month:02d}-01 00:00:00"
    middle = start + (first_end - start) / 2
    time = cftime.date2num([middle], units, calendar="standard")
    climatology = cftime.date2num([[start, end]], units, calendar="standard")
    out = ds.expand_dims(time=1).assign_coords(
        time=("time", time, {"standard_name": "time", "long_name": "time", "axis": "T", "units": units,
                             "calendar": "standard", "climatology": "climatology_bounds"}),
        climatology_bounds=(("time", "nv"), climatology),
    )
    for variable in out.data_vars.values():
        if "time" in variable.dims and "decade" not in str(variable.attrs.get("units", "")):
            variable.attrs.setdefault("cell_methods", "time: mean within years time: mean over years")
    return out


def _udunits_trend(ds: xr.Dataset) -> xr.Dataset:
    """Trend units per decade (``K/decade``) written as UDUNITS reads them (``K/(10 year)``).

    UDUNITS has no decade; a number times a unit in parentheses is part of its grammar.
    """
    for variable in ds.data_vars.values():
        units = str(variable.attrs.get("units", ""))
        if units.endswith("/decade"):
            variable.attrs["units"] = f"{units[: -len('/decade')]}/(10 year)"
    return ds


def _netcdf_attrs(attrs: Mapping[Any, Any]) -> dict[str, Any]:
    # NetCDF attributes hold only text and numbers: derived fields may carry None, bools or
    # dicts in .attrs, which the netCDF4 library refuses; write those as text instead.
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if value is None:
            continue
        if isinstance(value, bool):
            value = int(value)
        elif isinstance(value, (Mapping, list, tuple)) and not _numbers(value):
            value = json.dumps(value, default=str, ensure_ascii=False)
        out[str(key)] = value
    return out


def _numbers(value: Any) -> bool:
    return isinstance(value, (list, tuple)) and all(
        isinstance(v, (int, float)) and not isinstance(v, bool) for v in value
    )


def _check_nc(path: Path) -> None:
    if path.suffix.lower() != ".nc":
        raise InputError(
            f"unknown field format {path.suffix!r}" if path.suffix else "the output file has no extension",
            file=str(path),
            remedy="name the file with the extension .nc",
        )


def _netcdf_writer(ds: xr.Dataset) -> Callable[[str], None]:
    def write(target: str) -> None:
        try:
            ds.to_netcdf(target, engine="netcdf4", format="NETCDF4")
        except RuntimeError as error:
            # The netCDF-C library reports I/O failures (disk full, ...) as RuntimeError
            # "NetCDF: ..."; treat those like any other failed write, and nothing else.
            if not str(error).startswith("NetCDF:"):
                raise
            raise OSError(str(error)) from error

    return write


def write_field(
    field: xr.DataArray | xr.Dataset,
    path: str | os.PathLike[str],
    *,
    provenance: Mapping[str, Any] | None,
) -> Path:
    """Write a field as CF NetCDF (NetCDF-4) with its provenance.

    Parameters
    ----------
    field
        A DataArray (written under its name, else the provenance's ``variable``, else
        ``field``) or a Dataset.  Lazy (dask) data are computed while writing.
    path
        Target file ending in ``.nc``.
    provenance
        The record from :func:`provenance`, stored as the JSON text attribute
        ``provenance``.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    InputError
        For another extension or a missing or unwritable folder; no file is left then.

    Notes
    -----
    Variable attributes (``units``, ``standard_name``, ``long_name``, ``cell_methods``,
    ...) are kept; global attributes gain ``Conventions = "CF-1.10"``, a ``history`` line
    and ``provenance``.  cftime coordinates are encoded with their own calendar.  NaN data
    are written as the float fill value and read back as NaN.  The input is not changed.
    """
    path = Path(path)
    _check_nc(path)
    _atomic_write([(path, _netcdf_writer(_cf_dataset(field, provenance)))])
    return path


def field_bytes(field: xr.DataArray | xr.Dataset, *, provenance: Mapping[str, Any] | None) -> bytes:
    """The NetCDF file :func:`write_field` would write, as bytes (for downloads).

    Notes
    -----
    The netCDF4 library writes only to files, so the field goes through a temporary file
    that is removed afterwards.  See :func:`write_field` for attributes and NaN.
    """
    with tempfile.TemporaryDirectory(prefix="gridscore-field-") as folder:
        target = Path(folder) / "field.nc"
        write_field(field, target, provenance=provenance)
        return target.read_bytes()
