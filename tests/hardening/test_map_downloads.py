"""The map downloads (CF NetCDF with the significance dots as a flag variable) of runs and an
ensemble with hostile names: `gridscore check` reads them back as a climatology of the
period asked for, names in the attributes are plain text of the file (no markup run, no path
made of them), and the provenance lists the files of the map's own sources only.

Built as the dashboard's map download builds them (``app.views.maps.with_mask`` and
``evaluation.export.field_bytes``); the period's first season start is known from the files
(2001-2003, ANN: January 2001; CF conventions 7.4 climatological statistics).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
import xarray as xr

from app.views.maps import with_mask
from app.views.results import Results
from evaluation.catalog import Collection
from evaluation.export import field_bytes, provenance_for

from .cli import run
from .hostile import ENSEMBLE, ENSEMBLE_RUNS, ensemble_collection

RUNS = ENSEMBLE_RUNS


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    root = tmp_path_factory.mktemp("downloads")
    out = Results(Collection.from_path(ensemble_collection(root)))
    yield out
    out.close()


@pytest.mark.parametrize("source", [RUNS["m3"][0], RUNS["m1"][0], f"{ENSEMBLE} (ensemble mean)"])
def test_a_map_download_with_dots_is_read_back(capsys, results: Results, tmp_path: Path, source: str) -> None:
    field = results.map_field("ref", "tas", "2001-2003", "ANN", "difference", source)
    mask = results.comparison("ref", "tas", "2001-2003").significance_mask(source, "ANN")
    record = results.provenance("ref", "tas", "2001-2003", "global", "ANN")
    path = tmp_path / "map.nc"
    path.write_bytes(field_bytes(with_mask(field, mask, "tas"), provenance=provenance_for(record, {"ref", source})))
    outcome = run(capsys, "check", str(path))
    assert outcome.code == 0, outcome.out
    assert "climatology" in outcome.out and "2001-01 to 2001-01" in outcome.out and "flag variable" in outcome.out
    with xr.open_dataset(path) as ds:
        names = {v for v in ds.data_vars}
        assert names == {"tas_difference", "tas_difference_significance"}, names
        assert ds["tas_difference"].attrs["ancillary_variables"] == "tas_difference_significance"
        text = json.dumps({k: str(v) for k, v in ds.attrs.items()}, ensure_ascii=False)
    # the provenance names the map's sources only: the reference and this run (an ensemble
    # mean: its members' files), never the other runs
    others = [name for name, _, _ in RUNS.values() if name != source]
    if source.startswith(ENSEMBLE):
        others = [RUNS["m3"][0]]
    assert source in text and not any(f'"{o}"' in text or f"'{o}'" in text for o in others), text[:2000]
