"""Former home of cell geometry and remapping; everything now lives in :mod:`evaluation.grids`.

Kept as a re-export so that existing imports keep working.
"""

from __future__ import annotations

from .grids import EARTH_RADIUS, REGRID_METHODS, cell_area, grid_of, infer_bounds, regrid, same_grid
from .grids.remap import RegridMethod

__all__ = ["EARTH_RADIUS", "REGRID_METHODS", "RegridMethod", "cell_area", "infer_bounds", "grid_of", "same_grid", "regrid"]
