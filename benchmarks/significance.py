"""What the significance tests and the bootstrap intervals add to scoring, measured.

Run ``python benchmarks/significance.py [SAMPLE_FOLDER]`` (default ``sample_output``).  It
scores near-surface air temperature of the sample's runs against its first reference
(regions global and land, seasons ANN and DJF) and prints, with the machine load:

* the time of ``Comparison.scores`` once the reductions are in memory, and the parts of it
  spent in the per-cell test with FDR control (``bias_signif_area``), in building the
  bootstrap's n x n matrices and in the bootstrap draws;
* the same bootstrap parts on a synthetic 0.25° grid (720 x 1440 cells, 30 years, 5 runs),
  where the draws still cost the same and only the matrices grow with the grid.

Re-runnable; nothing is written.  Times are CPU seconds of this process (wall time too for the
whole call): on a loaded machine read the load printed beside them.
"""

from __future__ import annotations

import os
import sys
import time
from collections import defaultdict
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from evaluation import bootstrap, scoring  # noqa: E402
from evaluation.catalog import Collection  # noqa: E402

spent: dict[str, float] = defaultdict(float)  # CPU seconds of this process (the machine is shared)


def timed(owner, name: str, label: str) -> None:
    function = getattr(owner, name)

    def wrapper(*args, **kwargs):
        start = time.process_time()
        try:
            return function(*args, **kwargs)
        finally:
            spent[label] += time.process_time() - start

    setattr(owner, name, wrapper)


def sample(folder: Path) -> None:
    collection = Collection.from_path(folder)
    reference = next(s for s in collection.sources if s.role == "reference")
    runs = [s for s in collection.sources if s.role == "model"]
    cmp = scoring.Comparison(reference=reference, models=runs, variable="tas", cache=False)
    kept = [m.name for m in cmp.models]
    cmp.prepare(["ANN", "DJF"])
    start = time.process_time()
    from scipy import stats  # noqa: F401  (imported once per process by the tests; measured apart)

    print(f"importing scipy.stats: {time.process_time() - start:.2f} s CPU (once per process)")
    timed(scoring.Comparison, "_significant_cells", "per-cell test + FDR")
    timed(bootstrap, "error_moments", "bootstrap n x n matrices")
    timed(bootstrap, "difference_intervals", "bootstrap draws and intervals")
    start, wall = time.process_time(), time.perf_counter()
    cmp.scores(regions=["global", "land"], seasons=["ANN", "DJF"])
    total, wall = time.process_time() - start, time.perf_counter() - wall
    grid = cmp._target_grid
    print(f"sample: {len(kept)} runs on a {grid.sizes['lat']}x{grid.sizes['lon']} grid, {cmp.period}, 2 regions x 2 seasons")
    print(f"  Comparison.scores (reductions in memory): {total:.2f} s CPU ({wall:.2f} s wall)")
    for label, seconds in spent.items():
        print(f"  of which {label}: {seconds:.3f} s CPU ({100 * seconds / total:.0f} %)")


def large() -> None:
    rng = np.random.default_rng(0)
    years, cells, runs = 30, 720 * 1440, 5
    w = np.cos(np.deg2rad(np.repeat(np.linspace(-89.875, 89.875, 720), 1440)))
    moments = {}
    built = 0.0
    for k in range(runs):
        diff = rng.standard_normal((years, cells), dtype=np.float32).astype("float64") + 0.1 * k
        start = time.process_time()
        moments[f"run-{k}"] = bootstrap.error_moments(diff, w, np.arange(years))
        built += time.process_time() - start
        del diff
    start = time.process_time()
    bootstrap.difference_intervals(moments)
    drawn = time.process_time() - start
    print(f"0.25° grid ({cells} cells), {years} years, {runs} runs, one region:")
    print(f"  n x n matrices: {built:.2f} s CPU ({built / runs:.2f} s per run); "
          f"{bootstrap.RESAMPLES} draws and intervals: {drawn:.3f} s CPU")


if __name__ == "__main__":
    print(f"load average (1, 5, 15 min): {os.getloadavg()}")
    sample(Path(sys.argv[1]) if len(sys.argv) > 1 else ROOT / "sample_output")
    large()
