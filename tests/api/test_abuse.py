"""Cheap hostile requests against a real server process must be refused or bounded.

Each case (at reduced sizes) asserts its status, a time bound, a bound on the growth of the
server's peak resident memory, and that /healthz kept answering within 1 s meanwhile.  The
bounds are generous (a shared 2-core machine); before the limits these cases took from tens
of seconds to minutes and hundreds of MB to GB (tests/benchmarks/abuse.py gives figures).
"""

from __future__ import annotations

import json
import socket
import threading
import time

import pytest

from . import abuse_harness as h

KEY = "abuse-suite-model-key-0123456789abcdef"
ENV = {
    "BESTSCALE_POOL_SIZE": "2",
    "BESTSCALE_MAX_TABLE_COLUMNS": "100000",  # so the linear-time intake itself is exercised
    "BESTSCALE_HEADER_TIMEOUT_S": "2",
    "BESTSCALE_MAX_CONNECTIONS": "40",
    "BESTSCALE_MODEL_KEY": KEY,
}
HEALTH_S = 1.0


@pytest.fixture(scope="module")
def server():
    s = h.Server(ENV)
    try:
        yield s
    finally:
        s.close()


def _check(server, case, status, seconds, mb, fragment: str | None = None):
    run, _ = case
    m = h.measure(server, run)
    assert m.status == status, m.detail
    assert m.seconds < seconds, (m.seconds, m.detail)
    assert m.rss_growth_mb < mb, (m.rss_growth_mb, m.detail)
    assert m.health_max_s < HEALTH_S, m.health_max_s
    assert server.alive()
    if fragment is not None:
        assert fragment in m.detail, m.detail
    return m


def test_parquet_bomb_is_refused_from_its_metadata(server):
    # 3M rows of two constant columns compress to a few hundred kB
    _check(server, h.case_parquet_bomb(3_000_000), 422, 5, 150, "at most 1000000")


def test_unequal_lengths_over_many_columns_are_found_in_linear_time(server):
    _check(server, h.case_many_columns(20_000), 422, 5, 300, "unequal lengths")


def test_repeated_csv_header_name_is_found_in_linear_time(server):
    _check(server, h.case_csv_duplicate_header(30_000), 422, 5, 300, "repeats column name")


def test_overlong_level_is_refused_not_repeated(server):
    _check(server, h.case_long_level(200_000), 422, 5, 200, "at most 256")


def test_tiny_lambda_is_the_log_and_stays_bounded(server):
    _check(server, h.case_tiny_lambda(5e-6), 200, 15, 300)


def test_lambda_just_above_the_floor_stays_bounded(server):
    _check(server, h.case_tiny_lambda(0.0011), 200, 15, 300)


def test_tiny_power_exponent_is_refused(server):
    _check(server, h.case_tiny_power(1e-5), 422, 5, 100, "too close to 0")


@pytest.mark.parametrize("kind", ["coefficient", "variance", "exponent", "residuals"])
def test_forged_model_is_refused(server, kind):
    _check(server, h.case_forged_model(kind), 422, 10, 300)


def test_one_deadline_covers_search_stability_and_optimism(server):
    # folds 50 x repeats 50 with 1000 resamples and optimism: the 2 s limit is for the whole
    m = _check(server, h.case_deadline(2.0), 200, 8, 500)
    assert m.seconds < 2.0 + 5.0


def test_many_predictors_answer_within_their_time_limit(server):
    # 30 predictors at 8,000 rows: the band's entries and the listed entries' White tests
    # (465 auxiliary columns) come out of the 8 s, not after it
    _wait_until_no_slot_is_busy(server)
    m = _check(server, h.case_wide(8000, 30, 8.0), 200, 8.0 + 6.0, 800)
    assert m.seconds < 8.0 + 6.0


def test_deep_nesting_is_a_400(server):
    _check(server, h.case_deep_nesting(970), 400, 5, 100, "levels deep")


def test_repeated_multipart_part_is_named(server):
    _check(server, h.case_repeated_options(), 422, 5, 100, "'options' part appears 2 times")


def test_multipart_without_closing_boundary_is_a_400(server):
    _check(server, h.case_unclosed_multipart(), 400, 5, 100, "closing boundary")


def test_content_length_with_transfer_encoding_is_a_400(server):
    _check(server, h.case_length_and_chunked(), 400, 5, 100)


def test_slow_header_lines_are_cut_off(server):
    # source: the slow-header pattern (one header line every few seconds keeps a
    # connection open); the server must close it after BESTSCALE_HEADER_TIMEOUT_S (2 s here)
    t = time.perf_counter()
    still_open = h.slow_headers(server, 10, 1.0, 5.0)
    assert still_open == 0
    assert time.perf_counter() - t < 10
    assert server.request("GET", "/healthz")[0] == 200


def test_connections_past_the_cap_are_closed(server):
    socks = [socket.create_connection(("127.0.0.1", server.port), timeout=5) for _ in range(50)]
    try:
        time.sleep(0.5)  # before the header timeout (2 s)
        closed = 0
        for s in socks:
            s.setblocking(False)
            try:
                closed += s.recv(1) == b""
            except BlockingIOError:
                pass
            except OSError:
                closed += 1
        assert closed >= 10  # 40 allowed per process
    finally:
        for s in socks:
            s.close()
    time.sleep(0.2)
    assert server.request("GET", "/healthz")[0] == 200


@pytest.mark.parametrize("path", ["/v1/selections", "/v1/reports"])
def test_a_disconnected_client_frees_its_compute_slot(server, path):
    req = {
        "data": {"columns": h._table(120)},
        "response": "y",
        "predictors": ["x"],
        "validation": {"folds": 50, "repeats": 50},
        "trust": {"stability": True, "optimism": True, "resamples": 1000},
        "limits": {"time_limit_s": 60},
    }
    body = json.dumps(req).encode()
    head = (
        f"POST {path} HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
        f"Content-Length: {len(body)}\r\n\r\n"
    ).encode()
    _wait_until_no_slot_is_busy(server)  # an earlier case's computation may still be finishing
    socks = []
    try:
        for _ in range(2):  # both compute slots
            s = socket.create_connection(("127.0.0.1", server.port), timeout=5)
            s.sendall(head + body)
            socks.append(s)
        _wait_until_busy(server, 2)
        busy = server.request("POST", "/v1/selections", body)[0]
        assert busy == 503  # both slots taken
    finally:
        for s in socks:
            s.close()  # the callers hang up
    small = json.dumps(
        {"data": {"columns": h._table(40)}, "response": "y", "predictors": ["x"]}
    ).encode()
    t = time.perf_counter()
    status = 503
    while status == 503 and time.perf_counter() - t < 10:
        time.sleep(0.25)
        status = server.request("POST", "/v1/selections", small)[0]
    assert status == 200
    assert time.perf_counter() - t < 5  # not the 60 s time limit


def _busy_slots(server) -> float:
    text = server.request("GET", "/metrics")[2].decode()
    line = next(x for x in text.splitlines() if x.startswith("bestscale_pool_busy "))
    return float(line.split()[1])


def _wait_until_busy(server, slots: int, seconds: float = 30.0) -> None:
    t = time.perf_counter()
    while _busy_slots(server) < slots:
        assert time.perf_counter() - t < seconds, f"{slots} slots never became busy"
        time.sleep(0.1)


def _wait_until_no_slot_is_busy(server, seconds: float = 60.0) -> None:
    t = time.perf_counter()
    while _busy_slots(server) > 0:
        assert time.perf_counter() - t < seconds, "a compute slot stayed busy"
        time.sleep(0.25)


def test_health_stays_fast_while_two_heavy_requests_run(server):
    _wait_until_no_slot_is_busy(server)  # an earlier case's computation may still be finishing
    results = []

    def heavy():
        run, _ = h.case_deadline(3.0)
        results.append(run(server)[0])

    threads = [threading.Thread(target=heavy) for _ in range(2)]
    with h.health_probe(server) as health:
        for t in threads:
            t.start()
        for t in threads:
            t.join(60)
    assert results == [200, 200]
    assert health["max"] < HEALTH_S and health["failed"] == 0
