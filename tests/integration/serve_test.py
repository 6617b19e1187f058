#!/usr/bin/python3
"""Integration tests of `forewarden serve`: the real binary on a loopback port, a real HTTP
client, real SQLite files. Compares what the service holds with `forewarden replay` of the
same (acknowledged) input.

usage: FOREWARDEN_BINARY=path serve_test.py [TEST_NAME ...]"""
import datetime
import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import urllib.parse

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import harness  # noqa: E402
from harness import Server, close, replay  # noqa: E402

SETTINGS = """
server: {queue_depth: 64, max_rows_per_batch: 50000, max_body_bytes: 2000000}
policies:
  - name: weekly
    match: "w/*"
    period: week
    alpha: 0.3
    signal_beta: 0.2
    history: 8
    rules: [{name: drift, signal: trigg, limit: 0.8}]
  - name: skipping
    match: "s/*"
    period: week
    method: holt
    gaps: skip
    history: 8
"""

MONDAY = datetime.date(2026, 1, 5)


def week(i):
    return (MONDAY + datetime.timedelta(weeks=i)).isoformat()


def feed(keys, weeks, start=0, value=lambda k, t: 10 + (k * 7 + t * 3) % 11):
    lines = ["series,period,value"]
    for t in range(start, start + weeks):
        for k, key in enumerate(keys):
            lines.append("%s,%s,%s" % (key, week(t), value(k, t)))
    return "\n".join(lines) + "\n"


def history(server, key):
    status, body, _ = server.request("GET", "/v1/series/" + key + "/history")
    assert status == 200, (status, body)
    return body["rows"]


def assert_matches_replay(server, key, csv_text):
    """The retained history the service recomputes equals replay's rows for the same periods."""
    rows = [r for r in replay(server.config, csv_text, server.dir) if r["series"] == key]
    by_period = {r["period"]: r for r in rows}
    got = [h for h in history(server, key) if not h["filled"]]
    assert got, "no history for " + key
    for h in got:
        r = by_period[h["period"]]
        for field, ours in (("forecast", h["forecast"]), ("error", h["error"]), ("mad", h["mad"]),
                            ("cusum", h["cusum"]), ("smoothed_error", h["smoothed_error"]),
                            ("trigg_signal", h["trigg_signal"]), ("alpha", h["alpha"])):
            assert close(ours, r[field]), (key, h["period"], field, ours, r[field])
        assert ";".join(h["alerts"]) == r["alerts"], (h, r)
    return got


def test_ingest_then_query():
    s = Server(SETTINGS)
    try:
        text = feed(["w/a", "w/b", "s/c"], 12)
        status, body, _ = s.post_csv(text)
        assert status == 200, body
        assert body["applied"] == 36 and body["new_series"] == 3, body
        status, body, _ = s.request("GET", "/v1/series?sort=trigg&limit=2")
        assert status == 200 and body["total"] == 3 and len(body["series"]) == 2, body
        status, whole, _ = s.request("GET", "/v1/series?sort=cusum")
        signals = [abs(x["cusum_signal"]) for x in whole["series"]]
        assert signals == sorted(signals, reverse=True), whole
        status, second, _ = s.request("GET", "/v1/series?sort=cusum&offset=1&limit=1")
        assert second["series"] == whole["series"][1:2], (second, whole)
        status, by_key, _ = s.request("GET", "/v1/series")
        assert [x["key"] for x in by_key["series"]] == ["s/c", "w/a", "w/b"], by_key
        status, body, _ = s.request("GET", "/v1/series?policy=skipping")
        assert [x["key"] for x in body["series"]] == ["s/c"], body
        status, detail, _ = s.request("GET", "/v1/series/w/a")
        assert status == 200 and detail["last_period"] == week(11) and detail["next_period"] == week(12)
        assert detail["lower"] < detail["forecast"] < detail["upper"], detail
        status, body, _ = s.request("GET", "/v1/policies")
        assert [p["series"] for p in body["policies"]] == [2, 1], body
        assert all(p["last_actual_at"] for p in body["policies"]), body
        # labels travel with NDJSON and can be filtered on
        status, _, _ = s.request("POST", "/v1/actuals",
                                 '{"series":"w/l","period":"%s","value":3,"labels":{"channel":"web"}}\n'
                                 % week(0), "application/x-ndjson")
        assert status == 200
        status, body, _ = s.request("GET", "/v1/series?label=channel:web")
        assert [x["key"] for x in body["series"]] == ["w/l"], body
        assert s.request("GET", "/v1/series/w/l")[1]["labels"] == {"channel": "web"}
        for key in ("w/a", "w/b", "s/c"):
            got = assert_matches_replay(s, key, text)
            assert len(got) == 12  # history 8 + lazy trimming slack
        status, body, _ = s.request("GET", "/v1/series/w/a/history?from=%s&to=%s" % (week(10), week(11)))
        assert [r["period"] for r in body["rows"]] == [week(10), week(11)], body
    finally:
        s.stop()


def test_duplicates_are_unchanged():
    s = Server(SETTINGS)
    try:
        text = feed(["w/a"], 5)
        assert s.post_csv(text)[1]["applied"] == 5
        status, body, _ = s.post_csv(text)
        assert status == 200 and body["unchanged"] == 5 and body["applied"] == 0, body
        ndjson = '{"series":"w/a","period":"%s","value":%s}\n' % (week(4), 10 + (0 + 4 * 3) % 11)
        status, body, _ = s.request("POST", "/v1/actuals", ndjson, "application/x-ndjson")
        assert status == 200 and body["unchanged"] == 1, body
    finally:
        s.stop()


def test_restatement_equals_replay_of_corrected_history():
    s = Server(SETTINGS)
    try:
        text = feed(["w/a", "w/b"], 10)
        assert s.post_csv(text)[0] == 200
        fix = "series,period,value\nw/a,%s,55\n" % week(7)
        status, body, _ = s.post_csv(fix)
        assert status == 200 and body["restated"] == 1, body
        corrected = text.replace("w/a,%s," % week(7), "w/a,%s,55#" % week(7))
        corrected = "\n".join(l.split("#")[0] if "#" not in l else "w/a,%s,55" % week(7)
                              for l in corrected.splitlines()) + "\n"
        assert_matches_replay(s, "w/a", corrected)
        # older than the retained history (8 + slack): a clear problem, nothing applied
        s.post_csv(feed(["w/a"], 20, start=10))
        status, body, _ = s.post_csv("series,period,value\nw/a,%s,1\n" % week(0))
        assert status == 400 and body["problems"][0]["field"] == "period", body
        assert "older than the retained history" in body["problems"][0]["message"]
    finally:
        s.stop()


def test_gap_rules_match_replay():
    s = Server(SETTINGS)
    try:
        text = "series,period,value\n" + "".join(
            "%s,%s,%d\n" % (k, week(t), 10 + t) for t in (0, 1, 4, 5, 9) for k in ("w/z", "s/k"))
        status, body, _ = s.post_csv(text)
        assert status == 200 and body["gap_periods_filled"] == 10, body
        assert_matches_replay(s, "w/z", text)
        assert_matches_replay(s, "s/k", text)
        filled = [h["period"] for h in history(s, "w/z") if h["filled"]]
        assert filled == [week(2), week(3), week(6), week(7), week(8)], filled
        late = "series,period,value\nw/z,%s,7\ns/k,%s,7\n" % (week(2), week(2))
        status, body, _ = s.post_csv(late)
        assert body["restated"] == 2, body
        full = text + late.split("\n", 1)[1]
        lines = full.splitlines()
        ordered = [lines[0]] + sorted(lines[1:], key=lambda l: (l.split(",")[0], l.split(",")[1]))
        assert_matches_replay(s, "w/z", "\n".join(ordered) + "\n")
        assert_matches_replay(s, "s/k", "\n".join(ordered) + "\n")
    finally:
        s.stop()


def wait_for(path):
    end = time.monotonic() + harness.DEADLINE
    while time.monotonic() < end:
        if os.path.exists(path):
            return
        time.sleep(0.02)  # polling for a file, not synchronising on time
    raise AssertionError("never appeared: " + path)


def test_drop_folder():
    import tempfile
    work = harness.temp_dir()
    incoming = os.path.join(work, "incoming")
    os.makedirs(incoming)
    settings = SETTINGS.replace("server: {", "server: {folder: '%s', folder_poll_ms: 20, " % incoming)
    good = feed(["w/a"], 6)
    # a file left behind by a crash after its commit is processed again safely
    with open(os.path.join(incoming, "0-left-over.csv"), "w") as f:
        f.write(good)
    s = Server(settings, workdir=work)
    try:
        wait_for(os.path.join(incoming, "done", "0-left-over.csv"))
        with open(os.path.join(incoming, ".1-good.csv.tmp"), "w") as f:
            f.write(good)
        os.rename(os.path.join(incoming, ".1-good.csv.tmp"), os.path.join(incoming, "1-good.csv"))
        wait_for(os.path.join(incoming, "done", "1-good.csv"))
        # written under a hidden name and renamed, as producers must (the folder is polled
        # every 20 ms: a file written in place can be read while still empty)
        with open(os.path.join(incoming, ".2-bad.csv.tmp"), "w") as f:
            f.write("series,period,value\nw/b,2026-02-30,1\nw/b,2026-03-02,x\n")
        os.rename(os.path.join(incoming, ".2-bad.csv.tmp"), os.path.join(incoming, "2-bad.csv"))
        wait_for(os.path.join(incoming, "rejected", "2-bad.csv"))
        with open(os.path.join(incoming, "rejected", "2-bad.csv.problems")) as f:
            report = f.read()
        assert "line 2, field period: '2026-02-30' is not a date" in report, report
        assert "line 3, field value" in report, report
        status, body, _ = s.request("GET", "/v1/series/w/b")
        assert status == 404
        assert_matches_replay(s, "w/a", good)
    finally:
        s.stop()


def test_kill9_during_ingest_loses_nothing_acknowledged():
    # a long history: no trimming, so no state is written before the kill (they are saved
    # every state_flush_seconds) and the restart must replay every actual
    s = Server(SETTINGS.replace("history: 8\n    rules", "history: 500\n    rules"))
    keys = ["w/k%d" % i for i in range(40)]
    acked, in_flight = [], []
    stop = threading.Event()

    def pusher():
        t = 0
        while not stop.is_set() and t < 400:
            text = feed(keys, 1, start=t)
            in_flight[:] = [text]
            try:
                status, body, _ = s.request("POST", "/v1/actuals", text, "text/csv")
            except Exception:
                return
            if status == 200:
                acked.append(text)
                in_flight[:] = []
            t += 1

    th = threading.Thread(target=pusher)
    th.start()
    end = time.monotonic() + harness.DEADLINE
    while len(acked) < 25 and time.monotonic() < end:
        time.sleep(0.005)  # waiting for progress, not for a state to settle
    s.kill9()
    stop.set()
    th.join()
    assert len(acked) >= 25, len(acked)
    s.start()
    try:
        # states are saved lazily (every state_flush_seconds): the restart replays actuals
        s.wait_stderr("recovered 40 series")
        ack_text = "series,period,value\n" + "".join(a.split("\n", 1)[1] for a in acked)
        both = ack_text + "".join(a.split("\n", 1)[1] for a in in_flight)
        for key in keys[:5]:
            hist = history(s, key)
            last = hist[-1]["period"]
            expect = both if last == week(len(acked)) and in_flight else ack_text
            assert last == week(len(acked) - 1) or (in_flight and last == week(len(acked))), last
            assert_matches_replay(s, key, expect)
    finally:
        s.stop()


def test_sigterm_finishes_a_request_in_flight():
    s = Server(SETTINGS)
    body = feed(["w/t"], 4).encode()
    sock = socket.create_connection(("127.0.0.1", s.port), timeout=harness.DEADLINE)
    sock.sendall(b"POST /v1/actuals HTTP/1.1\r\nHost: x\r\nContent-Type: text/csv\r\n"
                 b"Expect: 100-continue\r\nContent-Length: %d\r\n\r\n" % len(body))
    first = sock.recv(4096)
    assert first.startswith(b"HTTP/1.1 100"), first  # the server holds the request now
    s.signal(signal.SIGTERM)
    s.wait_stderr("stopping")
    sock.sendall(body)
    reply = b""
    while b"\r\n\r\n" not in reply or not reply.rstrip().endswith(b"}"):
        chunk = sock.recv(4096)
        if not chunk:
            break
        reply += chunk
    assert reply.startswith(b"HTTP/1.1 200"), reply
    assert s.proc.wait(timeout=harness.DEADLINE) == 0
    s.proc = None
    s.start()
    try:
        assert_matches_replay(s, "w/t", feed(["w/t"], 4))
    finally:
        s.stop()


def test_sighup_bad_config_keeps_old_then_good_applies():
    s = Server(SETTINGS)
    try:
        assert s.post_csv(feed(["w/a"], 3))[0] == 200
        with open(s.config, "w") as f:
            f.write("policies:\n  - {name: weekly, match: '*', period: fortnight}\n")
        s.signal(signal.SIGHUP)
        s.wait_stderr("reload refused")
        status, body, _ = s.request("GET", "/v1/policies")
        assert [p["name"] for p in body["policies"]] == ["weekly", "skipping"], body
        with open(s.config, "w") as f:
            f.write(SETTINGS.replace("history: 8\n    rules", "history: 8\n    warmup: 1\n    rules")
                    + "  - {name: extra, match: 'x/*', period: day}\n")
        s.signal(signal.SIGHUP)
        s.wait_stderr("reloaded")
        status, body, _ = s.request("GET", "/v1/policies")
        assert [p["name"] for p in body["policies"]] == ["weekly", "skipping", "extra"], body
        assert s.post_csv("series,period,value\nx/1,2026-01-07,3\n")[0] == 200
    finally:
        s.stop()


def test_auth_and_listen_safety():
    token = "s3cret-token-for-tests-0123"
    s = Server(SETTINGS.replace("server: {", "server: {token_env: FW_TEST_TOKEN, "),
               env={"FW_TEST_TOKEN": token})
    try:
        text = feed(["w/a"], 2)
        assert s.post_csv(text)[0] == 401
        assert s.post_csv(text, token="wrong-token-wrong-token")[0] == 401
        assert s.post_csv(text, token=token)[0] == 200
        assert s.request("GET", "/v1/series/w/a")[0] == 200  # reads need no token
        status, _, _ = s.request("POST", "/v1/series/w/a/reset", '{"to":"last","who":"x"}', "application/json")
        assert status == 401
    finally:
        s.stop()
    import tempfile
    cfg = os.path.join(harness.temp_dir(), "s.yaml")
    with open(cfg, "w") as f:
        f.write(SETTINGS)
    r = subprocess.run([harness.BINARY, "serve", "--config", cfg, "--listen", "0.0.0.0:0",
                        "--data", os.path.dirname(cfg) + "/d"], capture_output=True, text=True,
                       timeout=harness.DEADLINE)
    assert r.returncode == 2 and "refusing to listen on 0.0.0.0 without a bearer token" in r.stderr, r


BAD_REQUESTS = [
    # (method, path, content type, body, status, text that must appear)
    ("POST", "/v1/actuals", "text/csv", "", 400, '"field": "header"'),
    ("POST", "/v1/actuals", "text/csv", "series,value\nw/a,1\n", 400, "no 'period' column"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value,series\n", 400, "appears twice"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-01-05\n", 400, '"field": "row", "line": 2'),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-01-05,abc\n", 400, "'abc' is not a finite number"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-01-05,nan\n", 400, '"field": "value"'),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-01-05,inf\n", 400, '"field": "value"'),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-01-05,1e999\n", 400, '"field": "value"'),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-02-30,1\n", 400, "February 2026 has 28 days"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-13-01,1\n", 400, "the month must be 01-12"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,05/01/2026,1\n", 400, '"field": "period"'),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,,1\n", 400, "the period is empty"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\n,2026-01-05,1\n", 400, "the series key is empty"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nq/nomatch,2026-01-05,1\n", 400, "no policy matches the series 'q/nomatch'"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2025-W53,1\n", 400, "has 52 ISO weeks"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\n\"w/a,2026-01-05,1\n", 400, "quoted field is not closed"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/ok,2026-01-05,1\nw/a,2026-01-05,x\n", 400, '"line": 3'),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/new,2026-01-05,1\nw/new,2025-01-05,2\n", 400, "older than the retained history"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-01-05,1\nw/a,2036-01-07,1\n", 400, "max_gap is 366"),
    ("POST", "/v1/actuals", "application/x-ndjson", "{not json}\n", 400, '"field": "json"'),
    ("POST", "/v1/actuals", "application/x-ndjson", '{"series":"w/a","period":"2026-01-05"}\n', 400, '"field": "value", "line": 1, "message": "missing"'),
    ("POST", "/v1/actuals", "application/x-ndjson", '{"series":"w/a","period":"2026-01-05","value":"7"}\n', 400, "must be a number"),
    ("POST", "/v1/actuals", "application/x-ndjson", '{"series":7,"period":"2026-01-05","value":7}\n', 400, '"field": "series"'),
    ("POST", "/v1/actuals", "application/x-ndjson", '{"series":"w/a","period":"2026-01-05","value":1,"colour":"red"}\n', 400, "unknown field 'colour'"),
    ("POST", "/v1/actuals", "application/x-ndjson", '\n{"series":"w/a","period":"2026-01-05","value":1,"labels":{"a":1}}\n', 400, '"line": 2'),
    ("POST", "/v1/actuals", "application/json", "[]", 415, "text/csv"),
    ("POST", "/v1/actuals", None, "series,period,value\n", 415, "text/csv"),
    ("GET", "/v1/actuals", None, None, 405, "use POST"),
    ("POST", "/v1/nothing", "text/csv", "x", 404, "no such endpoint"),
    ("GET", "/v1/series/w/none", None, None, 404, "no series 'w/none'"),
    ("GET", "/v1/series?limit=0", None, None, 400, "limit: 0 is outside 1..10000"),
    ("GET", "/v1/series?limit=12abc", None, None, 400, "limit: '12abc' is not a whole number"),
    ("GET", "/v1/series?offset=-1", None, None, 400, "offset: -1 is outside"),
    ("GET", "/v1/alerts?before=1e3", None, None, 400, "before: '1e3' is not a whole number"),
    ("GET", "/v1/alerts?limit=99999999999999999999", None, None, 400, "limit: 99999999999999999999 is outside"),
    ("GET", "/v1/alerts?group=x", None, None, 400, "group: 'x' is not a whole number"),
    ("GET", "/v1/alerts/abc", None, None, 404, "no such alert: abc"),
    ("DELETE", "/v1/alerts/1", None, None, 405, "use GET"),
    # An outside hostile-input check once ended the process with these bodies (an uncaught JSON
    # type error): each is a 400 naming the field, and the server keeps answering.
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": 5, "who": "x"}', 400, "field to: must be a string"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": null, "who": "x"}', 400, "field to: missing"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "value", "value": "7", "who": "x"}', 400, "field value: must be a number"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "mean", "k": 4294967297, "who": "x"}', 400, "field k: outside 1..100000"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "mean", "k": 2.5, "who": "x"}', 400, "field k: must be a whole number"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "mean", "k": 18446744073709551615, "who": "x"}', 400, "field k: outside"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "last", "who": ["x"]}', 400, "field who: must be a string"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "last", "who": "x", "note": 5}', 400, "field note: must be a string"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "value", "value": 1e300, "who": "x"}', 400, "field value: the new level must be"),
    ("POST", "/v1/series/w/a/reset", "application/json", '[1, 2]', 400, "the body must be a JSON object"),
    ("POST", "/v1/alerts/1/acknowledge", "application/json", '{"by": 5}', 400, "field by: must be a string"),
    ("POST", "/v1/alerts/1/acknowledge", "application/json", '{"by": "x", "note": {}}', 400, "field note: must be a string"),
    ("POST", "/v1/alerts/1/snooze", "application/json", '{"by": "x", "until": 5}', 400, "field until: must be a string"),
    ("POST", "/v1/alerts/1/snooze", "application/json", '{"by": "x"}', 400, "field until: missing"),
    ("POST", "/v1/alerts/99/resolve", "application/json", '{"by": "x"}', 404, "no alert 99"),
    # every field and parameter: missing, empty, wrong type, out of range
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "mean", "who": "x"}', 400, "field k: missing"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "mean", "k": "2", "who": "x"}', 400, "field k: must be a whole number"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "last", "who": ""}', 400, "field who: empty"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "middle", "who": "x"}', 400, "field to: must be value, last, mean or change"),
    # to = change: the alert whose diagnosis gives the level, missing, of the wrong type, out of
    # range, or not there
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "who": "x"}', 400, "field alert: missing"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "alert": null, "who": "x"}', 400, "field alert: missing"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "alert": "3", "who": "x"}', 400, "field alert: must be a whole number"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "alert": 2.5, "who": "x"}', 400, "field alert: must be a whole number"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "alert": [1], "who": "x"}', 400, "field alert: must be a whole number"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "alert": 0, "who": "x"}', 400, "field alert: outside"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "alert": -4, "who": "x"}', 400, "field alert: outside"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "alert": 18446744073709551615, "who": "x"}', 400, "field alert: outside"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "change", "alert": 987654, "who": "x"}', 404, "no alert 987654"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to": "last", "who": "x", "note": "%s"}' % ("n" * 5000), 400, "field note: longer than 4096 bytes"),
    ("POST", "/v1/alerts/1/acknowledge", "application/json", '{}', 400, "field by: missing"),
    ("POST", "/v1/alerts/1/acknowledge", "application/json", '{"by": ""}', 400, "field by: empty"),
    ("POST", "/v1/alerts/1/resolve", "application/json", 'not json', 400, "the body must be a JSON object"),
    ("POST", "/v1/alerts/1/snooze", "application/json", '{"by": "x", "until": "2026-12-05T10:00:00"}', 400, "field until: not an ISO 8601 time"),
    ("POST", "/v1/alerts/1/snooze", "application/json", '{"by": "x", "until": "2001-01-01T00:00:00Z"}', 400, "field until: the time has passed"),
    ("POST", "/v1/alerts/18446744073709551616/acknowledge", "application/json", '{"by": "x"}', 404, "no such alert"),
    ("GET", "/v1/series?offset=x", None, None, 400, "offset: 'x' is not a whole number"),
    ("GET", "/v1/series?limit=", None, None, 400, "limit: '' is not a whole number"),
    ("GET", "/v1/series?label=nocolon", None, None, 400, "label must be name:value"),
    ("GET", "/v1/series/w/a/history?from=yesterday", None, None, 400, "from: "),
    ("GET", "/v1/series/w/a/history?to=2026-13-01", None, None, 400, "to: "),
    ("GET", "/v1/alerts?before=0", None, None, 400, "before: 0 is outside"),
    ("GET", "/v1/alerts?group=0", None, None, 400, "group: 0 is outside"),
    ("GET", "/v1/alerts?limit=0", None, None, 400, "limit: 0 is outside 1..1000"),
    ("GET", "/v1/alerts?state=broken", None, None, 400, "state must be"),
    ("GET", "/v1/alerts?severity=loud", None, None, 400, "severity must be"),
    ("GET", "/v1/deliveries?state=lost", None, None, 400, "state must be dead, pending or delivered"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,2026-01-05,1.7e308\n", 400, "beyond +/-1e15"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,9999-01-04,1\n", 400, "the year must be 1900-2999"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/a,1899-12-25,1\n", 400, "the year must be 1900-2999"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\nw/neg,2026-01-05,-3\n", 400, "refuses negative actuals"),
    ("POST", "/v1/actuals", "application/x-ndjson", '{"series":"w/a\\u0000b","period":"2026-01-05","value":1}\n', 400, "control character"),
    ("POST", "/v1/actuals", "application/x-ndjson", '{"series":"w/a","period":"2026-01-05","value":1,"labels":{"c":"x\\ny"}}\n', 400, "label 'c' holds a control character"),
    ("POST", "/v1/actuals", "text/csv", b"series,period,value\nw/\xff\xfe,2026-01-05,1\n", 400, "invalid UTF-8 at byte 2"),
    ("POST", "/v1/actuals", "text/csv", b"series,period,value\nw/\xc0\xaf,2026-01-05,1\n", 400, "invalid UTF-8"),
    ("GET", "/v1/series?status=broken", None, None, 400, "status must be"),
    ("GET", "/v1/series?sort=colour", None, None, 400, "sort must be"),
    ("POST", "/v1/series/w/a/reset", "application/json", "{}", 400, "field to"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to":"value","who":"x"}', 400, "field value"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to":"mean","k":0,"who":"x"}', 400, "field k"),
    ("POST", "/v1/series/w/a/reset", "application/json", '{"to":"last"}', 400, "field who"),
    ("POST", "/v1/series/w/none/reset", "application/json", '{"to":"last","who":"x"}', 404, "no series"),
    ("GET", "/v1/series/w/a/forecast?horizon=abc", None, None, 400, "horizon: 'abc' is not a whole number"),
    ("GET", "/v1/series/w/a/forecast?horizon=", None, None, 400, "horizon"),
    ("GET", "/v1/series/w/a/forecast?horizon=-3", None, None, 400, "horizon"),
    ("GET", "/v1/series/w/a/forecast?horizon=0", None, None, 400, "horizon"),
    ("GET", "/v1/series/w/a/forecast?horizon=105", None, None, 400, "horizon"),
    ("GET", "/v1/series/w/a/forecast?horizon=1e2", None, None, 400, "horizon"),
    ("GET", "/v1/forecasts?horizon=", None, None, 400, "horizon"),
    ("GET", "/v1/forecasts?horizon=-1", None, None, 400, "horizon"),
    ("GET", "/v1/forecasts?horizon=2.5", None, None, 400, "horizon"),
    ("GET", "/v1/forecasts?horizon=99999999999999999999", None, None, 400, "horizon"),
    ("GET", "/v1/forecasts?format=", None, None, 400, "format: must be csv or ndjson"),
    ("GET", "/v1/forecasts?format=CSV", None, None, 400, "format"),
    ("GET", "/v1/forecasts?label=:x", None, None, 400, "label"),
    ("GET", "/v1/forecasts?policy=%00", None, None, 400, "policy: no policy"),
    ("GET", "/v1/series/w/none/forecast", None, None, 404, "no series"),
    ("GET", "/v1/attention?state=everything", None, None, 400, "state must be"),
    ("GET", "/v1/attention?severity=loud", None, None, 400, "severity must be"),
    ("GET", "/v1/attention?near=0", None, None, 400, "near must be"),
    ("GET", "/v1/attention?near=nan", None, None, 400, "near"),
    ("GET", "/v1/attention?near=1.5", None, None, 400, "near must be"),
    ("GET", "/v1/attention?near=abc", None, None, 400, "near: not a number"),
    ("GET", "/v1/attention?near=", None, None, 400, "near"),
    ("GET", "/v1/attention?limit=abc", None, None, 400, "limit: 'abc' is not a whole number"),
    ("GET", "/v1/attention?limit=", None, None, 400, "limit"),
    ("GET", "/v1/attention?offset=1.5", None, None, 400, "offset"),
    ("GET", "/v1/attention?offset=100000001", None, None, 400, "offset"),
    ("GET", "/v1/attention?recent=abc", None, None, 400, "recent"),
    ("GET", "/v1/attention?recent=-1", None, None, 400, "recent"),
    ("GET", "/v1/attention?limit=501", None, None, 400, "limit"),
    ("GET", "/v1/attention?limit=0", None, None, 400, "limit"),
    ("GET", "/v1/attention?offset=-1", None, None, 400, "offset"),
    ("GET", "/v1/attention?recent=105", None, None, 400, "recent"),
    ("GET", "/v1/attention?label=nocolon", None, None, 400, "label must be name:value"),
    ("GET", "/v1/attention?label=:x", None, None, 400, "label must be name:value"),
    ("GET", "/v1/attention?q=" + "x" * 300, None, None, 400, "q: longer than 256"),
    ("GET", "/page/..%2f..%2fetc%2fpasswd", None, None, 404, "no such page file"),
    ("GET", "/page/index.html", None, None, 404, "no such page file"),
    ("GET", "/page/", None, None, 404, "no such endpoint"),
    ("POST", "/", "text/plain", "x", 405, "use GET"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\n" + "w/a,2026-01-05,1\n" * 60000, 413, "max_rows_per_batch"),
    ("POST", "/v1/actuals", "text/csv", "series,period,value\n" + "w/a,2026-01-05,1" + "0" * 2100000 + "\n", 413, "max_body_bytes"),
]


def test_lists_over_the_read_view_while_ingesting_agree_with_each_series():
    """Lists, the attention list, the policies and /metrics read a view of every series on the
    API's reader thread while batches keep arriving (under ThreadSanitizer in deploy/tsan.sh, a
    race stops the process); once ingest stops, every list agrees with each series' own detail."""
    import threading
    s = Server(SETTINGS)
    keys = ["w/%03d" % i for i in range(300)] + ["s/%03d" % i for i in range(50)]
    errors = []
    done = threading.Event()

    def reader():
        paths = ["/v1/series?sort=trigg&limit=20", "/v1/series?sort=key&limit=50&offset=100",
                 "/v1/series?status=warming", "/v1/attention?limit=20", "/v1/attention?state=near&near=0.1",
                 "/v1/policies", "/metrics"]
        n = 0
        while not done.is_set():
            status, body, _ = s.request("GET", paths[n % len(paths)])
            if status not in (200, 503):
                errors.append((paths[n % len(paths)], status, body))
            n += 1

    try:
        threads = [threading.Thread(target=reader) for _ in range(2)]
        for t in threads:
            t.start()
        for t in range(30):
            status, body, _ = s.post_csv(feed(keys, 1, start=t, value=lambda k, w: 10 + (k * 7 + w * 3) % 11 + (20 if k % 9 == 0 and w > 15 else 0)))
            assert status == 200, body
        done.set()
        for t in threads:
            t.join()
        assert not errors, errors[:3]
        status, listed, _ = s.request("GET", "/v1/series?sort=key&limit=10000")
        assert [x["key"] for x in listed["series"]] == sorted(keys)
        by_trigg = s.request("GET", "/v1/series?sort=trigg&limit=10000")[1]["series"]
        size = [abs(x["trigg_signal"]) if x["trigg_signal"] is not None else -1 for x in by_trigg]
        assert size == sorted(size, reverse=True)
        for x in listed["series"][::25]:
            detail = s.request("GET", "/v1/series/" + x["key"])[1]
            assert (detail["status"], detail["trigg_signal"], detail["cusum_signal"]) == \
                (x["status"], x["trigg_signal"], x["cusum_signal"]), (x, detail)
        counts = s.request("GET", "/v1/attention?limit=1")[1]["counts"]
        policies = {p["name"]: p["series"] for p in s.request("GET", "/v1/policies")[1]["policies"]}
        assert {c["policy"]: c["series"] for c in counts} == policies == {"weekly": 300, "skipping": 50}
        alerting = s.request("GET", "/v1/series?status=alerting&limit=10000")[1]["total"]
        assert sum(c["alerting"] for c in counts) == alerting
        metrics = s.request("GET", "/metrics")[1]
        assert 'forewarden_series{policy="weekly",state="alerting"} %d' % alerting in metrics, alerting
    finally:
        s.stop()


def test_bad_requests_are_refused_with_line_and_field_and_change_nothing():
    s = Server(SETTINGS)
    try:
        assert s.post_csv(feed(["w/a"], 3))[0] == 200
        before = s.request("GET", "/v1/series?limit=10000")[1], history(s, "w/a")
        assert len(BAD_REQUESTS) >= 25
        import json as _json
        for method, path, ctype, body, status, text in BAD_REQUESTS:
            if body and len(body) > 1500000:
                got, reply = s.raw_request(method, path, body, ctype)
            else:
                got, reply, _ = s.request(method, path, body, ctype)
            shown = _json.dumps(reply, sort_keys=True) if not isinstance(reply, str) else reply
            assert got == status, (method, path, (body or "")[:80], got, shown[:300])
            assert text in shown, (path, (body or "")[:80], text, shown[:300])
        after = s.request("GET", "/v1/series?limit=10000")[1], history(s, "w/a")
        assert before == after
    finally:
        s.stop()


def test_full_store_is_sticky_and_loses_nothing_acknowledged():
    """A database that cannot grow (server.max_database_bytes, SQLite's max_page_count: the
    same error as a full disk) makes the service refuse writes with the reason, report not
    ready, keep serving reads, and lose nothing it acknowledged."""
    capped = SETTINGS.replace("server: {", "server: {max_database_bytes: 1000000, ")
    s = Server(capped)
    acked = []
    try:
        # each batch brings 200 new series (the database keeps growing) and a new week for
        # the series of the first batch
        for t in range(60):
            text = feed(["w/b%d-%d" % (t, i) for i in range(200)], 1, start=t)
            if t:
                text += feed(["w/b0-%d" % i for i in range(200)], 1, start=t).split("\n", 1)[1]
            status, body, _ = s.post_csv(text)
            if status != 200:
                assert status == 503 and "full" in body["error"], (status, body)
                break
            acked.append(text)
        assert 0 < len(acked) < 60, len(acked)
        status, body, _ = s.request("GET", "/readyz")
        assert status == 503 and "full" in body["reason"], body
        status, body, _ = s.post_csv(feed(["w/other"], 1))
        assert status == 503 and "full" in body["error"], body
        assert s.request("GET", "/v1/series/w/b0-0")[0] == 200  # reads still work
        status, metrics, _ = s.request("GET", "/metrics")  # visible to monitoring
        assert status == 200 and "forewarden_store_failed 1" in metrics, metrics
        assert 'forewarden_http_rejections_total{reason="unavailable"} 2' in metrics, metrics
    finally:
        s.stop()
    # nothing is corrupted: SQLite's own check of the file the failure left behind
    import sqlite3
    con = sqlite3.connect(os.path.join(s.data, "forewarden.db"))
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    con.close()
    with open(s.config, "w") as f:
        f.write(SETTINGS)
    s.start()
    try:
        assert s.request("GET", "/readyz")[0] == 200
        assert "forewarden_store_failed 0" in s.request("GET", "/metrics")[1]
        assert s.request("GET", "/v1/series?limit=1")[1]["total"] == 200 * len(acked)
        ack_text = "series,period,value\n" + "".join(a.split("\n", 1)[1] for a in acked)
        for key in ("w/b0-0", "w/b0-199", "w/b%d-7" % (len(acked) - 1)):
            assert_matches_replay(s, key, ack_text)
        assert history(s, "w/b0-0")[-1]["period"] == week(len(acked) - 1)
    finally:
        s.stop()


def test_invalid_utf8_in_the_path_is_answered():
    """Regression (HTTP fuzz target, tests/fuzz/regressions/http-invalid-utf8-path): a path that
    is not UTF-8 was echoed into a JSON error whose serialisation threw and ended the process."""
    s = Server(SETTINGS)
    try:
        head, body = s.raw_exchange(b"DELETE /\xff\xfe HTTP/1.1\r\nHost: t\r\nConnection: close\r\n\r\n")
        assert head.startswith(b"HTTP/1.1 404"), head
        assert b"no such endpoint" in body, body
        assert s.request("GET", "/healthz")[0] == 200  # still up
    finally:
        s.stop()


EDGE_SETTINGS = """
server: {max_series: 3}
policies:
  - name: net
    match: "n/*"
    period: week
    negative_actuals: accept
  - name: weekly
    match: "w/*"
    period: week
"""


def test_input_edges_are_documented_and_tested():
    """What the README's "How actuals are applied" promises at the edges: a byte-order mark
    before the CSV header is accepted; two rows of one series and period in one batch apply in
    order (the later one restates the earlier); negative actuals only where the policy accepts
    them; server.max_series refuses new series naming the line, counted in a metric."""
    s = Server(EDGE_SETTINGS)
    try:
        status, body, _ = s.request("POST", "/v1/actuals",
                                    "\ufeffseries,period,value\nw/a,%s,4\n" % week(0), "text/csv")
        assert status == 200 and body["applied"] == 1, body
        # the same period twice in one batch: the later value wins, as a restatement
        status, body, _ = s.post_csv("series,period,value\nw/a,%s,5\nw/a,%s,9\n" % (week(1), week(1)))
        assert status == 200 and body["applied"] == 1 and body["restated"] == 1, body
        rows = history(s, "w/a")
        assert [r["actual"] for r in rows] == [4, 9], rows
        assert_matches_replay(s, "w/a", "series,period,value\nw/a,%s,4\nw/a,%s,9\n" % (week(0), week(1)))
        # net sales with returns: accepted by the policy that says so, refused elsewhere
        status, body, _ = s.post_csv("series,period,value\nn/a,%s,-2.5\n" % week(0))
        assert status == 200, body
        status, body, _ = s.post_csv("series,period,value\nw/a,%s,-1\n" % week(2))
        assert status == 400 and body["problems"][0]["field"] == "value", body
        assert "negative_actuals: accept" in body["problems"][0]["message"], body
        # max_series 3: w/a and n/a exist; one more fits, the next is refused with its line
        status, body, _ = s.post_csv("series,period,value\nw/b,%s,1\nw/c,%s,1\n" % (week(0), week(0)))
        assert status == 400, body
        p = body["problems"][0]
        assert p["line"] == 3 and p["field"] == "series" and "server.max_series (3)" in p["message"], body
        assert s.request("GET", "/v1/series/w/b")[0] == 404  # nothing of the batch was applied
        assert s.post_csv("series,period,value\nw/b,%s,1\n" % week(0))[0] == 200
        _, text, _ = s.request("GET", "/metrics")
        assert "forewarden_series_refused_total 1" in text, text[:200]
    finally:
        s.stop()


def test_push_survives_a_hostile_server():
    """`forewarden push` read Retry-After with std::stol and threw on a date; a server's reply
    of the wrong shape must not end it either. A receiver inside the test answers 503 with an
    HTTP-date Retry-After, then 400 with problems of the wrong types."""
    import http.server
    answers = [(503, {"Retry-After": "Wed, 21 Oct 2015 07:28:00 GMT"}, b'{"error": "busy"}'),
               (400, {}, b'{"problems": [{"line": "two", "field": 5, "message": null}]}')]

    class Handler(http.server.BaseHTTPRequestHandler):
        def do_POST(self):
            self.rfile.read(int(self.headers["Content-Length"]))
            status, headers, body = answers.pop(0) if answers else (500, {}, b"{}")
            self.send_response(status)
            for k, v in headers.items():
                self.send_header(k, v)
            self.send_header("Content-Length", str(len(body)))
            self.end_headers()
            self.wfile.write(body)

        def log_message(self, *args):
            pass

    server = http.server.HTTPServer(("127.0.0.1", 0), Handler)
    t = threading.Thread(target=server.serve_forever, daemon=True)
    t.start()
    tmp = harness.temp_dir()
    try:
        path = os.path.join(tmp, "feed.csv")
        with open(path, "w") as f:
            f.write(feed(["w/a"], 2))
        r = subprocess.run([harness.BINARY, "push", path, "--url", "http://127.0.0.1:%d" % server.server_port],
                           capture_output=True, text=True, timeout=harness.DEADLINE)
        assert r.returncode == 2, (r.returncode, r.stdout, r.stderr)
        assert "were rejected" in r.stderr, r.stderr
        assert not answers, answers  # it retried after the 503
    finally:
        server.shutdown()
        server.server_close()


def test_push_sends_batches_and_names_file_lines():
    s = Server(SETTINGS)
    try:
        path = os.path.join(s.dir, "feed.csv")
        with open(path, "w") as f:
            f.write(feed(["w/a", "w/b"], 5))
        r = subprocess.run([harness.BINARY, "push", path, "--url", s.url, "--batch", "3"],
                           capture_output=True, text=True, timeout=harness.DEADLINE)
        assert r.returncode == 0, r.stderr
        assert "pushed 10 rows in 4 batches" in r.stdout and "applied: 10" in r.stdout, r.stdout
        with open(path, "a") as f:
            f.write("w/a,%s,1\nw/a,%s,oops\n" % (week(5), week(6)))
        r = subprocess.run([harness.BINARY, "push", path, "--url", s.url, "--batch", "4"],
                           capture_output=True, text=True, timeout=harness.DEADLINE)
        assert r.returncode == 2, (r.stdout, r.stderr)
        assert "lines 10-13 of" in r.stderr and "line 13, field value: 'oops'" in r.stderr, r.stderr
    finally:
        s.stop()


EXPORT_SETTINGS = SETTINGS + """
  - name: seasons
    match: "z/*"
    period: week
    method: seasonal-add
    season_length: 4
    history: 8
  - name: lumpy
    match: "c/*"
    period: week
    method: croston
    history: 8
"""


def test_forecast_export_matches_each_series_and_is_written_whole():
    """GET /v1/forecasts gives, for every series with a forecast, the same rows as its own
    GET /v1/series/{key}/forecast (one moment: no batch between them); CSV and NDJSON agree;
    `forewarden export` renames its file only when complete; the parameters are checked."""
    s = Server(EXPORT_SETTINGS)
    try:
        keys = ["w/a", "w/b,comma", "s/c", "z/d", "c/e", "w/late"]
        value = lambda k, t: (0 if (k == 4 and t % 3) else 10 + (k * 7 + t * 3) % 11)  # noqa: E731
        csv_text = "\n".join(l for l in feed(keys[:-1], 12, value=value).splitlines()
                             if '"' not in l) + "\n"
        csv_text = csv_text.replace("w/b,comma", '"w/b,comma"')
        status, body, _ = s.request("POST", "/v1/actuals", csv_text, "text/csv")
        assert status == 200, body
        status, body, _ = s.request("POST", "/v1/actuals", "series,period,value\nw/late,%s,4\n"
                                    % week(11), "text/csv")
        assert status == 200, body  # one actual: a forecast from the first actual
        status, text, hdrs = s.request("GET", "/v1/forecasts?horizon=6")
        assert status == 200, text
        assert hdrs["Content-Type"].startswith("text/csv") and hdrs.get("Transfer-Encoding") == "chunked"
        import csv as csvmod
        import io
        rows = list(csvmod.DictReader(io.StringIO(text)))
        assert list(rows[0].keys()) == ["key", "policy", "period", "h", "forecast", "lower", "upper"]
        assert int(hdrs["Forewarden-Rows"]) == len(rows) == 6 * int(hdrs["Forewarden-Series"])
        got = {}
        for r in rows:
            got.setdefault(r["key"], []).append(r)
        assert sorted(got) == sorted(keys), sorted(got)
        for key, mine in got.items():
            status, one, _ = s.request("GET", "/v1/series/" + urllib.parse.quote(key, safe="/")
                                       + "/forecast?horizon=6")
            assert status == 200, one
            assert len(one["rows"]) == len(mine) == 6
            for a, b in zip(one["rows"], mine):
                assert a["period"] == b["period"] and a["h"] == int(b["h"]), (a, b)
                assert float(b["forecast"]) == a["forecast"], (key, a, b)
                for side in ("lower", "upper"):
                    if a[side] is None:
                        assert b[side] == "", (key, side, b)
                    else:
                        assert close(float(b[side]), a[side]), (key, side, a, b)
        assert got["c/e"][0]["lower"] == "" and got["w/a"][0]["lower"] != ""
        status, text, hdrs = s.request("GET", "/v1/forecasts?horizon=2&format=ndjson&policy=weekly")
        assert status == 200 and hdrs["Content-Type"] == "application/x-ndjson"
        lines = [json.loads(l) for l in text.splitlines()]
        assert {l["key"] for l in lines} == {"w/a", "w/b,comma", "w/late"} and len(lines) == 6
        assert lines[0]["forecast"] == float(got[lines[0]["key"]][0]["forecast"])
        # HTTP/1.0: no chunks; the body ends with the connection
        head, raw = s.raw_exchange(b"GET /v1/forecasts?horizon=1 HTTP/1.0\r\n\r\n")
        assert b" 200 " in head.split(b"\r\n")[0] and raw.count(b"\n") == 1 + 6, (head, raw)
        for bad, needle in (("horizon=0", "horizon"), ("horizon=105", "horizon"),
                            ("horizon=x", "horizon"), ("format=xml", "format"),
                            ("policy=nope", "policy"), ("label=nocolon", "label")):
            status, body, _ = s.request("GET", "/v1/forecasts?" + bad)
            assert status == 400 and needle in body["error"], (bad, status, body)
        out = os.path.join(s.dir, "export.csv")
        r = subprocess.run([harness.BINARY, "export", "--url", s.url, "--out", out,
                            "--horizon", "6"], capture_output=True, text=True,
                           timeout=harness.DEADLINE)
        assert r.returncode == 0, r.stderr
        assert "exported 36 forecasts of 6 series" in r.stdout, r.stdout
        with open(out) as f:
            assert list(csvmod.DictReader(f)) == rows
        assert not os.path.exists(out + ".partial")
        r = subprocess.run([harness.BINARY, "export", "--url", s.url, "--out", out,
                            "--policy", "nope"], capture_output=True, text=True,
                           timeout=harness.DEADLINE)
        assert r.returncode == 1 and "no policy 'nope'" in r.stderr, r.stderr
        assert not os.path.exists(out + ".partial") and os.path.getsize(out) > 0
        for flags, needle in ((["--horizon", "0"], "--horizon"), (["--horizon", "abc"], "--horizon"),
                              (["--horizon", "105"], "--horizon"), (["--format", "xml"], "--format"),
                              (["--horizon"], "needs a value"), (["--bogus", "1"], "unknown option")):
            r = subprocess.run([harness.BINARY, "export", "--url", s.url, "--out", out] + flags,
                               capture_output=True, text=True, timeout=harness.DEADLINE)
            assert r.returncode == 2 and needle in r.stderr, (flags, r.returncode, r.stderr)
        r = subprocess.run([harness.BINARY, "export", "--url", s.url], capture_output=True,
                           text=True, timeout=harness.DEADLINE)
        assert r.returncode == 2 and "usage: forewarden export --out FILE" in r.stderr, r.stderr
        status, metrics, _ = s.request("GET", "/metrics")
        assert 'forewarden_exports_total{outcome="complete"} 4' in metrics, metrics
        assert "forewarden_export_rows_total 84" in metrics
    finally:
        s.stop()


def test_an_export_cut_short_by_its_client_frees_its_slot():
    """A client that reads the head of a large export and hangs up: the export is counted as
    cut, its slot is free again (server.max_exports: 1) and the service answers on."""
    s = Server(EXPORT_SETTINGS.replace("server: {", "server: {max_exports: 1, "))
    try:
        keys = ["w/k%04d" % i for i in range(3000)]
        status, body, _ = s.request("POST", "/v1/actuals", feed(keys, 4), "text/csv")
        assert status == 200, body
        sock = socket.create_connection(("127.0.0.1", s.port), timeout=harness.DEADLINE)
        sock.sendall(b"GET /v1/forecasts?horizon=104 HTTP/1.1\r\nHost: x\r\n\r\n")
        assert b"200 OK" in sock.recv(4096)
        sock.close()  # about 30 MB left unread
        deadline = time.monotonic() + harness.DEADLINE
        while True:
            status, metrics, _ = s.request("GET", "/metrics")
            if 'forewarden_exports_total{outcome="cut"} 1' in metrics:
                break
            assert time.monotonic() < deadline, metrics
            time.sleep(0.05)  # polling a counter the server updates; not a synchronisation
        status, text, hdrs = s.request("GET", "/v1/forecasts?horizon=1")
        assert status == 200 and int(hdrs["Forewarden-Rows"]) == 3000
    finally:
        s.stop()


if __name__ == "__main__":
    harness.BINARY = os.environ["FOREWARDEN_BINARY"]
    sys.exit(harness.run([
        test_ingest_then_query,
        test_duplicates_are_unchanged,
        test_restatement_equals_replay_of_corrected_history,
        test_gap_rules_match_replay,
        test_drop_folder,
        test_kill9_during_ingest_loses_nothing_acknowledged,
        test_sigterm_finishes_a_request_in_flight,
        test_sighup_bad_config_keeps_old_then_good_applies,
        test_auth_and_listen_safety,
        test_bad_requests_are_refused_with_line_and_field_and_change_nothing,
        test_lists_over_the_read_view_while_ingesting_agree_with_each_series,
        test_push_sends_batches_and_names_file_lines,
        test_full_store_is_sticky_and_loses_nothing_acknowledged,
        test_invalid_utf8_in_the_path_is_answered,
        test_input_edges_are_documented_and_tested,
        test_push_survives_a_hostile_server,
        test_forecast_export_matches_each_series_and_is_written_whole,
        test_an_export_cut_short_by_its_client_frees_its_slot,
    ]))
