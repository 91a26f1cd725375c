"""The ``velspec`` command line: parse, validate, call the library, report.

User errors (our own exceptions, bad options) become one ``velspec: error: ...`` line on stderr
and exit status 2; ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import argparse
import os
import sys
import textwrap
import warnings
from pathlib import Path

from . import __version__
from .caution import CAUTION
from .errors import ParameterError, VelspecError

EXIT_OK, EXIT_DIFFERENT, EXIT_USAGE = 0, 1, 2


class UsageError(VelspecError):
    """Bad command-line usage."""


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, our prefix, exit 2
        raise UsageError(f"{message} (see velspec {self.prog.split()[-1]} --help)"
                         if " " in self.prog else f"{message} (see velspec --help)")


def _epilog(*examples: str) -> str:
    """An "examples:" block (command, then what it does, in comment form) and the caution."""
    rows = ["examples:"] + [f"  {e}" for e in examples]
    return "\n".join(rows) + "\n\n" + textwrap.fill(CAUTION, 92)


_RAW = argparse.RawDescriptionHelpFormatter


def _work_options(parser: argparse.ArgumentParser, force_help: str) -> None:
    """Options of every command that computes and writes: threads, force, quiet, debug."""
    parser.add_argument("--threads", type=int, metavar="N", help="threads for the kernels (default: all cores)")
    parser.add_argument("--force", action="store_true", help=force_help)
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    parser.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="velspec", description="First-pass velocity analysis of prestack 2D SEG-Y lines.",
                formatter_class=_RAW, epilog=_epilog(
                    "velspec demo                                  # a synthetic line, analysed, in velspec-demo/",
                    "velspec inspect line.sgy                      # survey the headers first",
                    "velspec run line.sgy --out line.h5            # the whole analysis",
                    "velspec picks line.h5 --out picks.csv         # picks as CSV, to review and edit",
                    "velspec revise line.h5 --out new.h5 --picks picks.csv",
                    "velspec compare new.h5 line.h5 --report diff.json",
                    "velspec config line.h5 --out line.toml        # the parameters a result was made with",
                    "velspec export line.h5 --out products --line line.sgy   # SEG-Y sections, CSV, the stack",
                    "velspec report line.h5 --out qc --line line.sgy         # QC pictures and one HTML page",
                    "velspec COMMAND --help                        # the options of one command"))
    p.add_argument("--version", action="version", version=f"velspec {__version__}")
    p.add_argument("--debug", action="store_true", help="show a traceback on error")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    run = sub.add_parser("run", help="velocity spectra, picks and velocity fields for a line",
                         formatter_class=_RAW,
                         description="Velocity spectra for every CMP, automatic picks, stacking and "
                                     "interval velocity fields, written to one HDF5 result file.\n"
                                     "Parameters come from the defaults, then --config, then the options "
                                     "here (the command line wins);\n--print-config prints the merged "
                                     "set as TOML and runs nothing (LINE and --out are then not needed).",
                         epilog=_epilog(
                             "velspec run line.sgy --out line.h5",
                             "velspec run line.sgy --out line.h5 --config deep.toml --vmax 7000 --threads 2",
                             "velspec run line.sgy --out line.h5 --guide regional",
                             "velspec run line.sgy --out line.h5 --picks edits.csv --edit-mode guide",
                             "velspec run line.sgy --out line.h5 --resume    # finish an interrupted run",
                             "velspec run line.sgy --out line.h5 --workers 2  # on a local Dask cluster",
                             "velspec run /shared/line.sgy --out line.h5 --scheduler tcp://10.0.0.5:8786",
                             "velspec run --config deep.toml --nvel 200 --print-config > merged.toml",
                             "velspec run line.sgy --out again.h5 --config merged.toml"))
    run.add_argument("line", metavar="LINE.sgy", nargs="?", help="prestack 2D line, SEG-Y rev 1 or rev 2.0")
    run.add_argument("--out", metavar="RESULT.h5", help="result file to write (needed unless --print-config)")
    run.add_argument("--config", metavar="FILE.toml", help="parameters; the command line wins")
    run.add_argument("--vmin", type=float, metavar="M/S", help="lowest trial stacking velocity (default 1400)")
    run.add_argument("--vmax", type=float, metavar="M/S", help="highest trial stacking velocity (default 6000)")
    run.add_argument("--nvel", type=int, metavar="N", help="number of trial velocities (default 120)")
    run.add_argument("--guide", metavar="regional|FILE.csv",
                     help="guide function: the built-in regional trend, or a CSV (t0_s,vrms_m_s [,cmp])")
    run.add_argument("--picks", metavar="EDITS.csv", help="a person's picks (cmp,t0_s,vrms_m_s) for chosen CMPs")
    run.add_argument("--edit-mode", choices=("replace", "guide"),
                     help="the person's picks replace the automatic ones there, or guide them (default replace)")
    run.add_argument("--print-config", action="store_true",
                     help="print the effective parameters (defaults, --config and options merged) as TOML "
                          "to stdout and stop")
    run.add_argument("--resume", action="store_true",
                     help="finish the interrupted run whose RESULT.h5.partial is beside --out, without redoing "
                          "its finished CMP blocks")
    cluster = run.add_mutually_exclusive_group()
    cluster.add_argument("--workers", type=int, metavar="N",
                         help="scan on a local Dask cluster of N worker processes (needs velspec[cluster])")
    cluster.add_argument("--scheduler", metavar="ADDRESS",
                         help="scan on a running dask.distributed cluster (tcp://HOST:PORT); its workers must "
                              "read LINE.sgy at the same path")
    _work_options(run, force_help="overwrite an existing result, or start again over an interrupted run")

    rev = sub.add_parser("revise", help="rerun the line pass from a result, with a person's picks",
                         formatter_class=_RAW,
                         description="Reruns lateral regularisation, constrained Dix and depth conversion "
                                     "from a result file, without rescanning: with --picks, a person's\npicks "
                                     "replace or guide the automatic ones at the CMPs they name.",
                         epilog=_epilog(
                             "velspec revise line.h5 --out revised.h5 --picks picks.csv",
                             "velspec picks line.h5 --out picks.csv        # the CSV to edit, made first",
                             "velspec revise line.h5 --out guided.h5 --picks picks.csv --edit-mode guide",
                             "velspec revise line.h5 --out wider.h5 --config wider-vint.toml",
                             "velspec compare revised.h5 line.h5           # what the edits changed"))
    rev.add_argument("result", metavar="RESULT.h5", help="result of velspec run (or of an earlier revise)")
    rev.add_argument("--out", required=True, metavar="NEW.h5", help="revised result to write")
    rev.add_argument("--picks", metavar="EDITS.csv", help="picks to apply (cmp,t0_s,vrms_m_s)")
    rev.add_argument("--edit-mode", choices=("replace", "guide"), default="replace",
                     help="replace the automatic picks at those CMPs, or keep only those near the "
                          "person's function (default replace)")
    rev.add_argument("--config", metavar="FILE.toml",
                     help="changed [pick] / [interval] parameters (the scan's stay as they were)")
    rev.add_argument("--force", action="store_true", help="overwrite an existing output")
    rev.add_argument("--quiet", action="store_true", help="no summary line")
    rev.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)

    pk = sub.add_parser("picks", help="write the picks of a result as CSV, for a person to edit",
                        formatter_class=_RAW,
                        description="Writes every pick of a result (with its uncertainty, coherence, flags "
                                    "and whether it was used) as CSV; give the edited\nfile back to "
                                    "velspec revise --picks or velspec run --picks. Rows with used = 0 "
                                    "are skipped when read back.",
                        epilog=_epilog("velspec picks line.h5 --out picks.csv",
                                       "velspec picks line.h5 --out picks.csv --force   # replace an older file"))
    pk.add_argument("result", metavar="RESULT.h5", help="result of velspec run or revise")
    pk.add_argument("--out", required=True, metavar="PICKS.csv", help="CSV file to write")
    pk.add_argument("--force", action="store_true", help="overwrite an existing file")
    pk.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)

    cmpr = sub.add_parser("compare", help="compare two results field by field and pick by pick",
                          formatter_class=_RAW,
                          description="Compares two result files on their common CMPs and t0 samples: "
                                      "each field (median, 95th percentile and largest\nabsolute and "
                                      "relative difference, the CMPs and times outside tolerance), the picks "
                                      "(matched by CMP and\nnearest t0: added, removed, moved, flags "
                                      "changed), and the parameters and versions that differ.\n"
                                      "A value passes when |a - b| <= atol + rtol * |b| (numpy.isclose's "
                                      "rule; B is the reference).\nExit status 0 within tolerance, 1 "
                                      "outside it, 2 on bad input. Parameters and versions are reported, "
                                      "not judged.",
                          epilog=_epilog(
                              "velspec compare new.h5 old.h5",
                              "velspec compare new.h5 old.h5 --exact                    # bit for bit",
                              "velspec compare new.h5 old.h5 --rtol 0.01 --junit compare.xml   # for CI",
                              "velspec compare new.h5 old.h5 --report diff.json --picture diff.png --quiet"))
    cmpr.add_argument("a", metavar="A.h5", help="result to check")
    cmpr.add_argument("b", metavar="B.h5", help="reference result")
    cmpr.add_argument("--rtol", type=float, metavar="R", help="relative tolerance, a fraction of |b| (default 0.001)")
    cmpr.add_argument("--atol", type=float, metavar="M/S", help="absolute tolerance of velocities (default 1 m/s)")
    cmpr.add_argument("--exact", action="store_true",
                      help="every tolerance zero (fields, times, eta, pick times): the same bits or exit 1")
    cmpr.add_argument("--report", metavar="FILE.json", help="write the whole report as JSON")
    cmpr.add_argument("--junit", metavar="FILE.xml", help="write a JUnit XML report (a testcase per field, "
                                                        "the picks, parameters)")
    cmpr.add_argument("--picture", metavar="FILE.png", help="write the relative difference of vrms and vint "
                                                            "over CMP x t0 as a PNG")
    cmpr.add_argument("--force", action="store_true", help="overwrite existing report files")
    cmpr.add_argument("--quiet", action="store_true", help="print nothing; only the exit status tells")
    cmpr.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)

    cfg = sub.add_parser("config", help="write the parameters a result was made with, as TOML",
                         formatter_class=_RAW,
                         description="Writes the parameters stored in a result (every one, defaults "
                                     "included) as a TOML configuration that\nvelspec run --config reads: "
                                     "a later run with it reproduces the result. Without --out it goes to "
                                     "stdout.",
                         epilog=_epilog("velspec config line.h5                         # print it",
                                        "velspec config line.h5 --out line.toml",
                                        "velspec run line.sgy --out again.h5 --config line.toml",
                                        "velspec compare again.h5 line.h5 --exact"))
    cfg.add_argument("result", metavar="RESULT.h5", help="result of velspec run or revise")
    cfg.add_argument("--out", metavar="FILE.toml", help="file to write (default: print to stdout)")
    cfg.add_argument("--force", action="store_true", help="overwrite an existing file")
    cfg.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)

    demo = sub.add_parser("demo", help="generate a synthetic line and analyse it",
                          formatter_class=_RAW,
                          description="Makes a synthetic 2D line (an invented shelf-basin scenario), runs "
                                      "the whole analysis on it and writes the result\nand a QC picture. "
                                      "Needs no input and no network.",
                          epilog=_epilog("velspec demo", "velspec demo --out /tmp/try --threads 2 --force"))
    demo.add_argument("--out", default="velspec-demo", metavar="DIR", help="folder to create (default velspec-demo)")
    _work_options(demo, force_help="replace an existing folder")

    exp = sub.add_parser("export", help="write the velocity fields as SEG-Y sections and CSV functions",
                         description="Writes post-stack SEG-Y sections of the stacking and interval velocity "
                                     "(time and depth), a smoothed field for migration and CSV velocity functions "
                                     "into a folder, from the result alone; with --line also the NMO-corrected "
                                     "stack of the line. README.txt in the folder lists the files.",
                         formatter_class=_RAW,
                         epilog=_epilog("velspec export line.h5 --out products",
                                        "velspec export line.h5 --out products --line line.sgy --cmp 1050 1100",
                                        "velspec export line.h5 --out products --smooth-time 0.2 --smooth-cmps 20"))
    exp.add_argument("result", metavar="RESULT.h5", help="result of velspec run or revise")
    exp.add_argument("--out", required=True, metavar="DIR", help="folder to create")
    exp.add_argument("--line", metavar="LINE.sgy", help="the prestack line of the result: adds its NMO-corrected stack")
    exp.add_argument("--cmp", type=int, nargs="+", metavar="N", default=[],
                     help="also write the NMO-corrected gathers of these CMPs (needs --line)")
    exp.add_argument("--smooth-time", type=float, metavar="S",
                     help="standard deviation in t0 of the smoothing for migration, s (default 0.1)")
    exp.add_argument("--smooth-cmps", type=float, metavar="N",
                     help="standard deviation along the line of the smoothing for migration, CMPs (default 10)")
    exp.add_argument("--csv-step", type=float, metavar="S", help="time step of functions.csv, s (default 0.05)")
    exp.add_argument("--force", action="store_true", help="replace an existing folder written by velspec")
    exp.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    exp.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)

    rep = sub.add_parser("report", help="write QC pictures and one HTML page for a result",
                         description="Writes the QC pictures of a result (PNG: coherence panels, velocity fields "
                                     "with the flagged places, quality along the line; with --line a gather before "
                                     "and after NMO and the stack) and index.html, which gathers them with summary "
                                     "numbers and the run's parameters.",
                         formatter_class=_RAW,
                         epilog=_epilog("velspec report line.h5 --out qc",
                                        "velspec report line.h5 --out qc --line line.sgy --cmp 1050 1100"))
    rep.add_argument("result", metavar="RESULT.h5", help="result of velspec run or revise")
    rep.add_argument("--out", required=True, metavar="DIR", help="folder to create")
    rep.add_argument("--line", metavar="LINE.sgy", help="the prestack line of the result: adds gathers and the stack")
    rep.add_argument("--cmp", type=int, nargs="+", metavar="N", default=[],
                     help="CMPs to show (their kept coherence panels; with --line their gathers)")
    rep.add_argument("--force", action="store_true", help="replace an existing folder written by velspec")
    rep.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    rep.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)

    ins = sub.add_parser("inspect", help="survey the headers of a line before a long run",
                         formatter_class=_RAW,
                         description="Traces, CMP range, fold, offsets, sample interval, byte positions "
                                     "used, and warnings for anything odd.",
                         epilog=_epilog("velspec inspect line.sgy",
                                        "velspec inspect line.sgy --config headers.toml   # other byte positions"))
    ins.add_argument("line", metavar="LINE.sgy", help="prestack 2D line, SEG-Y rev 1 or rev 2.0")
    ins.add_argument("--config", metavar="FILE.toml", help="header byte positions in [read.headers]")
    ins.add_argument("--debug", action="store_true", help=argparse.SUPPRESS)
    for parser in (p, *sub.choices.values()):
        # the raw formatter keeps the examples' layout; descriptions are filled here instead
        parser.description = textwrap.fill(" ".join(parser.description.split()), 92)
    return p


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    debug = "--debug" in argv
    try:
        args = build_parser().parse_args(argv)
        if args.command is None:
            raise UsageError("a command is needed: run, demo, inspect, revise, picks, export, report, compare "
                             "or config "
                             "(see velspec --help)")
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", UserWarning)
            commands = {"run": _cmd_run, "demo": _cmd_demo, "inspect": _cmd_inspect, "revise": _cmd_revise,
                        "picks": _cmd_picks, "export": _cmd_export, "report": _cmd_report,
                        "compare": _cmd_compare, "config": _cmd_config}
            status = commands[args.command](args)
        for w in caught:
            if issubclass(w.category, UserWarning):
                print(f"velspec: warning: {w.message}", file=sys.stderr)
        return status
    except VelspecError as exc:
        if debug:
            raise
        print(f"velspec: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print("velspec: error: interrupted; no output was written (a run can be finished with --resume)",
              file=sys.stderr)
        return EXIT_USAGE
    except MemoryError:
        if debug:
            raise
        # outputs are written as .partial and removed on any exception, so nothing is left half-written
        print("velspec: error: out of memory; no output was written. Free memory, raise the limit "
              "(ulimit -v), or lower block and keep_spectra in the configuration", file=sys.stderr)
        return EXIT_USAGE
    except BrokenPipeError:
        # The reader of our output went away (e.g. `| head`); the work itself is complete.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK


# -- commands ---------------------------------------------------------------------------------

def _run_params(args):
    from .params import RunParams, load_toml

    params = load_toml(args.config) if getattr(args, "config", None) else RunParams()
    params = params.with_overrides(scan__vmin=getattr(args, "vmin", None), scan__vmax=getattr(args, "vmax", None),
                                   scan__nvel=getattr(args, "nvel", None), threads=getattr(args, "threads", None),
                                   pick__guide=getattr(args, "guide", None), pick__edits=getattr(args, "picks", None),
                                   pick__edit_mode=getattr(args, "edit_mode", None))
    _check_threads(params.threads)
    return params.validate()


def _check_threads(threads: int) -> None:
    cores = os.cpu_count() or 1
    if threads is not None and (threads < 0 or threads > max(cores, 1) * 4):
        raise ParameterError(f"--threads must be between 0 (all cores) and {cores * 4}, got {threads}")


def _progress(quiet: bool, label: str):
    if quiet or not sys.stderr.isatty():
        return None
    from tqdm import tqdm

    def factory(total):
        bar = tqdm(total=total, unit="CMP", desc=label, file=sys.stderr, leave=False, dynamic_ncols=True)
        return bar.update, bar.close

    return factory


def _cmd_run(args) -> int:
    from .streaming import run_to_file

    if args.print_config:
        from .config import to_toml

        params = _run_params(args)
        sys.stdout.write(to_toml(params, header="effective configuration: defaults, --config and options merged"))
        return EXIT_OK
    missing = [name for name, value in (("LINE.sgy", args.line), ("--out", args.out)) if value is None]
    if missing:
        raise UsageError(f"the following arguments are required: {', '.join(missing)} (see velspec run --help)")
    out = Path(args.out)
    _check_output_file(out, args.force)
    if not Path(args.line).exists():
        raise UsageError(f"{args.line}: no such file")
    if not Path(args.line).is_file():
        raise UsageError(f"{args.line} is not a file; give the SEG-Y file of the line")
    if args.workers is not None and not 1 <= args.workers <= 1024:
        raise UsageError(f"--workers must be between 1 and 1024, got {args.workers}")
    if args.scheduler is not None and "://" not in args.scheduler:
        raise UsageError(f"--scheduler needs an address like tcp://HOST:PORT, got {args.scheduler!r}")
    summary = run_to_file(args.line, out, _run_params(args), resume=args.resume, force=args.force,
                          progress=_progress(args.quiet, "scanning"), workers=args.workers or 0,
                          scheduler=args.scheduler)
    if not args.quiet:
        again = (f"; {summary.resumed_blocks} of {summary.blocks} blocks were finished before"
                 if args.resume else "")
        print(f"velspec: wrote {out} ({summary.cmps} CMPs, {summary.used} picks used "
              f"of {summary.picks}{again})", file=sys.stderr)
    return EXIT_OK


def _cmd_revise(args) -> int:
    from .io.hdf5 import write_result
    from .pipeline import revise_result

    out = Path(args.out)
    _check_output_file(out, args.force)
    if Path(args.result).resolve() == out.resolve():
        raise UsageError("--out must differ from the result being revised (inputs are never modified)")
    result = revise_result(args.result, edits=args.picks, edit_mode=args.edit_mode, params=args.config)
    write_result(out, result, force=args.force)
    if not args.quiet:
        print(f"velspec: wrote {out} ({len(result.cmp)} CMPs, {int(result.used.sum())} picks used, "
              f"{result.attrs['edited_cmps']} CMP(s) edited)", file=sys.stderr)
    return EXIT_OK


def _cmd_picks(args) -> int:
    from .io.hdf5 import read_result
    from .io.picks_csv import write_picks

    out = Path(args.out)
    _check_output_file(out, args.force)
    write_picks(out, read_result(args.result), force=args.force)
    return EXIT_OK


def _check_product_inputs(args) -> None:
    if not Path(args.result).is_file():
        raise UsageError(f"{args.result}: no such file; give the result of velspec run")
    if args.line is not None and not Path(args.line).is_file():
        raise UsageError(f"{args.line}: no such file; give the prestack SEG-Y line of the result")


def _cmd_export(args) -> int:
    from .export import export_result

    _check_product_inputs(args)
    files = export_result(args.result, args.out, line=args.line, cmps=args.cmp, smooth_time=args.smooth_time,
                          smooth_cmps=args.smooth_cmps, csv_step=args.csv_step, force=args.force,
                          progress=_progress(args.quiet, "stacking"))
    if not args.quiet:
        print(f"velspec: wrote {args.out} ({len(files)} files; README.txt lists them)\n{CAUTION}", file=sys.stderr)
    return EXIT_OK


def _cmd_report(args) -> int:
    from .report import report_result

    _check_product_inputs(args)
    page = report_result(args.result, args.out, line=args.line, cmps=args.cmp, force=args.force,
                         progress=_progress(args.quiet, "stacking"))
    if not args.quiet:
        print(f"velspec: wrote {page}\n{CAUTION}", file=sys.stderr)
    return EXIT_OK


def _cmd_compare(args) -> int:
    from .compare import CompareParams, compare_results

    outputs = [Path(p) for p in (args.report, args.junit, args.picture) if p]
    for out in outputs:
        _check_output_file(out, args.force)
    if len({o.resolve() for o in outputs}) < len(outputs):
        raise UsageError("--report, --junit and --picture must name different files")
    for name in (args.a, args.b):
        if not Path(name).is_file():
            raise UsageError(f"{name}: no such file" if not Path(name).exists()
                             else f"{name} is not a file; give a result file (.h5)")
    if args.exact and (args.rtol is not None or args.atol is not None):
        raise UsageError("--exact sets every tolerance to zero; give it without --rtol/--atol")
    params = CompareParams.exact() if args.exact else None
    report = compare_results(args.a, args.b, rtol=args.rtol, atol=args.atol, params=params)
    if args.picture:   # first: the one that can fail (nothing compared to draw)
        report.write_picture(args.picture, force=args.force)
    if args.report:
        report.write_json(args.report, force=args.force)
    if args.junit:
        report.write_junit(args.junit, force=args.force)
    if not args.quiet:
        print(report.summary())
    return EXIT_OK if report.passed else EXIT_DIFFERENT


def _cmd_config(args) -> int:
    from .config import to_toml, write_config
    from .io.hdf5 import read_result

    if args.out:
        _check_output_file(Path(args.out), args.force)
    result = read_result(args.result)
    params = result.params.validate()
    header = f"parameters of {args.result} (made {result.attrs.get('created', 'at an unknown time')})"
    if args.out:
        write_config(args.out, params, force=args.force, header=header)
    else:
        sys.stdout.write(to_toml(params, header=header))
    return EXIT_OK


def _cmd_demo(args) -> int:
    from .demo import run_demo

    _check_threads(args.threads)
    out = Path(args.out)
    if out.exists() and not args.force:
        raise UsageError(f"{out} exists; use --force to replace it or --out to choose another folder")
    print(run_demo(out, threads=args.threads or 0, force=args.force, progress=_progress(args.quiet, "demo")))
    return EXIT_OK


def _cmd_inspect(args) -> int:
    from .inspect import survey_line
    from .params import RunParams, load_toml

    params = load_toml(args.config) if args.config else RunParams()
    params.read.validate()
    print(survey_line(args.line, params.read))
    return EXIT_OK


def _check_output_file(out: Path, force: bool) -> None:
    if out.exists() and not force:
        raise UsageError(f"{out} exists; use --force to overwrite it")
    if out.exists() and out.is_dir():
        raise UsageError(f"{out} is a folder; give a file name for the result")
    if not out.parent.exists():
        raise UsageError(f"folder {out.parent} does not exist; create it first")


if __name__ == "__main__":
    sys.exit(main())
