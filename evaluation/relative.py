"""Relative errors across the runs shown (Gleckler et al. 2008), with what lies behind each.

One meaning everywhere: a run's relative error is ``(E − median E) / median E``, where
``E`` is its RMSE against a reference and the median is taken over **the runs shown
together** — the runs of one command-line request, the runs ticked in a dashboard table,
the runs drawn in the overview — that hold a finite RMSE for the same reference,
variable, level, region, season and period.  Adding or removing a run changes the median
and therefore every value; the run count ``N`` travels with each value so a page can say
"median over the N runs shown".

:func:`relative_error_table` gives RMSE, median, run count, relative error and rank per
run; :func:`with_relative_errors` rewrites the ``rel_error`` rows of a tidy score table
for a chosen set of runs; :func:`run_order` ranks runs over many columns.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np
import pandas as pd

from .metrics import relative_errors

__all__ = ["GROUP_COLUMNS", "relative_error_table", "run_order", "with_relative_errors"]

#: What one comparison of runs is: the runs sharing these values share one median.
GROUP_COLUMNS: tuple[str, ...] = ("reference", "variable", "level", "region", "season", "period")


def _groups(frame: pd.DataFrame) -> list[str]:
    return [c for c in GROUP_COLUMNS if c in frame.columns]


def relative_error_table(tidy: pd.DataFrame, runs: Iterable[str] | None = None) -> pd.DataFrame:
    """Each run's RMSE, the runs' median RMSE, their count, its relative error and its rank.

    Parameters
    ----------
    tidy
        A tidy score table (:data:`evaluation.export.TIDY_COLUMNS`); only ``rmse`` rows are read.
    runs
        The runs shown together (``model`` values); ``None`` takes every model of ``tidy``.
        Other models (an alternative reference scored as if it were a run) are left out.

    Returns
    -------
    pandas.DataFrame
        One row per run and comparison: the group columns present in ``tidy``, ``model``,
        ``rmse``, ``units``, ``median_rmse``, ``runs`` (how many finite RMSEs the median is
        taken over), ``rel_error`` and ``rank`` (1 = smallest RMSE; equal RMSEs share the
        smaller rank; NaN where the RMSE is missing).

    Notes
    -----
    The values are :func:`evaluation.metrics.relative_errors` of each group; a run without
    a finite RMSE keeps NaN and does not count in ``runs``.
    """
    keys = _groups(tidy)
    rmse = tidy[tidy["metric"] == "rmse"]
    if runs is not None:
        rmse = rmse[rmse["model"].isin(list(runs))]
    columns = [*keys, "model", "rmse", "units", "median_rmse", "runs", "rel_error", "rank"]
    if rmse.empty:
        return pd.DataFrame(columns=columns)
    parts = []
    for _, block in rmse.groupby(keys, sort=False, dropna=False):
        values = dict(zip(block["model"], block["value"].astype("float64"), strict=True))
        rel = relative_errors(values)
        finite = np.array([v for v in values.values() if np.isfinite(v)], dtype="float64")
        part = block[[*keys, "model"]].copy()
        part["rmse"] = block["value"].astype("float64").to_numpy()
        part["units"] = block["units"].to_numpy() if "units" in block.columns else ""
        part["median_rmse"] = float(np.median(finite)) if finite.size else float("nan")
        part["runs"] = int(finite.size)
        part["rel_error"] = [rel[m] for m in part["model"]]
        part["rank"] = part["rmse"].rank(method="min", na_option="keep")
        parts.append(part)
    return pd.concat(parts, ignore_index=True)[columns]


def with_relative_errors(tidy: pd.DataFrame, runs: Iterable[str]) -> pd.DataFrame:
    """``tidy`` with its ``rel_error`` rows relative to the median RMSE of ``runs`` only.

    Rows of models outside ``runs`` (alternative references scored as runs) get their RMSE
    relative to the same median, as :meth:`evaluation.scoring.Comparison.scores` does.
    A group where no run of ``runs`` has a finite RMSE gets NaN.
    """
    runs = list(runs)
    keys = _groups(tidy)
    out = tidy.copy()
    table = relative_error_table(tidy, runs)
    medians = table.drop_duplicates(keys)[[*keys, "median_rmse"]] if not table.empty else pd.DataFrame(columns=[*keys, "median_rmse"])
    rmse = tidy[tidy["metric"] == "rmse"][[*keys, "model", "value"]].rename(columns={"value": "rmse"})
    merged = rmse.merge(medians, on=keys, how="left")
    median = merged["median_rmse"].astype("float64")
    merged["rel"] = np.where(median > 0, (merged["rmse"].astype("float64") - median) / median.where(median > 0), np.nan)
    lookup = {tuple(row[:-1]): row[-1] for row in merged[[*keys, "model", "rel"]].itertuples(index=False, name=None)}
    is_rel = out["metric"] == "rel_error"
    out.loc[is_rel, "value"] = [
        float(lookup.get(tuple(row), np.nan)) for row in out.loc[is_rel, [*keys, "model"]].itertuples(index=False, name=None)
    ]
    return out


def run_order(table: pd.DataFrame) -> list[str]:
    """Runs ordered best first by their median relative error over the columns they hold.

    ``table`` is :func:`relative_error_table` output (any number of variables, seasons,
    regions).  Equal medians keep the name order; runs without a finite value come last.
    """
    if table.empty:
        return []
    summary = table.groupby("model", sort=False)["rel_error"].median()
    finite = summary[np.isfinite(summary.to_numpy(dtype="float64"))]
    missing = sorted(m for m in summary.index if m not in finite.index)
    ordered = sorted(finite.index, key=lambda m: (float(finite[m]), str(m)))
    return [*ordered, *missing]
