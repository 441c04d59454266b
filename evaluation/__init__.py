"""gridscore's computing package: score gridded model output against reference fields.

Nothing here imports a user-interface library; the dashboard and the command line in
``app/`` build on this package.
"""

from __future__ import annotations

__all__ = ["__version__"]


def __getattr__(name: str) -> str:
    # looked up on first use: importlib.metadata costs about 0.05 s, a tenth of a cached answer
    if name != "__version__":
        raise AttributeError(f"module 'evaluation' has no attribute {name!r}")
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("gridscore")
    except PackageNotFoundError:  # running from a source tree that is not installed
        return "0.0.0+local"
