"""Overload: the sustainable ingest rate is measured first (closed loop, as many clients as the overload has senders), then twice
that rate is offered open loop for FOREWARDEN_OVERLOAD_SECONDS (default 60; the long soak is
600). The service must shed the excess with 503 and Retry-After while its memory stays bounded,
and after a kill -9 and restart every acknowledged actual must be there."""
import os
import random
import sys
import threading
import time
import http.client

sys.path.insert(0, os.path.dirname(__file__))
import harness  # noqa: E402
from harness import Server, run  # noqa: E402
from hostile_test import rss  # noqa: E402
from serve_test import week  # noqa: E402

SECONDS = float(os.environ.get("FOREWARDEN_OVERLOAD_SECONDS", "60"))
SENDERS = 8
KEYS = 2500  # series per sender; a batch is one week of them (large: the service, not the
             # Python client, must be the bottleneck)
SETTINGS = """
server: {synchronous: full, queue_depth: 2, max_connections: 64}
policies:
  - {name: p, match: '*', period: week, alpha: 0.2, history: 1000}
"""


def value(sender, k, t):
    return (sender * 131 + k * 7 + t * 3) % 97 + 1


def body(sender, t):
    return "series,period,value\n" + "".join(
        "o%d/k%04d,%s,%d\n" % (sender, k, week(t), value(sender, k, t)) for k in range(KEYS))


def test_twice_the_sustainable_rate_is_shed_and_nothing_acknowledged_is_lost():
    asan = os.environ.get("ASAN_OPTIONS", "")
    srv = Server(SETTINGS, env={"ASAN_OPTIONS": (asan + ":" if asan else "") + "quarantine_size_mb=4"})
    acked = {s: [] for s in range(SENDERS)}
    week_next = {s: 0 for s in range(SENDERS)}
    lock = threading.Lock()

    def send(conn, sender):
        t = week_next[sender]
        week_next[sender] = t + 1
        conn.request("POST", "/v1/actuals", body(sender, t), {"Content-Type": "text/csv"})
        r = conn.getresponse()
        r.read()
        if r.status == 200:
            with lock:
                acked[sender].append(t)
        return r.status, r.getheader("Retry-After")

    try:
        # 1. the most the service sustains: as many clients as senders, closed loop (group
        # commit takes in whatever waits), 5 seconds
        done = [0]
        stop = time.monotonic() + 5

        def closed(sender):
            c = http.client.HTTPConnection("127.0.0.1", srv.port, timeout=120)
            while time.monotonic() < stop:
                status, _ = send(c, sender)
                if status == 200:
                    with lock:
                        done[0] += 1
                else:
                    assert status == 503, status  # the queue is full: already at capacity
            c.close()

        t0 = time.monotonic()
        threads = [threading.Thread(target=closed, args=(s,)) for s in range(SENDERS)]
        for th in threads:
            th.start()
        for th in threads:
            th.join()
        sustainable = done[0] / (time.monotonic() - t0)  # batches per second
        # 2. twice that, open loop, spread over the senders
        interval = SENDERS / (2 * sustainable)
        rss_start = rss(srv.proc.pid)
        peak = [rss_start]
        shed = [0]
        missing_retry_after = [0]
        t_start = time.monotonic()

        def open_loop(sender):
            c = http.client.HTTPConnection("127.0.0.1", srv.port, timeout=120)
            i = 0
            while True:
                due = t_start + (i + sender / SENDERS) * interval
                if due > t_start + SECONDS:
                    break
                delay = due - time.monotonic()
                if delay > 0:
                    time.sleep(delay)  # pacing the offered load (open loop), not synchronising
                status, retry = send(c, sender)
                if status == 503:
                    with lock:
                        shed[0] += 1
                        missing_retry_after[0] += retry is None
                else:
                    assert status == 200, status
                i += 1
            c.close()

        def sample():
            while time.monotonic() < t_start + SECONDS:
                peak[0] = max(peak[0], rss(srv.proc.pid))
                time.sleep(0.5)  # sampling memory

        threads = [threading.Thread(target=open_loop, args=(s,)) for s in range(SENDERS)] + [threading.Thread(target=sample)]
        for th in threads:
            th.start()
        for th in threads:
            th.join()
        offered = sum(week_next.values())
        accepted = sum(len(v) for v in acked.values())
        print("sustainable %.1f batches/s of %d rows; offered 2x for %.0f s: %d batches, %d accepted, "
              "%d shed with 503; RSS %.0f MB at start, peak %.0f MB"
              % (sustainable, KEYS, SECONDS, offered, accepted, shed[0], rss_start / 1e6, peak[0] / 1e6))
        assert shed[0] > 0, "twice the sustainable rate was never refused"
        assert missing_retry_after[0] == 0
        assert peak[0] - rss_start < 150 * 1024 * 1024, (rss_start, peak[0])
        srv.kill9()
        srv.start()
        # 3. every acknowledged actual is there (a sample of series per sender, every week)
        rng = random.Random(7)
        for sender in range(SENDERS):
            for k in rng.sample(range(KEYS), 5):
                status, hist, _ = srv.request("GET", "/v1/series/o%d%%2Fk%04d/history" % (sender, k))
                assert status == 200, hist
                have = {h["period"]: h["actual"] for h in hist["rows"] if not h["filled"]}
                for t in acked[sender]:
                    assert have.get(week(t)) == value(sender, k, t), (sender, k, t, have.get(week(t)))
    finally:
        srv.stop()


if __name__ == "__main__":
    sys.exit(run([test_twice_the_sustainable_rate_is_shed_and_nothing_acknowledged_is_lost]))
