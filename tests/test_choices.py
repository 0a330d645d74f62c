"""Each choice and default is written once: the CLI, the library signatures and the schema
agree because they read the same definitions; this checks that they do."""

import argparse
import inspect
from typing import Literal, get_args, get_origin

import pytest

from align import choices as C
from align.cli import build_parser
from align.markers import KINDS, RECORD_KINDS
from align.schema import LagRequest, ResampleRequest, XcorrRequest


def subparsers(parser):
    return next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction)).choices


def actions(parser):
    return {a.dest: a for a in parser._actions if a.option_strings}


def literal_values(annotation):
    if get_origin(annotation) is not Literal:
        annotation = next((a for a in get_args(annotation) if get_origin(a) is Literal), None)
    return get_args(annotation) if annotation is not None else None


COMMANDS = subparsers(build_parser())


def agree(parser, model, names, *, defaults=True):
    flags = actions(parser)
    for name in names:
        field = model.model_fields[name]
        action = flags[name]
        values = literal_values(field.annotation)
        if values is not None:
            assert tuple(action.choices) == values, name
        if defaults:
            assert action.default == field.default, name


@pytest.mark.parametrize("kind", sorted(RECORD_KINDS))
def test_detect_options_are_the_kinds_options(kind):
    options = KINDS[kind].options
    names = [n for n in options.model_fields if n != "kind"]
    agree(subparsers(COMMANDS["detect"])[kind], options, names)
    # and the library's keyword defaults are the same values
    detect = getattr(__import__("align"), f"detect_{kind}")
    signature = inspect.signature(detect).parameters
    for name in names:
        assert signature[name].default == options.model_fields[name].default, name


def test_xcorr_resample_lag_tie_options_follow_the_schema():
    agree(COMMANDS["xcorr"], XcorrRequest, ["method", "surrogates", "surrogate_kind",
                                            "bootstrap", "step"])
    agree(COMMANDS["resample"], ResampleRequest, ["min_coverage", "along", "step", "start",
                                                  "stop"])
    # lag options default to None on the command line so that a request file keeps its own
    # values; their choices and their help's default come from the schema
    lag = actions(COMMANDS["lag"])
    assert tuple(lag["timescale_model"].choices) == C.options(C.TimescaleModel)
    assert f"default: {LagRequest.model_fields['draws'].default}" in lag["draws"].help
    assert tuple(actions(COMMANDS["tie"])["method"].choices) == C.options(C.TieInterpolation)
    assert tuple(actions(COMMANDS["info"])["depth_units"].choices) == C.options(C.DepthUnits)
    from align.xcorr import cross_correlate

    signature = inspect.signature(cross_correlate).parameters
    for name in ("method", "surrogates", "surrogate_kind", "bootstrap"):
        assert signature[name].default == XcorrRequest.model_fields[name].default, name


def test_marker_flags_offer_every_kind():
    lag = actions(COMMANDS["lag"])
    for kind in RECORD_KINDS:
        assert kind in lag["a"].help
    assert set(KINDS) - set(RECORD_KINDS) == {"sites"}  # given in a request file


def walk(parser, path=()):
    yield path, parser
    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from walk(sub, (*path, name))


def test_every_option_has_help():
    for path, parser in walk(build_parser()):
        for action in parser._actions:
            if action.option_strings and action.dest != "help":
                assert action.help, (path, action.option_strings)
        text = parser.format_help()
        assert "Undefined" not in text, (path, text)  # a required field has no default to show
        for action in parser._actions:  # each option states its default once
            shown = parser._get_formatter()._get_help_string(action) or ""
            assert shown.count("(default:") <= 1, (path, action.option_strings, shown)


def test_align_lists_only_options_it_accepts():
    flags = {f for a in COMMANDS["align"]._actions for f in a.option_strings}
    assert not {"--start", "--stop"} & flags
