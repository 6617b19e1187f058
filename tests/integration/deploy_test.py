"""End-to-end tests of running forewarden as a service: the readiness, watchdog and stopping
notifications (a unix datagram socket standing in for the service manager), the log line
format, the install layout with the systemd unit verified by systemd-analyze, and an online
backup taken while the service ingests, restored into a second service."""
import os
import re
import select
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time

sys.path.insert(0, os.path.dirname(__file__))
import harness  # noqa: E402
from harness import Server, run, temp_dir  # noqa: E402
from alerts_test import BASE, csv_rows  # noqa: E402

ROOT = os.path.join(os.path.dirname(__file__), "..", "..")
SETTINGS = """
policies:
  - name: lines
    match: '*'
    period: week
    alpha: 0.2
    rules:
      - {name: shift, signal: cusum, limit: 3, clear: 2}
"""
LOG_LINE = re.compile(r'^ts=\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ level=(info|warn|error) msg=("([^"\\]|\\.)*"|\S+)( [a-z_]+=("([^"\\]|\\.)*"|\S+))*$')


def receive(sock, needle, deadline=harness.DEADLINE):
    """Datagrams until one contains `needle`; returns all seen."""
    seen = []
    end = time.monotonic() + deadline
    while True:
        left = end - time.monotonic()
        if left <= 0:
            raise AssertionError("no notification with %r; seen %r" % (needle, seen))
        ready, _, _ = select.select([sock], [], [], left)
        if ready:
            msg = sock.recv(4096).decode()
            seen.append(msg)
            if needle in msg:
                return seen


def test_readiness_watchdog_stopping_and_log_lines():
    d = temp_dir()
    path = os.path.join(d, "notify.sock")
    sock = socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM)
    sock.bind(path)
    srv = Server(SETTINGS, workdir=d, env={"NOTIFY_SOCKET": path, "WATCHDOG_USEC": "200000"})
    try:
        seen = receive(sock, "READY=1")
        assert "STATUS=serving 1 policies" in seen[-1], seen
        # pings at half the interval, through the engine
        receive(sock, "WATCHDOG=1")
        receive(sock, "WATCHDOG=1")
        srv.signal(signal.SIGHUP)
        receive(sock, "READY=1")  # after a reload
        srv.signal(signal.SIGTERM)
        receive(sock, "STOPPING=1")
        assert srv.proc.wait(timeout=harness.DEADLINE) == 0
        srv.wait_stderr("msg=stopped")
        lines = [l.rstrip("\n") for l in srv.stderr_lines]
        assert lines and all(LOG_LINE.match(l) for l in lines), lines
        srv.proc = None
    finally:
        srv.stop()
        sock.close()


def test_install_layout_and_the_unit_verify():
    build = os.environ["FOREWARDEN_BUILD_DIR"]
    dest = temp_dir()
    r = subprocess.run(["cmake", "--install", build], env=dict(os.environ, DESTDIR=dest),
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    files = {os.path.relpath(os.path.join(p, f), dest) for p, _, fs in os.walk(dest) for f in fs}
    for suffix in ("bin/forewarden", "lib/systemd/system/forewarden.service",
                   "share/forewarden/forewarden-rules.yml", "share/forewarden/prometheus.yml",
                   "share/forewarden/forewarden-dashboard.json", "share/doc/forewarden/README.md",
                   "etc/forewarden/forewarden.yaml"):
        assert any(f.endswith(suffix) for f in files), (suffix, sorted(files))
    binary = [os.path.join(dest, f) for f in files if f.endswith("bin/forewarden")][0]
    config = [os.path.join(dest, f) for f in files if f.endswith("etc/forewarden/forewarden.yaml")][0]
    r = subprocess.run([binary, "check-config", config], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    unit = [os.path.join(dest, f) for f in files if f.endswith("forewarden.service")][0]
    with open(unit) as f:
        text = f.read()
    for needle in ("Type=notify", "NoNewPrivileges=yes", "ProtectSystem=strict", "ProtectHome=yes",
                   "PrivateTmp=yes", "ReadWritePaths=/var/lib/forewarden", "StateDirectory=forewarden",
                   "Restart=on-failure", "KillSignal=SIGTERM", "WatchdogSec="):
        assert needle in text, needle
    # systemd-analyze checks the unit; ExecStart must name an existing binary: the installed one.
    local = os.path.join(temp_dir(), "forewarden.service")
    with open(local, "w") as f:
        f.write(text.replace("/usr/bin/forewarden", os.path.abspath(binary)))
    r = subprocess.run(["systemd-analyze", "verify", local], capture_output=True, text=True)
    problems = [l for l in (r.stdout + r.stderr).splitlines() if "forewarden.service" in l]
    assert r.returncode == 0 and not problems, (r.returncode, r.stdout, r.stderr)


def test_backup_while_ingesting_then_restore():
    srv = Server(SETTINGS)
    try:
        status, body, _ = srv.post_csv("series,period,value\n" + "".join(
            csv_rows("north/s%03d" % i, BASE) for i in range(50)))
        assert status == 200, body
        # a second client keeps ingesting while the backup runs
        done = threading.Event()
        errors = []

        def feed():
            week = 11
            while not done.is_set() and week < 52:
                s, b, _ = srv.post_csv("series,period,value\n" + "".join(
                    "north/s%03d,2026-W%02d,101\n" % (i, week) for i in range(50)))
                if s != 200:
                    errors.append(b)
                week += 1

        t = threading.Thread(target=feed)
        t.start()
        copy = os.path.join(temp_dir(), "copy.db")
        r = subprocess.run([harness.BINARY, "backup", "--data", srv.data, "--to", copy],
                           capture_output=True, text=True)
        done.set()
        t.join()
        assert r.returncode == 0, r.stderr
        assert "integrity ok" in r.stdout, r.stdout
        assert not errors, errors
        assert not os.path.exists(copy + ".partial")
    finally:
        srv.stop()
    # Restore: the copy as the data folder of a new service; every series is there, each at
    # some week the feed reached (the copy is one consistent moment).
    d = temp_dir()
    os.makedirs(os.path.join(d, "data"))
    shutil.copy(copy, os.path.join(d, "data", "forewarden.db"))
    restored = Server(SETTINGS, workdir=d)
    try:
        status, body, _ = restored.request("GET", "/v1/series?limit=1000")
        assert status == 200 and body["total"] == 50, body
        weeks = {s["last_period"] for s in body["series"]}
        assert len(weeks) <= 2, weeks  # batches are atomic: at most a batch boundary apart
        # and it keeps working
        status, body, _ = restored.post_csv("series,period,value\nnorth/s000,2027-W01,100\n")
        assert status == 200, body
    finally:
        restored.stop()
    r = subprocess.run([harness.BINARY, "backup", "--data", temp_dir(), "--to", copy], capture_output=True, text=True)
    assert r.returncode == 1 and "no store here" in r.stderr, r.stderr


if __name__ == "__main__":
    sys.exit(run([test_readiness_watchdog_stopping_and_log_lines, test_install_layout_and_the_unit_verify,
                  test_backup_while_ingesting_then_restore]))
