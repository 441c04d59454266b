"""gridscore's computing package: score gridded model output against reference fields.

Nothing here imports a user-interface library; the dashboard and the command line in
``app/`` build on this package.
"""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("gridscore")
except PackageNotFoundError:  # running from a source tree that is not installed
    __version__ = "0.0.0+local"

__all__ = ["__version__"]
