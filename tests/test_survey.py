"""Surveys: per-pair lags, their combination, and the same answer on a dask cluster."""

import json

import numpy as np
import pytest

from align.survey import survey
from conftest import RECORDS, run_cli


def greenland_spec(greenland, rows=None, draws=4000):
    """Onsets of Ca against d18O at the transitions of the Greenland event table
    (Rasmussen et al. 2014, doi:10.1016/j.quascirev.2014.09.007) in the NGRIP decadal data
    (Erhardt et al. 2019, doi:10.5194/cp-15-811-2019)."""
    csv = str(greenland / "NGRIP_10yr.csv")
    mapping = {"age_column": "Age_BP", "age_reference": "BP"}
    return {"table": {"path": str(greenland / "GIS_table.txt"), "label_column": "Event",
                      "age_column": "Age", "age_reference": "b2k", "window": [-250, 250],
                      "rows": rows},
            "a": {"kind": "onset", "record": csv, "variable": "Ca", "mapping": mapping,
                  "draws": 400},
            "b": {"kind": "onset", "record": csv, "variable": "d18O", "mapping": mapping,
                  "draws": 400},
            "draws": draws, "seed": 7}


def test_survey_of_greenland_transitions(greenland):
    result = survey(greenland_spec(greenland, rows=["Holocene", "GI-1e", "GI-8c", "GI-12c",
                                                     "GI-14e"]))
    assert [p.label for p in result.pairs] == ["Holocene", "GI-1e", "GI-8c", "GI-12c", "GI-14e"]
    used = [p for p in result.pairs if p.clear]
    assert result.n_used == len(used) >= 3
    combined = result.combined
    # the combined interval carries each pair's uncertainty: it is never narrower than the
    # inverse-variance bound from the pairs' sds
    bound = 1.0 / np.sqrt(sum(1.0 / p.lag.sd**2 for p in used))
    assert combined.sd >= 0.95 * bound
    assert 0 <= result.heterogeneity.p_value <= 1 and result.heterogeneity.dof == len(used) - 1
    # the pair table is one row per pair with the lag's columns; the kept markers are tables
    # of their own, not hundreds of flattened columns
    table = result.to_dataframe("pairs")
    assert list(table["label"]) == [p.label for p in result.pairs]
    assert {"lag.median", "a_age.median", "clear"} <= set(table.columns)
    assert not [c for c in table.columns if c.split(".")[0] in ("a", "b")]


def test_survey_on_a_local_cluster_equals_serial(greenland):
    distributed = pytest.importorskip("distributed")
    spec = greenland_spec(greenland, rows=["Holocene", "GI-1e", "GI-4"], draws=2000)
    serial = survey(spec)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        clustered = survey(spec, scheduler=cluster.scheduler_address)
    assert without_times(serial.to_dict(), "provenance") == without_times(
        clustered.to_dict(), "provenance")


def without_times(data, *drop):
    """``data`` without creation times (each pair's markers keep theirs) and ``drop``."""
    if isinstance(data, dict):
        return {k: without_times(v) for k, v in data.items() if k not in ("created", *drop)}
    return [without_times(v) for v in data] if isinstance(data, list) else data


def test_cli_survey_on_the_demo():
    done = run_cli("survey", RECORDS / "demo_survey.json", "--json")
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    assert [p["label"] for p in result["pairs"]] == ["X1 cooling", "X2 warming"]
    lo, hi = result["combined"]["ci95"]
    assert lo <= 0 <= hi  # in truth ice and lake change together (records/README.md)


def test_worker_processes_give_the_serial_answer(greenland):
    spec = greenland_spec(greenland, rows=["Holocene", "GI-1e", "GI-4"], draws=2000)
    serial = survey(spec, workers=1)
    parallel = survey(spec, workers=2)
    assert without_times(serial.to_dict(), "provenance") == without_times(
        parallel.to_dict(), "provenance")


def test_records_ties_and_transfers_are_made_once_per_survey(monkeypatch):
    from align import lag as lagmod
    from align.requests import read_survey

    calls = {"record": 0, "ties": 0, "transfer": 0}

    class Counting(lagmod.Sources):
        def record(self, spec):
            calls["record"] += 1
            return super().record(spec)

        def ties(self, name):
            calls["ties"] += 1
            return super().ties(name)

        def transfer(self, *args, **kwargs):
            calls["transfer"] += 1
            return super().transfer(*args, **kwargs)

    spec = read_survey(RECORDS / "demo_survey.json").model_copy(update={"draws": 2000})
    result = survey(spec, sources=Counting(), workers=1)
    assert len(result.pairs) == 2
    # two records, one tie table, one transfer, for two pairs (before: 4, 2 and 2)
    assert calls == {"record": 2, "ties": 1, "transfer": 1}


def test_lag_settings_reach_every_pair_and_the_provenance():
    """A survey takes the lag's settings (bridge rate, synchronisation error, age-error
    scale) for every pair and states them; before, each pair silently used the defaults.
    The demo's budget is led by the bridge between ties, so a 4x rate widens every pair."""
    from align.requests import read_survey

    spec = read_survey(RECORDS / "demo_survey.json").model_copy(update={"draws": 2000})
    plain = survey(spec, workers=1)
    wide = survey(spec.model_copy(update={"bridge_rate": 12.0, "sync_sd": 7.0,
                                          "age_error_scale": 300.0}), workers=1)
    for before, after in zip(plain.pairs, wide.pairs, strict=True):
        assert after.lag.sd > 1.3 * before.lag.sd, (before.label, before.lag, after.lag)
    used = wide.provenance.parameters
    assert (used["bridge_rate"], used["sync_sd"], used["age_error_scale"]) == (12.0, 7.0, 300.0)


def test_worker_count():
    from align.errors import InputError
    from align.survey import worker_count

    assert worker_count(None, 1) == 1
    assert worker_count(3, 2) == 2
    assert worker_count(1, 100) == 1
    with pytest.raises(InputError, match="workers"):
        worker_count(0, 5)
