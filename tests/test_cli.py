"""The command line's common words: version, --json on every producing command, --to,
progress on stderr, a closed pipe, and reports that are never overwritten by accident."""

import json
import re
import subprocess
import sys

import pytest

from conftest import RECORDS, ROOT, run_cli

ICE, LAKE, TIES = RECORDS / "hvd1_ice.nc", RECORDS / "trv3_lake.nc", RECORDS / "hvd1_trv3_ties.csv"


def test_version():
    done = run_cli("--version")
    assert done.returncode == 0 and done.stdout.startswith("corealign ")


def test_json_on_commands_that_write(tmp_path):
    convert = run_cli("convert", LAKE, "-o", tmp_path / "lake.nc", "--json")
    assert convert.returncode == 0, convert.stderr
    assert json.loads(convert.stdout)["ensemble_members"] == 500
    tie = run_cli("tie", LAKE, "--ties", TIES, "--onto", ICE, "-o", tmp_path / "moved.nc",
                  "--json")
    assert tie.returncode == 0, tie.stderr
    assert json.loads(tie.stdout)["timescale_kind"] == "transferred"
    aligned = run_cli("align", ICE, LAKE, "--ties", TIES, "-o", tmp_path / "grid.nc", "--json")
    assert aligned.returncode == 0, aligned.stderr
    assert json.loads(aligned.stdout)["cells"] > 10
    suggest = run_cli("suggest-ties", f"{ICE}:sulfate", f"{LAKE}:tephra", "-o",
                      tmp_path / "candidates.csv", "--json")
    assert suggest.returncode == 0, suggest.stderr
    candidates = json.loads(suggest.stdout)["candidates"]
    assert candidates and {"label", "depth", "sd"} <= set(candidates[0])


def test_to_sets_the_reference_of_results():
    done = run_cli("lag", "--a", f"event:{ICE}:sulfate", "--a-window", "12060,12360",
                   "--b", f"onset:{LAKE}:d18O", "--b-window", "11850,12450",
                   "--to", "BP", "--ties", TIES, "--draws", "2000", "--seed", "1", "--json")
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    assert result["age_reference"] == "BP" and result["request"]["age_reference"] == "BP"
    # the same lag in b2k: marker ages shift by 50 years, the lag does not
    b2k = run_cli("lag", "--a", f"event:{ICE}:sulfate", "--a-window", "12110,12410",
                  "--b", f"onset:{LAKE}:d18O", "--b-window", "11900,12500",
                  "--ties", TIES, "--draws", "2000", "--seed", "1", "--json")
    other = json.loads(b2k.stdout)
    assert abs(other["a"]["event"]["median"] - result["a"]["event"]["median"] - 50) < 1e-6
    assert abs(other["lag"]["median"] - result["lag"]["median"]) < 1e-6


def test_progress_lines_when_stderr_is_not_a_terminal():
    done = run_cli("survey", RECORDS / "demo_survey.json")
    assert done.returncode == 0, done.stderr
    lines = [line for line in done.stderr.splitlines() if "survey:" in line]
    assert "2 pairs to do" in lines[0] and lines[-1].startswith("corealign: survey: 2/2 pairs")
    assert "\r" not in done.stderr


def test_a_closed_pipe_ends_quietly():
    command = (f"{sys.executable} -m align detect event {ICE}:sulfate --json | head -c 100")
    done = subprocess.run(["bash", "-o", "pipefail", "-c", command], capture_output=True,
                          text=True, cwd=ROOT, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr and "Broken pipe" not in done.stderr


def test_a_report_is_not_overwritten_by_accident(tmp_path):
    first = run_cli("lag", "--request", RECORDS / "demo_lag_request.json", "--draws", "2000",
                    "-o", tmp_path)
    assert first.returncode == 0, first.stderr
    again = run_cli("report", tmp_path / "report.json", "-o", tmp_path)
    assert again.returncode == 2 and "already holds a report" in again.stderr
    forced = run_cli("report", tmp_path / "report.json", "-o", tmp_path, "--overwrite")
    assert forced.returncode == 0, forced.stderr


@pytest.mark.parametrize("command", [
    ("lag", "--request", RECORDS / "demo_lag_request.json"),
    ("survey", RECORDS / "demo_survey.json"),
    ("xcorr", f"{ICE}:d18O", f"{RECORDS / 'trv3_lake.nc'}:d18O", "--max-lag", "200"),
], ids=["lag", "survey", "xcorr"])
@pytest.mark.parametrize("where, words", [
    ("a-file", "the report folder is an existing file"),
    ("a-file/sub", "cannot write here (Not a directory)"),
])
def test_a_report_folder_that_cannot_be_written_is_refused_before_the_work(
        tmp_path, command, where, words):
    """Before, the whole computation ran and then the folder was refused."""
    (tmp_path / "a-file").write_text("kept")
    done = run_cli(*command, "-o", tmp_path / where)
    assert done.returncode == 2 and words in done.stderr, done.stderr
    assert not re.search(r"estimating|survey:|cross-correlating", done.stderr), done.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a-file"]
    assert (tmp_path / "a-file").read_text() == "kept"


def test_onset_bootstrap_reports_counts_and_time_left(tmp_path):
    """A bootstrap larger than one chunk reports replicates done, one line at a time."""
    import numpy as np

    from align.io import save_record
    from align.record import build_record

    rng = np.random.default_rng(1)
    age = np.arange(1000.0, 21000.0, 1.0) + 0.5
    values = np.where(age < 11000, 1.0, 0.0) + rng.normal(0, 0.2, age.size)
    save_record(build_record(age=age, age_reference="b2k", proxies={"x": (values, {})}),
                tmp_path / "long.nc")
    done = run_cli("detect", "onset", f"{tmp_path / 'long.nc'}:x", "--window", "8000,14000",
                   "--draws", "300", "--seed", "1")
    assert done.returncode == 0, done.stderr
    lines = [line for line in done.stderr.splitlines() if "onset bootstrap" in line]
    assert "300 replicates to do" in lines[0]
    assert lines[-1].startswith("corealign: onset bootstrap: 300/300 replicates")


def test_lag_sets_every_numeric_option_of_the_request():
    """``sync_sd`` and ``age_error_scale`` reach the request from the command line, as they
    do from the library and the service."""
    done = run_cli("lag", "--a", f"event:{ICE}:sulfate", "--a-window", "12110,12410",
                   "--b", f"onset:{LAKE}:d18O", "--b-window", "11900,12500", "--ties", TIES,
                   "--draws", "2000", "--seed", "1", "--sync-sd", "7", "--age-error-scale",
                   "300", "--json")
    assert done.returncode == 0, done.stderr
    request = json.loads(done.stdout)["request"]
    assert request["sync_sd"] == 7 and request["age_error_scale"] == 300
