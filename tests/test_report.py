"""Reports: one object behind JSON, Markdown and HTML; redrawn from JSON alone; the demo."""

import json
import os
import re
from pathlib import Path

import pytest

from align.errors import InputError
from align.report import write_report
from conftest import RECORDS, run_cli


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    done = run_cli("lag", "--request", RECORDS / "demo_lag_request.json", "-o", folder)
    assert done.returncode == 0, done.stderr
    assert "report.html" in done.stdout
    return folder


def test_report_folder_has_every_file(demo_report):
    names = {p.name for p in demo_report.iterdir()}
    for figure in ("overview", "marker_a", "marker_b", "lag", "budget"):
        assert {f"{figure}.svg", f"{figure}.png"} <= names
    assert {"report.json", "report.md", "report.html"} <= names
    page = (demo_report / "report.html").read_text()
    assert page.count("<svg") == 5 and "http://" not in page.split("<svg")[0]
    assert not re.search(r"<(script|link|img)[^>]+(src|href)=\"https?:", page)


def test_the_three_formats_show_the_same_numbers(demo_report):
    result = json.loads((demo_report / "report.json").read_text())
    md = (demo_report / "report.md").read_text()
    page = (demo_report / "report.html").read_text()
    lag = result["lag"]
    expected = [f"{lag['median']:.1f} yr", f"{lag['ci95'][0]:.1f} to {lag['ci95'][1]:.1f} yr",
                f"{lag['p_a_before_b']:.3f}", f"{result['resolution_floor']:.2f} yr"]
    expected += [f"{b['sd']:.2f}" for b in result["budget"]]
    expected += [f"{w['ci95'][0]:.1f} to {w['ci95'][1]:.1f}" for w in result["what_if"]]
    expected += [i["sha256"] for i in result["provenance"]["inputs"]]
    for text in expected:
        assert text in md, text
        assert text in page, text
    assert result["verdict"] in md and result["verdict"] in page
    assert "does not establish cause" in md and "does not establish cause" in page


def test_report_redrawn_from_json_alone_is_the_same(demo_report, tmp_path):
    done = run_cli("report", demo_report / "report.json", "-o", tmp_path)
    assert done.returncode == 0, done.stderr
    for figure in ("overview", "marker_a", "marker_b", "lag", "budget"):
        assert (tmp_path / f"{figure}.svg").read_text() == (
            demo_report / f"{figure}.svg").read_text(), figure
    assert (tmp_path / "report.md").read_text() == (demo_report / "report.md").read_text()


@pytest.mark.parametrize("content, fragment", [
    ('{"lag": 3}', "not a LagResult"),
    ("[1, 2]", "not a corealign result"),
    ("not json", "not valid JSON"),
])
def test_report_refuses_what_is_not_a_result(tmp_path, content, fragment):
    path = tmp_path / "bad.json"
    path.write_text(content)
    done = run_cli("report", path, "-o", tmp_path / "out")
    assert done.returncode == 2 and fragment in done.stderr
    assert len(done.stderr.strip().splitlines()) == 1 and "Traceback" not in done.stderr


def test_missing_field_is_named(demo_report, tmp_path):
    data = json.loads((demo_report / "report.json").read_text())
    del data["budget"]
    path = tmp_path / "partial.json"
    path.write_text(json.dumps(data))
    done = run_cli("report", path, "-o", tmp_path / "out")
    assert done.returncode == 2 and "'budget'" in done.stderr


def test_demo_json_truth_inside_the_interval(tmp_path):
    done = run_cli("demo", "-o", tmp_path / "demo", "--json")
    assert done.returncode == 0, done.stderr
    out = json.loads(done.stdout)
    lo, hi = out["result"]["lag"]["ci95"]
    assert lo <= out["truth"]["lag_on_ice_timescale"] <= hi
    assert lo <= out["truth"]["lag"] <= hi
    assert (tmp_path / "demo" / "report.html").exists()


@pytest.fixture(scope="module")
def demo_survey():
    from align import read_survey, survey

    return survey(read_survey(RECORDS / "demo_survey.json"))


def test_survey_report(demo_survey, tmp_path):
    result = demo_survey
    folder = write_report(result, tmp_path / "survey")
    page = (folder / "report.html").read_text()
    assert "X1 cooling" in page and page.count("<svg") == 2  # the lags, the pairs' fits
    assert {"pairs-1.svg", "pairs-1.png"} <= {p.name for p in folder.iterdir()}
    md = (folder / "report.md").read_text()
    assert f"{result.combined.median:.1f} yr" in md
    assert f"{result.heterogeneity.q:.2f} ({result.heterogeneity.dof}," in md
    for pair in result.pairs:
        assert pair.label in md
    headline = md.split("\n\n")[1]
    assert headline.startswith("a, d18O onset (hvd1_ice.nc), against b, d18O onset "
                               "(trv3_lake.nc), over 2 pairs: ")
    assert result.systematic in headline


def test_survey_provenance_lists_every_record_with_its_checksum(demo_survey):
    """Checksums against hashlib on the files' bytes (not the project's helper)."""
    import hashlib

    inputs = {Path(i.source).name: i for i in demo_survey.provenance.inputs}
    assert set(inputs) == {"hvd1_ice.nc", "trv3_lake.nc", "hvd1_trv3_ties.csv",
                           "demo_transitions.csv"}
    assert (inputs["hvd1_ice.nc"].role, inputs["trv3_lake.nc"].role) == ("record a", "record b")
    for name, item in inputs.items():
        assert item.sha256 == hashlib.sha256((RECORDS / name).read_bytes()).hexdigest(), name


def test_survey_pairs_whose_markers_differ_say_so(tmp_path):
    """Explicit pairs with different markers: the pair table and the text name each pair's."""
    from align import survey, text

    ice, lake = str(RECORDS / "hvd1_ice.nc"), str(RECORDS / "trv3_lake.nc")
    spec = {"pairs": [
        {"label": "X1", "a": {"kind": "onset", "record": ice, "variable": "d18O",
                              "window": [11900, 12400]},
         "b": {"kind": "onset", "record": lake, "variable": "d18O", "window": [11900, 12400]}},
        {"label": "X2", "a": {"kind": "onset", "record": ice, "variable": "d18O",
                              "window": [11380, 11880], "position": "midpoint"},
         "b": {"kind": "onset", "record": lake, "variable": "d18O",
               "window": [11380, 11880]}}],
        "ties": str(RECORDS / "hvd1_trv3_ties.csv"), "draws": 2000, "seed": 3}
    result = survey(spec, workers=1)
    md = (write_report(result, tmp_path / "r") / "report.md").read_text()
    assert "| pair | a | b | lag a - b (yr) |" in md
    assert ("| X2 | d18O transition midpoint (hvd1_ice.nc) | d18O onset (trv3_lake.nc) |"
            in md)
    assert "d18O onset (hvd1_ice.nc) or d18O transition midpoint (hvd1_ice.nc)" in md
    lines = text.survey(result).splitlines()
    assert lines[lines.index(next(x for x in lines if x.startswith("X2"))) + 1].split() == [
        "a:", "d18O", "transition", "midpoint", "(hvd1_ice.nc);", "b:", "d18O", "onset",
        "(trv3_lake.nc)"]


def test_survey_keeps_each_pairs_marker_fit_outlying_first(greenland):
    """Every sample of each window is kept (values to 4 significant digits) with a thinned
    fit, and the fits' pages put the largest share of Cochran's Q first; shares computed here
    from Cochran (1954): w_i (y_i - ybar_w)^2 / Q."""
    import numpy as np
    import pandas as pd

    from align import survey
    from align.figures import FIT_POINTS, fit_pages, pair_fit_figure
    from test_survey import greenland_spec

    result = survey(greenland_spec(greenland, rows=["Holocene", "GI-1e", "GI-8c", "GI-12c",
                                                     "GI-14e"], draws=2000), workers=1)
    table = pd.read_csv(greenland / "NGRIP_10yr.csv", comment="#")
    age_b2k = table["Age_BP"].to_numpy() + 50.0  # BP = b2k - 50
    for pair in result.pairs:
        for marker in (pair.a, pair.b):
            assert len(marker.trace.curve_age) <= FIT_POINTS
            values = table[marker.variable].to_numpy()
            inside = ((age_b2k >= marker.window[0]) & (age_b2k <= marker.window[1])
                      & np.isfinite(values))
            assert sorted(marker.trace.value) == pytest.approx(sorted(values[inside]),
                                                               rel=1e-3)
    used = [k for k, p in enumerate(result.pairs) if p.clear]
    y = np.array([result.pairs[k].lag.median for k in used])
    w = 1 / np.array([result.pairs[k].lag.sd for k in used]) ** 2
    part = w * (y - (w * y).sum() / w.sum()) ** 2
    order = [used[i] for i in np.argsort(-part)]
    pages = fit_pages(result, per_page=2)
    assert [k for page in pages for k in page][:len(used)] == order
    assert [len(p) for p in pages] == [2, 2, 1]
    fig = pair_fit_figure(result, pages[0])
    assert len(fig.axes) == 4


@pytest.mark.parametrize("command, title", [
    (("xcorr", f"{RECORDS / 'hvd1_ice.nc'}:d18O", f"{RECORDS / 'trv3_lake.nc'}:d18O",
      "--max-lag", "300", "--surrogates", "100", "--bootstrap", "100", "--seed", "1"),
     "Cross-correlation report"),
    (("detect", "onset", f"{RECORDS / 'trv3_lake.nc'}:d18O", "--window", "11900,12500",
      "--draws", "300", "--seed", "1"), "Marker report: onset"),
    (("detect", "event", f"{RECORDS / 'hvd1_ice.nc'}:sulfate", "--window", "12150,12350"),
     "Marker report: event"),
])
def test_report_on_any_saved_result(tmp_path, command, title):
    """``corealign report`` renders every result type the CLI saves with --json."""
    done = run_cli(*command, "--json")
    assert done.returncode == 0, done.stderr
    saved = tmp_path / "result.json"
    saved.write_text(done.stdout)
    again = run_cli("report", saved, "-o", tmp_path / "report")
    assert again.returncode == 0, again.stderr
    page = (tmp_path / "report" / "report.html").read_text()
    assert f"<h1>{title}</h1>" in page and page.count("<svg") == 1
    assert json.loads((tmp_path / "report" / "report.json").read_text()) == json.loads(
        done.stdout)


def test_xcorr_writes_its_report_folder(tmp_path):
    """``xcorr -o`` writes the report as ``lag -o`` does; its headline says which record
    leads only when the peak lag's 95 % interval excludes zero."""
    done = run_cli("xcorr", f"{RECORDS / 'hvd1_ice.nc'}:d18O", f"{RECORDS / 'trv3_lake.nc'}:d18O",
                   "--max-lag", "200", "--window", "11900,12500", "--surrogates", "100",
                   "--bootstrap", "100", "--seed", "1", "-o", tmp_path / "xc")
    assert done.returncode == 0, done.stderr
    assert f"report: {tmp_path / 'xc' / 'report.html'}" in done.stdout
    saved = json.loads((tmp_path / "xc" / "report.json").read_text())
    low, high = saved["peak_lag"]["ci95"]
    page = (tmp_path / "xc" / "report.html").read_text()
    assert "<h1>Cross-correlation report</h1>" in page
    words = ("the pattern is older in a" if low > 0 else "the pattern is younger in a"
             if high < 0 else "the interval includes zero, so neither record is shown to lead")
    assert words in page


@pytest.mark.parametrize("name, words", [
    ("dangling", "symbolic link"), ("to-folder", "symbolic link"), ("a" * 300, "too long"),
    ("", "must be a path"), ("nul\0name", "must be a path"),
])
def test_unusable_report_folders_are_input_errors(tmp_path, name, words):
    """Before, these passed the check and failed after the work, some as internal errors."""
    from align.report import check_report_folder

    (tmp_path / "real").mkdir()
    (tmp_path / "dangling").symlink_to(tmp_path / "nowhere")
    (tmp_path / "to-folder").symlink_to(tmp_path / "real")
    before = sorted(p.name for p in tmp_path.iterdir())
    with pytest.raises(InputError, match=words):
        check_report_folder(tmp_path / name if name else name, overwrite=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == before


def _files(folder):
    return {p.name: p.read_bytes() for p in folder.iterdir()}


def _old_report(like, folder):
    """A folder holding the files of the report in ``like``, each with other content (so that
    any file rewritten in place shows)."""
    folder.mkdir()
    for name in _files(like):
        (folder / name).write_text(f"old {name}")
    return folder


@pytest.fixture(scope="module")
def demo_result(demo_report):
    from align.report import load_result

    return load_result(demo_report / "report.json")


def test_a_failed_rewrite_leaves_the_old_report_and_no_temporary_folder(
        demo_report, demo_result, tmp_path, monkeypatch):
    """A figure that fails mid-write (the third of five) leaves the old folder as it was."""
    from matplotlib.figure import Figure

    folder = _old_report(demo_report, tmp_path / "report")
    before = _files(folder)
    saved = []
    real = Figure.savefig

    def failing(self, *args, **kwargs):
        saved.append(args[0])
        if len(saved) == 5:  # the third figure's SVG
            raise OSError("disk full (simulated)")
        return real(self, *args, **kwargs)

    monkeypatch.setattr(Figure, "savefig", failing)
    with pytest.raises(OSError, match="simulated"):
        write_report(demo_result, folder, overwrite=True)
    assert _files(folder) == before
    assert len(saved) == 5 and all(Path(p).parent != folder for p in saved)
    assert [p.name for p in tmp_path.iterdir()] == ["report"]


@pytest.mark.parametrize("exchange", [True, False], ids=["swap", "rename-aside"])
def test_an_overwrite_replaces_the_whole_folder(demo_result, tmp_path, monkeypatch, exchange):
    """No file of the old report survives beside the new one (a survey figure in a marker
    report's folder is a mix of two runs); with or without the atomic swap."""
    if not exchange:
        monkeypatch.setattr("align.folders._exchange", lambda a, b: False)
    folder = tmp_path / "report"
    folder.mkdir()
    (folder / "survey.svg").write_text("<svg/>")
    (folder / "report.md").write_text("an older report")
    write_report(demo_result.a, folder, overwrite=True)  # one figure: quick
    names = {p.name for p in folder.iterdir()}
    assert names == {"marker.svg", "marker.png", "report.json", "report.md", "report.html"}
    assert (folder / "report.md").read_text().startswith("# Marker report")
    assert [p.name for p in tmp_path.iterdir()] == ["report"]
    umask = os.umask(0)
    os.umask(umask)
    assert folder.stat().st_mode & 0o777 == 0o777 & ~umask  # not the temporary folder's 0o700


def test_a_folder_with_other_files_is_not_replaced(demo_result, tmp_path):
    from align.errors import InputError

    (tmp_path / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="not part of a report.*notes.txt"):
        write_report(demo_result, tmp_path, overwrite=True)
    assert [p.name for p in tmp_path.iterdir()] == ["notes.txt"]


def test_a_terminated_rewrite_leaves_the_old_report(demo_report, tmp_path):
    """SIGTERM while ``corealign report --overwrite`` fills its new folder: exit 143, the old
    report as it was, no temporary folder left."""
    import signal
    import subprocess
    import sys
    import time

    from conftest import ROOT

    folder = _old_report(demo_report, tmp_path / "report")
    before = _files(folder)
    process = subprocess.Popen([sys.executable, "-m", "align", "report",
                                str(demo_report / "report.json"), "-o", str(folder),
                                "--overwrite"], cwd=ROOT, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 120
    while not any(p.suffix == ".part" and any(p.iterdir()) for p in tmp_path.iterdir()):
        assert process.poll() is None and time.monotonic() < deadline, process.stderr.read()
        time.sleep(0.005)
    process.send_signal(signal.SIGTERM)
    assert process.wait(timeout=60) == 143
    assert _files(folder) == before
    assert [p.name for p in tmp_path.iterdir()] == ["report"]


def test_survey_headline_puts_a_disagreement_first(demo_survey):
    """When the pairs disagree significantly, the headline opens with it (as the result's
    statement does) and still names both series."""
    from align.report import survey_headline

    disagree = "the pairs disagree more than their uncertainties allow (Q = 9.0 on 1 dof)"
    het = demo_survey.heterogeneity.model_copy(update={"significant": True})
    result = demo_survey.model_copy(update={"heterogeneity": het, "systematic": disagree})
    headline = survey_headline(result)
    assert headline.startswith(disagree + ". Compared: a, d18O onset (hvd1_ice.nc), against "
                               "b, d18O onset (trv3_lake.nc), over 2 pairs.")
    calm = survey_headline(demo_survey)
    assert calm.startswith("a, d18O onset (hvd1_ice.nc)") and demo_survey.systematic in calm


def test_a_survey_saved_without_markers_still_renders(demo_survey, tmp_path):
    """A survey result saved before pairs kept their markers: no fits section, no empty page."""
    pairs = [p.model_copy(update={"a": None, "b": None}) for p in demo_survey.pairs]
    folder = write_report(demo_survey.model_copy(update={"pairs": pairs}), tmp_path / "old")
    page = (folder / "report.html").read_text()
    assert page.count("<svg") == 1 and "Each pair&#x27;s markers" not in page
    assert not list(folder.glob("pairs-*"))


def test_two_folders_swap_in_one_step(tmp_path):
    """The swap that puts a new report folder in place (renameat2 with RENAME_EXCHANGE, Linux):
    each path then holds the other's files."""
    import sys

    from align.folders import _exchange

    old, new = tmp_path / "old", tmp_path / "new"
    for folder in (old, new):
        folder.mkdir()
        (folder / folder.name).write_text(folder.name)
    swapped = _exchange(new, old)
    assert swapped or sys.platform != "linux"
    if swapped:
        assert [p.name for p in old.iterdir()] == ["new"]
        assert [p.name for p in new.iterdir()] == ["old"]
