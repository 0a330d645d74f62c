"""Costs paid once per process, not per call: the package version, the OpenAPI document."""

from importlib import metadata

from align import provenance


def test_version_is_looked_up_once(monkeypatch):
    provenance.version.cache_clear()
    calls = []
    real = metadata.version
    monkeypatch.setattr(provenance.metadata, "version",
                        lambda name: calls.append(name) or real(name))
    first = [provenance.provenance(inputs=[], parameters={})["version"] for _ in range(50)]
    assert len(set(first)) == 1 and calls == ["corealign"]
    provenance.version.cache_clear()


def test_openapi_document_is_built_once(client, monkeypatch):
    import api.spec

    api.spec._openapi_document.cache_clear()
    api.spec._openapi_text.cache_clear()
    built = []
    real = api.spec.json_schemas
    monkeypatch.setattr(api.spec, "json_schemas", lambda models: built.append(1) or real(models))
    bodies = [client.get("/openapi.json").get_json() for _ in range(3)]
    assert len(built) == 1
    assert bodies[0] == bodies[2] and bodies[0]["openapi"] == "3.1.0"
    assert "/openapi.json" in bodies[0]["paths"]


def test_trace_lists_equal_the_element_by_element_conversion():
    import json

    import numpy as np

    from align.detect import trace_list

    values = np.random.default_rng(2).normal(size=1000)
    values[[3, 70, 500]] = [np.nan, np.inf, -np.inf]
    expected = [None if not np.isfinite(v) else float(v) for v in values]
    got = trace_list(values)
    assert got == expected and json.dumps(got) == json.dumps(expected)
    assert all(type(v) is float for v in got if v is not None)
