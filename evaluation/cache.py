"""A persistent on-disk cache of reduced products (yearly season means, monthly climatologies).

Entries are small NetCDF (or JSON) files named by a hash of what produced them: the
identity of every input file (see :func:`evaluation.io.file_identity`) and the parameters
of the reduction, so a changed input never meets an old entry.  The folder has a size
bound; when it is exceeded the least recently used entries go first (a hit refreshes an
entry's modification time).

The cache owns only what it made.  Its folder carries a ``CACHEDIR.TAG`` marker (the Cache
Directory Tagging Specification, so that backup tools skip it) and an index
(``gridscore-index.json``) listing every entry with the SHA-256 of its content.  Eviction
and ``clear`` remove only listed entries (and unfinished temporary files of the cache); a
folder that holds anything else -- a data folder, a home directory -- is refused with an
:class:`~evaluation.errors.InputError` before anything is read or removed.  An entry whose
content no longer matches its recorded hash (edited by hand, damaged) is removed and
recomputed, never served.

Folder: ``$GRIDSCORE_CACHE`` if set, else ``reductions`` in the user's cache directory
(``~/.cache/gridscore/reductions`` on Linux).  ``GRIDSCORE_CACHE=off`` disables the cache.
Bound: ``$GRIDSCORE_CACHE_LIMIT_MB`` (default 2000 MB; a value that is not a positive
number is refused).
"""

from __future__ import annotations

import contextlib
import fcntl
import hashlib
import json
import math
import os
import re
import tempfile
import threading
from collections.abc import Iterator
from concurrent.futures import Future, ThreadPoolExecutor
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .errors import InputError

if TYPE_CHECKING:  # imported where arrays are read or written: a cached score table needs no xarray
    import xarray as xr

__all__ = ["Cache", "cache_limit_bytes", "default_cache"]

_DEFAULT_LIMIT_MB = 2000.0
_SUFFIX = ".nc"
#: The Cache Directory Tagging Specification (Bryan Ford, 2004): the first line is fixed.
MARKER = "CACHEDIR.TAG"
_MARKER_TEXT = (
    "Signature: 8a477f597d28d172789f06886806bc55\n"
    "# This file marks a gridscore cache folder; gridscore deletes only the entries its index lists.\n"
)
INDEX = "gridscore-index.json"
_LOCK = ".gridscore-cache.lock"
_ENTRY = re.compile(r"^gs-[0-9A-Za-z_-]{1,64}\.(nc|json)$")
_TEMPORARY = re.compile(r"^\.gs-tmp-[^/]*$")
_OWN_FILES = frozenset({MARKER, INDEX, _LOCK})


def cache_limit_bytes() -> float:
    """The size bound from ``$GRIDSCORE_CACHE_LIMIT_MB`` (megabytes), in bytes.

    Raises
    ------
    InputError
        The variable is set to something that is not a positive finite number.
    """
    text = os.environ.get("GRIDSCORE_CACHE_LIMIT_MB", "").strip()
    if not text:
        return _DEFAULT_LIMIT_MB * 1e6
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not math.isfinite(value) or value <= 0:
        raise InputError(
            f"GRIDSCORE_CACHE_LIMIT_MB is {text[:40]!r}, not a positive number of megabytes",
            remedy="set it to a number such as 2000, or unset it",
        )
    return value * 1e6


# Entries written while the computation goes on (Cache.put_later): one writer thread for
# every cache of the process, and the writes not yet done, by entry file.  The thread is
# not a daemon: the interpreter waits for it at exit, so a command's entries are complete.
_WRITER: list[ThreadPoolExecutor] = []
_PENDING: dict[Path, Future] = {}
_PENDING_LOCK = threading.Lock()


def _writer() -> ThreadPoolExecutor:
    with _PENDING_LOCK:
        if not _WRITER:
            _WRITER.append(ThreadPoolExecutor(max_workers=1, thread_name_prefix="gridscore-cache-writer"))
        return _WRITER[0]


def _digest(path: Path) -> str:
    sha = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            sha.update(block)
    return sha.hexdigest()


class Cache:
    """Reduced arrays stored as NetCDF under ``path`` with an LRU size bound.

    Parameters
    ----------
    path
        Folder of the cache; default ``$GRIDSCORE_CACHE`` or the user cache directory.
    limit_bytes
        Size bound; default ``$GRIDSCORE_CACHE_LIMIT_MB`` megabytes (2000).

    Raises
    ------
    InputError
        The folder exists and holds files the cache did not make (see the module notes),
        or the size bound from the environment is not a positive number.
    """

    def __init__(self, path: str | os.PathLike[str] | None = None, *, limit_bytes: float | None = None) -> None:
        if path is None:
            path = os.environ.get("GRIDSCORE_CACHE") or _user_cache_dir()
        self.path = Path(path).expanduser()
        self.limit = float(cache_limit_bytes() if limit_bytes is None else limit_bytes)
        self._lock = threading.Lock()
        self._check_owned()

    # ------------------------------------------------------------------ ownership
    def foreign(self) -> list[str]:
        """Names in the folder that the cache did not make (empty for a missing folder)."""
        if not self.path.exists():
            return []
        if not self.path.is_dir():
            return [self.path.name]
        names = sorted(p.name for p in self.path.iterdir())
        if names and MARKER not in names:
            return names  # an unmarked folder with content is somebody else's
        return [n for n in names if n not in _OWN_FILES and not _ENTRY.match(n) and not _TEMPORARY.match(n)
                or (_ENTRY.match(n) and not (self.path / n).is_file())]

    def _check_owned(self) -> None:
        others = self.foreign()
        if others:
            shown = ", ".join(repr(n) for n in others[:3]) + (f" and {len(others) - 3} more" if len(others) > 3 else "")
            raise InputError(
                f"the cache folder holds files gridscore did not make ({shown}); it would not delete them, "
                "and will not mix its entries with them",
                file=str(self.path),
                remedy="set GRIDSCORE_CACHE (or --cache-dir) to an empty or new folder, or GRIDSCORE_CACHE=off",
            )

    def _claim(self) -> bool:
        """Create the folder and its marker; False when the folder cannot be written."""
        try:
            self.path.mkdir(parents=True, exist_ok=True)
            marker = self.path / MARKER
            if not marker.exists():
                self._check_owned()  # somebody may have put files there since
                marker.write_text(_MARKER_TEXT)
        except OSError:
            return False
        return True

    @contextlib.contextmanager
    def _locked(self) -> Iterator[None]:
        """This thread's lock and an exclusive lock on the folder (other processes)."""
        with self._lock:
            with open(self.path / _LOCK, "a") as fh:
                fcntl.flock(fh, fcntl.LOCK_EX)
                try:
                    yield
                finally:
                    fcntl.flock(fh, fcntl.LOCK_UN)

    # ------------------------------------------------------------------ the index
    def _read_index(self) -> dict[str, dict[str, Any]]:
        try:
            index = json.loads((self.path / INDEX).read_text())
        except (OSError, ValueError):
            return {}
        if not isinstance(index, dict):
            return {}
        return {k: v for k, v in index.items() if _ENTRY.match(str(k)) and isinstance(v, dict) and isinstance(v.get("sha256"), str)}

    def _write_index(self, index: dict[str, dict[str, Any]]) -> None:
        fd, tmp = tempfile.mkstemp(dir=self.path, prefix=".gs-tmp-", suffix=".json")
        with os.fdopen(fd, "w") as fh:
            json.dump(index, fh, sort_keys=True)
        os.replace(tmp, self.path / INDEX)

    def flush(self) -> None:
        """Wait until every entry of this cache given to :meth:`put_later` is written."""
        with _PENDING_LOCK:
            waiting = [f for path, f in _PENDING.items() if path.parent == self.path]
        for future in waiting:
            future.exception()  # waits; a failed write only costs speed (as in _store)

    def wait(self, key: str) -> None:
        """Wait until the array entry ``key`` given to :meth:`put_later` is written (or its
        writing failed); at once when it is not waiting to be written."""
        self._wait_for(self._name(key, _SUFFIX))

    def _wait_for(self, name: str) -> None:
        with _PENDING_LOCK:
            future = _PENDING.get(self.path / name)
        if future is not None:
            future.exception()

    def _verified(self, name: str) -> Path | None:
        """The entry's file when the index lists it and its content matches the recorded hash."""
        self._wait_for(name)
        record = self._read_index().get(name)
        f = self.path / name
        if record is None or not f.is_file():
            return None
        try:
            good = _digest(f) == record["sha256"]
        except OSError:
            return None
        if not good:  # edited by hand or damaged: never served, recomputed by the caller
            self._drop(name)
            return None
        try:
            os.utime(f)  # mark as recently used
        except OSError:
            pass
        return f

    def _drop(self, name: str) -> None:
        try:
            with self._locked():
                index = self._read_index()
                if index.pop(name, None) is not None:
                    (self.path / name).unlink(missing_ok=True)
                    self._write_index(index)
        except OSError:
            pass

    def _store(self, name: str, write: Any) -> None:
        """Write an entry through a temporary file, record its hash, then evict."""
        if not self._claim():
            return  # an unwritable cache folder only costs speed
        try:
            fd, tmp = tempfile.mkstemp(dir=self.path, prefix=".gs-tmp-", suffix=Path(name).suffix)
            os.close(fd)
        except OSError:
            return
        try:
            write(tmp)
            record = {"sha256": _digest(Path(tmp)), "size": os.path.getsize(tmp)}
            with self._locked():
                os.replace(tmp, self.path / name)
                index = self._read_index()
                index[name] = record
                self._write_index(index)
        except Exception:
            Path(tmp).unlink(missing_ok=True)
            return
        self.evict()

    # ------------------------------------------------------------------ entries
    @staticmethod
    def key(**parts: Any) -> str:
        """A stable hash of JSON-serialisable parts (file identities, parameters)."""
        text = json.dumps(parts, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:32]

    @staticmethod
    def _name(key: str, suffix: str) -> str:
        if not re.fullmatch(r"[0-9A-Za-z_-]{1,64}", key):
            raise ValueError(f"not a cache key: {key!r}")
        return f"gs-{key}{suffix}"

    def get(self, key: str) -> xr.DataArray | None:
        """The stored array, loaded into memory, or ``None`` (also for a damaged entry)."""
        f = self._verified(self._name(key, _SUFFIX))
        if f is None:
            return None
        import xarray as xr

        try:
            da = xr.load_dataarray(f)
        except Exception:  # unreadable despite a matching hash: a miss, and it goes
            self._drop(f.name)
            return None
        # classic NetCDF stores integers in 32 bits: the labels (years, months) come back as written
        return da.assign_coords({c: da[c].astype("int64") for c in da.coords if da[c].dtype.kind == "i" and da[c].dtype.itemsize < 8})

    def put(self, key: str, da: xr.DataArray, *, classic_only: bool = False) -> None:
        """Store an array (atomically: a temporary file renamed into place), then evict.

        ``classic_only``: write with scipy's pure-Python writer or not at all (for the
        background writer: the netCDF-C/HDF5 library must not be entered from two threads,
        which crashed the process when the main thread read or wrote NetCDF meanwhile)."""

        def write(tmp: str) -> None:
            keep = da.drop_vars([c for c in da.coords if c not in da.dims])
            keep.attrs = {k: v for k, v in da.attrs.items() if isinstance(v, (str, int, float))}
            keep.name = keep.name or "value"
            try:
                _write_classic(keep, tmp)
            except (TypeError, ValueError, OverflowError):  # what classic NetCDF cannot hold
                if classic_only:
                    raise
                keep.to_netcdf(tmp)

        self._store(self._name(key, _SUFFIX), write)

    def put_later(self, key: str, da: xr.DataArray) -> None:
        """:meth:`put` in the background: the caller goes on computing while the entry is
        written (on 2 cores the writing overlaps the scoring).  :meth:`get` of the same key
        waits for it; the process waits for every write at exit.  ``da`` must not be changed
        afterwards (it is written as it is when the writer reaches it)."""
        path = self.path / self._name(key, _SUFFIX)
        arrays = [da.variable, *(da[c].variable for c in da.dims if c in da.coords)]
        if 0 in da.shape or not all(_fits_classic(a.values) for a in arrays):
            self.put(key, da)  # not for scipy's writer: written here, with netCDF-C, on this thread
            return
        box: dict[str, Future] = {}

        def run() -> None:
            try:
                self.put(key, da, classic_only=True)
            finally:
                with _PENDING_LOCK:
                    if _PENDING.get(path) is box.get("future"):
                        _PENDING.pop(path, None)

        self._wait_for(path.name)  # one write of an entry at a time
        try:
            future = _writer().submit(run)
        except RuntimeError:  # the process is ending (the writer is shut down): written here
            self.put(key, da)
            return
        with _PENDING_LOCK:
            box["future"] = future
            for done in [p for p, f in _PENDING.items() if f.done()]:
                del _PENDING[done]
            if not future.done():
                _PENDING[path] = future

    def get_json(self, key: str) -> Any | None:
        """A stored JSON document (e.g. a whole score table), or ``None``."""
        f = self._verified(self._name(key, ".json"))
        if f is None:
            return None
        try:
            return json.loads(f.read_text())
        except (OSError, ValueError):
            self._drop(f.name)
            return None

    def put_json(self, key: str, value: Any) -> None:
        """Store a JSON document atomically, then evict."""

        def write(tmp: str) -> None:
            with open(tmp, "w") as fh:
                json.dump(value, fh, default=str)

        self._store(self._name(key, ".json"), write)

    def entries(self) -> list[Path]:
        """The entry files the index lists (and that exist)."""
        self.flush()
        if not self.path.is_dir():
            return []
        return [self.path / n for n in self._read_index() if (self.path / n).is_file()]

    def evict(self) -> int:
        """Remove least recently used entries until the listed entries fit the bound;
        whole score tables (JSON) only when no array entry is left.

        Only entries of the index are counted and removed; nothing else in the folder is
        touched (there is nothing else: :class:`Cache` refuses such a folder).
        """
        if not self.path.is_dir():
            return 0
        with self._locked():
            index = self._read_index()
            files = []
            for name in list(index):
                try:
                    st = (self.path / name).stat()
                except OSError:
                    index.pop(name)
                    continue
                # whole score tables (.json, a few kB: the warm answers) go only after every
                # array: a century of 1° months puts 1.5 GB of season means in per variable,
                # which, by age alone, pushed the previous variable's table out
                files.append((name.endswith(".json"), st.st_mtime, st.st_size, name))
            files.sort()
            total = sum(size for _, _, size, _ in files)
            removed = 0
            for _, _, size, name in files:
                if total <= self.limit:
                    break
                (self.path / name).unlink(missing_ok=True)
                index.pop(name, None)
                total -= size
                removed += 1
            self._write_index(index)
            return removed

    def info(self) -> dict[str, Any]:
        files = self.entries()
        return {"path": str(self.path), "entries": len(files), "size": sum(p.stat().st_size for p in files), "limit": self.limit}

    def clear(self) -> int:
        """Remove every entry of the cache (and its unfinished temporary files); nothing else."""
        self.flush()
        self._check_owned()
        if not self.path.is_dir():
            return 0
        with self._locked():
            index = self._read_index()
            names = set(index) | {p.name for p in self.path.iterdir() if _ENTRY.match(p.name) and p.is_file()}
            for name in names:
                (self.path / name).unlink(missing_ok=True)
            for p in self.path.iterdir():
                if _TEMPORARY.match(p.name) and p.is_file():
                    p.unlink(missing_ok=True)
            self._write_index({})
        return len(names)


def _fits_classic(values) -> bool:
    """Whether :func:`_write_classic` can store these values (floats, 32-bit integers)."""
    if values.dtype.kind in "iu":
        return not values.size or (values.min() >= -(2**31) and values.max() < 2**31)
    return values.dtype.kind == "f"


def _write_classic(da: xr.DataArray, path: str) -> None:
    """``da`` (named, its coordinates on its dimensions only) as classic NetCDF with
    scipy's writer, which ``xarray.load_dataarray`` reads back as it was.

    Written directly rather than with ``to_netcdf``: measured on a loaded 2-core machine,
    20 entries of 30 x 90 x 180 doubles took 2.4 s through xarray's encoders (HDF5: 10 s)
    and 0.3 s here.  Integers are stored in 32 bits (refused beyond), floats as they are.
    """
    import numpy as np
    from scipy.io import netcdf_file

    def stored(values: np.ndarray) -> np.ndarray:
        if not _fits_classic(values):
            raise TypeError(f"cannot store {values.dtype} values in classic NetCDF")
        return values.astype("int32") if values.dtype.kind in "iu" else values

    def attributes(var, attrs) -> None:
        for k, v in attrs.items():
            setattr(var, k, v)

    if 0 in da.shape:
        raise ValueError("classic NetCDF reads a dimension of length 0 as unlimited")
    with netcdf_file(path, "w", version=2) as f:
        for dim, size in da.sizes.items():
            f.createDimension(dim, size)
        for dim in da.dims:
            if dim in da.coords:
                values = stored(np.asarray(da[dim].values))
                var = f.createVariable(dim, values.dtype, (dim,))
                var[:] = values
                attributes(var, da[dim].attrs)
        values = stored(np.asarray(da.values))
        var = f.createVariable(str(da.name), values.dtype, da.dims)
        if values.ndim:
            var[:] = values
        else:
            var.assignValue(values)
        attributes(var, da.attrs)


def _user_cache_dir() -> str:
    from platformdirs import user_cache_dir

    # A folder of its own: the user cache directory of gridscore also holds the demo.
    return os.path.join(user_cache_dir("gridscore", appauthor=False), "reductions")


def default_cache() -> Cache | None:
    """The cache named by the environment, or ``None`` when ``GRIDSCORE_CACHE=off``.

    Raises
    ------
    InputError
        The folder holds files the cache did not make, or the size bound is not a number.
    """
    if os.environ.get("GRIDSCORE_CACHE", "").strip().lower() in ("off", "0", "none", "false"):
        return None
    return Cache()
