"""Hostile strings and small collections for the hardening tests.

Every string here is something a person (or a file written by someone else) can put in
a name: a folder under ``runs/``, a manifest ``name``, a NetCDF attribute or a link.
The payloads call ``alert`` (caught by a dialog listener) or set ``window.__xss``.
"""

from __future__ import annotations

from pathlib import Path

from cfdata import write_cf

#: A folder name that is an HTML element with a handler (valid on POSIX file systems).
FOLDER_IMG = "<img src=x onerror=alert(77)>"
#: Braces are format fields for HoloViews titles; quotes end HTML attributes.
FOLDER_BRACES = "run {x} \"q\" 'a'"
#: A manifest name with a script element and a closing tag (a "/" is fine in a manifest).
MANIFEST_SCRIPT = "<script>alert(78)</script>"
MANIFEST_SVG = "<svg onload=alert(79)>{y}"
#: A spreadsheet formula from a run's name.
FORMULA = "=HYPERLINK(\"http://example.invalid\",\"x\")"
#: What a file attribute may carry.
ATTRIBUTE_IMG = "<img src=y onerror=\"window.__xss='attr'\">"


def write_run(folder: Path, *, offset: float, variable: str = "tas", attrs: dict | None = None,
              years: int = 3, start_year: int = 2001, name: str = "data.nc") -> Path:
    """``years`` years (three from 2001) of monthly data on a 10-degree grid in ``folder/name``."""
    folder.mkdir(parents=True, exist_ok=True)
    return write_cf(
        folder / name, variable=variable, dlat=10.0, years=years, start_year=start_year, offset=offset,
        global_attrs=attrs or {},
    )


def toml_text(text: str) -> str:
    """A TOML basic string holding ``text`` literally."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def layout_collection(root: Path) -> Path:
    """A folder collection (no manifest) whose run and reference names are hostile folder names."""
    write_run(root / "references" / "ref {0}", offset=0.0)
    write_run(root / "runs" / FOLDER_IMG, offset=1.0)
    write_run(root / "runs" / FOLDER_BRACES, offset=-0.5)
    return root


def manifest_collection(root: Path) -> Path:
    """A manifest collection whose names, descriptions and file attributes are hostile."""
    attrs = {"title": ATTRIBUTE_IMG, "history": MANIFEST_SCRIPT}
    write_run(root / "ref", offset=0.0, attrs=attrs)
    write_run(root / "a", offset=1.0, attrs=attrs)
    write_run(root / "b", offset=2.0, attrs=attrs)
    write_run(root / "c", offset=-1.0, attrs=attrs)
    manifest = root / "manifest.toml"
    manifest.write_text(
        f"title = {toml_text('T ' + MANIFEST_SCRIPT)}\n"
        f'[[source]]\nname = {toml_text(MANIFEST_SVG)}\nrole = "reference"\npaths = ["ref/*.nc"]\n'
        f'[[source]]\nname = {toml_text(MANIFEST_SCRIPT)}\nrole = "model"\npaths = ["a/*.nc"]\n'
        f"description = {toml_text(ATTRIBUTE_IMG)}\n"
        f'[[source]]\nname = {toml_text(FORMULA)}\nrole = "model"\npaths = ["b/*.nc"]\n'
        f'[[source]]\nname = {toml_text("-1+1 {z}")}\nrole = "model"\npaths = ["c/*.nc"]\n',
        encoding="utf-8",
    )
    return manifest


#: An ensemble whose name is markup, of two runs named as formulas, beside a run named as markup:
#: folder -> (name, ensemble or None, offset from the reference).
ENSEMBLE = "<svg onload=alert(83)> {e}"
ENSEMBLE_RUNS = {"m1": ("=cmd|' /C calc'!A0", ENSEMBLE, 1.0), "m2": ("-1+1 {z}", ENSEMBLE, 1.5),
                 "m3": ("<img src=x onerror=alert(82)>", None, -0.5)}


def ensemble_collection(root: Path) -> Path:
    """A manifest collection of :data:`ENSEMBLE_RUNS` and a reference ``ref``; returns the manifest."""
    write_run(root / "ref", offset=0.0)
    text = '[[source]]\nname = "ref"\nrole = "reference"\npaths = ["ref/*.nc"]\n'
    for folder, (name, ensemble, offset) in ENSEMBLE_RUNS.items():
        write_run(root / folder, offset=offset)
        text += f'[[source]]\nname = {toml_text(name)}\nrole = "model"\npaths = ["{folder}/*.nc"]\n'
        text += f"ensemble = {toml_text(ensemble)}\n" if ensemble else ""
    (root / "manifest.toml").write_text(text, encoding="utf-8")
    return root / "manifest.toml"
