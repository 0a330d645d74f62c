"""The ``corealign`` command: parses arguments, calls the library, prints.

Exit codes: 0 success, 2 bad input (one line naming the file, variable and row or field), 1 an
internal error, 130 interrupted (Ctrl-C), 143 terminated (SIGTERM). ``--json`` prints the same
object the library's ``to_dict()`` returns. The library is imported inside each command, so
``corealign --help`` and ``corealign age`` do not load the scientific stack.

Words kept the same on every command: ``--age-reference`` is the reference of an input
file's ages; ``--to`` the reference of windows and results (default: b2k for lags and surveys,
which may join records on different references; the record's own for single records).
Choices and defaults come from :mod:`align.choices` and the schema's fields, never from here.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import signal
import sys
import types
import warnings
from typing import Literal, Union, get_args, get_origin

from align import choices as C
from align.errors import InputError

#: Record references as the CLI offers them for ``--to``.
_REFS = C.options(C.RecordReference)


class _Formatter(argparse.HelpFormatter):
    """Help that shows each option's default (where it has one)."""

    def _get_help_string(self, action):
        text = action.help or ""
        default = action.default
        if (action.option_strings and "%(default)" not in text and "default" not in text
                and default not in (None, False, argparse.SUPPRESS, [])):
            text += " (default: %(default)s)"
        return text


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line and exit code 2."""

    def __init__(self, *args, **kwargs):
        kwargs.setdefault("formatter_class", _Formatter)
        super().__init__(*args, **kwargs)
        self.add_argument("--limit", metavar="NAME=N", action="append", default=argparse.SUPPRESS,
                          help="raise a resource limit for this run, e.g. cells=1e8 "
                               "(repeatable; the limits are listed in the README)")

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
    signal.signal(signal.SIGTERM, _terminated)
    try:
        from align.progress import reporting

        with reporting(), _limits(getattr(args, "limit", [])):
            _check_report_folder(args)
            code = args.run(args) or 0
        sys.stdout.flush()  # a closed pipe shows here, not at exit
        return code
    except InputError as exc:
        hint = (f"; raise it with --limit {exc.limit}=N" if getattr(exc, "limit", None)
                else "")
        print(f"corealign: {cli_words(str(exc))}{hint}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("corealign: interrupted", file=sys.stderr)
        return 130
    except _Terminated:
        print("corealign: terminated", file=sys.stderr)
        return 143
    except BrokenPipeError:  # the reader went away (``| head``): not an error
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except Exception as exc:  # noqa: BLE001 - the one place that turns bugs into exit code 1
        if os.environ.get("COREALIGN_DEBUG"):
            raise
        print(f"corealign: internal error: {exc.__class__.__name__}: {exc} "
              "(set COREALIGN_DEBUG=1 for the traceback)", file=sys.stderr)
        return 1


class _Terminated(BaseException):
    """SIGTERM, raised where the program is (so that ``finally`` blocks clean up)."""


def _terminated(signum, frame):
    raise _Terminated


def _limits(items):
    """``--limit NAME=N`` options as a :func:`align.limits.use_limits` block."""
    from align.limits import use_limits

    changes = {}
    for item in items:
        name, sep, value = item.partition("=")
        if not sep:
            raise InputError(f"--limit takes NAME=N, got {item!r}", field="limit")
        changes[name.strip()] = value.strip()
    return use_limits(**changes)


def _one_line_warning(message, category, filename, lineno, file=None, line=None):
    print(f"corealign: warning: {message}", file=sys.stderr)


# --------------------------------------------------------------------------------------------
# the parser


def build_parser():
    """The full argument parser (one sub-command per job step)."""
    from align.provenance import version

    parser = _Parser(prog="corealign", description=(
        "Date an abrupt event in one paleoclimate record against a climate transition in "
        "another, with an honest uncertainty budget."))
    parser.add_argument("--version", action="version", version=f"corealign {version()}",
                        help="print the version and exit")
    commands = parser.add_subparsers(title="commands", metavar="COMMAND", parser_class=_Parser)
    for add in (_info_parser, _convert_parser, _age_parser, _tie_parser, _suggest_parser,
                _resample_parser, _align_parser, _detect_parser, _lag_parser, _xcorr_parser,
                _survey_parser, _synchrony_parser, _report_parser, _serve_parser, _demo_parser):
        add(commands)
    return parser


def from_field(parser, model, name, flag=None, **overrides):
    """An option whose type, choices, default and help come from a schema field.

    ``model.model_fields[name]`` gives them; ``overrides`` replace any (e.g. ``default=None``
    where the library resolves a default itself).
    """
    field = model.model_fields[name]
    annotation = field.annotation
    if get_origin(annotation) in (Union, types.UnionType):
        annotation = next(a for a in get_args(annotation) if a is not type(None))
    options = {"help": field.description or name.replace("_", " "),
               "default": None if field.is_required() else field.default}
    if annotation is bool:
        options["action"] = "store_true"
    elif get_origin(annotation) is Literal:
        options["choices"] = get_args(annotation)
    elif annotation in (int, float, str):
        options["type"] = annotation
        options["metavar"] = name.upper()
    options.update(overrides)
    return parser.add_argument(flag or "--" + name.replace("_", "-"), **options)


def _json_option(parser):
    parser.add_argument("--json", action="store_true",
                        help="print the result as JSON (the library's to_dict())")


def _to_option(parser, default="the record's"):
    """``--to``: the reference of windows and results. Its default is the library's (shown in
    the help), so a request file's own ``age_reference`` is not overridden."""
    parser.add_argument("--to", metavar="REF", choices=_REFS,
                        help=f"age reference of windows and results (default: {default})")


def _output_option(parser, what, required=True):
    parser.add_argument("-o", "--output", required=required, metavar="PATH", help=what)


def _check_report_folder(args):
    """A report folder that cannot be written is refused before any work."""
    if getattr(args, "overwrite", None) is not None and args.output is not None:
        from align.report import check_report_folder

        check_report_folder(args.output, args.overwrite)


def _report_options(parser):
    """``-o``: write a report folder; ``--overwrite``: replace a report already there."""
    _output_option(parser, "write a report folder", required=False)
    parser.add_argument("--overwrite", action="store_true",
                        help="replace a report already in the output folder")


def _mapping_options(parser):
    group = parser.add_argument_group("how to read a table (text, .xlsx or generic NetCDF)")
    for role in ("age", "depth", "age-sd", "mce", "depth-top", "depth-bottom", "age-top",
                 "age-bottom"):
        group.add_argument(f"--{role}-column", metavar="NAME",
                           help=f"column holding the {role.replace('-', ' ')}")
    group.add_argument("--age-reference", metavar="REF",
                       help="reference of the input file's ages: b2k, BP, ka b2k, ka BP, CE, "
                            "BCE or astronomical (default: from the header)")
    group.add_argument("--age-units", metavar="UNIT",
                       help="units of the age columns, e.g. yr, ka, 'cal ka BP' (default: "
                            "from the header, else yr)")
    group.add_argument("--depth-units", choices=C.options(C.DepthUnits),
                       help="units of the depth columns (default: from the header or the "
                            "column name, e.g. depth_cm, else m)")
    group.add_argument("--missing-value", "--missing-values", dest="missing_values",
                       metavar="CODE", action="append", help="a missing-value code (repeatable)")
    group.add_argument("--sheet", metavar="NAME", help="sheet of an .xlsx workbook")
    group.add_argument("--names", metavar="A,B", help="column names of a headerless table")
    group.add_argument("--decimal", choices=(".", ","), help="decimal mark of a text table")
    group.add_argument("--relative-to", type=float, metavar="AGE",
                       help="age of the event a relative time column counts from")
    group.add_argument("--relative-sign", choices=("after", "before"),
                       help="positive relative time is after or before the event")
    group.add_argument("--variables", metavar="A,B", help="proxy columns to keep (default: all)")
    group.add_argument("--units", metavar="VAR=UNIT", action="append", default=[],
                       help="CF units of a proxy column (repeatable)")
    for key in ("archive", "site", "core", "timescale", "timescale-kind"):
        group.add_argument(f"--{key}", metavar="TEXT", help=f"record {key.replace('-', ' ')}")


def _info_parser(commands):
    info = commands.add_parser("info", help="what a record holds: variables, ranges, sampling")
    info.add_argument("record", help="NetCDF or CSV/TSV record")
    _mapping_options(info)
    _json_option(info)
    info.set_defaults(run=_info)


def _convert_parser(commands):
    convert = commands.add_parser("convert", help="read a table or NetCDF, write a CF record")
    convert.add_argument("input", help="NetCDF or CSV/TSV record")
    _output_option(convert, "the NetCDF file to write")
    _mapping_options(convert)
    _json_option(convert)
    convert.set_defaults(run=_convert)


def _age_parser(commands):
    conventions = ", ".join(C.options(C.AgeConvention))
    age = commands.add_parser("age", help=f"convert an age between {conventions}")
    age.add_argument("value", type=float, help="the age or calendar year")
    age.add_argument("--from", dest="from_", required=True, metavar="REF",
                     help=f"reference of VALUE ({conventions})")
    age.add_argument("--to", required=True, metavar="REF", help="reference to convert to")
    _json_option(age)
    age.set_defaults(run=_age)


def _tie_parser(commands):
    from align.schema import LagRequest

    tie = commands.add_parser("tie", help="put a record on another's timescale through ties")
    tie.add_argument("record", help="the record to move (needs depths)")
    tie.add_argument("--ties", required=True, help="tie table: label,depth,ref_depth|ref_age,sd")
    tie.add_argument("--onto", required=True, help="the reference record")
    _output_option(tie, "the NetCDF file to write")
    tie.add_argument("--method", default=C.DEFAULT_TIE_INTERPOLATION,
                     choices=C.options(C.TieInterpolation),
                     help="interpolation between tie points")
    from_field(tie, LagRequest, "bridge_rate", metavar="R")
    tie.add_argument("--extrapolate", action="store_true",
                     help="keep samples beyond the outer ties (flagged, wider uncertainty)")
    _mapping_options(tie)
    _json_option(tie)
    tie.set_defaults(run=_tie)


def _suggest_parser(commands):
    suggest = commands.add_parser("suggest-ties", help="candidate ties from peaks in both")
    suggest.add_argument("reference", metavar="A.nc:VAR", help="reference record and variable")
    suggest.add_argument("moved", metavar="B.nc:VAR", help="record to move and variable")
    suggest.add_argument("--max-offset", type=float, metavar="YEARS",
                         help="largest age difference at a tie (default: from the timescales)")
    suggest.add_argument("--threshold", type=float, default=C.DEFAULT_SUGGEST_THRESHOLD,
                         help="robust z-score a peak must exceed")
    _output_option(suggest, "candidate tie table (CSV)")
    _json_option(suggest)
    suggest.set_defaults(run=_suggest_ties)


def _grid_options(parser, *, edges=True):
    from align.schema import ResampleRequest

    from_field(parser, ResampleRequest, "step", metavar="YEARS",
               help="cell width (default: the coarser native resolution)")
    if edges:
        from_field(parser, ResampleRequest, "start", help="first cell edge")
        from_field(parser, ResampleRequest, "stop", help="last cell edge")
    from_field(parser, ResampleRequest, "min_coverage", metavar="F",
               help="cells covered less than this fraction are missing")
    _output_option(parser, "the NetCDF file to write")


def _resample_parser(commands):
    from align.schema import ResampleRequest

    resample = commands.add_parser("resample", help="a record on a regular grid (no invented "
                                                    "detail)")
    resample.add_argument("record", help="NetCDF or CSV/TSV record")
    _grid_options(resample)
    from_field(resample, ResampleRequest, "along", help="the coordinate of the grid")
    from_field(resample, ResampleRequest, "interpolate",
               help="interpolate linearly in cells finer than the samples")
    _json_option(resample)
    _mapping_options(resample)
    resample.set_defaults(run=_resample)


def _align_parser(commands):
    align = commands.add_parser("align", help="put B on A's timescale, both on one grid")
    align.add_argument("a", metavar="A.nc", help="the reference record")
    align.add_argument("b", metavar="B.nc", help="the record brought onto A's timescale")
    align.add_argument("--ties", help="tie table between B (depth) and A (ref_depth/ref_age)")
    align.add_argument("--same-timescale", action="store_true",
                       help="A and B are already on the same timescale")
    _grid_options(align, edges=False)
    _json_option(align)
    align.set_defaults(run=_align)


def _detect_parser(commands):
    from align.markers import RECORD_KINDS

    detect = commands.add_parser("detect", help="find a marker: " + ", ".join(RECORD_KINDS))
    kinds = detect.add_subparsers(title="markers", metavar="KIND", parser_class=_Parser)
    for name, kind in RECORD_KINDS.items():
        sub = kinds.add_parser(name, help=kind.summary)
        sub.add_argument("target", metavar="RECORD:VARIABLE", help="record and variable")
        sub.add_argument("--window", metavar="YOUNG,OLD", required=kind.window_required,
                         help="ages to search" + ("" if kind.window_required
                                                  else " (default: the whole record)"))
        for option in kind.options.model_fields:
            if option != "kind":
                from_field(sub, kind.options, option)
        sub.add_argument("--seed", type=int, help="random seed (drawn and recorded if absent)")
        sub.add_argument("--transform", choices=C.options(C.Transform),
                         help="transform the variable first (log for dust and sea salt)")
        _to_option(sub)
        _json_option(sub)
        _mapping_options(sub)
        sub.set_defaults(run=_detect, kind=name)


#: Request fields that ``corealign lag`` sets from flags of the same name.
_LAG_OPTIONS = ("draws", "seed", "timescale_model", "bridge_rate", "sync_sd", "age_error_scale")


def _lag_parser(commands):
    from align.markers import RECORD_KINDS
    from align.schema import LagRequest

    lag = commands.add_parser("lag", help="the lag between two markers, with its budget")
    for side in ("a", "b"):
        lag.add_argument(f"--{side}", metavar="KIND:RECORD:VARIABLE",
                         help=f"marker {side}: kind ({', '.join(RECORD_KINDS)}), record, "
                              "variable (a sites marker is given in a --request file)")
        lag.add_argument(f"--{side}-window", metavar="YOUNG,OLD", help=f"window of marker {side}")
        lag.add_argument(f"--{side}-transform", choices=C.options(C.Transform),
                         help=f"transform of marker {side}'s variable")
    lag.add_argument("--request", metavar="FILE", help="a lag request (JSON) instead of flags")
    lag.add_argument("--ties", help="tie table between b (depth) and a (ref_depth/ref_age)")
    for name in _LAG_OPTIONS:
        field = LagRequest.model_fields[name]
        text = field.description or name.replace("_", " ")
        from_field(lag, LagRequest, name, default=None,
                   help=text if "default" in text else f"{text} (default: {field.default})")
    _to_option(lag, C.DEFAULT_AGE_REFERENCE)
    _report_options(lag)
    _json_option(lag)
    _mapping_options(lag)
    lag.set_defaults(run=_lag)


def _xcorr_parser(commands):
    from align.schema import XcorrRequest

    xcorr = commands.add_parser("xcorr", help="cross-correlate two records over a lag range")
    xcorr.add_argument("a", metavar="A:VARIABLE", help="record a and its variable")
    xcorr.add_argument("b", metavar="B:VARIABLE", help="record b and its variable")
    from_field(xcorr, XcorrRequest, "max_lag", metavar="YEARS", required=True,
               help="largest lag tried, both ways (yr)")
    xcorr.add_argument("--window", metavar="YOUNG,OLD", help="ages to correlate")
    from_field(xcorr, XcorrRequest, "step", metavar="YEARS",
               help="grid step (default: the coarser native resolution)")
    for name in ("method", "surrogates", "surrogate_kind", "bootstrap", "seed"):
        from_field(xcorr, XcorrRequest, name)
    _to_option(xcorr)
    _report_options(xcorr)
    _json_option(xcorr)
    _mapping_options(xcorr)
    xcorr.set_defaults(run=_xcorr)


def _survey_parser(commands):
    survey = commands.add_parser("survey", help="lags of many marker pairs, combined")
    survey.add_argument("spec", metavar="SPEC.json", help="the survey (pairs or an event table)")
    survey.add_argument("--scheduler", metavar="ADDRESS",
                        help="a dask.distributed scheduler (default: this machine)")
    _to_option(survey, C.DEFAULT_AGE_REFERENCE)
    _report_options(survey)
    _json_option(survey)
    survey.set_defaults(run=_survey)


def _synchrony_parser(commands):
    from align.schema import SynchronyRequest

    synchrony = commands.add_parser("synchrony", help="is one horizon the same age at many "
                                    "sites? test, combined age, spread, outliers")
    synchrony.add_argument("sites", metavar="SITES", help="site file: a JSON request or a CSV "
                           "table label,age,sd[,lower,upper,age_reference,chronology,"
                           "shared_sd,independent]")
    from_field(synchrony, SynchronyRequest, "seed", default=None,
               help="random seed (used when the site file gives none)")
    _to_option(synchrony, C.DEFAULT_AGE_REFERENCE)
    _report_options(synchrony)
    _json_option(synchrony)
    synchrony.set_defaults(run=_synchrony)


def _report_parser(commands):
    report = commands.add_parser("report", help="render a report again from a saved result")
    report.add_argument("result", metavar="RESULT.json", help="report.json or --json output")
    _output_option(report, "the report folder")
    report.add_argument("--overwrite", action="store_true",
                        help="replace a report already in the output folder")
    report.set_defaults(run=_report)


def _serve_parser(commands):
    serve = commands.add_parser("serve", help="run the HTTP service (waitress)")
    serve.add_argument("--host", default="127.0.0.1", help="address to listen on")
    serve.add_argument("--port", type=int, default=8750, help="port to listen on")
    serve.add_argument("--data-dir", metavar="DIR",
                       help="store folder (default: $COREALIGN_DATA_DIR or the XDG data home)")
    serve.add_argument("--token-file", metavar="FILE",
                       help="require this bearer token on every route but /health and "
                            "/openapi.json")
    serve.add_argument("--workers", type=int, help="computation worker processes (default 2)")
    serve.add_argument("--time-limit", type=float, metavar="SECONDS",
                       help="stop a computation after this long (default 300)")
    serve.add_argument("--worker-memory", type=float, metavar="MIB",
                       help="memory (MiB) each worker may hold; a computation needing more is "
                            "refused (default 4096, at least 512)")
    serve.set_defaults(run=_serve)


def _demo_parser(commands):
    demo = commands.add_parser("demo", help="run the main job on the bundled synthetic records")
    demo.add_argument("mode", nargs="?", default="lag", choices=("lag", "synchrony"),
                      help="lag (default): the lag job; synchrony: the eruption dated at "
                           "several invented sites")
    demo.add_argument("-o", "--output", metavar="DIR",
                      help="report folder (default: ./corealign-demo-report, or "
                           "./corealign-demo-synchrony for the synchrony demo)")
    _json_option(demo)
    demo.set_defaults(run=_demo)


# --------------------------------------------------------------------------------------------
# reading arguments


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


_MAPPING_KEYS = ("age_column", "depth_column", "age_sd_column", "mce_column",
                 "depth_top_column", "depth_bottom_column", "age_top_column",
                 "age_bottom_column", "age_reference", "age_units", "depth_units", "archive",
                 "site", "core", "timescale", "timescale_kind", "missing_values", "sheet",
                 "decimal", "relative_to", "relative_sign")
_LIBRARY_WORD = re.compile(r"\b(missing_values=\[([^\]]*)\]|([a-z][a-z_]*)=)")


def cli_words(message):
    """A library message in this command's spelling: ``age_column=`` becomes
    ``--age-column``, ``missing_values=[-999]`` becomes ``--missing-value -999``."""
    def spell(match):
        if match[2] is not None:
            return f"--missing-value {match[2]}"
        key = match[3]
        return f"--{key.replace('_', '-')} " if key in (*_MAPPING_KEYS, "variables",
                                                          "names") else match[0]

    return _LIBRARY_WORD.sub(spell, message)


def mapping_from(args):
    """The :func:`align.open_record` keywords given on the command line."""
    units = {}
    for item in args.units:
        name, sep, unit = item.partition("=")
        if not sep:
            raise InputError(f"--units takes VAR=UNIT, got {item!r}", field="units")
        units[name.strip()] = unit.strip()
    mapping = {key: getattr(args, key) for key in _MAPPING_KEYS
               if getattr(args, key, None) is not None}
    for key in ("variables", "names"):
        if getattr(args, key):
            mapping[key] = [v.strip() for v in getattr(args, key).split(",") if v.strip()]
    if units:
        mapping["units"] = units
    return mapping


def record_and_variable(text_):
    """Split ``PATH:VARIABLE`` (the variable after the last colon)."""
    path, sep, variable = text_.rpartition(":")
    if not sep or not path or not variable:
        raise InputError(f"expected RECORD:VARIABLE, got {text_!r}", field="record")
    return path, variable


def marker_flag(text_, window, side):
    """``KIND:RECORD:VARIABLE`` and ``YOUNG,OLD`` as a marker spec dict."""
    from align.markers import RECORD_KINDS

    kind, sep, rest = (text_ or "").partition(":")
    path, sep2, variable = rest.rpartition(":")
    if not (sep and sep2 and path and variable) or kind not in RECORD_KINDS:
        raise InputError(f"--{side} takes KIND:RECORD:VARIABLE with KIND one of "
                         f"{', '.join(RECORD_KINDS)}, got {text_!r}", field=side)
    if window is None:
        raise InputError(f"--{side}-window YOUNG,OLD is needed", field=f"{side}-window")
    return {"kind": kind, "record": path, "variable": variable, "window": parse_window(window)}


# --------------------------------------------------------------------------------------------
# printing


def _print_json(obj):
    print(json.dumps(obj, indent=2, allow_nan=False))


class progress_note:
    """A "working on it" line on stderr, then how long it took (also when not a terminal)."""

    def __init__(self, what):
        self.what = what

    def __enter__(self):
        import time

        self.start = time.monotonic()
        print(f"corealign: {self.what} ...", file=sys.stderr, flush=True)
        return self

    def __exit__(self, *exc):
        import time

        if exc[0] is None:
            print(f"corealign: {self.what}: done in {time.monotonic() - self.start:.1f} s",
                  file=sys.stderr, flush=True)
        return False


def _finish(result, args, render):
    """Write the report folder if asked, then print JSON or text."""
    from align.report import write_report

    folder = (write_report(result, args.output, overwrite=args.overwrite)
              if args.output is not None else None)
    if args.json:
        _print_json(result.to_dict())
    else:
        print(render(result))
        if folder:
            print(f"report: {folder / 'report.html'}")


def _record_summary(record, path, args, what):
    """After writing a record: its description as JSON, or one line."""
    from align.describe import describe_record

    if args.json:
        _print_json(describe_record(record).to_dict())
    else:
        print(f"wrote {path}: {record.sizes['sample']} samples{what}")


def _grid_summary(grid, output, args):
    from align.describe import describe_grid

    if args.json:
        _print_json(describe_grid(grid).to_dict())
        return
    along = next(iter(grid.dims))
    print(f"wrote {output}: {grid.sizes[along]} cells of {grid.attrs['resample_step']:g} along "
          f"{along}" + (f"; {grid.attrs['step_choice']}" if "step_choice" in grid.attrs else ""))


# --------------------------------------------------------------------------------------------
# the commands


def _info(args):
    from align import text
    from align.describe import describe_record
    from align.io import open_record

    info = describe_record(open_record(args.record, **mapping_from(args)))
    if args.json:
        _print_json(info.to_dict())
    else:
        print(text.record_info(info))


def _convert(args):
    from align.io import open_record, save_record

    record = open_record(args.input, **mapping_from(args))
    path = save_record(record, args.output, history=f"converted from {args.input}")
    _record_summary(record, path, args, "")


def _age(args):
    from align.ages import convert_age

    result = convert_age(args.value, args.from_, args.to)
    if args.json:
        from align.schema import AgeConversion

        _print_json(AgeConversion(value=args.value, from_=args.from_, to=args.to,
                                  result=result).to_dict())
    else:
        print(f"{result:.10g}")


def _tie(args):
    from align.io import open_record, save_record
    from align.ties import read_ties, transfer

    record = open_record(args.record, **mapping_from(args))
    moved = transfer(record, read_ties(args.ties), open_record(args.onto), method=args.method,
                     extrapolate=args.extrapolate, bridge_rate=args.bridge_rate)
    save_record(moved, args.output, history=f"written by corealign tie from {args.record}")
    sd = moved["age_sd"].values
    _record_summary(moved, args.output, args,
                    f" on {moved.attrs['timescale']}, age sd {sd.min():.1f} to "
                    f"{sd.max():.1f} yr; bridge rate {moved.attrs['bridge_rate']:.3g} yr^2/yr "
                    f"({moved.attrs['bridge_rate_choice']})")


def _suggest_ties(args):
    from pathlib import Path

    from align.io import atomic_write, open_record
    from align.suggest import suggest_ties

    (ref_path, ref_var), (moved_path, moved_var) = map(record_and_variable,
                                                       (args.reference, args.moved))
    table = suggest_ties(open_record(ref_path), ref_var, open_record(moved_path), moved_var,
                         max_offset=args.max_offset, threshold=args.threshold)
    header = (f"# candidate ties: {moved_path} (depth) onto {ref_path}; review before use, "
              "delete the rows you reject\n")
    atomic_write(args.output, lambda tmp: Path(tmp).write_text(
        header + table.to_csv(index=False, float_format="%.6g")))
    if args.json:
        _print_json({"output": str(args.output),
                     "candidates": json.loads(table.to_json(orient="records"))})
    else:
        print(f"wrote {args.output}: {len(table)} candidate ties (never applied automatically)")


def _resample(args):
    from align.io import open_record, save_grid
    from align.resample import resample

    mapping = mapping_from(args)
    record = open_record(args.record, **mapping)
    grid = resample(record, args.step, start=args.start, stop=args.stop,
                    variables=mapping.get("variables"), min_coverage=args.min_coverage,
                    along=args.along, interpolate=args.interpolate)
    save_grid(grid, args.output, history=f"corealign resample {args.record}")
    _grid_summary(grid, args.output, args)


def _align(args):
    from align.io import open_record, save_grid
    from align.resample import align_records
    from align.ties import read_ties

    a, b = open_record(args.a), open_record(args.b)
    grid = align_records(a, b, ties=read_ties(args.ties) if args.ties else None,
                         same_timescale=args.same_timescale, step=args.step,
                         min_coverage=args.min_coverage)
    save_grid(grid, args.output, history=f"corealign align {args.a} {args.b}")
    _grid_summary(grid, args.output, args)


def _detect(args):
    from align import text
    from align.detect import detect_marker
    from align.io import open_record
    from align.markers import KINDS

    path, variable = record_and_variable(args.target)
    kind = KINDS[args.kind]
    spec = {"kind": args.kind, "variable": variable, "window": parse_window(args.window),
            "transform": args.transform,
            **{k: getattr(args, k) for k in kind.options.model_fields if k != "kind"}}
    record = open_record(path, **mapping_from(args))
    with progress_note(f"finding the {args.kind} in {variable}"):
        result = detect_marker(record, spec, seed=args.seed, age_reference=args.to)
    _print_json(result.to_dict()) if args.json else print(text.marker(result))


def _lag(args):
    from align import text
    from align.lag import estimate_lag

    options = dict(ties=args.ties, age_reference=args.to,
                   **{name: getattr(args, name) for name in _LAG_OPTIONS})
    if args.request:
        from align.requests import read_request

        if args.a or args.b:
            raise InputError("give --request or --a/--b, not both", field="request")
        a, b = read_request(args.request), None
    else:
        mapping = mapping_from(args) or None
        a = {**marker_flag(args.a, args.a_window, "a"), "mapping": mapping,
             "transform": args.a_transform}
        b = {**marker_flag(args.b, args.b_window, "b"), "mapping": mapping,
             "transform": args.b_transform}
    with progress_note("estimating the lag"):
        result = estimate_lag(a, b, **options)
    _finish(result, args, text.lag)


def _xcorr(args):
    from align import text
    from align.io import open_record
    from align.xcorr import cross_correlate

    (path_a, var_a), (path_b, var_b) = map(record_and_variable, (args.a, args.b))
    with progress_note("cross-correlating"):
        mapping = mapping_from(args)
        result = cross_correlate((open_record(path_a, **mapping), var_a),
                                 (open_record(path_b, **mapping), var_b),
                                 args.max_lag, step=args.step, method=args.method,
                                 surrogates=args.surrogates, surrogate_kind=args.surrogate_kind,
                                 window=parse_window(args.window), seed=args.seed,
                                 age_reference=args.to, bootstrap=args.bootstrap)
    _finish(result, args, text.xcorr)


def _survey(args):
    from align import text
    from align.progress import Progress
    from align.requests import read_survey
    from align.survey import survey

    result = survey(read_survey(args.spec), scheduler=args.scheduler, age_reference=args.to,
                    progress=Progress("survey", unit="pairs"))
    _finish(result, args, text.survey)


def _synchrony(args):
    from align import text
    from align.sites import read_sites
    from align.synchrony import test_synchrony

    request = read_sites(args.sites)
    with progress_note("testing synchrony"):
        result = test_synchrony(request, seed=args.seed, age_reference=args.to)
    _finish(result, args, text.synchrony)


def _report(args):
    from align.report import load_result, write_report

    folder = write_report(load_result(args.result), args.output, overwrite=args.overwrite)
    print(f"report: {folder / 'report.html'}")


def _serve(args):
    from api.server import serve

    serve(args.host, args.port, args.data_dir, args.token_file, args.workers, args.time_limit,
          worker_memory=args.worker_memory)


def _demo(args):
    if args.mode == "synchrony":
        return _demo_synchrony(args)
    from align.demo import demo_request_path, demo_truth
    from align.lag import estimate_lag
    from align.report import summary, write_report
    from align.requests import read_request

    with progress_note("running the demo (synthetic records, invented scenario)"):
        result = estimate_lag(read_request(demo_request_path()))
    folder = write_report(result, args.output or "corealign-demo-report", overwrite=True)
    truth = demo_truth()
    if args.json:
        _print_json({"truth": truth, "result": result.to_dict()})
        return
    print(summary(result))
    print(f"\nknown truth of this synthetic scenario (records/README.md): the event precedes "
          f"the onset by {truth['lag']:g} years ({truth['lag_on_ice_timescale']:g} on the ice "
          f"core's own timescale).")
    print(f"report: {folder / 'report.html'}")


def _demo_synchrony(args):
    from align import text
    from align.demo import demo_sites_path, demo_sites_truth
    from align.report import write_report
    from align.sites import read_sites
    from align.synchrony import test_synchrony

    with progress_note("testing synchrony (invented sites, synthetic dates)"):
        result = test_synchrony(read_sites(demo_sites_path()))
    folder = write_report(result, args.output or "corealign-demo-synchrony", overwrite=True)
    truth = demo_sites_truth()
    if args.json:
        _print_json({"truth": truth, "result": result.to_dict()})
        return
    print(text.synchrony(result))
    print(f"\nknown truth of this invented scenario (records/README.md): {truth['summary']}")
    print(f"report: {folder / 'report.html'}")
