"""Shared helpers for the integration tests: the real forewarden binary on a loopback port
with its own temporary data folder, a real HTTP client (urllib / raw sockets), processes
stopped by PID. No sleeps for synchronisation: tests wait for events (a line on stderr, a
file appearing, a process exiting) with a deadline."""
import atexit
import json
import os
import shutil
import select
import signal
import socket
import subprocess
import sys
import tempfile
import time
import traceback
import urllib.error
import urllib.request

BINARY = os.environ.get("FOREWARDEN_BINARY", "")
DEADLINE = 60.0  # seconds any awaited event may take before the test fails
_TEMP_DIRS = []


def temp_dir():
    """A temporary folder removed when the test process exits."""
    path = tempfile.mkdtemp(prefix="forewarden-it-")
    _TEMP_DIRS.append(path)
    return path


_SERVERS = []


@atexit.register
def _remove_temp_dirs():
    # A test that failed before its stop leaves no server behind (stopped by PID).
    for server in _SERVERS:
        if server.proc and server.proc.poll() is None:
            server.proc.kill()
            server.proc.wait()
    for path in _TEMP_DIRS:
        shutil.rmtree(path, ignore_errors=True)


def write_people_file(path, people):
    """A server.people_file at `path` for people {name: (role, token)}, mode 0600."""
    import hashlib
    with open(path, "w") as f:
        f.write("# name role sha256-of-token\n")
        for name, (role, token) in people.items():
            f.write("%s %s %s\n" % (name, role, hashlib.sha256(token.encode()).hexdigest()))
    os.chmod(path, 0o600)


def _read_until_closed(sock):
    reply = b""
    while True:
        chunk = sock.recv(65536)
        if not chunk:
            return reply
        reply += chunk


class Server:
    """forewarden serve on 127.0.0.1:<free port> with settings text `yaml`."""

    def __init__(self, yaml, workdir=None, env=None, extra_args=()):
        self.dir = workdir or temp_dir()
        self.config = os.path.join(self.dir, "settings.yaml")
        with open(self.config, "w") as f:
            f.write(yaml)
        self.data = os.path.join(self.dir, "data")
        self.env = dict(os.environ, **(env or {}))
        self.extra_args = list(extra_args)
        self.proc = None
        self.stderr_lines = []
        _SERVERS.append(self)
        self.start()

    def start(self):
        self._pending = ""
        self.proc = subprocess.Popen(
            [BINARY, "serve", "--config", self.config, "--listen", "127.0.0.1:0", "--data", self.data]
            + self.extra_args,
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=self.env)
        line = self.proc.stdout.readline()
        if "listening on" not in line:
            err = self.proc.stderr.read()
            raise AssertionError("server did not start: %r %r" % (line, err))
        self.port = int(line.rsplit(":", 1)[1])
        self.url = "http://127.0.0.1:%d" % self.port

    def wait_stderr(self, needle):
        """Reads stderr (raw, unbuffered) until a line holds `needle`; returns that line."""
        end = time.monotonic() + DEADLINE
        fd = self.proc.stderr.fileno()
        while True:
            while "\n" in self._pending:
                line, self._pending = self._pending.split("\n", 1)
                self.stderr_lines.append(line + "\n")
                if needle in line:
                    return line
            left = end - time.monotonic()
            if left <= 0:
                break
            ready, _, _ = select.select([fd], [], [], left)
            if not ready:
                break
            chunk = os.read(fd, 65536)
            if not chunk:
                break
            self._pending += chunk.decode(errors="replace")
        raise AssertionError("no stderr line with %r; seen: %s" % (needle, "".join(self.stderr_lines)))

    def signal(self, signo):
        os.kill(self.proc.pid, signo)

    def stop(self):
        if self.proc and self.proc.poll() is None:
            self.signal(signal.SIGTERM)
            rc = self.proc.wait(timeout=DEADLINE)
            assert rc == 0, "graceful stop exited %d" % rc
        self.proc = None

    def kill9(self):
        os.kill(self.proc.pid, signal.SIGKILL)
        self.proc.wait(timeout=DEADLINE)
        self.proc = None

    def request(self, method, path, body=None, content_type=None, token=None, headers=None):
        """Returns (status, parsed JSON or raw text, response headers)."""
        data = body.encode() if isinstance(body, str) else body
        req = urllib.request.Request(self.url + path, data=data, method=method)
        if content_type:
            req.add_header("Content-Type", content_type)
        if token:
            req.add_header("Authorization", "Bearer " + token)
        for k, v in (headers or {}).items():
            req.add_header(k, v)
        try:
            with urllib.request.urlopen(req, timeout=DEADLINE) as r:
                status, raw, hdrs = r.status, r.read().decode(), dict(r.headers)
        except urllib.error.HTTPError as e:
            status, raw, hdrs = e.code, e.read().decode(), dict(e.headers)
        try:
            return status, json.loads(raw), hdrs
        except ValueError:
            return status, raw, hdrs

    def raw_exchange(self, data):
        """Sends raw bytes on a new connection and reads until the server closes it; returns
        (status line and headers, body) as bytes."""
        sock = socket.create_connection(("127.0.0.1", self.port), timeout=DEADLINE)
        try:
            sock.sendall(data)
            reply = _read_until_closed(sock)
        finally:
            sock.close()
        head, _, body = reply.partition(b"\r\n\r\n")
        return head, body

    def raw_request(self, method, path, body, content_type):
        """Sends a request the way curl does for large bodies: headers with "Expect:
        100-continue", then the body only after "100 Continue". Returns (status, text)."""
        data = body.encode()
        sock = socket.create_connection(("127.0.0.1", self.port), timeout=DEADLINE)
        try:
            sock.sendall(("%s %s HTTP/1.1\r\nHost: t\r\nContent-Type: %s\r\nExpect: 100-continue\r\n"
                          "Content-Length: %d\r\nConnection: close\r\n\r\n"
                          % (method, path, content_type, len(data))).encode())
            reply = sock.recv(65536)
            if reply.startswith(b"HTTP/1.1 100"):
                sock.sendall(data)
                reply = b""
            reply += _read_until_closed(sock)
        finally:
            sock.close()
        head, _, text = reply.decode(errors="replace").partition("\r\n\r\n")
        return int(head.split()[1]), text

    def post_csv(self, text, token=None):
        return self.request("POST", "/v1/actuals", text, "text/csv", token)


def replay(config, csv_text, workdir):
    """Runs forewarden replay; returns the output rows as dicts."""
    inp = os.path.join(workdir, "replay-in.csv")
    out = os.path.join(workdir, "replay-out.csv")
    with open(inp, "w") as f:
        f.write(csv_text)
    subprocess.run([BINARY, "replay", "--config", config, "--input", inp, "--output", out],
                   check=True, capture_output=True)
    import csv
    with open(out) as f:
        return list(csv.DictReader(f))


def close(a, b, tol=1e-9):
    if a is None or b is None or a == "" or b == "":
        return (a in (None, "")) and (b in (None, ""))
    a, b = float(a), float(b)
    return abs(a - b) <= tol * max(1.0, abs(b))


def run(tests):
    """Runs test functions; prints a closing 'N passed, N failed' line; returns the exit code."""
    passed = failed = 0
    only = sys.argv[1:] if len(sys.argv) > 1 else None
    for t in tests:
        if only and t.__name__ not in only:
            continue
        try:
            t()
            passed += 1
            print("PASS", t.__name__)
        except Exception:
            failed += 1
            print("FAIL", t.__name__)
            traceback.print_exc()
    print("%d passed, %d failed" % (passed, failed))
    if passed + failed == 0:
        print("no test of that name ran:", " ".join(only or []))
        return 1
    return 0 if failed == 0 else 1
