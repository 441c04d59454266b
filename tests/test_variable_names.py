"""A source may store the compared variable under its own name (``Source.variables``).

Real files on disk; the runs are the reference field plus a known constant, so the bias
is that constant (common practice: the mean of f + c is mean(f) + c, area weights sum
to one).
"""

from __future__ import annotations

import itertools
import json

import pytest
from cfdata import cf_dataset, write_cf

from app.cli import main
from evaluation.catalog import Collection
from evaluation.errors import InputError
from evaluation.scoring import Comparison, Source

COMMON = dict(dlat=15.0, start_year=1995, years=3, dtype="float64")


def _write(path, ds):
    encoding = {
        name: {"_FillValue": None}
        for name in itertools.chain(ds.coords, [v for v in ds.data_vars if "nv" in ds[v].dims])
    }
    ds.to_netcdf(path, encoding=encoding)
    return path


@pytest.fixture
def files(tmp_path):
    ref = write_cf(tmp_path / "ref.nc", **COMMON)
    # the run stores surface temperature as TS (no standard_name), and a decoy 'tas' 10 K off
    ds = cf_dataset(variable="TS", standard_name=None, offset=1.5, **COMMON)
    ds["tas"] = ds["TS"] + 10.0
    ds["tas"].attrs = {"units": "K", "standard_name": "air_temperature"}
    odd = tmp_path / "a=b,c"  # a folder name holding '=' and ','
    odd.mkdir()
    run = _write(odd / "run.nc", ds)
    return {"ref": ref, "run": run, "dir": tmp_path}


def _bias(cmp: Comparison, name: str) -> float:
    t = cmp.scores()
    return float(t.loc[(t.model == name) & (t.metric == "bias"), "value"].iloc[0])


def test_the_mapped_name_is_read(files):
    ref = Source("obs", "reference", str(files["ref"]))
    plain = Comparison(
        reference=ref, models=[Source("run-a", "model", str(files["run"]))], variable="tas", cache=False
    )
    mapped = Comparison(
        reference=ref,
        models=[Source("run-a", "model", str(files["run"]), variables={"tas": "TS"})],
        variable="tas",
        cache=False,
    )
    assert _bias(plain, "run-a") == pytest.approx(11.5, rel=1e-9)
    assert _bias(mapped, "run-a") == pytest.approx(1.5, rel=1e-9)
    assert mapped.provenance()["variable_names"] == {"run-a": "tas read from TS"}
    assert "variable_names" not in plain.provenance()


def _score_args(files) -> list[str]:
    """`score` of run-a against obs for tas: the command line the CLI tests below share."""
    return ["score", "--reference", f"obs={files['ref']}", "--model", f"run-a={files['run']}", "--variable", "tas"]


def test_cli_variable_in_with_odd_paths_and_the_cache(files, tmp_path):
    # the same files scored twice: once without, once with the mapping; the persistent
    # cache must not hand the first answer to the second request
    out1, out2 = tmp_path / "plain.json", tmp_path / "mapped.json"
    base = _score_args(files)
    assert main([*base, "--output", str(out1)]) == 0
    assert main([*base, "--variable-in", "run-a=TS", "--output", str(out2)]) == 0

    def bias(path):
        record = json.loads(path.read_text())
        rows = record["table"] if isinstance(record, dict) and "table" in record else record
        text = json.dumps(record)
        return rows, text

    rows1, _ = bias(out1)
    rows2, text2 = bias(out2)
    assert "tas read from TS" in text2
    assert json.dumps(rows1) != json.dumps(rows2)


@pytest.mark.parametrize(
    ("pair", "needle"),
    [("nobody=TS", "no source 'nobody'"), ("run-a", "NAME=VARIABLE"), ("run-a=", "NAME=VARIABLE")],
)
def test_cli_variable_in_mistakes_exit_2(files, capsys, pair, needle):
    code = main([*_score_args(files), "--variable-in", pair])
    assert code == 2
    assert needle in capsys.readouterr().err


def test_cli_variable_in_absent_name_names_the_file(files, capsys):
    code = main([*_score_args(files), "--variable-in", "run-a=TSX"])
    err = capsys.readouterr().err
    assert code == 2 and "TSX" in err and "run.nc" in err


def test_manifest_variables(files):
    manifest = files["dir"] / "manifest.toml"
    manifest.write_text(
        '[[source]]\nname = "obs"\nrole = "reference"\npaths = ["ref.nc"]\n'
        '[[source]]\nname = "run-a"\nrole = "model"\npaths = ["a=b,c/run.nc"]\nvariables = { tas = "TS" }\n'
    )
    coll = Collection.from_path(manifest)
    run = coll.source("run-a")
    assert (
        dict(run.variables) == {"tas": "TS"}
        and run.name_in_files("tas") == "TS"
        and run.name_in_files("pr") == "pr"
    )
    assert "tas" in coll.variables()
    cmp = Comparison(reference=coll.source("obs"), models=[run], variable="tas", cache=False)
    assert _bias(cmp, "run-a") == pytest.approx(1.5, rel=1e-9)


@pytest.mark.parametrize("value", ['"TS"', "{ tas = 3 }", '{ tas = "" }', '["TS"]'])
def test_manifest_variables_must_be_a_table_of_names(files, value):
    manifest = files["dir"] / "bad.toml"
    manifest.write_text(
        f'[[source]]\nname = "run-a"\nrole = "model"\npaths = ["ref.nc"]\nvariables = {value}\n'
    )
    with pytest.raises(InputError, match="table of names"):
        Collection.from_path(manifest)


def test_a_source_with_names_stays_hashable():
    a = Source("run-a", "model", "x.nc", variables={"tas": "TS"})
    assert hash(a) == hash(Source("run-a", "model", "x.nc")) and a != Source("run-a", "model", "x.nc")


def test_unnamed_reference_whose_path_holds_equals_and_commas(files, tmp_path):
    out = tmp_path / "t.csv"
    code = main(
        [
            "score",
            "--reference",
            str(files["run"]),
            "--model",
            f"run-b={files['ref']}",
            "--variable",
            "tas",
            "--variable-in",
            "run=TS",
            "--output",
            str(out),
        ]
    )
    assert code == 0  # the reference is named after its file stem, 'run'
    import pandas as pd

    t = pd.read_csv(out)
    # the reference is TS (the field + 1.5), the run the field itself: bias -1.5
    assert t.loc[t.metric == "bias", "value"].iloc[0] == pytest.approx(-1.5, rel=1e-9)


def test_dashboard_offers_a_variable_a_run_stores_under_its_own_name(files):
    from app.views.results import Results

    manifest = files["dir"] / "manifest.toml"
    manifest.write_text(
        '[[source]]\nname = "obs"\nrole = "reference"\npaths = ["ref.nc"]\n'
        '[[source]]\nname = "run-b"\nrole = "model"\npaths = ["only_ts.nc"]\nvariables = { tas = "TS" }\n'
    )
    write_cf(files["dir"] / "only_ts.nc", variable="TS", standard_name=None, offset=1.5, **COMMON)
    res = Results(Collection.from_path(manifest))
    assert "tas" in res.variables() and res.models("tas") == ["run-b"]
    cmp = Comparison(reference=res.source("obs"), models=[res.source("run-b")], variable="tas", cache=False)
    assert _bias(cmp, "run-b") == pytest.approx(1.5, rel=1e-9)


def _fluxes(names, offsets, standard):
    ds = cf_dataset(
        variable=names[0],
        units="W m-2",
        standard_name="toa_incoming_shortwave_flux" if standard else None,
        offset=offsets[0],
        **COMMON,
    )
    for name, off, sn in zip(
        names[1:], offsets[1:], ("toa_outgoing_shortwave_flux", "toa_outgoing_longwave_flux"), strict=True
    ):
        ds[name] = ds[names[0]] - offsets[0] + off
        ds[name].attrs = {"units": "W m-2", **({"standard_name": sn} if standard else {})}
    return ds


def test_a_derived_variable_from_inputs_stored_under_other_names(tmp_path):
    # net TOA flux = rsdt - rsut - rlut; the run's fields are the reference's plus
    # (+2, +0.5, -1) W m-2, so the bias is 2 - 0.5 + 1 = 2.5 (common practice: linearity)
    ref = _write(tmp_path / "ref_flux.nc", _fluxes(("rsdt", "rsut", "rlut"), (0.0, -100.0, -10.0), True))
    run = _write(tmp_path / "run_flux.nc", _fluxes(("SW_IN_TOP", "SW_OUT_TOP", "LW_OUT_TOP"), (2.0, -99.5, -11.0), False))
    src = Source("run-f", "model", str(run), variables={"rsdt": "SW_IN_TOP", "rsut": "SW_OUT_TOP", "rlut": "LW_OUT_TOP"})
    cmp = Comparison(
        reference=Source("obs", "reference", str(ref)), models=[src], variable="toa_net", cache=False
    )
    assert _bias(cmp, "run-f") == pytest.approx(2.5, rel=1e-9)
    assert cmp.provenance()["variable_names"] == {
        "run-f": "rsdt read from SW_IN_TOP; rsut read from SW_OUT_TOP; rlut read from LW_OUT_TOP"
    }
