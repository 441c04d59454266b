"""Ensembles: runs grouped as members of one model's ensemble.

An ensemble is a name and two or more member runs (``ensemble = "name"`` on each member in
a manifest, ``--ensemble NAME=MEMBER1,MEMBER2`` on the command line).  For an ensemble a
:class:`~evaluation.scoring.Comparison` gives

- every member's scores, as for any run;
- the scores of the **ensemble-mean field**, a source of its own called
  ``"<name> (ensemble mean)"`` (:func:`mean_name`): the members' mean is taken before
  scoring, so its RMSE is not the mean of the members' RMSEs;
- the spread of each member metric across the members as tidy rows of their own, with
  the same metric names and units: model ``"<name> (members' min)"``, ``"<name> (members'
  max)"`` and ``"<name> (members' std)"`` (:func:`spread_name`; the standard deviation is
  the sample one, ddof = 1, over the members that have a value).

The ensemble-mean field is defined on the common target grid after the time reduction:
each member is reduced to yearly season means (and a monthly climatology) on its own
calendar, remapped onto the target grid, and the members' values are averaged cell by cell
and year by year.  Both steps are linear, so this equals the reduction of a member-mean
field wherever such a field exists (members on one grid and calendar) — provided every
member covers the same years and a cell's missing-value mask does not change in time.
Members whose complete years differ are refused; a cell missing in any member is missing
in the mean.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from .errors import InputError
from .names import name_problem, printable, same_name

if TYPE_CHECKING:  # pragma: no cover
    import pandas as pd

    from .scoring import Comparison

__all__ = [
    "Ensemble",
    "MEAN_SUFFIX",
    "SPREAD_STATS",
    "attach",
    "check_ensembles",
    "ensemble_rows",
    "fill_means",
    "mean_name",
    "parse_ensemble_arg",
    "spread_name",
    "spread_rows",
]

MEAN_SUFFIX = " (ensemble mean)"
#: statistic -> the suffix of the rows holding it
SPREAD_STATS = {"min": " (members' min)", "max": " (members' max)", "std": " (members' std)"}


@dataclass(frozen=True)
class Ensemble:
    """An ensemble's name and its member runs, in order."""

    name: str
    members: tuple[str, ...]


def mean_name(ensemble: str) -> str:
    """The name of an ensemble's mean field as a source: ``"<ensemble> (ensemble mean)"``."""
    return f"{ensemble}{MEAN_SUFFIX}"


def spread_name(ensemble: str, stat: str) -> str:
    """The ``model`` of the rows holding one spread statistic (``min``, ``max``, ``std``)."""
    return f"{ensemble}{SPREAD_STATS[stat]}"


def ensemble_rows(ensemble: str) -> tuple[str, ...]:
    """Every ``model`` value an ensemble adds beside its members: the mean, then the spread."""
    return (mean_name(ensemble), *(spread_name(ensemble, s) for s in SPREAD_STATS))


def parse_ensemble_arg(text: str) -> Ensemble:
    """``NAME=MEMBER1,MEMBER2[,...]`` (the members are ``--model`` names)."""
    name, sep, members = text.partition("=")
    parts = tuple(dict.fromkeys(m.strip() for m in members.split(",") if m.strip()))
    if not sep or not name.strip():
        raise InputError(f"'{text}' is not NAME=MEMBER1,MEMBER2", remedy="write --ensemble NAME=RUN1,RUN2 with the --model names of its members")
    return Ensemble(name.strip(), parts)


def check_ensembles(ensembles: Iterable[Ensemble], models: Sequence[str], *, others: Sequence[str] = (), where: Any = None) -> tuple[Ensemble, ...]:
    """Refuse ensembles that cannot be read exactly; return them as a tuple.

    Each needs a printable name of its own (not a source's, not another ensemble's) and at
    least two members, each a run of ``models`` and a member of one ensemble only.
    """
    result = tuple(ensembles)
    taken = {same_name(n) for n in (*models, *others)}
    seen_names: set[str] = set()
    member_of: dict[str, str] = {}
    for ens in result:
        problem = name_problem(ens.name)
        if problem:
            raise InputError(f"the name of ensemble '{printable(ens.name)}' {problem}", file=where, remedy="give each ensemble a short printable name")
        if same_name(ens.name) in taken or same_name(ens.name) in seen_names:
            raise InputError(f"the ensemble name '{ens.name}' is already the name of a source or another ensemble", file=where,
                             remedy="give the ensemble a name of its own")
        seen_names.add(same_name(ens.name))
        unknown = [m for m in ens.members if m not in models]
        if unknown:
            raise InputError(f"ensemble '{ens.name}' names '{unknown[0]}', which is not a run", file=where,
                             remedy=f"its members must be runs: {', '.join(models) or 'none given'}")
        if len(ens.members) < 2:
            raise InputError(f"ensemble '{ens.name}' has {len(ens.members)} member", file=where, remedy="an ensemble needs at least two member runs")
        for m in ens.members:
            if m in member_of:
                raise InputError(f"run '{m}' is a member of two ensembles ('{member_of[m]}' and '{ens.name}')", file=where,
                                 remedy="make each run a member of one ensemble at most")
            member_of[m] = ens.name
    return result


# ---------------------------------------------------------------------------- inside a Comparison


def attach(cmp: Comparison, ensembles: Sequence[Ensemble]) -> None:
    """Add each ensemble's mean as a source of ``cmp`` (called at the end of its constructor).

    Raises
    ------
    InputError
        Members whose complete years differ, or of different time kinds (monthly against
        annual): their mean would mix different years or seasons.

    Notes
    -----
    A member the comparison left out (unreadable, not covering the period) leaves the
    ensemble mean out too, as an omission with the reason: a mean over fewer members is
    another quantity.  The members are scored as runs in any case.
    """
    from .scoring import Source, _Prepared

    check_ensembles(ensembles, [m.name for m in cmp.models] + [o["source"] for o in cmp.omissions if o["season"] == "all"],
                    others=[cmp.reference.name, *(a.name for a in cmp.alternatives)])
    cmp.ensembles = list(ensembles)
    for ens in ensembles:
        name = mean_name(ens.name)
        lost = [m for m in ens.members if m not in cmp._prepared]
        if lost:
            cmp._omit(name, "all", f"member '{lost[0]}' could not be used, and a mean over fewer members is another quantity")
            continue
        preps = [cmp._prepared[m] for m in ens.members]
        kinds = {p.kind for p in preps}
        spans = {str(p.span) for p in preps}
        files = [f for p in preps for f in p.files]
        if len(kinds) > 1:
            raise InputError(f"the members of ensemble '{ens.name}' hold different kinds of time series ({', '.join(sorted(kinds))})",
                             file=files, remedy="give every member monthly means")
        if len(spans) > 1:
            detail = ", ".join(f"{m} {p.span}" for m, p in zip(ens.members, preps, strict=True))
            raise InputError(f"the members of ensemble '{ens.name}' cover different years ({detail})", file=files,
                             remedy="give every member the same years, or score the members as separate runs")
        members = [cmp._sources[m] for m in ens.members]
        source = Source(name=name, role="model", paths=tuple(p for m in members for p in m.paths))
        cmp._sources[name] = source
        cmp._prepared[name] = _Prepared(monthly=preps[0].monthly, span=preps[0].span, files=files, kind=preps[0].kind, members=ens.members)
        cmp._used[name] = sorted({f for m in ens.members for f in cmp._used.get(m, [])})
        cmp.models.append(source)


def fill_means(cmp: Comparison, seasons: Iterable[str], cycle: bool) -> None:
    """Average the members' reductions (already on the target grid) into each ensemble mean.

    A season a member lacks is lacking in the mean (an omission naming the member); the
    year coordinates of the members must agree, which :func:`attach` ensured through their
    complete years.
    """

    for name, prep in list(cmp._prepared.items()):
        if not prep.members:
            continue
        members = [cmp._prepared[m] for m in prep.members]
        for season in seasons:
            if season in prep.seasons or cmp._omitted(name, season) is not None:
                continue
            missing = next((m for m, p in zip(prep.members, members, strict=True) if season not in p.seasons), None)
            if missing is not None:
                cmp._omit(name, season, f"member '{missing}' has no {season} values")
                continue
            prep.seasons[season] = _mean([p.seasons[season] for p in members], "year", name)
        if cycle and prep.cycle is None and all(p.cycle is not None for p in members):
            prep.cycle = _mean([p.cycle for p in members], "month", name)


def _mean(parts: list, dim: str, name: str):
    """The cell-by-cell mean of the members' arrays; NaN where any member has NaN."""
    import xarray as xr

    first = parts[0]
    for other in parts[1:]:
        if not (other[dim].size == first[dim].size and (other[dim].values == first[dim].values).all()):
            raise InputError(f"the members of '{name}' have different {dim}s after the time reduction",
                             remedy="give every member the same years")
    stacked = xr.concat([p.drop_vars([c for c in p.coords if c not in first.coords], errors="ignore") for p in parts], dim="member",
                        coords="minimal", compat="override", join="override")
    out = stacked.mean("member", skipna=False)
    out.attrs = dict(first.attrs)
    return out


def spread_rows(table: pd.DataFrame, ensembles: Sequence[Ensemble]) -> pd.DataFrame:
    """Rows of the members' min, max and sample standard deviation of every metric
    but the bootstrap intervals (:data:`evaluation.bootstrap.INTERVAL_METRICS`).

    Grouped by reference, variable, level, region, season, period and metric; a member
    without a value (NaN) is left out of its group, and a group with one member value has
    a NaN standard deviation.
    """
    import numpy as np
    import pandas as pd

    from .bootstrap import INTERVAL_METRICS

    keys = ["reference", "variable", "level", "region", "season", "period", "metric"]
    out = []
    for ens in ensembles:
        # the members' min of an interval's end is no interval: such rows would be read as
        # one (and a spread row marked "best"), so the interval metrics have no spread rows
        part = table[table["model"].isin(ens.members) & ~table["metric"].isin(INTERVAL_METRICS)]
        if part.empty:
            continue
        grouped = part.groupby(keys, sort=False, dropna=False)
        stats = grouped["value"].agg(
            min="min", max="max", std=lambda v: float(np.std(v.dropna(), ddof=1)) if v.notna().sum() > 1 else float("nan")
        )
        units = grouped["units"].first()
        for stat in SPREAD_STATS:
            rows = stats[stat].rename("value").reset_index()
            rows["units"] = units.to_numpy()
            rows.insert(0, "model", spread_name(ens.name, stat))
            out.append(rows)
    if not out:
        return table.iloc[0:0]
    return pd.concat(out, ignore_index=True)[list(table.columns)]


def from_mapping(mapping: Mapping[str, Sequence[str]]) -> tuple[Ensemble, ...]:
    """``{"ens": ["m1", "m2"]}`` -> Ensemble objects, in order."""
    return tuple(Ensemble(name, tuple(members)) for name, members in mapping.items())
