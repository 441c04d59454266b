"""What identifies a request before any data are read, with the standard library only.

Periods, seasons, region ids, remapping names, the input files and their identities, and
the cache key of a whole score table.  A warm ``gridscore score`` answers from the cache
with this module, :mod:`evaluation.cache` and :mod:`evaluation.plainfiles` alone: no numpy,
pandas or xarray is imported (about 1.5 s of imports on a shared 2-core machine against a
whole cached answer in about 0.1 s).  The modules that compute (:mod:`evaluation.timeaxis`,
:mod:`evaluation.regions`, :mod:`evaluation.io`, :mod:`evaluation.grids`) re-export these
names, so either import works.
"""

from __future__ import annotations

import glob
import hashlib
import math
import os
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from .errors import InputError

__all__ = [
    "MONTH_NAMES",
    "SEASONS",
    "Period",
    "WMO_NORMAL",
    "parse_period",
    "parse_season",
    "Region",
    "REGIONS",
    "parse_region",
    "REGRID_METHODS",
    "FileIdentity",
    "expand_paths",
    "file_identity",
    "chunk_megabytes",
    "Source",
    "scores_key",
]

#: How a source is brought onto the target grid (:data:`evaluation.grids.REMAPPERS`).
REGRID_METHODS = ("conservative", "bilinear", "nearest")

# ----------------------------------------------------------------------------- periods and seasons
MONTH_NAMES = ("JAN", "FEB", "MAR", "APR", "MAY", "JUN", "JUL", "AUG", "SEP", "OCT", "NOV", "DEC")
SEASONS: dict[str, tuple[int, ...]] = {
    "ANN": tuple(range(1, 13)),
    "DJF": (12, 1, 2),
    "MAM": (3, 4, 5),
    "JJA": (6, 7, 8),
    "SON": (9, 10, 11),
    **{name: (i + 1,) for i, name in enumerate(MONTH_NAMES)},
}


@dataclass(frozen=True, order=True)
class Period:
    """Inclusive range of season label years, written ``YYYY-YYYY``."""

    start: int
    end: int

    def __post_init__(self) -> None:
        if self.end < self.start:
            raise InputError(f"period {self.start}-{self.end} ends before it starts", remedy="write the earlier year first, e.g. 1991-2020")

    def __str__(self) -> str:
        return f"{self.start:04d}-{self.end:04d}"

    @property
    def years(self):  # numpy.ndarray; numpy is imported only when years are asked for
        import numpy as np

        return np.arange(self.start, self.end + 1)

    @property
    def length(self) -> int:
        return self.end - self.start + 1

    def covers(self, other: Period) -> bool:
        return self.start <= other.start and other.end <= self.end


# The latest WMO 30-year standard climatological normal (WMO-No. 1203, 2017).
WMO_NORMAL = Period(1991, 2020)

_PERIOD = re.compile(r"^\s*(\d{1,4})\s*[-–/:]\s*(\d{1,4})\s*$")


def parse_period(text: str | Period) -> Period:
    """``"1981-2010"`` -> ``Period(1981, 2010)``; raises :class:`InputError` otherwise."""
    if isinstance(text, Period):
        return text
    m = _PERIOD.match(str(text))
    if not m:
        raise InputError(f"cannot read the period '{text}'", remedy="write it as inclusive years YYYY-YYYY, e.g. 1991-2020")
    return Period(int(m.group(1)), int(m.group(2)))


def parse_season(text: str) -> str:
    """Canonical season id (upper case) or :class:`InputError`."""
    season = str(text).strip().upper()
    if season not in SEASONS:
        raise InputError(f"unknown season '{text}'", remedy=f"use one of {' '.join(SEASONS)}")
    return season


# ----------------------------------------------------------------------------- regions
@dataclass(frozen=True)
class Region:
    """A latitude-longitude box, optionally restricted to land or ocean."""

    id: str
    label: str
    south: float = -90.0
    north: float = 90.0
    west: float = -180.0
    east: float = 180.0
    surface: str | None = None  # None, "land" or "ocean"

    @property
    def definition(self) -> str:
        text = f"{_lat(self.south)} to {_lat(self.north)}"
        if not (self.west == -180.0 and self.east == 180.0):
            text += f", {_lon(self.west)} to {_lon(self.east)}"
        if self.surface:
            text += f", {self.surface} fraction of each cell"
        return text


def _lat(v: float) -> str:
    return f"{abs(v):g}°{'S' if v < 0 else 'N'}" if v else "0°"


def _lon(v: float) -> str:
    return f"{abs(v):g}°{'W' if v < 0 else 'E'}" if v else "0°"


REGIONS: dict[str, Region] = {
    r.id: r
    for r in (
        Region("global", "Global"),
        Region("tropics", "Tropics (30°S–30°N)", -30.0, 30.0),
        Region("nh-extratropics", "Northern extratropics (30°N–90°N)", 30.0, 90.0),
        Region("sh-extratropics", "Southern extratropics (90°S–30°S)", -90.0, -30.0),
        Region("arctic", "Arctic (60°N–90°N)", 60.0, 90.0),
        Region("antarctic", "Antarctic (90°S–60°S)", -90.0, -60.0),
        Region("land", "Global land", surface="land"),
        Region("ocean", "Global ocean", surface="ocean"),
    )
}

_NUM = r"\s*([-+]?\d+(?:\.\d*)?)\s*"
_BOX = re.compile(rf"^box:{_NUM},{_NUM},{_NUM},{_NUM}$", re.IGNORECASE)


def parse_region(text: str | Region) -> Region:
    """A region id of :data:`REGIONS` or ``box:S,N,W,E`` (degrees) -> :class:`Region`."""
    if isinstance(text, Region):
        return text
    key = str(text).strip()
    if key.lower() in REGIONS:
        return REGIONS[key.lower()]
    m = _BOX.match(key)
    if not m:
        raise InputError(
            f"unknown region '{text}'",
            remedy=f"use one of {' '.join(REGIONS)} or box:S,N,W,E in degrees (e.g. box:-10,10,160,-150)",
        )
    s, n, w, e = (float(g) for g in m.groups())
    if not (-90.0 <= s < n <= 90.0):
        raise InputError(f"region '{text}': south must be below north, both within -90..90", remedy="write box:S,N,W,E, e.g. box:30,60,-10,40")
    if not (-180.0 <= w <= 360.0 and -180.0 <= e <= 360.0) or w == e:
        raise InputError(f"region '{text}': west and east must differ and lie within -180..360", remedy="write box:S,N,W,E, e.g. box:30,60,-10,40")
    canonical = f"box:{s:g},{n:g},{w:g},{e:g}"
    return Region(canonical, f"Box {_lat(s)}–{_lat(n)}, {_lon(w)}–{_lon(e)}", s, n, w, e)


# ----------------------------------------------------------------------------- files
@dataclass(frozen=True)
class FileIdentity:
    """What identifies the content of an input file for provenance and caching.

    ``modified`` can be set back by anyone (``touch -d``), so a file replaced by one of
    equal size with an old time would look unchanged; ``changed`` (the status-change time,
    which the system sets on every write, rename onto the path or ``touch``, and which no
    ordinary call can set back) and ``inode`` catch that from one ``stat``; ``sample`` is
    a hash of the file's head, tail and blocks spread over it (of the whole file up to
    4 MiB), which catches a change that touches a sampled byte on file systems whose status
    times are coarse or absent.
    """

    path: str
    size: int
    modified: float
    changed: int = 0  # st_ctime_ns
    inode: int = 0
    sample: str = ""


def expand_paths(paths: str | os.PathLike[str] | Iterable[str | os.PathLike[str]], *, source: str | None = None) -> list[str]:
    """Expand a file, a quoted glob or a list of either into sorted absolute paths.

    Raises :class:`InputError` when a pattern matches nothing or a named file is absent.
    """
    items = [paths] if isinstance(paths, (str, os.PathLike)) else list(paths)
    if not items:
        raise InputError("no input files given", file=source, remedy="give a file, a quoted glob or a list of files")
    found: list[str] = []
    for item in items:
        text = os.path.expanduser(str(item))
        if glob.has_magic(text) and not os.path.isfile(text):  # a file named 'a[1].nc' is itself
            matches = sorted(glob.glob(text))
            if not matches:
                raise InputError("the pattern matches no file", file=text, remedy="check the folder and the quoting of the glob")
            folders = [m for m in matches if os.path.isdir(m)]
            if folders:  # a folder is not a data file; reading it would fail with a misleading reason
                raise InputError(f"the pattern matches a folder, not a file ({folders[0]})", file=text,
                                 remedy=f"make the glob match files only, e.g. '{os.path.join(folders[0], '*.nc')}'")
            found.extend(matches)
        elif os.path.isfile(text):
            found.append(text)
        elif os.path.isdir(text):
            raise InputError("is a folder, not a file", file=text, remedy=f"give a glob such as '{os.path.join(text, '*.nc')}'")
        else:
            raise InputError("file not found", file=text, remedy="check the path")
    if os.sep == "/":
        odd = next((f for f in found if "\\" in f), None)
        if odd is not None:
            # netCDF-C turns a backslash in a path into a folder separator, then reports an HDF error
            raise InputError("the path holds a backslash, which the NetCDF library reads as a folder separator, so the file cannot be opened",
                             file=odd, remedy="rename the file (or its folder) without '\\'")
    return sorted({os.path.abspath(f) for f in found})


#: Bytes hashed at the head and the tail of a file (where NetCDF and HDF5 keep their
#: metadata), and the number and size of the raw blocks at fixed offsets spread between
#: them, for :attr:`FileIdentity.sample`; a file up to :data:`_SAMPLE_WHOLE` is hashed
#: whole.  Read with ``os.pread`` (no NetCDF library, safe on any thread).  Measured in the
#: page cache at load 2.5-3 on 2 cores: 3.9 ms for the 13 files of the benchmark request
#: (96 MB), against 31 ms with 1 MiB ends and 32 blocks of 64 KiB (4 MiB a file, most of it
#: hashing); a later call for an unchanged file is a stat.  Files up to 4 MiB (a few ms
#: of hashing each) are hashed whole, so that any change of a small file is seen even where
#: the file system's ctime is coarse; in a larger file, a change that misses every sampled
#: block is seen through its ctime and inode only (:class:`FileIdentity`).
_SAMPLE_HEAD = 1 << 16
_SAMPLE_BLOCKS, _SAMPLE_BLOCK = 64, 1 << 12
_SAMPLE_WHOLE = 4 << 20
_SAMPLES: dict[tuple, str] = {}
_SAMPLES_MAX = 50_000


def _content_sample(path: str, size: int) -> str:
    """A hash of the size, the head, the tail and :data:`_SAMPLE_BLOCKS` blocks between them."""
    sha = hashlib.blake2b(str(size).encode(), digest_size=16)
    fd = os.open(path, os.O_RDONLY)
    try:
        if size <= _SAMPLE_WHOLE:
            while block := os.read(fd, _SAMPLE_WHOLE):
                sha.update(block)
            return sha.hexdigest()
        sha.update(os.pread(fd, _SAMPLE_HEAD, 0))
        span = size - 2 * _SAMPLE_HEAD - _SAMPLE_BLOCK
        for i in range(_SAMPLE_BLOCKS):
            sha.update(os.pread(fd, _SAMPLE_BLOCK, _SAMPLE_HEAD + span * i // (_SAMPLE_BLOCKS - 1)))
        sha.update(os.pread(fd, _SAMPLE_HEAD, size - _SAMPLE_HEAD))
    finally:
        os.close(fd)
    return sha.hexdigest()


def file_identity(paths: Sequence[str]) -> list[FileIdentity]:
    """Identity of each file for provenance and cache keys (see :class:`FileIdentity`).

    Notes
    -----
    One ``stat`` per file; the content sample is read only when the file's status
    (size, times, inode) is new to this process, so revalidating on every request costs
    a ``stat``.
    """
    out = []
    for p in paths:
        st = os.stat(p)
        path = os.path.abspath(p)
        status = (path, st.st_size, st.st_mtime_ns, st.st_ctime_ns, st.st_ino, st.st_dev)
        sample = _SAMPLES.get(status)
        if sample is None:
            try:
                sample = _content_sample(path, st.st_size)
            except OSError:
                sample = ""  # unreadable: opening it reports the problem
            if len(_SAMPLES) >= _SAMPLES_MAX:
                _SAMPLES.clear()
            _SAMPLES[status] = sample
        out.append(FileIdentity(path=path, size=st.st_size, modified=st.st_mtime, changed=st.st_ctime_ns, inode=st.st_ino, sample=sample))
    return out


def chunk_megabytes() -> float:
    """``$GRIDSCORE_CHUNK_MB`` (default 64), refused unless a positive finite number."""
    text = os.environ.get("GRIDSCORE_CHUNK_MB", "").strip()
    if not text:
        return 64.0
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not math.isfinite(value) or value <= 0:
        raise InputError(
            f"GRIDSCORE_CHUNK_MB is {text[:40]!r}, not a positive number of megabytes",
            remedy="set it to a number such as 64, or unset it",
        )
    return value


# ----------------------------------------------------------------------------- sources and the score table's cache key
@dataclass(frozen=True)
class Source:
    """A named collection of files: one model run or one reference dataset."""

    name: str
    role: str  # "model" or "reference"
    paths: tuple[str, ...]
    colour: str | None = None
    description: str = ""
    # compared variable -> the name this source's files store it under ({"tas": "TS"});
    # left out of the hash so that a Source stays usable as a key
    variables: Mapping[str, str] = field(default_factory=dict, hash=False)

    def __post_init__(self) -> None:
        if isinstance(self.paths, str):
            object.__setattr__(self, "paths", (self.paths,))
        else:
            object.__setattr__(self, "paths", tuple(str(p) for p in self.paths))
        object.__setattr__(self, "variables", {str(k): str(v) for k, v in dict(self.variables).items()})

    def name_in_files(self, variable: str) -> str:
        """The name (or standard_name) under which this source's files hold ``variable``."""
        return self.variables.get(variable, variable)

    def names_in_files(self, variable: str) -> dict[str, str]:
        """Every name read under another name for ``variable``: ``{"tas": "TS"}``, or for a
        derived variable stored nowhere, its inputs (``{"rlut": "LW_OUT_TOP"}``)."""
        if variable in self.variables:
            return {variable: self.variables[variable]}
        from .derived import DERIVED

        inputs = DERIVED[variable].inputs if variable in DERIVED else ()
        return {name: self.variables[name] for name in inputs if name in self.variables}


def scores_key(
    *,
    reference: Source,
    alternatives: Sequence[Source],
    models: Sequence[Source],
    variable: str,
    regions: Sequence[str],
    seasons: Sequence[str],
    period: Any,
    regrid: str,
    level: str | None,
    target_grid: str | None,
) -> str:
    """The cache key of a whole score table (:func:`evaluation.scoring.score_table`).

    The same request on the same files (path, size, times, content sample) gives the same
    key.    A level is read with
    pint (:func:`evaluation.levels.parse_level`), imported only when one is given.
    """
    from .cache import Cache

    level_label = None
    if level:
        from .levels import parse_level

        level_label = parse_level(level).label()
    return Cache.key(
        kind="scores-v9",  # v9: a land fraction file stamped with one time step shapes land/ocean; v8: a regional rotated/curvilinear target weights its edge cells by the covered part; v7: significance rows (bias_signif_area, bootstrap intervals); v6: the provenance lists the files read
        # every reference in order (the primary first), then the runs
        sources=[(s.name, s.role, [vars(f) for f in file_identity(expand_paths(s.paths, source=s.name))], sorted(s.names_in_files(variable).items()))
                 for s in [reference, *alternatives, *models]],
        variable=variable,
        regions=[parse_region(r).id for r in regions],
        seasons=[parse_season(s) for s in seasons],
        period=None if period is None else str(parse_period(period)),
        regrid=regrid,
        level=level_label,
        target_grid=target_grid or "reference",
    )
