"""Crash consistency: rounds of start, two clients pushing concurrently, kill -9 after a seeded
random number of acknowledged batches, restart; after each round

  * every acknowledged actual is stored;
  * no batch is half-applied (a batch in flight at the kill is either wholly there or absent);
  * the state of every series equals `forewarden replay` of what was acknowledged (plus the
    in-flight batch when it landed), and so do the alerts (replay --alerts);
  * alert events left undelivered by the kill are delivered after the restart.

FOREWARDEN_CRASH_ROUNDS (default 5, the CI run) and FOREWARDEN_CRASH_SEED choose the run; the
long run is FOREWARDEN_CRASH_ROUNDS=50 (README, RELIABILITY.md)."""
import csv
import os
import random
import subprocess
import sys
import threading
import time

sys.path.insert(0, os.path.dirname(__file__))
import harness  # noqa: E402
from harness import Server, run, temp_dir, close  # noqa: E402
from alerts_test import Receiver, wait_for, webhook_sink, notified_events, delivered_all  # noqa: E402
from serve_test import week  # noqa: E402

ROUNDS = int(os.environ.get("FOREWARDEN_CRASH_ROUNDS", "5"))
SEED = int(os.environ.get("FOREWARDEN_CRASH_SEED", "20261202"))
GROUPS = {"a": ["east/a%02d" % i for i in range(15)], "b": ["west/b%02d" % i for i in range(15)]}


def settings(sink):
    return """
server:
  synchronous: full
  state_flush_seconds: 3600
policies:
  - name: lines
    match: '*'
    period: week
    alpha: 0.3
    signal_beta: 0.2
    warmup: 2
    history: 2000
    rules:
      - {name: shift, signal: cusum, limit: 2.5, clear: 1.5, resolve_after: 2}
      - {name: spike, signal: error, limit: 2.0}
alerts:
  initial_backoff_seconds: 0.05
  max_backoff_seconds: 0.2
%s""" % sink


def value(key, t):
    """Deterministic demand with shifts, so alerts open and resolve."""
    r = random.Random("%s/%d/%d" % (key, t, SEED))
    base = 100 + (40 if (t // 9) % 2 else 0)
    return round(base + r.gauss(0, 8), 1)


def batch(group, t):
    return "series,period,value\n" + "".join(
        "%s,%s,%s\n" % (k, week(t), value(k, t)) for k in GROUPS[group])


def stored(server, key):
    status, body, _ = server.request("GET", "/v1/series/" + key.replace("/", "%2F") + "/history")
    assert status == 200, body
    return {h["period"]: h for h in body["rows"] if not h["filled"]}


def check_round(srv, acked, landed_in_flight, workdir):
    """Stored == acknowledged (+ in-flight batches that landed), state and alerts == replay."""
    expected = {}  # key -> {period: value}
    for group, ts in acked.items():
        for t in ts:
            for k in GROUPS[group]:
                expected.setdefault(k, {})[week(t)] = value(k, t)
    for key, periods in expected.items():
        got = stored(srv, key)
        for p, v in periods.items():
            assert p in got and close(got[p]["actual"], v), (key, p, v, got.get(p))
        extra = set(got) - set(periods)
        assert not extra, (key, "stored but never acknowledged and not a landed batch", extra)
    # replay of the acknowledged input: states and alert episodes
    rows = ["series,period,value"]
    for group, ts in acked.items():
        for t in sorted(ts):
            rows += ["%s,%s,%s" % (k, week(t), value(k, t)) for k in GROUPS[group]]
    inp = os.path.join(workdir, "acked.csv")
    out = os.path.join(workdir, "replay.csv")
    episodes = os.path.join(workdir, "episodes.csv")
    with open(inp, "w") as f:
        f.write("\n".join(rows) + "\n")
    subprocess.run([harness.BINARY, "replay", "--config", srv.config, "--input", inp, "--output", out,
                    "--alerts", episodes], check=True, capture_output=True)
    with open(out) as f:
        last = {}
        for r in csv.DictReader(f):
            last[r["series"]] = r
    for key, r in last.items():
        status, s, _ = srv.request("GET", "/v1/series/" + key.replace("/", "%2F"))
        assert status == 200, s
        for field in ("mad", "cusum", "smoothed_error", "alpha"):
            assert close(s[field], r[field]), (key, field, s[field], r[field])
        assert s["last_period"] == r["period"], (key, s["last_period"], r["period"])
    with open(episodes) as f:
        replayed = sorted((r["series"], r["rule"], r["opened"], r["resolved"]) for r in csv.DictReader(f))
    served = []
    path = "/v1/alerts?limit=1000"
    while path:  # every page, newest first
        status, body, _ = srv.request("GET", path)
        assert status == 200, body
        served += [(a["series"], a["rule"], a["opened_period"], a["resolved_period"] or "")
                   for a in body["alerts"]]
        path = "/v1/alerts?limit=1000&before=%d" % body["next_before"] if body["next_before"] else None
    served.sort()
    assert served == replayed, ("served only", sorted(set(served) - set(replayed))[:20],
                                "replayed only", sorted(set(replayed) - set(served))[:20])


def test_rounds_of_kill9_lose_nothing_acknowledged():
    rx = Receiver()
    workdir = temp_dir()
    srv = Server(settings(webhook_sink(rx)), workdir=workdir)
    srv.kill9()
    rng = random.Random(SEED)
    acked = {"a": [], "b": []}
    next_t = {"a": 0, "b": 0}
    totals = {"rounds": 0, "batches_acked": 0, "in_flight_landed": 0, "in_flight_lost": 0}
    try:
        for rnd in range(ROUNDS):
            srv.start()
            kill_after = rng.randint(2, 12)
            count = [0]
            lock = threading.Lock()
            in_flight = {}
            stop = threading.Event()

            def pusher(group):
                while not stop.is_set():
                    t = next_t[group]
                    in_flight[group] = t
                    try:
                        status, body, _ = srv.request("POST", "/v1/actuals", batch(group, t), "text/csv")
                    except Exception:
                        return  # the kill
                    if status != 200:
                        return
                    with lock:
                        acked[group].append(t)
                        del in_flight[group]
                        next_t[group] = t + 1
                        count[0] += 1

            threads = [threading.Thread(target=pusher, args=(g,)) for g in GROUPS]
            for th in threads:
                th.start()
            wait_for("%d acknowledged batches" % kill_after, lambda: count[0] >= kill_after)
            srv.kill9()
            stop.set()
            for th in threads:
                th.join()
            srv.start()
            # A batch in flight at the kill: wholly there or wholly absent.
            for group, t in list(in_flight.items()):
                present = [week(t) in stored(srv, k) for k in GROUPS[group]]
                assert all(present) or not any(present), (group, t, present)
                if all(present):
                    acked[group].append(t)
                    next_t[group] = t + 1
                    totals["in_flight_landed"] += 1
                else:
                    totals["in_flight_lost"] += 1
            check_round(srv, acked, in_flight, workdir)
            # Alert events the kill left undelivered go out now.
            expected = notified_events(srv, "hook")
            rx.wait("every event after round %d" % rnd,
                    lambda reqs: {b["event_id"] for b in rx.accepted()} >= expected)
            wait_for("no pending deliveries", lambda: delivered_all(srv, "hook"))
            totals["rounds"] += 1
            totals["batches_acked"] = sum(len(v) for v in acked.values())
            srv.kill9()
        rows = totals["batches_acked"] * len(GROUPS["a"])
        print("crash rounds: %(rounds)d, batches acknowledged: %(batches_acked)d, in flight at the kill: "
              "%(in_flight_landed)d landed, %(in_flight_lost)d absent" % totals + ", rows verified: %d" % rows)
    finally:
        if srv.proc:
            srv.stop()
        rx.close()


if __name__ == "__main__":
    sys.exit(run([test_rounds_of_kill9_lose_nothing_acknowledged]))
