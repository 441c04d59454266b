"""Names that would mislead a reader, ensembles, odd file names and hostile attributes through
the command line.

A name is refused (exit 2, one line, nothing written) when it holds a control character, a
character that turns the direction of the text after it (Unicode's bidirectional controls,
UAX #9; the "Trojan Source" attack, CVE-2021-42574, hides code this way) or an invisible one,
or when it ends like the rows gridscore names itself (``(ensemble mean)``, ``(members'
min|max|std)``, ``(reference)``): two rows that read the same are a silently wrong table.
Every line printed for a file keeps those characters escaped (``\\u202e``), never raw.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from cfdata import write_cf

from evaluation.catalog import Collection
from evaluation.errors import InputError
from evaluation.names import UNSAFE

from .cli import run

GRID = {"dlat": 15.0, "years": 2, "start_year": 2001}
RLO = "\u202e"  # RIGHT-TO-LEFT OVERRIDE (Unicode, UAX #9)
NFC, NFD = "m\u00e9tis", "me\u0301tis"  # 'métis' composed and decomposed (Unicode UAX #15)


@pytest.fixture(scope="module")
def files(tmp_path_factory) -> Path:
    d = tmp_path_factory.mktemp("names")
    write_cf(d / "ref.nc", **GRID)
    for i, offset in enumerate((1.0, 1.5, 2.0)):
        write_cf(d / f"m{i}.nc", offset=offset, **GRID)
    write_cf(d / "short.nc", offset=1.0, dlat=15.0, years=1, start_year=2001)
    write_cf(d / f"v{RLO}name.nc", variable=f"t{RLO}as", **GRID)
    write_cf(d / "escape.nc", calendar="x\x1b]0;title\x07" + RLO, **GRID)
    (d / "out").mkdir()
    return d


def _three(d: Path, *extra: str, names=("a", "b", "c"), ref: str = "ref") -> list[str]:
    argv = ["score", "--reference", f"{ref}={d / 'ref.nc'}"]
    for name, i in zip(names, range(3), strict=True):
        argv += ["--model", f"{name}={d / f'm{i}.nc'}"]
    return [*argv, "--variable", "tas", "--season", "ANN", "--output", str(d / "out" / "t.csv"), *extra]


CASES = [
    ("model-newline", lambda d: _three(d, names=("a\nb", "b", "c"))),
    ("model-tab", lambda d: _three(d, names=("a\tb", "b", "c"))),
    ("model-escape-sequence", lambda d: _three(d, names=("a\x1b[2Jb", "b", "c"))),
    ("model-right-to-left-override", lambda d: _three(d, names=(f"a{RLO}cod.exe", "b", "c"))),
    ("model-right-to-left-isolate", lambda d: _three(d, names=("a\u2067x\u2069", "b", "c"))),
    ("model-zero-width-space", lambda d: _three(d, names=("a\u200b", "a", "c"))),
    ("model-byte-order-mark", lambda d: _three(d, names=("\ufeffa", "b", "c"))),
    ("model-named-like-an-ensemble-mean", lambda d: _three(d, "--ensemble", "e=b,c", names=("e (ensemble mean)", "b", "c"))),
    ("model-named-like-a-spread-row", lambda d: _three(d, "--ensemble", "e=b,c", names=("e (members' std)", "b", "c"))),
    ("model-named-like-a-renamed-reference", lambda d: _three(d, names=("a (reference)", "b", "c"), ref="a")),
    ("reference-named-like-an-ensemble-mean", lambda d: _three(d, ref="x (ensemble mean)")),
    ("ensemble-named-like-its-mean", lambda d: _three(d, "--ensemble", "e (ensemble mean)=a,b")),
    ("ensemble-right-to-left", lambda d: _three(d, "--ensemble", f"e{RLO}x=a,b")),
    ("ensemble-newline", lambda d: _three(d, "--ensemble", "e\nx=a,b")),
    ("ensemble-empty-name", lambda d: _three(d, "--ensemble", "=a,b")),
    ("ensemble-very-long-name", lambda d: _three(d, "--ensemble", "e" * 5000 + "=a,b")),
    ("model-very-long-name", lambda d: _three(d, names=("m" * 201, "b", "c"))),
    ("ensemble-no-members", lambda d: _three(d, "--ensemble", "e=")),
    ("ensemble-one-member", lambda d: _three(d, "--ensemble", "e=a")),
    ("ensemble-same-member-twice", lambda d: _three(d, "--ensemble", "e=a,a")),
    ("ensemble-unknown-member", lambda d: _three(d, "--ensemble", "e=a,zz")),
    ("ensemble-named-as-a-run", lambda d: _three(d, "--ensemble", "a=a,b")),
    ("ensemble-run-in-two", lambda d: _three(d, "--ensemble", "e=a,b", "--ensemble", "f=b,c")),
    ("ensemble-name-twice", lambda d: _three(d, "--ensemble", "e=a,b", "--ensemble", "e=c,a")),
    ("ensemble-html", lambda d: _three(d, "--ensemble", "<img src=x onerror=alert(1)>=a,b")),
    # one name in two spellings: 'é' as one character and as 'e' + U+0301 are canonically
    # equivalent (Unicode UAX #15, NFC) and read the same in every table
    ("model-names-equal-in-nfc", lambda d: _three(d, names=(NFC, NFD, "c"))),
    ("reference-and-model-equal-in-nfc", lambda d: _three(d, names=(NFD, "b", "c"), ref=NFC)),
    ("ensemble-named-as-a-run-in-nfc", lambda d: _three(d, "--ensemble", f"{NFD}=b,c", names=(NFC, "b", "c"))),
    ("ensemble-members-of-other-years", lambda d: [x.replace("m2.nc", "short.nc") for x in _three(d, "--ensemble", "e=a,b,c")]),
    ("file-with-a-backslash", lambda d: [*_three(d)[:5], "--model", f"b={d / 'back' / ('b' + chr(92) + 'x.nc')}", "--variable", "tas"]),
    ("variable-with-control-characters", lambda d: ["score", "--reference", str(d / "escape.nc"), "--model", f"a={d / 'm0.nc'}", "--variable", "tas"]),
]


@pytest.mark.parametrize("argv", [pytest.param(c[1], id=c[0]) for c in CASES])
def test_refused_with_one_printable_line(capsys, files: Path, argv) -> None:
    back = files / "back"
    back.mkdir(exist_ok=True)
    shutil.copyfile(files / "m1.nc", back / "b\\x.nc")
    outcome = run(capsys, *argv(files))
    assert outcome.one_line_refusal(), outcome
    assert not UNSAFE.search(outcome.err.rstrip("\n")), repr(outcome.err)  # nothing raw reaches the terminal
    assert sorted(p.name for p in (files / "out").iterdir()) == []


def test_a_backslash_in_a_path_is_named_as_the_cause(capsys, files: Path) -> None:
    (files / "back").mkdir(exist_ok=True)
    shutil.copyfile(files / "m1.nc", files / "back" / "b\\x.nc")
    outcome = run(capsys, "check", str(files / "back" / "b\\x.nc"))
    # netCDF-C reads '\' as a folder separator (common practice for its Windows path handling):
    # the report says so instead of calling a whole file truncated
    assert outcome.code == 2 and "backslash" in outcome.out and "complete NetCDF" not in outcome.out


def test_a_file_whose_name_looks_like_a_glob_is_read_as_itself(capsys, files: Path) -> None:
    odd = files / "odd"
    odd.mkdir(exist_ok=True)
    shutil.copyfile(files / "m0.nc", odd / "run[1].nc")
    outcome = run(capsys, "score", "--reference", str(files / "ref.nc"), "--model", f"a={odd / 'run[1].nc'}", "--variable", "tas",
                  "--season", "ANN")
    assert outcome.code == 0, outcome.err
    assert run(capsys, "check", str(odd / "run[1].nc")).code == 0


def test_check_escapes_direction_and_escape_characters_from_files(capsys, files: Path) -> None:
    outcome = run(capsys, "check", str(files / f"v{RLO}name.nc"), str(files / "escape.nc"))
    assert outcome.code == 2
    assert not UNSAFE.search(outcome.out.replace("\n", "")), repr(outcome.out)
    assert "t\\u202eas" in outcome.out and "\\x1b" in outcome.out
    document = json.loads(run(capsys, "check", "--json", str(files / f"v{RLO}name.nc")).out)
    # JSON keeps the names exactly (json.dumps escapes what JSON needs)
    assert f"t{RLO}as" in json.dumps(document, ensure_ascii=False)


def test_hostile_folder_and_manifest_names_are_refused_for_serving(capsys, tmp_path: Path) -> None:
    for folder in (tmp_path / "lay" / "references" / "ref", tmp_path / "lay" / "runs" / f"a{RLO}b"):
        folder.mkdir(parents=True)
        write_cf(folder / "d.nc", **GRID)
    outcome = run(capsys, "serve", str(tmp_path / "lay"), "--port", "0")
    assert outcome.one_line_refusal() and "rename the folder" in outcome.err and RLO not in outcome.err
    manifest = tmp_path / "manifest.toml"
    entry = '[[source]]\nname = "{}"\nrole = "{}"\npaths = ["lay/references/ref/*.nc"]\n'
    manifest.write_text(entry.format("ref", "reference") + entry.format("x\\u202ey", "model"), encoding="utf-8")
    outcome = run(capsys, "serve", str(manifest), "--port", "0")
    assert outcome.one_line_refusal() and "\\u202e" in outcome.err and RLO not in outcome.err
    manifest.write_text(entry.format("ref", "reference") + entry.format("m", "model").replace('paths', 'ensemble = "e (ensemble mean)"\npaths')
                        + entry.format("n", "model").replace('paths', 'ensemble = "e (ensemble mean)"\npaths'), encoding="utf-8")
    outcome = run(capsys, "serve", str(manifest), "--port", "0")
    assert outcome.one_line_refusal() and "ensemble mean" in outcome.err


@pytest.mark.parametrize("name", ["a/b", "<svg onload=alert(1)>", "{x}", "=cmd", "t\u202eas", "two words"])
def test_a_manifest_variable_name_a_netcdf_file_cannot_hold_is_refused(capsys, tmp_path: Path, name: str) -> None:
    # the dashboard's map downloads name their variable after it; netCDF-C refuses '/' and
    # odd first characters (NetCDF users guide, "Naming conventions"), CF 2.3 recommends
    # letters, digits and '_'
    for folder in ("ref", "a"):
        (tmp_path / folder).mkdir()
        write_cf(tmp_path / folder / "d.nc", variable="TS", standard_name=None, **GRID)
    entry = '[[source]]\nname = "{}"\nrole = "{}"\npaths = ["{}/*.nc"]\nvariables = {{ {} = "TS" }}\n'
    key = json.dumps(name)  # a TOML basic string (JSON's escapes are TOML's)
    (tmp_path / "manifest.toml").write_text(entry.format("ref", "reference", "ref", key) + entry.format("a", "model", "a", key),
                                            encoding="utf-8")
    outcome = run(capsys, "serve", str(tmp_path / "manifest.toml"), "--port", "0")
    assert outcome.one_line_refusal() and "NetCDF file cannot hold" in outcome.err, outcome
    assert not UNSAFE.search(outcome.err.rstrip("\n"))


def test_names_in_other_scripts_are_kept(capsys, files: Path) -> None:
    # letters of any script are names (Unicode letters, category L*); Persian needs the zero-width
    # non-joiner U+200C inside words (Unicode Standard, chapter 9.2), emoji sequences the joiner U+200D
    names = ("m\u00e9tis-ctl", "\u03b8-\u03b1\u03c1\u03c7\u03ae", "\u06a9\u0627\u0631\u200c\u0628\u0631")
    outcome = run(capsys, *_three(files, names=names), "--ensemble", "\U0001f469\u200d\U0001f52c=" + ",".join(names[:2]))
    assert outcome.code == 0, outcome.err
    written = (files / "out" / "t.csv").read_text(encoding="utf-8")
    (files / "out" / "t.csv").unlink()
    for name in names:
        assert f"\n{name}," in written
    assert "\U0001f469\u200d\U0001f52c (ensemble mean)" in written


def test_a_folder_name_in_two_spellings_is_refused(tmp_path: Path) -> None:
    # a folder copied from macOS keeps 'é' decomposed (e + U+0301); beside 'métis' typed on Linux
    # the two sources would be two rows that read the same
    for folder in (tmp_path / "lay" / "references" / "ref", tmp_path / "lay" / "runs" / NFC, tmp_path / "lay" / "runs" / NFD):
        folder.mkdir(parents=True)
        write_cf(folder / "d.nc", **GRID)
    with pytest.raises(InputError, match="two sources are called"):
        Collection.from_path(tmp_path / "lay")
