"""Security review, checked: every write endpoint needs the token when one is configured; the
token never reaches the log or the metrics; a token file readable by others is warned about at
start-up; JSON answers escape whatever a series key holds; query values are bound, never
spliced into SQL."""
import json
import os
import signal
import subprocess
import sys

sys.path.insert(0, os.path.dirname(__file__))
from harness import BINARY, Server, run, temp_dir, write_people_file  # noqa: E402

TOKEN = "tok-abcdefghijklmnop-0123"
WRITES = [
    ("/v1/actuals", "text/csv", "series,period,value\nw/a,2026-W01,1\n"),
    ("/v1/series/w%2Fa/reset", "application/json", '{"to": "last", "who": "x"}'),
    ("/v1/alerts/1/acknowledge", "application/json", '{"by": "x"}'),
    ("/v1/alerts/1/snooze", "application/json", '{"by": "x", "until": "2026-W09"}'),
    ("/v1/alerts/1/resolve", "application/json", '{"by": "x"}'),
    ("/v1/deliveries/retry", "application/json", ""),
]


def test_writes_need_the_token_and_the_token_stays_secret():
    d = temp_dir()
    token_file = os.path.join(d, "token")
    with open(token_file, "w") as f:
        f.write(TOKEN + "\n")
    os.chmod(token_file, 0o644)
    srv = Server("""
server: {token_file: '%s'}
policies:
  - {name: p, match: '*', period: week, rules: [{name: r, signal: cusum, limit: 1}]}
""" % token_file, workdir=d)
    try:
        srv.wait_stderr("readable or writable by other users")
        for path, ctype, body in WRITES:
            status, answer, headers = srv.request("POST", path, body, ctype)
            assert status == 401, (path, status, answer)
            assert headers.get("WWW-Authenticate") == "Bearer", headers
            status, answer, _ = srv.request("POST", path, body, ctype, token=TOKEN[:-1] + "x")
            assert status == 401, (path, status)
        # with the token each is let through (whatever it then answers)
        for path, ctype, body in WRITES:
            status, answer, _ = srv.request("POST", path, body, ctype, token=TOKEN)
            assert status != 401, (path, status, answer)
        for path in ("/v1/series", "/v1/alerts", "/v1/policies", "/metrics", "/readyz"):
            assert srv.request("GET", path)[0] == 200, path  # reads need none
        status, metrics, _ = srv.request("GET", "/metrics")
        assert TOKEN not in metrics
        assert 'forewarden_http_rejections_total{reason="unauthorized"} 12' in metrics, metrics
    finally:
        srv.stop()
    assert all(TOKEN not in line for line in srv.stderr_lines), srv.stderr_lines


PEOPLE = {  # name: (role, token)
    "rita": ("read", "rita-token-0123456789abcdef"),
    "pablo": ("planner", "pablo-token-0123456789abcdef"),
    "olga": ("operator", "olga-token-0123456789abcdef"),
}
# What each role may do, by write endpoint (api/access.h): planners work alerts and reset
# forecasts; operators also send actuals and retry deliveries.
ALLOWED = {
    "read": set(),
    "planner": {"/v1/series/w%2Fa/reset", "/v1/alerts/1/acknowledge", "/v1/alerts/1/snooze",
                "/v1/alerts/1/resolve"},
    "operator": {path for path, _, _ in WRITES},
}


def test_each_role_against_each_write_endpoint_and_names_are_recorded():
    d = temp_dir()
    people = os.path.join(d, "people")
    write_people_file(people, PEOPLE)
    srv = Server("""
server: {people_file: '%s', token_for_reads: true}
policies:
  - {name: p, match: '*', period: week, warmup: 0, start: {mean_of_first: 1},
     rules: [{name: r, signal: cusum, limit: 1}]}
""" % people, workdir=d)
    try:
        # a series with an open alert for the alert endpoints
        feed = "series,period,value\n" + "".join("w/a,2026-W%02d,%d\n" % (w, v)
                                                  for w, v in zip(range(1, 9), [10, 10, 10, 11, 30, 31, 32, 33]))
        status, answer, _ = srv.request("POST", "/v1/actuals", feed, "text/csv", token=PEOPLE["olga"][1])
        assert status == 200 and answer["alerts_opened"] >= 1, answer
        # reads need a token of any role; health, metrics and the page never do
        assert srv.request("GET", "/v1/series")[0] == 401
        for path in ("/healthz", "/metrics", "/", "/page/app.js", "/v1/access"):
            assert srv.request("GET", path)[0] == 200, path
        for name, (role, token) in PEOPLE.items():
            assert srv.request("GET", "/v1/series", token=token)[0] == 200, name
            status, access, _ = srv.request("GET", "/v1/access", token=token)
            assert access["mode"] == "people" and access["you"] == {"name": name, "role": role}, access
            assert access["names_recorded"] is True
            assert access["may"]["work_alerts"] == (role != "read"), access
            assert access["may"]["operate"] == (role == "operator"), access
        status, access, _ = srv.request("GET", "/v1/access", token="not-a-known-token-at-all")
        assert access["token_accepted"] is False and access["you"] is None, access
        # each role against each write endpoint (alert 1 stays open until the resolve, which
        # comes before the reset, which resolves what is left)
        for name in ("rita", "pablo", "olga"):
            role, token = PEOPLE[name]
            for path, ctype, body in WRITES[2:] + WRITES[:2]:  # the alert ones before the reset
                status, answer, _ = srv.request("POST", path, body, ctype, token=token)
                if path in ALLOWED[role]:
                    assert status not in (401, 403), (name, path, status, answer)
                else:
                    assert status == 403, (name, path, status, answer)
                    assert role in answer["error"], answer
            status, _, _ = srv.request("POST", WRITES[0][0], WRITES[0][2], WRITES[0][1], token="wrong-token-0123456789")
            assert status == 401
        # the audit trail holds the token's name, not what the body typed
        status, alert, _ = srv.request("GET", "/v1/alerts/1")
        assert status == 401
        status, alert, _ = srv.request("GET", "/v1/alerts/1", token=PEOPLE["rita"][1])
        by = {(e["kind"], e["by"]) for e in alert["history"]}
        assert ("acknowledged", "pablo") in by and ("resolved", "pablo") in by, alert["history"]
        assert all(e["by"] != "x" for e in alert["history"]), alert["history"]
        status, series, _ = srv.request("GET", "/v1/series/w%2Fa", token=PEOPLE["rita"][1])
        assert {a["who"] for a in series["audit"]} == {"pablo", "olga"}, series["audit"]
        # a planner needs no "by": the service knows who it is
        status, answer, _ = srv.request("POST", "/v1/series/w%2Fa/reset", '{"to": "last"}', "application/json",
                                        token=PEOPLE["pablo"][1])
        assert status == 200 and answer["reset"]["who"] == "pablo", answer
        status, metrics, _ = srv.request("GET", "/metrics")
        assert 'forewarden_http_rejections_total{reason="forbidden"} 8' in metrics, metrics
        # SIGHUP reloads the people file: rita leaves, a bad line is refused whole
        write_people_file(people, {k: v for k, v in PEOPLE.items() if k != "rita"})
        srv.signal(signal.SIGHUP)
        srv.wait_stderr("reloaded")
        assert srv.request("GET", "/v1/series", token=PEOPLE["rita"][1])[0] == 401
        with open(people, "a") as f:
            f.write("eve boss 1234\n")
        srv.signal(signal.SIGHUP)
        line = srv.wait_stderr("reload refused")
        assert "line 4, field role" in line, line
        assert srv.request("GET", "/v1/series", token=PEOPLE["pablo"][1])[0] == 200
    finally:
        srv.stop()
    for name, (role, token) in PEOPLE.items():
        assert all(token not in line for line in srv.stderr_lines), name


def test_hostile_headers_and_bodies_with_people_tokens():
    """Headers the change reads (Authorization for people, If-None-Match for the page) and the
    body fields a person's token makes optional (by, who), each wrong, missing and too long."""
    d = temp_dir()
    people = os.path.join(d, "people")
    write_people_file(people, {"pablo": ("planner", PEOPLE["pablo"][1]), "olga": ("operator", PEOPLE["olga"][1])})
    srv = Server("""
server: {people_file: '%s'}
policies:
  - {name: p, match: '*', period: week, warmup: 0, start: {mean_of_first: 1},
     rules: [{name: r, signal: cusum, limit: 1}]}
""" % people, workdir=d)
    pablo = PEOPLE["pablo"][1]
    try:
        feed = "series,period,value\n" + "".join("w/a,2026-W%02d,%d\n" % (w, v)
                                                  for w, v in zip(range(1, 9), [10, 10, 10, 11, 30, 31, 32, 33]))
        assert srv.request("POST", "/v1/actuals", feed, "text/csv", token=PEOPLE["olga"][1])[0] == 200
        # Authorization: every malformed form is "no known token", never a crash or a match
        # (trailing spaces are not among them: HTTP strips a field value's surrounding spaces)
        for value in ("", "Bearer", "Bearer ", "bearer " + pablo, "Basic " + pablo, "Bearer  " + pablo,
                      "Bearer " + pablo[:-1], "Bearer " + "x" * 6000,
                      "Bearer " + pablo + "\u00e9".encode().decode("latin-1")):
            status, answer, _ = srv.request("POST", "/v1/alerts/1/acknowledge", "{}", "application/json",
                                            headers={"Authorization": value} if value else None)
            assert status == 401, (value[:40], status, answer)
            status, access, _ = srv.request("GET", "/v1/access", headers={"Authorization": value} if value else None)
            assert status == 200 and access["you"] is None, (value[:40], access)
        # by / who are optional with a person's token, but when given they must be text
        for path, body, field in (
                ("/v1/alerts/1/acknowledge", '{"by": 5}', "field by: must be a string"),
                ("/v1/alerts/1/acknowledge", '{"by": ["x"]}', "field by: must be a string"),
                ("/v1/alerts/1/acknowledge", '{"by": "%s"}' % ("x" * 5000), "field by: longer than 4096"),
                ("/v1/alerts/1/acknowledge", '{"note": 7}', "field note: must be a string"),
                ("/v1/alerts/1/snooze", '{}', "field until: missing"),
                ("/v1/alerts/1/snooze", '{"until": 2027}', "field until: must be a string"),
                ("/v1/series/w%2Fa/reset", '{"to": "last", "who": {}}', "field who: must be a string"),
                ("/v1/series/w%2Fa/reset", '{"to": "last", "who": "%s"}' % ("y" * 5000), "field who: longer than 4096"),
                ("/v1/series/w%2Fa/reset", '[]', "must be a JSON object")):
            status, answer, _ = srv.request("POST", path, body, "application/json", token=pablo)
            assert status == 400 and field in answer["error"], (path, body[:40], status, answer)
        status, alert, _ = srv.request("GET", "/v1/alerts/1")
        assert alert["state"] == "open", alert  # nothing above changed it
        # If-None-Match: the page's tag gives 304 and no body; anything else the file
        status, page, headers = srv.request("GET", "/")
        tag = headers["ETag"]
        raw_head, raw_body = srv.raw_exchange(("GET / HTTP/1.1\r\nHost: x\r\nIf-None-Match: %s\r\n"
                                               "Connection: close\r\n\r\n" % tag).encode())
        assert raw_head.startswith(b"HTTP/1.1 304") and raw_body == b"", raw_head
        for other in ('"0000000000000000"', "*", tag + ", " + tag, "x" * 300, tag[1:-1]):
            status, body, _ = srv.request("GET", "/", headers={"If-None-Match": other})
            assert status == 200 and "<!doctype html>" in body, other[:40]
    finally:
        srv.stop()


def test_people_file_problems_name_line_and_field():
    d = temp_dir()
    cases = [
        ("ana planner\n", "line 1, field hash: missing"),
        ("ana chief " + "a" * 64 + "\n", "line 1, field role"),
        ("ana planner xyz\n", "line 1, field hash: must be 64 hex digits"),
        ("# c\nana planner " + "a" * 64 + "\nana read " + "b" * 64 + "\n", "line 3, field name: 'ana' is listed twice"),
        ("a<b planner " + "a" * 64 + "\n", "line 1, field name"),
        ("ana planner " + "a" * 64 + "\nbob read " + "a" * 64 + "\n", "line 2, field hash: the same token as ana"),
        ("# nobody\n", "lists nobody"),
    ]
    for text, expected in cases:
        people = os.path.join(d, "people")
        with open(people, "w") as f:
            f.write(text)
        config = os.path.join(d, "s.yaml")
        with open(config, "w") as f:
            f.write("server: {people_file: '%s'}\npolicies:\n  - {name: p, match: '*', period: week}\n" % people)
        proc = subprocess.run([BINARY, "serve", "--config", config, "--listen", "127.0.0.1:0", "--data",
                               os.path.join(d, "data")], capture_output=True, text=True, timeout=60)
        assert proc.returncode == 2, (text, proc.returncode, proc.stderr)
        assert expected in proc.stderr, (text, proc.stderr)


def test_json_escapes_keys_and_queries_are_bound():
    srv = Server("""
policies:
  - {name: p, match: '*', period: week}
""")
    try:
        nasty = 'q"uote\\\\back\\tslash</script>'
        body = json.dumps({"series": nasty, "period": "2026-W01", "value": 1}) + "\n"
        status, answer, _ = srv.request("POST", "/v1/actuals", body, "application/x-ndjson")
        assert status == 200, answer
        status, listed, _ = srv.request("GET", "/v1/series")
        assert status == 200 and isinstance(listed, dict), listed  # parsed: valid JSON
        assert [s["key"] for s in listed["series"]] == [json.loads(body)["series"]], listed
        # an injection attempt is just a value that matches nothing
        for query in ("/v1/alerts?series=x'%20OR%201=1%20--", "/v1/alerts?policy=p'%3B%20DROP%20TABLE%20alerts%3B--",
                      "/v1/deliveries?sink=x'%20OR%20'1'='1"):
            status, answer, _ = srv.request("GET", query)
            assert status == 200, (query, answer)
            assert answer.get("alerts", answer.get("deliveries")) == [], (query, answer)
        assert srv.request("GET", "/v1/alerts")[0] == 200  # the table is still there
    finally:
        srv.stop()


if __name__ == "__main__":
    sys.exit(run([test_writes_need_the_token_and_the_token_stays_secret, test_json_escapes_keys_and_queries_are_bound,
              test_each_role_against_each_write_endpoint_and_names_are_recorded,
              test_people_file_problems_name_line_and_field,
              test_hostile_headers_and_bodies_with_people_tokens]))
