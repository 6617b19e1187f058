"""Security review, checked: every write endpoint needs the token when one is configured; the
token never reaches the log or the metrics; a token file readable by others is warned about at
start-up; JSON answers escape whatever a series key holds; query values are bound, never
spliced into SQL."""
import json
import os
import sys

sys.path.insert(0, os.path.dirname(__file__))
from harness import Server, run, temp_dir  # noqa: E402

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
    sys.exit(run([test_writes_need_the_token_and_the_token_stays_secret, test_json_escapes_keys_and_queries_are_bound]))
