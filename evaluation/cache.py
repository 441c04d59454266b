"""A persistent on-disk cache of reduced products (yearly season means, monthly climatologies).

Entries are small NetCDF files named by a hash of what produced them: the identity of
every input file (path, size, modification time) and the parameters of the reduction.
A changed input therefore never meets an old entry.  The folder has a size bound; when
it is exceeded the least recently used entries go first (a hit refreshes an entry's
modification time).

Folder: ``$GRIDSCORE_CACHE`` if set, else the user's cache directory
(``~/.cache/gridscore`` on Linux).  ``GRIDSCORE_CACHE=off`` disables the cache.
Bound: ``$GRIDSCORE_CACHE_LIMIT_MB`` (default 2000 MB).
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
import threading
from pathlib import Path
from typing import Any

import xarray as xr

__all__ = ["Cache", "default_cache"]

_DEFAULT_LIMIT_MB = 2000.0
_SUFFIX = ".nc"


class Cache:
    """Reduced arrays stored as NetCDF under ``path`` with an LRU size bound.

    Parameters
    ----------
    path
        Folder of the cache; default ``$GRIDSCORE_CACHE`` or the user cache directory.
    limit_bytes
        Size bound; default ``$GRIDSCORE_CACHE_LIMIT_MB`` megabytes (2000).
    """

    def __init__(self, path: str | os.PathLike[str] | None = None, *, limit_bytes: float | None = None) -> None:
        if path is None:
            path = os.environ.get("GRIDSCORE_CACHE") or _user_cache_dir()
        self.path = Path(path).expanduser()
        if limit_bytes is None:
            limit_bytes = float(os.environ.get("GRIDSCORE_CACHE_LIMIT_MB", _DEFAULT_LIMIT_MB)) * 1e6
        self.limit = float(limit_bytes)
        self._lock = threading.Lock()

    @staticmethod
    def key(**parts: Any) -> str:
        """A stable hash of JSON-serialisable parts (file identities, parameters)."""
        text = json.dumps(parts, sort_keys=True, default=str)
        return hashlib.sha256(text.encode()).hexdigest()[:32]

    def _file(self, key: str) -> Path:
        return self.path / f"{key}{_SUFFIX}"

    def get(self, key: str) -> xr.DataArray | None:
        """The stored array, loaded into memory, or ``None``."""
        f = self._file(key)
        if not f.exists():
            return None
        try:
            da = xr.load_dataarray(f)
        except Exception:  # a damaged entry is a miss, and goes
            f.unlink(missing_ok=True)
            return None
        try:
            os.utime(f)  # mark as recently used
        except OSError:
            pass
        return da

    def put(self, key: str, da: xr.DataArray) -> None:
        """Store an array (atomically: a temporary file renamed into place), then evict."""
        try:
            self.path.mkdir(parents=True, exist_ok=True)
            fd, tmp = tempfile.mkstemp(dir=self.path, suffix=".tmp")
            os.close(fd)
        except OSError:
            return  # an unwritable cache folder only costs speed
        try:
            keep = da.drop_vars([c for c in da.coords if c not in da.dims])
            keep.attrs = {k: v for k, v in da.attrs.items() if isinstance(v, (str, int, float))}
            keep.name = keep.name or "value"
            keep.to_netcdf(tmp)
            os.replace(tmp, self._file(key))
        except Exception:
            Path(tmp).unlink(missing_ok=True)
            return
        self.evict()

    def get_json(self, key: str) -> Any | None:
        """A stored JSON document (e.g. a whole score table), or ``None``."""
        f = self.path / f"{key}.json"
        try:
            value = json.loads(f.read_text())
        except (OSError, ValueError):
            return None
        try:
            os.utime(f)
        except OSError:
            pass
        return value

    def put_json(self, key: str, value: Any) -> None:
        """Store a JSON document atomically, then evict."""
        try:
            self.path.mkdir(parents=True, exist_ok=True)
            fd, tmp = tempfile.mkstemp(dir=self.path, suffix=".tmp")
            with os.fdopen(fd, "w") as fh:
                json.dump(value, fh, default=str)
            os.replace(tmp, self.path / f"{key}.json")
        except (OSError, TypeError, ValueError):
            return
        self.evict()

    def entries(self) -> list[Path]:
        if not self.path.is_dir():
            return []
        return [p for p in self.path.iterdir() if p.suffix in (_SUFFIX, ".json") and p.is_file()]

    def evict(self) -> int:
        """Remove least recently used entries until the folder fits the bound."""
        with self._lock:
            files = []
            for p in self.entries():
                try:
                    st = p.stat()
                except OSError:
                    continue
                files.append((st.st_mtime, st.st_size, p))
            files.sort()
            total = sum(size for _, size, _ in files)
            removed = 0
            for _, size, p in files:
                if total <= self.limit:
                    break
                p.unlink(missing_ok=True)
                total -= size
                removed += 1
            return removed

    def info(self) -> dict[str, Any]:
        files = self.entries()
        return {"path": str(self.path), "entries": len(files), "size": sum(p.stat().st_size for p in files), "limit": self.limit}

    def clear(self) -> int:
        files = self.entries()
        for p in files:
            p.unlink(missing_ok=True)
        return len(files)


def _user_cache_dir() -> str:
    from platformdirs import user_cache_dir

    return user_cache_dir("gridscore", appauthor=False)


def default_cache() -> Cache | None:
    """The cache named by the environment, or ``None`` when ``GRIDSCORE_CACHE=off``."""
    if os.environ.get("GRIDSCORE_CACHE", "").strip().lower() in ("off", "0", "none", "false"):
        return None
    return Cache()
