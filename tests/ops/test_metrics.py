"""Prometheus metrics in-process (the multiprocess sum under gunicorn is checked in
tests/ops/test_gunicorn_serve.py). Parsed with prometheus-client's own text parser."""

from __future__ import annotations

from prometheus_client.parser import text_string_to_metric_families

from service.ops import metrics


def _samples(client) -> dict:
    resp = client.get("/metrics")
    assert resp.status_code == 200
    assert resp.mimetype == "text/plain"
    out = {}
    for family in text_string_to_metric_families(resp.get_data(as_text=True)):
        for sample in family.samples:
            out[(sample.name, tuple(sorted(sample.labels.items())))] = sample.value
    return out


def _value(samples, name, **labels):
    return samples.get((name, tuple(sorted(labels.items()))), 0.0)


def test_request_counter_and_histogram_by_route_and_status(client):
    before = _samples(client)
    for _ in range(3):
        client.get("/healthz")
    client.get("/_test/item/abc")
    client.get("/_test/item/def")
    client.get("/missing")
    after = _samples(client)
    key = dict(endpoint="/healthz", method="GET", status="200")
    assert _value(after, "gainchain_http_requests_total", **key) \
        - _value(before, "gainchain_http_requests_total", **key) == 3
    assert _value(after, "gainchain_http_request_duration_seconds_count", **key) \
        - _value(before, "gainchain_http_request_duration_seconds_count", **key) == 3
    item = dict(endpoint="/_test/item/<item_id>", method="GET", status="200")
    assert _value(after, "gainchain_http_requests_total", **item) \
        - _value(before, "gainchain_http_requests_total", **item) == 2
    missing = dict(endpoint="<unmatched>", method="GET", status="404")
    assert _value(after, "gainchain_http_requests_total", **missing) \
        - _value(before, "gainchain_http_requests_total", **missing) == 1
    # Histogram buckets are cumulative: +Inf equals the count.
    inf = dict(key, le="+Inf")
    assert _value(after, "gainchain_http_request_duration_seconds_bucket", **inf) == \
        _value(after, "gainchain_http_request_duration_seconds_count", **key)


def test_design_compute_histogram_observer(client):
    before = _samples(client)
    metrics.observe_design_seconds(0.0015)
    with metrics.time_design():
        pass
    after = _samples(client)
    name = "gainchain_design_compute_seconds"
    assert _value(after, name + "_count") - _value(before, name + "_count") == 2
    assert _value(after, name + "_sum") - _value(before, name + "_sum") >= 0.0015
    assert _value(after, name + "_bucket", le="0.0025") \
        - _value(before, name + "_bucket", le="0.0025") == 2


def test_design_endpoint_feeds_the_compute_histogram(client):
    # service/pipeline.py calls observe_design_seconds around the engine.
    body = {"target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},  # README
            "supply": {"kind": "single", "v_pos": 5}, "opamp": "gc-cmos-rr-10m"}
    before = _samples(client)
    assert client.post("/v1/designs", json=body).status_code == 200
    after = _samples(client)
    name = "gainchain_design_compute_seconds"
    assert _value(after, name + "_count") - _value(before, name + "_count") >= 1
    assert _value(after, name + "_sum") > _value(before, name + "_sum")
