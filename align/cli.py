"""The ``corealign`` command: parses arguments, calls the library, prints.

Exit codes: 0 success, 2 bad input (one line naming the file, variable and row or field), 1 an
internal error. ``--json`` prints the same object the library's ``to_dict()`` returns.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import warnings
from pathlib import Path

from align import text
from align.ages import REFERENCES, convert_age
from align.demo import demo_request_path, demo_truth
from align.describe import describe_grid, describe_record
from align.detect import detect_event, detect_onset
from align.errors import InputError
from align.io import atomic_write, open_record, save_grid, save_record
from align.lag import estimate_lag
from align.report import load_result, summary, write_report
from align.resample import align_records, resample
from align.suggest import suggest_ties
from align.survey import survey
from align.ties import read_ties, transfer
from align.xcorr import cross_correlate
from align.schema import AgeConversion


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line and exit code 2."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {message}\n")


def main(argv=None):
    """Entry point of the ``corealign`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if not hasattr(args, "run"):
        parser.print_help()
        return 2
    warnings.showwarning = _one_line_warning
    try:
        return args.run(args) or 0
    except InputError as exc:
        print(f"corealign: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("corealign: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # noqa: BLE001 - the one place that turns bugs into exit code 1
        if os.environ.get("COREALIGN_DEBUG"):
            raise
        print(f"corealign: internal error: {exc.__class__.__name__}: {exc} "
              "(set COREALIGN_DEBUG=1 for the traceback)", file=sys.stderr)
        return 1


class progress_note:
    """A one-line "working on it" note on a terminal's stderr (silent when piped)."""

    def __init__(self, what):
        self.what = what
        self.shown = sys.stderr.isatty()

    def __enter__(self):
        if self.shown:
            print(f"corealign: {self.what} ...", end="", file=sys.stderr, flush=True)
        return self

    def __exit__(self, *exc):
        if self.shown:
            print(" done" if exc[0] is None else "", file=sys.stderr)
        return False


def _one_line_warning(message, category, filename, lineno, file=None, line=None):
    print(f"corealign: warning: {message}", file=sys.stderr)


def build_parser():
    """The full argument parser (one sub-command per job step)."""
    parser = _Parser(prog="corealign", description=(
        "Date an abrupt event in one paleoclimate record against a climate transition in "
        "another, with an honest uncertainty budget."))
    commands = parser.add_subparsers(title="commands", metavar="COMMAND", parser_class=_Parser)

    info = commands.add_parser("info", help="what a record holds: variables, ranges, sampling")
    info.add_argument("record", help="NetCDF or CSV/TSV record")
    _mapping_options(info)
    _json_option(info)
    info.set_defaults(run=_info)

    convert = commands.add_parser("convert", help="read a table or NetCDF, write a CF record")
    convert.add_argument("input", help="NetCDF or CSV/TSV record")
    convert.add_argument("-o", "--output", required=True, help="the NetCDF file to write")
    _mapping_options(convert)
    convert.set_defaults(run=_convert)

    age = commands.add_parser("age", help="convert an age between b2k, BP, CE, BCE, ka")
    age.add_argument("value", type=float, help="the age or calendar year")
    age.add_argument("--from", dest="from_", required=True, metavar="REF",
                     help=f"reference of VALUE ({', '.join(REFERENCES)})")
    age.add_argument("--to", required=True, metavar="REF", help="reference to convert to")
    _json_option(age)
    age.set_defaults(run=_age)

    tie = commands.add_parser("tie", help="put a record on another's timescale through ties")
    tie.add_argument("record", help="the record to move (needs depths)")
    tie.add_argument("--ties", required=True, help="tie table: label,depth,ref_depth|ref_age,sd")
    tie.add_argument("--onto", required=True, help="the reference record")
    tie.add_argument("-o", "--output", required=True, help="the NetCDF file to write")
    tie.add_argument("--method", default="linear", choices=("linear", "pchip"))
    tie.add_argument("--bridge-rate", type=float, metavar="R",
                     help="between-tie variance rate, yr^2 per yr (default: from the ties)")
    tie.add_argument("--extrapolate", action="store_true",
                     help="keep samples beyond the outer ties (flagged, wider uncertainty)")
    _mapping_options(tie)
    tie.set_defaults(run=_tie)

    suggest = commands.add_parser("suggest-ties", help="candidate ties from peaks in both")
    suggest.add_argument("reference", metavar="A.nc:VAR", help="reference record and variable")
    suggest.add_argument("moved", metavar="B.nc:VAR", help="record to move and variable")
    suggest.add_argument("--max-offset", type=float, metavar="YEARS",
                         help="largest age difference at a tie (default: from the timescales)")
    suggest.add_argument("--threshold", type=float, default=4.0,
                         help="robust z-score a peak must exceed (default 4)")
    suggest.add_argument("-o", "--output", required=True, help="candidate tie table (CSV)")
    suggest.set_defaults(run=_suggest_ties)

    resample_ = commands.add_parser("resample", help="a record on a regular grid (no invented "
                                                     "detail)")
    resample_.add_argument("record", help="NetCDF or CSV/TSV record")
    _grid_options(resample_)
    resample_.add_argument("--along", default="age", choices=("age", "depth"))
    resample_.add_argument("--interpolate", action="store_true",
                           help="interpolate linearly in cells finer than the samples")
    _json_option(resample_)
    _mapping_options(resample_)
    resample_.set_defaults(run=_resample)

    align_ = commands.add_parser("align", help="put B on A's timescale, both on one grid")
    align_.add_argument("a", metavar="A.nc", help="the reference record")
    align_.add_argument("b", metavar="B.nc", help="the record brought onto A's timescale")
    align_.add_argument("--ties", help="tie table between B (depth) and A (ref_depth/ref_age)")
    align_.add_argument("--same-timescale", action="store_true",
                        help="A and B are already on the same timescale")
    _grid_options(align_)
    align_.set_defaults(run=_align)

    detect = commands.add_parser("detect", help="find an event or a transition onset")
    kinds = detect.add_subparsers(title="markers", metavar="KIND", parser_class=_Parser)
    event = kinds.add_parser("event", help="where a spike begins (robust z-score)")
    event.add_argument("target", metavar="RECORD:VARIABLE")
    event.add_argument("--window", metavar="YOUNG,OLD", help="ages to search")
    event.add_argument("--threshold", type=float, default=5.0, help="robust z (default 5)")
    event.add_argument("--baseline-years", type=float, help="running-median span")
    event.add_argument("--pick", default="first", choices=("first", "peak"))
    event.add_argument("--direction", default="up", choices=("up", "down"))
    _marker_options(event)
    event.set_defaults(run=_detect_event)
    onset = kinds.add_parser("onset", help="the onset of a transition (ramp fit)")
    onset.add_argument("target", metavar="RECORD:VARIABLE")
    onset.add_argument("--window", metavar="YOUNG,OLD", required=True,
                       help="ages holding the transition and both plateaus")
    onset.add_argument("--direction", default="auto", choices=("auto", "up", "down"))
    onset.add_argument("--method", default="ramp", choices=("ramp", "bayes"))
    onset.add_argument("--draws", type=int, default=2000)
    onset.add_argument("--seed", type=int)
    _marker_options(onset)
    onset.set_defaults(run=_detect_onset)

    lag = commands.add_parser("lag", help="the lag between two markers, with its budget")
    for side in ("a", "b"):
        lag.add_argument(f"--{side}", metavar="KIND:RECORD:VARIABLE",
                         help=f"marker {side}: event or onset, record, variable")
        lag.add_argument(f"--{side}-window", metavar="YOUNG,OLD", help=f"window of marker {side}")
    lag.add_argument("--request", metavar="FILE", help="a lag request (JSON) instead of flags")
    lag.add_argument("--ties", help="tie table between b (depth) and a (ref_depth/ref_age)")
    lag.add_argument("--draws", type=int, help="Monte Carlo draws (default 20000)")
    lag.add_argument("--seed", type=int)
    lag.add_argument("--age-reference", choices=("b2k", "BP"), help="default b2k")
    lag.add_argument("-o", "--output", metavar="DIR", help="write a report folder")
    _json_option(lag)
    lag.set_defaults(run=_lag)

    xcorr = commands.add_parser("xcorr", help="cross-correlate two records over a lag range")
    xcorr.add_argument("a", metavar="A:VARIABLE")
    xcorr.add_argument("b", metavar="B:VARIABLE")
    xcorr.add_argument("--max-lag", type=float, required=True, metavar="YEARS")
    xcorr.add_argument("--window", metavar="YOUNG,OLD")
    xcorr.add_argument("--step", type=float, metavar="YEARS", help="grid step")
    xcorr.add_argument("--method", default="pearson", choices=("pearson", "kernel"))
    xcorr.add_argument("--surrogates", type=int, default=1000)
    xcorr.add_argument("--surrogate-kind", default="phase", choices=("phase", "ar1"))
    xcorr.add_argument("--seed", type=int)
    xcorr.add_argument("--to", metavar="REF", choices=("b2k", "BP"))
    _json_option(xcorr)
    xcorr.set_defaults(run=_xcorr)

    survey_ = commands.add_parser("survey", help="lags of many marker pairs, combined")
    survey_.add_argument("spec", metavar="SPEC.json")
    survey_.add_argument("--scheduler", metavar="ADDRESS",
                         help="a dask.distributed scheduler (default: local threads)")
    survey_.add_argument("-o", "--output", metavar="DIR", help="write a report folder")
    _json_option(survey_)
    survey_.set_defaults(run=_survey)

    report = commands.add_parser("report", help="render a report again from a saved result")
    report.add_argument("result", metavar="RESULT.json", help="report.json or --json output")
    report.add_argument("-o", "--output", metavar="DIR", required=True)
    report.set_defaults(run=_report)

    serve = commands.add_parser("serve", help="run the HTTP service (waitress)")
    serve.add_argument("--host", default="127.0.0.1")
    serve.add_argument("--port", type=int, default=8750)
    serve.add_argument("--data-dir", metavar="DIR",
                       help="store folder (default: $COREALIGN_DATA_DIR or the XDG data home)")
    serve.add_argument("--token-file", metavar="FILE",
                       help="require this bearer token on write routes")
    serve.add_argument("--workers", type=int, help="computation worker processes (default 2)")
    serve.add_argument("--time-limit", type=float, metavar="SECONDS",
                       help="stop a computation after this long (default 300)")
    serve.set_defaults(run=_serve)

    demo = commands.add_parser("demo", help="run the main job on the bundled synthetic records")
    demo.add_argument("-o", "--output", metavar="DIR", default="corealign-demo-report",
                      help="report folder (default: ./corealign-demo-report)")
    _json_option(demo)
    demo.set_defaults(run=_demo)
    return parser


def _json_option(parser):
    parser.add_argument("--json", action="store_true", help="print the result as JSON")


def _mapping_options(parser):
    group = parser.add_argument_group("how to read a table (CSV/TSV or generic NetCDF)")
    for role in ("age", "depth", "age-sd", "mce", "depth-top", "depth-bottom", "age-top",
                 "age-bottom"):
        group.add_argument(f"--{role}-column", metavar="NAME", help=f"column holding {role}")
    group.add_argument("--age-reference", metavar="REF", help="b2k or BP")
    group.add_argument("--age-units", default="yr", choices=("yr", "ka"))
    group.add_argument("--depth-units", default="m", choices=("m", "cm", "mm"))
    group.add_argument("--variables", metavar="A,B", help="proxy columns to keep")
    group.add_argument("--units", metavar="VAR=UNIT", action="append", default=[],
                       help="CF units of a proxy column (repeatable)")
    for key in ("archive", "site", "core", "timescale", "timescale-kind"):
        group.add_argument(f"--{key}", metavar="TEXT", help=f"record {key.replace('-', ' ')}")


def _marker_options(parser):
    parser.add_argument("--to", metavar="REF", choices=("b2k", "BP"),
                        help="age reference of the window and result (default: the record's)")
    _json_option(parser)
    _mapping_options(parser)


def parse_window(text_):
    """``YOUNG,OLD`` as two floats."""
    if text_ is None:
        return None
    parts = text_.split(",")
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) != 2:
        raise InputError(f"a window is YOUNG,OLD (two ages), got {text_!r}", field="window")
    return values


def _grid_options(parser):
    parser.add_argument("--step", type=float, metavar="YEARS",
                        help="cell width (default: the coarser native resolution)")
    parser.add_argument("--start", type=float, help="first cell edge")
    parser.add_argument("--stop", type=float, help="last cell edge")
    parser.add_argument("--min-coverage", type=float, default=0.5, metavar="F",
                        help="cells covered less than this fraction are missing (default 0.5)")
    parser.add_argument("-o", "--output", required=True, help="the NetCDF file to write")


def mapping_from(args):
    """The :func:`align.open_record` keywords given on the command line."""
    units = {}
    for item in args.units:
        name, sep, unit = item.partition("=")
        if not sep:
            raise InputError(f"--units takes VAR=UNIT, got {item!r}", field="units")
        units[name.strip()] = unit.strip()
    keys = ("age_column", "depth_column", "age_sd_column", "mce_column", "depth_top_column",
            "depth_bottom_column", "age_top_column", "age_bottom_column", "age_reference",
            "age_units", "depth_units", "archive", "site", "core", "timescale",
            "timescale_kind")
    mapping = {key: getattr(args, key) for key in keys if getattr(args, key) is not None}
    if args.variables:
        mapping["variables"] = [v.strip() for v in args.variables.split(",") if v.strip()]
    if units:
        mapping["units"] = units
    return mapping


def _print_json(obj):
    print(json.dumps(obj, indent=2, allow_nan=False))


def _info(args):
    info = describe_record(open_record(args.record, **mapping_from(args)))
    if args.json:
        _print_json(info.to_dict())
    else:
        print(text.record_info(info))


def _convert(args):
    record = open_record(args.input, **mapping_from(args))
    path = save_record(record, args.output, history=f"converted from {args.input}")
    print(f"wrote {path} ({record.sizes['sample']} samples)")


def _age(args):
    result = convert_age(args.value, args.from_, args.to)
    if args.json:
        _print_json(AgeConversion(value=args.value, from_=args.from_, to=args.to,
                                  result=result).to_dict())
    else:
        print(f"{result:.10g}")


def record_and_variable(text_):
    """Split ``PATH:VARIABLE`` (the variable after the last colon)."""
    path, sep, variable = text_.rpartition(":")
    if not sep or not path or not variable:
        raise InputError(f"expected RECORD:VARIABLE, got {text_!r}", field="record")
    return path, variable


def _tie(args):
    record = open_record(args.record, **mapping_from(args))
    moved = transfer(record, read_ties(args.ties), open_record(args.onto), method=args.method,
                     extrapolate=args.extrapolate, bridge_rate=args.bridge_rate)
    save_record(moved, args.output, history=f"written by corealign tie from {args.record}")
    sd = moved["age_sd"].values
    print(f"wrote {args.output}: {moved.sizes['sample']} samples on {moved.attrs['timescale']}, "
          f"age sd {sd.min():.1f} to {sd.max():.1f} yr; bridge rate "
          f"{moved.attrs['bridge_rate']:.3g} yr^2/yr ({moved.attrs['bridge_rate_choice']})")


def _suggest_ties(args):
    (ref_path, ref_var), (moved_path, moved_var) = map(record_and_variable,
                                                       (args.reference, args.moved))
    table = suggest_ties(open_record(ref_path), ref_var, open_record(moved_path), moved_var,
                         max_offset=args.max_offset, threshold=args.threshold)
    header = (f"# candidate ties: {moved_path} (depth) onto {ref_path}; review before use, "
              "delete the rows you reject\n")
    atomic_write(args.output, lambda tmp: Path(tmp).write_text(
        header + table.to_csv(index=False, float_format="%.6g")))
    print(f"wrote {args.output}: {len(table)} candidate ties (never applied automatically)")


def _grid_summary(grid, output):
    along = next(iter(grid.dims))
    print(f"wrote {output}: {grid.sizes[along]} cells of {grid.attrs['resample_step']:g} along "
          f"{along}" + (f"; {grid.attrs['step_choice']}" if "step_choice" in grid.attrs else ""))


def _resample(args):
    mapping = mapping_from(args)
    record = open_record(args.record, **mapping)
    grid = resample(record, args.step, start=args.start, stop=args.stop,
                    variables=mapping.get("variables"), min_coverage=args.min_coverage,
                    along=args.along,
                    interpolate=args.interpolate)
    save_grid(grid, args.output, history=f"corealign resample {args.record}")
    if args.json:
        _print_json(describe_grid(grid).to_dict())
    else:
        _grid_summary(grid, args.output)


def _align(args):
    a, b = open_record(args.a), open_record(args.b)
    if args.start is not None or args.stop is not None:
        raise InputError("align chooses the grid from both records; use resample for "
                         "--start/--stop", field="start")
    grid = align_records(a, b, ties=read_ties(args.ties) if args.ties else None,
                         same_timescale=args.same_timescale, step=args.step,
                         min_coverage=args.min_coverage)
    save_grid(grid, args.output, history=f"corealign align {args.a} {args.b}")
    _grid_summary(grid, args.output)


def _detect_event(args):
    path, variable = record_and_variable(args.target)
    result = detect_event(open_record(path, **mapping_from(args)), variable,
                          parse_window(args.window), threshold=args.threshold,
                          baseline_years=args.baseline_years, pick=args.pick,
                          direction=args.direction, age_reference=args.to)
    _print_json(result.to_dict()) if args.json else print(text.marker(result))


def _detect_onset(args):
    path, variable = record_and_variable(args.target)
    with progress_note(f"fitting the onset ({args.draws} {args.method} draws)"):
        result = detect_onset(open_record(path, **mapping_from(args)), variable,
                              parse_window(args.window), direction=args.direction,
                              method=args.method, draws=args.draws, seed=args.seed,
                              age_reference=args.to)
    _print_json(result.to_dict()) if args.json else print(text.marker(result))


def marker_flag(text_, window, side):
    """``KIND:RECORD:VARIABLE`` and ``YOUNG,OLD`` as a marker spec dict."""
    kind, sep, rest = (text_ or "").partition(":")
    path, sep2, variable = rest.rpartition(":")
    if not (sep and sep2 and path and variable) or kind not in ("event", "onset"):
        raise InputError(f"--{side} takes KIND:RECORD:VARIABLE with KIND event or onset, got "
                         f"{text_!r}", field=side)
    if window is None:
        raise InputError(f"--{side}-window YOUNG,OLD is needed", field=f"{side}-window")
    return {"kind": kind, "record": path, "variable": variable, "window": parse_window(window)}


def _lag(args):
    options = dict(ties=args.ties, draws=args.draws, seed=args.seed,
                   age_reference=args.age_reference)
    if args.request:
        if args.a or args.b:
            raise InputError("give --request or --a/--b, not both", field="request")
        request = args.request
        with progress_note("estimating the lag"):
            result = estimate_lag(request, **options)
    else:
        a = marker_flag(args.a, args.a_window, "a")
        b = marker_flag(args.b, args.b_window, "b")
        with progress_note("estimating the lag"):
            result = estimate_lag(a, b, **options)
    _finish(result, args, text.lag)


def _finish(result, args, render):
    """Write the report folder if asked, then print JSON or text."""
    folder = write_report(result, args.output) if args.output else None
    if args.json:
        _print_json(result.to_dict())
    else:
        print(render(result))
        if folder:
            print(f"report: {folder / 'report.html'}")


def _xcorr(args):
    (path_a, var_a), (path_b, var_b) = map(record_and_variable, (args.a, args.b))
    with progress_note("cross-correlating"):
        result = cross_correlate((open_record(path_a), var_a), (open_record(path_b), var_b),
                                 args.max_lag, step=args.step, method=args.method,
                                 surrogates=args.surrogates, surrogate_kind=args.surrogate_kind,
                                 window=parse_window(args.window), seed=args.seed,
                                 age_reference=args.to)
    _print_json(result.to_dict()) if args.json else print(text.xcorr(result))


def _survey(args):
    result = survey(args.spec, scheduler=args.scheduler, progress=sys.stderr.isatty())
    _finish(result, args, text.survey)


def _report(args):
    folder = write_report(load_result(args.result), args.output)
    print(f"report: {folder / 'report.html'}")


def _serve(args):
    from api.server import serve

    serve(args.host, args.port, args.data_dir, args.token_file, args.workers, args.time_limit)


def _demo(args):
    with progress_note("running the demo (synthetic records, invented scenario)"):
        result = estimate_lag(demo_request_path())
    folder = write_report(result, args.output)
    truth = demo_truth()
    if args.json:
        _print_json({"truth": truth, "result": result.to_dict()})
        return
    print(summary(result))
    print(f"\nknown truth of this synthetic scenario (records/README.md): the event precedes "
          f"the onset by {truth['lag']:g} years ({truth['lag_on_ice_timescale']:g} on the ice "
          f"core's own timescale).")
    print(f"report: {folder / 'report.html'}")
