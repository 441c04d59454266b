"""A collection of sources: model runs and references named in a TOML manifest.

A manifest is a small, human-editable TOML file::

    title = "My comparison"
    description = "Three runs against two references"
    target_grid = "2.5x2.5"         # optional: reference (default), a source's name, or a spacing

    [[source]]
    name = "run-a"
    role = "model"                  # "model" or "reference"
    paths = ["runs/run-a/*.nc"]     # files or globs, relative to the manifest's folder
    colour = "#1f77b4"              # optional
    description = "control run"     # optional
    variables = { tas = "TS" }      # optional: this source's files store tas as TS

    [[source]]
    name = "obs-b"
    role = "reference"
    paths = ["refs/obs-b/*.nc"]
    reference_for = ["tas"]         # optional: the variables this reference serves, see below

A run may carry ``ensemble = "name"``: the runs sharing a name are the members of that
ensemble (at least two; the name is not a source's).  Their ensemble mean and the spread
of their scores are computed beside the members' own (:mod:`evaluation.ensembles`,
:meth:`Collection.ensembles_of`).

A variable is compared with every reference that holds it: first, in manifest order, the
references whose ``reference_for`` lists it, then those without ``reference_for``; a
reference whose ``reference_for`` does not list the variable is not used for it.  The
first is the primary reference, the others alternative references
(:meth:`Collection.references_for`).

A folder without a manifest is read by its layout: every sub-folder of
``DIR/references/`` is a reference and every sub-folder of ``DIR/runs/`` a model run,
each holding its ``*.nc`` files.  The manifest is the only way a collection names files.
"""

from __future__ import annotations

import glob
import os
import re
import tomllib
from collections.abc import Sequence
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

from . import io
from .ensembles import Ensemble, check_ensembles
from .errors import InputError
from .grids.target import parse_target_grid
from .names import UNSAFE, name_problem, printable, same_name
from .scoring import Source

__all__ = ["Collection", "MANIFEST_NAME", "ROLES", "Source"]

MANIFEST_NAME = "manifest.toml"
ROLES = ("model", "reference")
# the folder layout read when there is no manifest: sub-folder -> role
LAYOUT = {"references": "reference", "runs": "model"}
_SOURCE_KEYS = ("name", "role", "paths", "colour", "description", "variables", "reference_for", "ensemble")
_TOP_KEYS = ("title", "description", "target_grid", "source")
# '#rgb' / '#rrggbb' or a CSS colour word such as 'teal'
_COLOUR = re.compile(r"^(#[0-9a-fA-F]{3}|#[0-9a-fA-F]{6}|[a-zA-Z]{3,20})$")
_CONTROL = re.compile(r"[\x00-\x1f\x7f]")


@dataclass(frozen=True)
class Collection:
    """Model runs and references to compare, read from a manifest or a folder.

    Parameters
    ----------
    title
        A short name for the collection.
    description
        Free text.
    root
        The folder that relative paths in the manifest start from.
    sources
        The sources in manifest order; names are unique.
    """

    title: str
    description: str
    root: Path
    sources: tuple[Source, ...]
    target_grid: str = "reference"
    #: reference name -> the variables its ``reference_for`` lists (references without it are absent)
    reference_for: tuple[tuple[str, tuple[str, ...]], ...] = ()
    #: ensemble name -> its member runs, in manifest order (``ensemble = "name"`` on each member)
    ensembles: tuple[tuple[str, tuple[str, ...]], ...] = ()

    @classmethod
    def from_path(cls, path: str | os.PathLike[str]) -> Collection:
        """Read a manifest file, a folder holding ``manifest.toml``, or a folder laid out
        as ``references/<name>/*.nc`` and ``runs/<name>/*.nc``.

        Raises
        ------
        InputError
            A missing path, a TOML syntax error, an unknown key or role, a source without
            paths, a duplicate name, a glob that matches no file, or a folder with neither
            a manifest nor the layout.

        Notes
        -----
        Every glob is checked to match at least one file; the sources keep the absolute
        patterns (not the matches), so files added later are found when they are opened.
        """
        target = Path(path).expanduser()
        if target.is_dir():
            manifest = target / MANIFEST_NAME
            return cls._from_manifest(manifest) if manifest.is_file() else cls._from_layout(target)
        if target.is_file():
            return cls._from_manifest(target)
        raise InputError(
            "no such manifest or folder",
            file=target,
            remedy=f"give a {MANIFEST_NAME} file or a folder holding one",
        )

    @classmethod
    def _from_manifest(cls, manifest: Path) -> Collection:
        try:
            with manifest.open("rb") as stream:
                table = tomllib.load(stream)
        except tomllib.TOMLDecodeError as err:
            raise InputError(
                f"the manifest is not valid TOML ({err})",
                file=manifest,
                remedy="fix the syntax; strings need double quotes, lists square brackets",
            ) from None
        except (OSError, UnicodeDecodeError) as err:
            raise InputError(
                f"cannot read the manifest ({err})",
                file=manifest,
                remedy="check that it is a readable UTF-8 text file",
            ) from None
        unknown = sorted(set(table) - set(_TOP_KEYS))
        if unknown:
            raise InputError(
                f"unknown key {unknown[0]!r} in the manifest",
                file=manifest,
                remedy=f"use only {', '.join(_TOP_KEYS)} at the top (each source is a [[source]] table)",
            )
        entries = table.get("source", [])
        if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
            raise InputError(
                "'source' must be a list of tables",
                file=manifest,
                remedy="write each source as a [[source]] table",
            )
        if not entries:
            raise InputError(
                "the manifest names no source",
                file=manifest,
                remedy="add at least one [[source]] table with name, role and paths",
            )
        root = manifest.resolve().parent
        sources = tuple(
            _source_from_table(entry, index, root, manifest) for index, entry in enumerate(entries)
        )
        _check_unique(sources, manifest)
        marks = tuple((s.name, _reference_for(entry, s, manifest)) for entry, s in zip(entries, sources, strict=True) if "reference_for" in entry)
        ensembles = _ensembles(entries, sources, manifest)
        target_grid = _text(table, "target_grid", manifest, default="reference").strip() or "reference"
        try:
            target_grid = parse_target_grid(target_grid, sources=[s.name for s in sources]).text
        except InputError as err:
            raise InputError(f"target_grid: {err.problem}", file=manifest, remedy=err.remedy) from None
        return cls(
            title=_text(table, "title", manifest, default=root.name),
            description=_text(table, "description", manifest, default=""),
            root=root,
            sources=sources,
            target_grid=target_grid,
            reference_for=marks,
            ensembles=ensembles,
        )

    @classmethod
    def _from_layout(cls, folder: Path) -> Collection:
        root = folder.resolve()
        sources = []
        for sub, role in LAYOUT.items():
            parent = root / sub
            if not parent.is_dir():
                continue
            for child in sorted(p for p in parent.iterdir() if p.is_dir()):
                # a folder name is not a pattern: '[' or '*' in it must match itself
                problem = name_problem(child.name)
                if problem:
                    raise InputError(f"the folder name, used as the source's name, {problem}", file=printable(child),
                                     remedy="rename the folder")
                pattern = os.path.join(glob.escape(str(child)), "*.nc")
                io.expand_paths(pattern, source=child.name)  # refuses a folder without files
                sources.append(Source(name=child.name, role=role, paths=(pattern,)))
        if not sources:
            raise InputError(
                f"the folder has no {MANIFEST_NAME} and no references/<name>/ or runs/<name>/ sub-folders",
                file=root,
                remedy=f"write a {MANIFEST_NAME} or put each source's *.nc files in runs/<name>/ or references/<name>/",
            )
        result = tuple(sources)
        _check_unique(result, root)
        return cls(title=root.name, description="", root=root, sources=result)

    @property
    def models(self) -> tuple[Source, ...]:
        """The model runs, in manifest order."""
        return tuple(s for s in self.sources if s.role == "model")

    @property
    def references(self) -> tuple[Source, ...]:
        """The references, in manifest order."""
        return tuple(s for s in self.sources if s.role == "reference")

    def references_for(self, variable: str) -> tuple[Source, ...]:
        """The references to use for ``variable``, the primary first.

        Notes
        -----
        Those whose ``reference_for`` lists the variable (manifest order), then those
        without ``reference_for``.  Whether a reference's files hold the variable is not
        checked here (only headers tell; the dashboard filters by them).
        """
        marked = dict(self.reference_for)
        first = [s for s in self.references if variable in marked.get(s.name, ())]
        rest = [s for s in self.references if s.name not in marked]
        return (*first, *rest)

    def ensembles_of(self, runs: Sequence[str] | None = None) -> tuple[Ensemble, ...]:
        """The ensembles of the collection, each with the members among ``runs`` (all when None).

        An ensemble left with fewer than two of its members is not returned: its members
        are then plain runs.
        """
        wanted = None if runs is None else set(runs)
        out = []
        for name, members in self.ensembles:
            kept = tuple(m for m in members if wanted is None or m in wanted)
            if len(kept) >= 2:
                out.append(Ensemble(name, kept))
        return tuple(out)

    def ensemble_of(self, run: str) -> str | None:
        """The ensemble ``run`` is a member of, or None."""
        return next((name for name, members in self.ensembles if run in members), None)

    def source(self, name: str) -> Source:
        """The source called ``name``; InputError names the known ones otherwise."""
        for src in self.sources:
            if src.name == name:
                return src
        raise InputError(
            f"no source called {name!r} in the collection",
            file=self.root,
            remedy=f"choose one of {', '.join(s.name for s in self.sources)}",
        )

    def variables(self) -> list[str]:
        """Sorted names of the time-varying gridded variables that at least one model run
        and at least one reference hold.

        Notes
        -----
        Only file headers are read (through :func:`evaluation.io.variables_in`, which also
        caches them by file identity); the answer is kept on the instance.  Fixed fields
        without a time axis (land fraction, cell area) are left out: they are not
        compared.  An empty list means no variable is shared.
        """
        return list(self._shared_variables)

    @cached_property
    def _shared_variables(self) -> tuple[str, ...]:
        # cached_property writes to the instance __dict__, which a frozen dataclass allows
        def held(sources: tuple[Source, ...]) -> set[str]:
            names: set[str] = set()
            for src in sources:
                listing = io.variables_in(io.expand_paths(src.paths, source=src.name))
                timed = {n: meta for n, meta in listing.items() if meta.get("has_time") != "False"}
                names.update(timed)
                # a variable the manifest says is stored under another name (or standard_name) counts as held
                stored_as = set(timed) | {meta.get("standard_name", "") for meta in timed.values()}
                names.update(wanted for wanted, stored in src.variables.items() if stored in stored_as)
            return names

        return tuple(sorted(held(self.models) & held(self.references)))


def _text(table: dict, key: str, where: Path, *, default: str, context: str = "the manifest") -> str:
    value = table.get(key, default)
    if not isinstance(value, str):
        raise InputError(
            f"{key!r} in {context} must be a string, not {type(value).__name__}",
            file=where,
            remedy=f'write it in double quotes, e.g. {key} = "..."',
        )
    return value


def _source_from_table(entry: dict, index: int, root: Path, manifest: Path) -> Source:
    """One [[source]] table -> a Source with absolute path patterns."""
    label = f"source #{index + 1}"
    unknown = sorted(set(entry) - set(_SOURCE_KEYS))
    if unknown:
        raise InputError(
            f"unknown key {unknown[0]!r} in {label}",
            file=manifest,
            remedy=f"the keys of a source are {', '.join(_SOURCE_KEYS)}",
        )
    if "name" not in entry:
        raise InputError(f"{label} has no name", file=manifest, remedy='add name = "..."')
    name = _text(entry, "name", manifest, default="", context=label).strip()
    problem = name_problem(name)
    if problem:
        raise InputError(
            f"the name of {label} {problem}",
            file=manifest,
            remedy="give each source a short printable name",
        )
    label = f"source {name!r}"
    role = entry.get("role")
    if role not in ROLES:
        raise InputError(
            f"{label} has role {role!r}", file=manifest, remedy='set role = "model" or role = "reference"'
        )
    paths = entry.get("paths")
    if isinstance(paths, str):
        paths = [paths]
    if not isinstance(paths, list) or not paths or not all(isinstance(p, str) and p.strip() for p in paths):
        raise InputError(
            f"{label} has no paths",
            file=manifest,
            remedy='add paths = ["folder/*.nc"] (files or globs, relative to the manifest)',
        )
    patterns = tuple(_absolute(p, root) for p in paths)
    for pattern in patterns:
        try:
            io.expand_paths(pattern, source=name)
        except InputError as err:
            raise InputError(
                f"{label}: {err.problem} ({pattern})", file=manifest, remedy=err.remedy or "check the path"
            ) from None
    colour = entry.get("colour")
    if colour is not None and (not isinstance(colour, str) or not _COLOUR.match(colour.strip())):
        raise InputError(
            f"{label} has colour {colour!r}",
            file=manifest,
            remedy='write a colour as "#rrggbb" (or "#rgb", or a CSS colour name)',
        )
    return Source(
        name=name,
        role=role,
        paths=patterns,
        colour=None if colour is None else colour.strip(),
        description=_text(entry, "description", manifest, default="", context=label),
        variables=_names_in_files(entry, label, manifest),
    )


def _reference_for(entry: dict, source: Source, manifest: Path) -> tuple[str, ...]:
    """``reference_for = ["tas", "pr"]``: the variables a reference serves."""
    value = entry["reference_for"]
    label = f"source {source.name!r}"
    if source.role != "reference":
        raise InputError(f"{label} is a model run but has reference_for", file=manifest, remedy='remove reference_for, or set role = "reference"')
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not value or not all(isinstance(v, str) and v.strip() and not _CONTROL.search(v) for v in value):
        raise InputError(
            f"{label} has reference_for that is not a list of variable names",
            file=manifest,
            remedy='write reference_for = ["tas", "pr"]',
        )
    return tuple(dict.fromkeys(v.strip() for v in value))


def _ensembles(entries: list[dict], sources: tuple[Source, ...], manifest: Path) -> tuple[tuple[str, tuple[str, ...]], ...]:
    """``ensemble = "name"`` on runs -> (name, members) in manifest order, checked."""
    groups: dict[str, list[str]] = {}
    for entry, src in zip(entries, sources, strict=True):
        if "ensemble" not in entry:
            continue
        value = entry["ensemble"]
        if src.role != "model":
            raise InputError(f"source {src.name!r} is a reference but has ensemble", file=manifest,
                             remedy='remove ensemble, or set role = "model"')
        if not isinstance(value, str) or not value.strip() or _CONTROL.search(value):
            raise InputError(f"source {src.name!r} has ensemble {value!r}", file=manifest,
                             remedy='write ensemble = "name" (a short printable name shared by the members)')
        groups.setdefault(value.strip(), []).append(src.name)
    result = tuple((name, tuple(members)) for name, members in groups.items())
    check_ensembles(
        (Ensemble(name, members) for name, members in result),
        [s.name for s in sources if s.role == "model"],
        others=[s.name for s in sources if s.role != "model"],
        where=manifest,
    )
    return result


def _names_in_files(entry: dict, label: str, manifest: Path) -> dict[str, str]:
    """``variables = { tas = "TS" }``: compared variable -> the name the source's files use."""
    table = entry.get("variables", {})
    if not isinstance(table, dict) or not all(
        isinstance(k, str) and k.strip() and isinstance(v, str) and v.strip() and not _CONTROL.search(k + v) for k, v in table.items()
    ):
        raise InputError(
            f"{label} has variables that are not a table of names",
            file=manifest,
            remedy='write variables = { tas = "TS" } (the compared variable = the name in this source\'s files)',
        )
    wanted = {k.strip(): v.strip() for k, v in table.items()}
    for name in wanted:
        # the compared variable's name names the variable of the dashboard's NetCDF downloads
        if not _NETCDF_NAME.fullmatch(name) or UNSAFE.search(name):
            raise InputError(
                f"{label} compares a variable named {name!r}, which a NetCDF file cannot hold",
                file=manifest,
                remedy="name the compared variable with letters, digits and '_' (CF conventions 2.3), e.g. variables = { tas = \"TS\" }",
            )
    return wanted


#: A name a NetCDF file can hold (netCDF-C: no '/', no control characters, not starting with
#: a sign or a space); the characters HTML, LaTeX and formulas treat specially are left out
#: too, as CF conventions 2.3 recommend letters, digits and underscores.
_NETCDF_NAME = re.compile(r"[A-Za-z0-9_\u0080-\U0010ffff][A-Za-z0-9_.@+\-\u0080-\U0010ffff]*")


def _absolute(pattern: str, root: Path) -> str:
    """A manifest path made absolute: relative ones start at the manifest's folder."""
    text = os.path.expanduser(pattern.strip())
    return text if os.path.isabs(text) else os.path.normpath(os.path.join(root, text))


def _check_unique(sources: tuple[Source, ...], where: Path) -> None:
    seen: set[str] = set()
    for src in sources:
        if same_name(src.name) in seen:  # also two spellings of one name ('é' as one character or two)
            raise InputError(
                f"two sources are called {src.name!r}", file=where, remedy="give every source its own name"
            )
        seen.add(same_name(src.name))
