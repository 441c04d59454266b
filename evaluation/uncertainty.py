"""Observational uncertainty: how far apart the references are, and which run differences it swallows.

With several references for one variable, every run is scored against each (see
:class:`evaluation.scoring.Comparison`, ``alternatives=``).  A run's score then has a
range across the references; a difference between two runs that the choice of reference
alone could produce or reverse is not evidence that one run is better.  :data:`RULE` is
the one rule gridscore applies (the CLI's provenance, the dashboard and the README quote
it); :func:`within_observational_uncertainty` decides one case, :func:`run_pairs` every pair
of runs of a tidy table.
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import combinations

import numpy as np
import pandas as pd

from .metrics import METRICS

__all__ = ["RULE", "IDEAL_DISTANCE", "distance_from_ideal", "within_observational_uncertainty", "reference_range", "run_pairs", "tied_with"]

#: The rule in one paragraph, as the page, the provenance and the README state it.
RULE = (
    "Two runs' values of a metric are within observational uncertainty of each other when the "
    "choice of reference could decide between them: either their order (which is nearer the ideal "
    "value: 0 for bias and errors, 1 for correlation and ratios) is not the same against every "
    "reference, or their difference against the primary reference is no larger than the larger of "
    "the two runs' ranges of that metric across all references. With one reference nothing is known "
    "about observational uncertainty and nothing is marked."
)

#: How far a value is from the metric's ideal, by the registry's ``best`` rule: the rule
#: compares these distances (a bias of -0.3 is worse than one of +0.2). Metrics without a
#: better direction (means, trends, p-values) are compared as they are.
IDEAL_DISTANCE = {
    "low": lambda v: v,
    "high": lambda v: -v,
    "zero": np.abs,
    "one": lambda v: np.abs(v - 1.0),
    None: lambda v: v,
}


def distance_from_ideal(values: Sequence[float] | np.ndarray, metric: str) -> np.ndarray:
    """Values of ``metric`` turned so that smaller is better (see :data:`IDEAL_DISTANCE`).

    Notes
    -----
    NaN stays NaN; an unknown metric is compared as it is.
    """
    rule = METRICS[metric].best if metric in METRICS else None
    return np.asarray(IDEAL_DISTANCE[rule](np.asarray(values, dtype="float64")), dtype="float64")


def within_observational_uncertainty(a: Sequence[float], b: Sequence[float], metric: str | None = None) -> bool | None:
    """Whether two runs' values of one metric are within observational uncertainty (:data:`RULE`).

    Parameters
    ----------
    a, b
        The metric of run A and of run B against each reference, in the same order, the
        primary reference first.
    metric
        A metric of :data:`evaluation.metrics.METRICS` (its ``best`` rule turns values into
        distances from the ideal); ``None`` compares the values as they are.

    Returns
    -------
    bool or None
        ``None`` when it cannot be decided: fewer than two references, or a NaN among the
        values.

    Notes
    -----
    With ``g`` the distance from the ideal, ``d = |g(A₁) − g(B₁)|`` against the primary and
    ``s = max(range g(A), range g(B))`` across the references, the difference is within
    observational uncertainty when ``d ≤ s`` or when ``g(A) − g(B)`` does not keep one
    strict sign against every reference.  For the RMSE the range of a run across
    references is at most the RMSE between the references (triangle inequality of the
    weighted L2 norm), so the rule is never looser than comparing ``d`` with the
    references' RMSE against each other.
    """
    ga = distance_from_ideal(a, metric) if metric else np.asarray(a, dtype="float64")
    gb = distance_from_ideal(b, metric) if metric else np.asarray(b, dtype="float64")
    if ga.shape != gb.shape or ga.size < 2 or not (np.isfinite(ga).all() and np.isfinite(gb).all()):
        return None
    diff = ga - gb
    order_kept = bool((diff > 0).all() or (diff < 0).all())
    spread = max(float(ga.max() - ga.min()), float(gb.max() - gb.min()))
    return (not order_kept) or abs(float(diff[0])) <= spread


_KEYS = ["variable", "level", "region", "season", "period", "metric"]


def reference_range(table: pd.DataFrame) -> pd.DataFrame:
    """The range of every run's metrics across references.

    Parameters
    ----------
    table
        A tidy score table (:data:`evaluation.export.TIDY_COLUMNS`).

    Returns
    -------
    DataFrame
        One row per model, variable, level, region, season, period and metric with
        ``minimum``, ``maximum``, ``range`` and ``references`` (how many references
        scored it).

    Notes
    -----
    NaN values are left out (a metric with no finite value has NaN range).  Rows of an
    alternative reference scored against the primary form a group of their own (one
    reference: range 0).
    """
    groups = table.groupby(["model", *_KEYS], sort=False, dropna=False)["value"]
    out = groups.agg(minimum="min", maximum="max", references="count").reset_index()
    out["range"] = out["maximum"] - out["minimum"]
    return out


def run_pairs(table: pd.DataFrame, *, primary: str) -> pd.DataFrame:
    """Every pair of runs scored against every reference, with the rule's verdict.

    Parameters
    ----------
    table
        A tidy score table holding rows against several references.
    primary
        The primary reference's name; the runs are the models scored against it that are
        not references themselves.

    Returns
    -------
    DataFrame
        Columns ``model_a model_b variable level region season period metric difference
        spread order_kept within``: ``difference`` is A minus B against the primary
        (raw values), ``spread`` the larger of the two runs' ranges of the distance from
        the ideal across references, ``within`` the verdict of
        :func:`within_observational_uncertainty` (``None`` when undecided).

    Notes
    -----
    Only references that scored both runs enter; a pair with fewer than two such
    references is undecided.  An empty frame (with the columns) when there are fewer
    than two runs.
    """
    references = [primary, *[r for r in dict.fromkeys(table["reference"]) if r != primary]]
    runs = [m for m in dict.fromkeys(table.loc[table["reference"] == primary, "model"]) if m not in references]
    wide = table[table["model"].isin(runs)].pivot_table(index=["model", *_KEYS], columns="reference", values="value", sort=False, dropna=False)
    wide = wide.reindex(columns=[r for r in references if r in wide.columns])
    rows = []
    for keys, block in wide.groupby(level=list(range(1, len(_KEYS) + 1)), sort=False, dropna=False):
        block = block.droplevel(list(range(1, len(_KEYS) + 1)))
        for a, b in combinations([r for r in runs if r in block.index], 2):
            va, vb = block.loc[a].to_numpy(dtype="float64"), block.loc[b].to_numpy(dtype="float64")
            both = np.isfinite(va) & np.isfinite(vb)
            metric = keys[-1]
            verdict = within_observational_uncertainty(va[both], vb[both], metric) if both[0] else None
            ga, gb = distance_from_ideal(va[both], metric), distance_from_ideal(vb[both], metric)
            spread = max(float(np.ptp(ga)), float(np.ptp(gb))) if both.sum() >= 2 else float("nan")
            diff = ga - gb
            rows.append((a, b, *keys, float(va[0] - vb[0]), spread, bool((diff > 0).all() or (diff < 0).all()), verdict))
    return pd.DataFrame(rows, columns=["model_a", "model_b", *_KEYS, "difference", "spread", "order_kept", "within"])


def tied_with(pairs: pd.DataFrame, best: set[str] | frozenset[str]) -> set[str]:
    """The runs within observational uncertainty of any run in ``best`` (themselves excluded).

    ``pairs`` are rows of :func:`run_pairs` for one metric and one case (variable, level,
    region, season, period); undecided pairs tie nothing.
    """
    tied = pairs.loc[pairs["within"].map(lambda v: v is True).astype(bool)]
    close = {b for a, b in zip(tied["model_a"], tied["model_b"], strict=True) if a in best}
    close |= {a for a, b in zip(tied["model_a"], tied["model_b"], strict=True) if b in best}
    return close - set(best)
