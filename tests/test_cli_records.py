"""The record commands of the CLI: info and convert, and their exit codes on bad input."""

import json

import pytest

from conftest import RECORDS, run_cli
from corpus import CASES


@pytest.mark.parametrize("path", sorted(RECORDS.glob("*.nc")), ids=lambda p: p.name)
def test_info_json_on_demo_records(path):
    done = run_cli("info", path, "--json")
    assert done.returncode == 0, done.stderr
    info = json.loads(done.stdout)
    assert info["n_samples"] > 50 and info["age_reference"] in ("b2k", "BP")
    assert all(v["units"] for v in info["variables"])


def test_info_text_and_convert(tmp_path):
    done = run_cli("info", RECORDS / "hvd1_ice.nc")
    assert done.returncode == 0 and "layer-counted" in done.stdout and "sulfate" in done.stdout
    out = tmp_path / "copy.nc"
    done = run_cli("convert", RECORDS / "trv3_lake.nc", "-o", out)
    assert done.returncode == 0, done.stderr
    again = json.loads(run_cli("info", out, "--json").stdout)
    assert again["ensemble_members"] == 500 and again["age_reference"] == "BP"


def test_convert_ngrip_csv(tmp_path, ngrip_csv):
    out = tmp_path / "ngrip.nc"
    done = run_cli("convert", ngrip_csv, "--age-column", "Age_BP", "--age-reference", "BP",
                   "--units", "d18O=1e-3", "-o", out)
    assert done.returncode == 0, done.stderr
    info = json.loads(run_cli("info", out, "--json").stdout)
    assert info["age"]["interval"]["median"] == 10.0


@pytest.mark.parametrize("name, content, suffix, mapping, fragments", CASES,
                         ids=[c[0] for c in CASES])
def test_bad_input_exits_2_with_one_line(tmp_path, name, content, suffix, mapping, fragments):
    path = tmp_path / f"{name}{suffix}"
    path.write_bytes(content if isinstance(content, bytes) else content.encode())
    options = [f"--{k.replace('_', '-')}={v}" for k, v in mapping.items()]
    done = run_cli("info", path, *options)
    assert done.returncode == 2
    assert "Traceback" not in done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1 and all(f in lines[0] for f in fragments), done.stderr


def test_missing_file_and_usage_error():
    done = run_cli("info", "no/such/file.nc")
    assert done.returncode == 2 and "no such file" in done.stderr
    done = run_cli("info")
    assert done.returncode == 2 and len(done.stderr.strip().splitlines()) == 1
