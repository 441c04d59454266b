"""The ``gridscore`` command line: score, budget, check, demo, serve, cache.

Exit codes: 0 success; 2 bad input, with one line naming the file, the problem and the
remedy; 3 an unexpected internal error (one line; set GRIDSCORE_DEBUG=1 for the
traceback).  Nothing is written half-way: exporters write to a temporary file and
rename it into place.
"""

from __future__ import annotations

import argparse
import contextlib
import dataclasses
import glob
import os
import sys
import warnings
from collections.abc import Iterator, Sequence
from pathlib import Path

EXIT_OK, EXIT_INPUT, EXIT_INTERNAL = 0, 2, 3


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage errors as one line and exit 2, like any bad input."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.exit(EXIT_INPUT, f"gridscore: {message} — see '{self.prog} --help'\n")


def _source_arg(text: str, *, role: str, default_name: str | None = None):
    from evaluation.errors import InputError
    from evaluation.request import Source

    name, sep, path = text.partition("=")
    if sep and default_name is not None and _names_files(text):
        sep = ""  # an unnamed path that itself holds '=' (a folder 'a=b')
    if not sep:
        if default_name is None:
            raise InputError(f"'{text}' is not NAME=PATH", remedy="write --model NAME=PATH, e.g. --model run-a='runs/a/*.nc'")
        name, path = _name_from_path(text), text
    name, path = name.strip(), path.strip()
    if not name or not path:
        raise InputError(f"'{text}' is not NAME=PATH", remedy="write --model NAME=PATH, e.g. --model run-a='runs/a/*.nc'")
    from evaluation.names import name_problem

    problem = name_problem(name)
    if problem:
        raise InputError(f"the name '{name}' of --{'model' if role == 'model' else 'reference'} {text[:60]!r} {problem}",
                         remedy=f"give the source another name: --{'model' if role == 'model' else 'reference'} NAME=PATH")
    # comma-separated files, unless the whole text names files (a folder 'b,c')
    paths = tuple(p for p in path.split(",") if p) if "," in path and not _names_files(path) else (path,)
    return Source(name=name, role=role, paths=paths)


def _names_files(text: str) -> bool:
    """Whether ``text`` as a whole is an existing file or a glob matching one."""
    text = os.path.expanduser(text.strip())
    return os.path.isfile(text) or (glob.has_magic(text) and bool(glob.glob(text)))


def _with_names_in_files(sources: list, pairs: Sequence[str], *, variable: str) -> list:
    """Sources with ``--variable-in NAME=STORED`` applied: NAME's files hold ``variable`` as STORED.

    NAME is split off at the first '=' (source names never hold one); STORED is taken
    verbatim, so a name in the files may hold any character.
    """
    from evaluation.errors import InputError

    stored: dict[str, str] = {}
    for text in pairs:
        name, sep, in_files = text.partition("=")
        name, in_files = name.strip(), in_files.strip()
        known = [s.name for s in sources]
        if not sep or not name or not in_files:
            raise InputError(f"'{text}' is not NAME=VARIABLE", remedy=f"write --variable-in NAME=VARIABLE, e.g. --variable-in {known[-1]}=TS")
        if name not in known:
            raise InputError(f"--variable-in names no source '{name}'", remedy=f"use one of {', '.join(known)}")
        if stored.get(name, in_files) != in_files:
            raise InputError(f"--variable-in gives two names for '{name}'", remedy="give one --variable-in per source")
        stored[name] = in_files
    return [dataclasses.replace(s, variables={**s.variables, variable: stored[s.name]}) if s.name in stored else s for s in sources]


def _name_from_path(path: str) -> str:
    """A readable name for an unnamed source: the file stem, or the folder of a glob."""
    parts = Path(path).parts
    if glob.has_magic(path):
        plain = [p for p in parts[:-1] if not glob.has_magic(p)]
        return plain[-1] if plain else "reference"
    return Path(path).stem or "reference"


@contextlib.contextmanager
def _progress(enabled: bool) -> Iterator[None]:
    """dask's progress bar, on an interactive terminal only."""
    if enabled and sys.stderr.isatty():
        from dask.diagnostics import ProgressBar

        with ProgressBar(minimum=1.0, out=sys.stderr):
            yield
    else:
        yield


def _scheduler(args) -> contextlib.AbstractContextManager:
    """Connect to a dask.distributed scheduler, start a local cluster, or use threads."""
    address = getattr(args, "scheduler", None)
    workers = getattr(args, "workers", None)
    if not address and workers is None:  # --workers 0 is refused by connect, not ignored
        import dask
        import dask.threaded

        # dask's default threads, given as the function: a scheduler given by name or none
        # makes every compute import dask.distributed to look for a client (0.4 s a command)
        return dask.config.set(scheduler=dask.threaded.get)
    from evaluation.engine import connect

    return connect(address=address, workers=workers)


def _check_output(path: str | None) -> None:
    """Refuse an unknown output format before any work is done."""
    if path:
        from evaluation.plainfiles import check_table_path

        check_table_path(path)


def _cmd_score(args) -> int:
    _check_output(args.output)

    # the first --reference is the primary; every further one an alternative reference
    references = [_source_arg(r, role="reference", default_name="reference") for r in args.reference]
    models = [_source_arg(m, role="model") for m in args.model]
    sources = _with_names_in_files([*references, *models], args.variable_in or [], variable=args.variable)
    references, models = sources[: len(references)], sources[len(references):]
    references = [
        dataclasses.replace(r, name=f"{r.name} (reference)") if any(m.name == r.name for m in models) else r for r in references
    ]
    reference, alternatives = references[0], references[1:]
    ensembles = _ensembles_arg(args.ensemble or [], models, references)
    regions = args.region or ["global"]
    seasons = args.season or ["ANN"]
    if not ensembles and _answer_from_cache(args, reference=reference, alternatives=alternatives, models=models, regions=regions, seasons=seasons):
        return EXIT_OK
    from evaluation.export import write_table
    from evaluation.scoring import score_table

    with _scheduler(args), _progress(True):
        table, provenance = score_table(
            reference=reference, models=models, variable=args.variable, regions=regions, seasons=seasons,
            period=args.period, regrid=args.regrid, level=args.level, target_grid=args.target_grid, alternatives=alternatives,
            ensembles=ensembles,
        )
    _print_omissions(provenance)
    period = table["period"].iloc[0] if len(table) else args.period
    units = table.loc[table["metric"] == "mean", "units"].iloc[0] if len(table) else ""
    if args.output:
        write_table(table, args.output, provenance=provenance)
        print(f"wrote {len(table)} rows to {args.output}", file=sys.stderr)
    else:
        level = f" at {table['level'].iloc[0]}" if len(table) and table["level"].iloc[0] else ""
        if alternatives:
            for against, part in table.groupby("reference", sort=False):
                _print_wide(part, title=f"{args.variable}{level} against {against}, {period} ({units})")
                print()
            print(f"Observational uncertainty: {_rule()}")
        else:
            _print_wide(table, title=f"{args.variable}{level} against {reference.name}, {period} ({units})")
    return EXIT_OK


def _answer_from_cache(args, *, reference, alternatives, models, regions, seasons) -> bool:
    """Write a CSV or JSON table the cache holds, with the standard library only; False when it holds none.

    The same key, messages and bytes as :func:`evaluation.scoring.score_table` followed by
    :func:`evaluation.export.write_table`, without importing numpy, pandas or xarray: a
    cached answer takes about 0.1 s instead of 1.5 s of imports.
    """
    if not args.output or Path(args.output).suffix.lower() not in (".csv", ".json"):
        return False
    from evaluation.cache import default_cache
    from evaluation.plainfiles import write_tidy
    from evaluation.request import scores_key

    store = default_cache()
    if store is None:
        return False
    key = scores_key(reference=reference, alternatives=alternatives, models=models, variable=args.variable, regions=regions,
                     seasons=seasons, period=args.period, regrid=args.regrid, level=args.level, target_grid=args.target_grid)
    hit = store.get_json(key)
    if hit is None:
        return False
    _print_omissions(hit["provenance"])
    write_tidy(hit["table"], args.output, provenance=hit["provenance"])
    print(f"wrote {len(hit['table']['model'])} rows to {args.output}", file=sys.stderr)
    return True


def _ensembles_arg(texts: Sequence[str], models: list, references: list) -> tuple:
    """``--ensemble NAME=RUN1,RUN2``: the runs (``--model`` names) grouped as an ensemble."""
    from evaluation.ensembles import check_ensembles, parse_ensemble_arg

    return check_ensembles([parse_ensemble_arg(t) for t in texts], [m.name for m in models], others=[r.name for r in references])


def _rule() -> str:
    from evaluation.uncertainty import RULE

    return RULE


def _print_omissions(provenance: dict) -> None:
    """One stderr line per note and per left-out source or season (a partial table)."""
    for note in provenance.get("notes", []):
        print(f"gridscore: note: {note}", file=sys.stderr)
    for o in provenance.get("omitted", []):
        print(f"gridscore: left out: {o['source']} {o['season']}: {o['reason']}", file=sys.stderr)


def _print_wide(table, *, title: str) -> None:
    from evaluation.export import wide_table

    wide = wide_table(table)
    print(title)
    print(wide.to_markdown(index=False, floatfmt=".4g"))
    _print_best(table)


def _print_best(table) -> None:
    """Which run is best by more than sampling noise, per region and season (evaluation.bootstrap.BEST_RULE)."""
    from evaluation.bootstrap import BEST_RULE, GUARDED_BEST, confirmed_best

    if not set(GUARDED_BEST.values()) & set(table["metric"]):
        return
    best = confirmed_best(table)
    parts = []
    for region, season in table[["region", "season"]].drop_duplicates().itertuples(index=False):
        here = best[(best["region"] == region) & (best["season"] == season)]
        named = {m: ", ".join(here.loc[here["metric"] == m, "model"]) or "none" for m in ("rmse", "bias")}
        parts.append(f"{region} {season}: RMSE {named['rmse']}, bias {named['bias']}")
    print("Best by more than sampling noise: " + "; ".join(parts))
    print(f"  ({BEST_RULE})")


def _cmd_budget(args) -> int:
    from evaluation.budget import budget_table
    from evaluation.export import write_table

    _check_output(args.output)
    models = [_source_arg(m, role="model") for m in args.model]
    with _scheduler(args), _progress(True):
        table = budget_table(models, period=args.period)
    if args.output:
        from evaluation.budget import budget_provenance

        write_table(table, args.output, provenance=budget_provenance(models, table))  # the files read, not every file
        print(f"wrote {len(table)} rows to {args.output}", file=sys.stderr)
    else:
        wide = table.pivot_table(index=["model", "period"], columns="metric", values="value", sort=False).reset_index()
        print("Top-of-atmosphere energy budget (W m-2, K; drift per century)")
        print(wide.to_markdown(index=False, floatfmt=".4g"))
    return EXIT_OK


def _cmd_check(args) -> int:
    """Exit 0 when every file can be scored, 2 when any cannot (problems and notes apart)."""
    from evaluation.checking import check_paths, to_json

    reports = check_paths(args.paths)
    if args.json:
        print(to_json(reports))
    else:
        for report in reports:
            for line in report.lines():
                print(line)
        good = sum(r.can_score for r in reports)
        print(f"{good} of {len(reports)} files can be scored")
    return EXIT_OK if all(r.can_score for r in reports) else EXIT_INPUT


def _cmd_demo(args) -> int:
    from evaluation.demo import write_demo

    kwargs = {"size": args.size}
    if args.years:
        kwargs["years"] = args.years
    manifest = write_demo(args.directory, **kwargs)
    print(f"wrote the demo scenario; manifest: {manifest}")
    return EXIT_OK


def _cmd_serve(args) -> int:
    from app.opening import open_collection

    # the collection opens (and, without a cluster, its first numbers are made) while Panel loads
    opened = None if args.scheduler else open_collection(args.path)
    # with the server, the page's modules (every view): the first page imported them while
    # its document was built, after the server listened
    import app.dashboard  # noqa: F401
    from app.server import serve

    serve(
        args.path,
        port=args.port,
        address=args.address,
        allow_websocket_origin=tuple(args.allow_websocket_origin or ()),
        show=args.show,
        scheduler=args.scheduler,
        password=args.password,
        password_file=args.password_file,
        opened=opened,
    )
    return EXIT_OK


def _cmd_cache(args) -> int:
    from evaluation import cache

    store = cache.Cache(args.cache_dir)
    if args.action == "info":
        info = store.info()
        print(f"cache folder: {info['path']}\nentries: {info['entries']}\nsize: {info['size'] / 1e6:.1f} MB of {info['limit'] / 1e6:.0f} MB")
    else:
        removed = store.clear()
        print(f"removed {removed} entries from {store.path}")
    return EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    from evaluation.request import REGRID_METHODS

    parser = _Parser(prog="gridscore", description="Score gridded climate model output against reference fields.")
    sub = parser.add_subparsers(dest="command", required=True, parser_class=_Parser)

    def engine_options(p: argparse.ArgumentParser) -> None:
        p.add_argument("--scheduler", metavar="ADDRESS", help="address of a running dask.distributed scheduler (tcp://host:8786)")
        p.add_argument("--workers", type=int, metavar="N", help="start a local dask cluster with N worker processes")

    p = sub.add_parser("score", help="score model runs against a reference", description="Area-weighted scores of runs against a reference.")
    p.add_argument(
        "--reference", required=True, action="append", metavar="[NAME=]PATH",
        help="reference file, quoted glob, or NAME=PATH (repeatable: the first is the primary; every run is also scored "
        "against each further one, and each further one against the primary)",
    )
    p.add_argument("--model", required=True, action="append", metavar="NAME=PATH", help="a run (repeatable); PATH may be a quoted glob")
    p.add_argument(
        "--ensemble", action="append", metavar="NAME=RUN1,RUN2",
        help="the --model runs RUN1, RUN2, ... are members of ensemble NAME (repeatable): adds the rows of the ensemble-mean "
        "field, 'NAME (ensemble mean)', and the members' spread, 'NAME (members' min|max|std)'",
    )
    p.add_argument("--variable", required=True, metavar="VAR", help="variable name or CF standard_name")
    p.add_argument("--level", metavar="VALUE+UNITS", help="one vertical level of a variable on levels, e.g. 850hPa, 85000Pa, 2m (interpolated where a source lacks it)")
    p.add_argument("--variable-in", action="append", metavar="NAME=VARIABLE", help="source NAME stores the variable under another name, e.g. run-a=TS (repeatable)")
    p.add_argument("--region", action="append", metavar="ID", help="global tropics nh-extratropics sh-extratropics arctic antarctic land ocean box:S,N,W,E (repeatable)")
    p.add_argument("--season", action="append", metavar="S", help="ANN DJF MAM JJA SON JAN … DEC (repeatable)")
    p.add_argument("--period", metavar="YYYY-YYYY", help="inclusive years; default 1991-2020 when covered, else the common years")
    p.add_argument("--regrid", choices=REGRID_METHODS, default="conservative", help="remapping onto the target grid (default conservative)")
    p.add_argument(
        "--target-grid", default="reference", metavar="GRID",
        help="the common regular grid: reference (default), the name of a source, or a spacing in degrees such as 2.5x2.5",
    )
    p.add_argument("--output", metavar="FILE", help="write .csv .xlsx .md .tex .html or .json (default: a table on stdout)")
    engine_options(p)
    p.set_defaults(func=_cmd_score)

    p = sub.add_parser("budget", help="top-of-atmosphere energy budget of runs")
    p.add_argument("--model", required=True, action="append", metavar="NAME=PATH")
    p.add_argument("--period", metavar="YYYY-YYYY")
    p.add_argument("--output", metavar="FILE")
    engine_options(p)
    p.set_defaults(func=_cmd_budget)

    p = sub.add_parser("check", help="whether files can be scored, and what they hold (exit 2 when any cannot)")
    p.add_argument("paths", nargs="+", metavar="PATH", help="files or quoted globs")
    p.add_argument("--json", action="store_true", help="one JSON document: per file path, can_score, problems, notes, grid, frequency, calendar, span, variables")
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser("demo", help="write the invented demo scenario")
    p.add_argument("directory", nargs="?", default="gridscore-demo", metavar="DIR")
    p.add_argument("--size", choices=("small", "large"), default="small", help="small (the bundled sample) or large (benchmark size)")
    p.add_argument("--years", type=int, help="years of data for --size large (30 or 100)")
    p.set_defaults(func=_cmd_demo)

    p = sub.add_parser("serve", help="serve the dashboard")
    p.add_argument("path", nargs="?", metavar="PATH", help="a data folder or manifest (default: the bundled sample)")
    p.add_argument("--port", type=int, default=5006)
    p.add_argument("--address", default="127.0.0.1")
    p.add_argument("--allow-websocket-origin", action="append", metavar="HOST", help="host[:port] allowed to connect (repeatable)")
    p.add_argument("--show", action="store_true", help="open the dashboard in a browser")
    p.add_argument("--scheduler", metavar="ADDRESS", help="address of a running dask.distributed scheduler")
    p.add_argument("--password-file", metavar="FILE",
                   help="require the password on this file's first line (or a JSON object of users); "
                        "or set GRIDSCORE_PASSWORD — for sharing inside a group")
    p.add_argument("--password", metavar="PASSWORD", help="deprecated: visible to every user in ps; use --password-file or GRIDSCORE_PASSWORD")
    p.set_defaults(func=_cmd_serve)

    p = sub.add_parser("cache", help="inspect or clear the on-disk cache")
    p.add_argument("action", choices=("info", "clear"))
    p.add_argument("--cache-dir", metavar="DIR", help="cache folder (default: the user cache directory or $GRIDSCORE_CACHE)")
    p.set_defaults(func=_cmd_cache)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``gridscore`` console script."""
    # One BLAS thread per thread (unless the user chose otherwise): dask already runs a
    # thread per core, and OpenBLAS's own threads then only contend.  Measured on a loaded
    # 2-core machine: the small matrix products of the scores took 15x longer with them.
    # Set before numpy is first imported, which is when OpenBLAS reads it.
    for name in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(name, "1")
    from evaluation.errors import InputError

    parser = build_parser()
    args = parser.parse_args(argv)
    debug = bool(os.environ.get("GRIDSCORE_DEBUG"))
    try:
        from evaluation.request import chunk_megabytes

        chunk_megabytes()  # a bad GRIDSCORE_CHUNK_MB is refused even when results come from the cache
        with warnings.catch_warnings():
            if not debug:
                warnings.simplefilter("ignore")
            return int(args.func(args) or 0)
    except InputError as err:
        print(f"gridscore: {err.message}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("gridscore: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader went away (`gridscore check --json | head`): nothing to report; stdout
        # goes to devnull so that the flush at exit does not fail again (the way shown in
        # Python's signal module documentation, "Note on SIGPIPE")
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return EXIT_INPUT
    except Exception as exc:  # the last line of defence: one line, never a traceback
        if debug:
            raise
        text = " ".join(str(exc).split())[:200]
        print(f"gridscore: internal error ({type(exc).__name__}: {text}) — please report it; GRIDSCORE_DEBUG=1 shows the traceback", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())
