#!/usr/bin/python3
"""Several instances sharing series through Kafka (kafka.changelog_topic): real `forewarden
serve` processes in one consumer group on librdkafka's mock cluster (3 brokers, a 12-partition
source topic and a 12-partition changelog; tests/kafka/kafka_mock.cpp). One is killed with
kill -9 mid-stream, a broker stops answering for a while, and a fourth instance joins later;
at the end every series equals a single-instance
replay of the same rows, no actual is missing or applied twice, the alert events sent out
(a kafka sink) hold every episode replay finds once under one id, and a request for a series
held elsewhere is redirected to its owner."""
import csv
import http.client
import json
import os
import sys
import urllib.parse

sys.path.insert(0, os.path.dirname(__file__))
import harness  # noqa: E402
from harness import close, run  # noqa: E402
import kafka_test  # noqa: E402
from kafka_test import TOPIC, DEAD, EVENTS, KafkaServer, feed, metric, wait_for  # noqa: E402

CHANGELOG = "series-changelog"


class Cluster(kafka_test.Cluster):
    """The mock cluster with a changelog topic as well."""

    def __init__(self):
        import subprocess
        self.dir = harness.temp_dir()
        self.proc = subprocess.Popen([kafka_test.MOCK, "--brokers", "3", "--topic", TOPIC + ":12",
                                      "--topic", DEAD + ":1", "--topic", EVENTS + ":3",
                                      "--topic", CHANGELOG + ":12"],
                                     stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                     stderr=subprocess.DEVNULL, text=True)
        line = self.proc.stdout.readline()
        assert line.startswith("bootstrap "), line
        self.bootstrap = line.split()[1]
        self.n = 0


def settings(bootstrap, assignment=""):
    return """
alerts:
  sinks: [{name: stream, type: kafka, topic: %s, brokers: '%s', timeout_seconds: 5}]
  storm_threshold: 0
  initial_backoff_seconds: 0.2
  max_backoff_seconds: 1
policies:
  - name: stores
    match: '*'
    period: week
    alpha: 0.2
    start: {mean_of_first: 4}
    signal_beta: 0.1
    warmup: 4
    history: 200
    rules:
      - {name: shift, signal: cusum, limit: 3, resolve_after: 2}
kafka:
  brokers: '%s'
  topics: [%s]
  group: share-test
  dead_letter_topic: %s
  changelog_topic: %s
  partitioner: crc32
  batch_rows: 100
  batch_ms: 50
  properties: {topic.metadata.refresh.interval.ms: 1000, session.timeout.ms: 6000,
               heartbeat.interval.ms: 500%s}
""" % (EVENTS, bootstrap, bootstrap, TOPIC, DEAD, CHANGELOG,
       ", partition.assignment.strategy: " + assignment if assignment else "")


def positions(cluster):
    """The newest position record of each changelog partition: {partition: next offset}."""
    out = {}
    for partition, _, key, value in cluster.consume(CHANGELOG):
        if key == "\x01position":
            out[int(partition)] = json.loads(value)["next"]
    return out


def ends(cluster):
    return {p: n for (_, p), n in kafka_test.end_offsets(cluster).items()}


def raw_get(url, path):
    """One GET without following redirects: (status, headers, body)."""
    u = urllib.parse.urlparse(url)
    conn = http.client.HTTPConnection(u.hostname, u.port, timeout=harness.DEADLINE)
    try:
        conn.request("GET", path)
        r = conn.getresponse()
        return r.status, dict(r.getheaders()), r.read().decode()
    finally:
        conn.close()


def instances(srv):
    status, body, _ = srv.request("GET", "/v1/instances")
    assert status == 200, body
    return body


def all_ready(servers):
    for s in servers:
        status, body, _ = s.request("GET", "/readyz")
        if status != 200:
            return False
    return True


def series_path(key):
    return "/v1/series/" + urllib.parse.quote(key, safe="")


def test_three_instances_a_kill9_and_a_fourth_share_the_series_as_one_replay_would(assignment=""):
    with Cluster() as cluster:
        keys, messages, bad, good_csv = feed(series=60, weeks=30, seed=11)
        half = len(messages) // 2
        cluster.produce(messages[:half])
        servers = [KafkaServer(settings(cluster.bootstrap, assignment)) for _ in range(3)]
        try:
            wait_for("three instances holding all 12 partitions", lambda: all_ready(servers) and sorted(
                sum((instances(s)["held"] for s in servers), [])) == list(range(12)))
            # some progress on every instance, then one dies mid-stream
            wait_for("each instance consuming", lambda: all(
                metric(s, "forewarden_kafka_messages_total") > 0 for s in servers))
            victim = servers[1]
            victim.kill9()
            cluster.produce(messages[half:])
            alive = [servers[0], servers[2]]
            # a broker stops answering while the survivors take the partitions over
            seen = [len(s.log) for s in alive]
            cluster.command("down 2")
            # librdkafka says so in the service's log (a failed or lost connection to it)
            wait_for("the broker's loss noticed", lambda: any(
                "kafka" in line and ("FAIL" in line or "Disconnected" in line or "down" in line)
                for s, n in zip(alive, seen) for line in list(s.log)[n:]))
            cluster.command("up 2")
            wait_for("the survivors holding all 12 partitions", lambda: all_ready(alive) and sorted(
                sum((instances(s)["held"] for s in alive), [])) == list(range(12)))
            fourth = KafkaServer(settings(cluster.bootstrap, assignment))
            alive.append(fourth)
            wait_for("three instances again holding all 12", lambda: all_ready(alive) and sorted(
                sum((instances(s)["held"] for s in alive), [])) == list(range(12)) and
                instances(fourth)["held"])
            want_ends = ends(cluster)
            wait_for("every message applied and in the changelog", lambda: positions(cluster) == want_ends)
            urls = sorted(s.url for s in alive)
            wait_for("the partition map naming the three", lambda: all(
                sorted({p["owner"] for p in instances(s)["partitions"]}) == urls for s in alive))

            # every series equals replay of the good rows, through whichever instance is asked
            rows = harness.replay(alive[0].config, good_csv, alive[0].dir)
            last = {r["series"]: r for r in rows}
            owners = {}
            for key in keys:
                status, got, _ = alive[0].request("GET", series_path(key))  # follows a redirect
                assert status == 200, (key, got)
                want = last[key]
                assert got["last_period"] == want["period"], (key, got["last_period"], want["period"])
                for field in ("mad", "cusum", "smoothed_error"):
                    assert close(got[field], want[field]), (key, field, got[field], want[field])
                status, headers, _ = raw_get(alive[0].url, series_path(key))
                if status == 307:
                    owners[key] = headers["Location"].split("/v1/")[0]
                else:
                    assert status == 200, status
                    owners[key] = alive[0].url
            # a redirect names the instance that holds the series, and that one answers itself
            assert set(owners.values()) - {alive[0].url}, "no series was held elsewhere"
            for key, owner in owners.items():
                assert owner in [s.url for s in alive], owner
                status, _, body = raw_get(owner, series_path(key))
                assert status == 200, (key, owner, body)

            # the alert events out: each episode replay finds, once, under one stable id
            episodes_file = os.path.join(alive[0].dir, "episodes.csv")
            inp = os.path.join(alive[0].dir, "replay-in.csv")
            import subprocess
            subprocess.run([harness.BINARY, "replay", "--config", alive[0].config, "--input", inp,
                            "--output", os.path.join(alive[0].dir, "out.csv"), "--alerts", episodes_file],
                           check=True, capture_output=True)
            with open(episodes_file) as f:
                want = {(e["series"], e["rule"], e["opened"]) for e in csv.DictReader(f)}
            assert want, "the feed must open alerts"

            def opened_by_id():
                got = {}
                for _, _, _, v in cluster.consume(EVENTS):
                    e = json.loads(v)
                    if e["kind"] == "opened":
                        a = e["alert"]
                        got.setdefault(a["id"], set()).add((a["series"], a["rule"], a["opened_period"]))
                return got
            wait_for("every episode's opening sent", lambda: {
                next(iter(v)) for v in opened_by_id().values()} >= want)
            got = opened_by_id()
            for alert_id, episode in got.items():
                assert len(episode) == 1, (alert_id, episode)  # one id, one episode
            episodes = [next(iter(v)) for v in got.values()]
            assert len(episodes) == len(set(episodes)), "an episode was sent under two ids"
            assert set(episodes) == want, (set(episodes) ^ want)
        finally:
            for s in servers + [locals().get("fourth")]:
                if s is not None and s.proc is not None:
                    s.stop()


def test_the_same_with_cooperative_rebalancing():
    """Cooperative-sticky assignment moves only the partitions that change owner: the same
    ending, with partitions assigned and revoked a few at a time."""
    test_three_instances_a_kill9_and_a_fourth_share_the_series_as_one_replay_would("cooperative-sticky")


def test_sharing_refuses_http_actuals_and_reports_itself():
    with Cluster() as cluster:
        srv = KafkaServer(settings(cluster.bootstrap))
        try:
            status, body, _ = srv.post_csv("series,period,value\nnorth/a,2026-01-05,4\n")
            assert status == 409 and "source topic" in body["error"], (status, body)
            wait_for("partitions held", lambda: instances(srv)["held"] == list(range(12)))
            info = instances(srv)
            assert info["sharing"] and info["ready"], info
            assert all(p["owner"] == srv.url for p in info["partitions"]), info
            status, where, _ = srv.request("GET", "/v1/instances?series=north%2Fa")
            assert where["series"]["here"] and where["series"]["owner"] == srv.url, where
            # the changelog's metrics are exported and in the README's table
            import re
            _, text, _ = srv.request("GET", "/metrics")
            names = set(re.findall(r"^(forewarden_changelog_\w+)", text, re.M))
            with open(os.path.join(os.path.dirname(__file__), "..", "..", "README.md")) as f:
                readme = f.read()
            assert len(names) == 7 and all("`%s`" % n in readme for n in names), names
            assert metric(srv, "forewarden_changelog_restores_total") == 12
            # hostile paths and queries on what sharing added: answered, never 5xx, process up
            big = (12 + 1) << 43  # an alert id naming partition 12 of a 12-partition topic
            for path, allowed in (("/v1/alerts/abc", (400, 404)), ("/v1/alerts/-5", (400, 404)),
                                  ("/v1/alerts/99999999999999999999999", (400, 404)),
                                  ("/v1/alerts/%d" % big, (404,)), ("/v1/alerts/%d" % (big - 1), (404,)),
                                  ("/v1/series/%FF%FE", (404,)),
                                  ("/v1/instances?series=", (200,)), ("/v1/instances?series=%FF%FE", (200,)),
                                  ("/v1/instances?series=" + "k" * 20000, (200, 400, 413, 414, 431)),
                                  ("/v1/instances?series=a&series=b", (200,))):
                status, body, _ = srv.request("GET", path)
                assert status in allowed, (path, status, body)
            assert srv.proc.poll() is None
            status, where, _ = srv.request("GET", "/v1/instances?series=")
            assert where["series"]["key"] == "" and where["series"]["here"], where
        finally:
            srv.stop()


def test_sharing_settings_that_cannot_work_are_refused():
    for extra, needle in (("  topics: [a, b]\n  changelog_topic: cl\n", "one topic"),
                          ("  topics: [a]\n  changelog_topic: a\n", "must differ"),
                          ("  topics: [a]\n  changelog_topic: cl\n  partitioner: fnv\n", "murmur2 or crc32"),
                          ("  topics: [a]\n  changelog_topic: [cl]\n", "kafka.changelog_topic"),
                          ("  topics: [a]\n  changelog_topic: 'c l'\n", "kafka.changelog_topic"),
                          ("  topics: [a]\n  changelog_topic: cl\n  partitioner: {a: 1}\n", "kafka.partitioner"),
                          ("  topics: [a]\n  changelog_topic: cl\nserver: {folder: /tmp/in}\n", "server.folder")):
        path = os.path.join(harness.temp_dir(), "s.yaml")
        with open(path, "w") as f:
            f.write("policies: [{name: p, match: '*', period: week}]\nkafka:\n  brokers: 'x:1'\n" + extra)
        import subprocess
        r = subprocess.run([harness.BINARY, "check-config", path], capture_output=True, text=True)
        assert r.returncode == 2 and needle in r.stderr + r.stdout, (extra, r.stdout, r.stderr)


if __name__ == "__main__":
    sys.exit(run([
        test_three_instances_a_kill9_and_a_fourth_share_the_series_as_one_replay_would,
        test_the_same_with_cooperative_rebalancing,
        test_sharing_refuses_http_actuals_and_reports_itself,
        test_sharing_settings_that_cannot_work_are_refused,
    ]))
