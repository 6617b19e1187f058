#!/usr/bin/python3
"""TLS both ways, against certificates this test makes with Debian's openssl: the service's own
listener (verified by a client that trusts only the test's CA; a renewed certificate served
after SIGHUP while a connection opened before keeps working), the rule that a non-loopback
listener needs TLS or a proxy that terminates it, `push` over https, and webhook deliveries to
an https receiver (verified against a CA file; refused when the receiver's certificate is not
trusted).

usage: FOREWARDEN_BINARY=path tls_test.py [TEST_NAME ...]"""
import http.client
import http.server
import json
import os
import signal
import ssl
import subprocess
import sys
import threading
import time

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import harness  # noqa: E402
from harness import Server, run, temp_dir  # noqa: E402

POLICIES = """
policies:
  - name: stores
    match: '*'
    period: week
    alpha: 0.2
    signal_beta: 0.2
    warmup: 2
    rules: [{name: shift, signal: cusum, limit: 3, clear: 2}]
"""


def openssl(*args, cwd):
    subprocess.run(["openssl"] + list(args), cwd=cwd, check=True, capture_output=True,
                   timeout=harness.DEADLINE)


def make_pki(d):
    """A CA, two certificates for 127.0.0.1 signed by it (the second one 'renewed'), and a
    self-signed one nobody trusts. Returns a dict of file paths."""
    openssl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout", "ca.key", "-out", "ca.pem",
            "-days", "2", "-subj", "/CN=forewarden test CA", cwd=d)
    with open(os.path.join(d, "san.ext"), "w") as f:
        f.write("subjectAltName=IP:127.0.0.1,DNS:localhost\n")
    for name, serial in (("server", "1001"), ("renewed", "1002")):
        openssl("req", "-newkey", "rsa:2048", "-nodes", "-keyout", name + ".key", "-out", name + ".csr",
                "-subj", "/CN=127.0.0.1", cwd=d)
        openssl("x509", "-req", "-in", name + ".csr", "-CA", "ca.pem", "-CAkey", "ca.key", "-set_serial",
                serial, "-days", "2", "-extfile", "san.ext", "-out", name + ".pem", cwd=d)
    openssl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-keyout", "rogue.key", "-out", "rogue.pem",
            "-days", "2", "-subj", "/CN=127.0.0.1", "-addext", "subjectAltName=IP:127.0.0.1", cwd=d)
    return {k: os.path.join(d, k) for k in ("ca.pem", "server.pem", "server.key", "renewed.pem",
                                           "renewed.key", "rogue.pem", "rogue.key")}


def client_context(ca):
    ctx = ssl.create_default_context(cafile=ca)
    ctx.check_hostname = True
    return ctx


def serial_of(conn):
    der = conn.sock.getpeercert(binary_form=True)
    out = subprocess.run(["openssl", "x509", "-inform", "DER", "-noout", "-serial"], input=der,
                         capture_output=True, check=True)
    return out.stdout.decode().strip().split("=")[1]


def get(conn, path):
    conn.request("GET", path)
    r = conn.getresponse()
    return r.status, json.loads(r.read())


def copy(src, dst):
    with open(src, "rb") as f, open(dst + ".tmp", "wb") as g:
        g.write(f.read())
    os.replace(dst + ".tmp", dst)


def test_listener_over_tls_reloads_its_certificate_without_dropping_connections():
    d = temp_dir()
    pki = make_pki(d)
    cert, key = os.path.join(d, "live.pem"), os.path.join(d, "live.key")
    copy(pki["server.pem"], cert)
    copy(pki["server.key"], key)
    s = Server("server: {tls_cert_file: '%s', tls_key_file: '%s'}\n" % (cert, key) + POLICIES)
    try:
        ctx = client_context(pki["ca.pem"])
        first = http.client.HTTPSConnection("127.0.0.1", s.port, context=ctx, timeout=harness.DEADLINE)
        assert get(first, "/healthz") == (200, {"alive": True})
        assert serial_of(first) == "03E9", serial_of(first)  # 1001
        # plain HTTP to the TLS port gets no HTTP answer
        plain = http.client.HTTPConnection("127.0.0.1", s.port, timeout=harness.DEADLINE)
        try:
            plain.request("GET", "/healthz")
            plain.getresponse()
            raise AssertionError("plain HTTP was answered on the TLS listener")
        except (http.client.HTTPException, ConnectionError):
            pass
        # a client that does not trust the CA refuses the service
        try:
            get(http.client.HTTPSConnection("127.0.0.1", s.port, context=ssl.create_default_context(),
                                            timeout=harness.DEADLINE), "/healthz")
            raise AssertionError("an untrusted certificate was accepted")
        except ssl.SSLCertVerificationError:
            pass
        # renew: new files in place, SIGHUP; the open connection goes on, new ones see the new one
        copy(pki["renewed.pem"], cert)
        copy(pki["renewed.key"], key)
        s.signal(signal.SIGHUP)
        s.wait_stderr("reloaded")
        assert get(first, "/healthz")[0] == 200
        # the untrusted client and the plain HTTP request above were failed handshakes
        first.request("GET", "/metrics")
        text = first.getresponse().read().decode()
        assert 'forewarden_http_rejections_total{reason="tls_handshake"} 2' in text, \
            [l for l in text.splitlines() if "tls_handshake" in l]
        second = http.client.HTTPSConnection("127.0.0.1", s.port, context=ctx, timeout=harness.DEADLINE)
        assert get(second, "/readyz")[0] == 200
        assert serial_of(second) == "03EA", serial_of(second)  # 1002
        # a broken key on reload is refused and the certificate in force stays
        with open(key, "w") as f:
            f.write("not a key\n")
        s.signal(signal.SIGHUP)
        line = s.wait_stderr("reload refused")
        assert "tls_key_file" in line, line
        third = http.client.HTTPSConnection("127.0.0.1", s.port, context=ctx, timeout=harness.DEADLINE)
        assert get(third, "/healthz")[0] == 200 and serial_of(third) == "03EA"
        # push over https with the CA file
        feed = os.path.join(d, "feed.csv")
        with open(feed, "w") as f:
            f.write("series,period,value\nn/a,2026-W01,5\nn/a,2026-W02,6\n")
        r = subprocess.run([harness.BINARY, "push", feed, "--url", "https://127.0.0.1:%d" % s.port,
                            "--ca-file", pki["ca.pem"]], capture_output=True, text=True,
                           timeout=harness.DEADLINE)
        assert r.returncode == 0 and "applied: 2" in r.stdout, (r.stdout, r.stderr)
        r = subprocess.run([harness.BINARY, "push", feed, "--url", "https://127.0.0.1:%d" % s.port],
                           capture_output=True, text=True, timeout=harness.DEADLINE)
        assert r.returncode == 1 and "certificate verify failed" in r.stderr, (r.stdout, r.stderr)
        for c in (first, second, third):
            c.close()
    finally:
        s.stop()


def serve_status(yaml, listen):
    """Runs serve with `listen` (never a loopback address here: one that cannot be bound) and
    returns (exit code, stderr). Nothing is ever bound."""
    d = temp_dir()
    cfg = os.path.join(d, "settings.yaml")
    with open(cfg, "w") as f:
        f.write(yaml)
    r = subprocess.run([harness.BINARY, "serve", "--config", cfg, "--listen", listen, "--data",
                        os.path.join(d, "data")], capture_output=True, text=True,
                       timeout=harness.DEADLINE, env=dict(os.environ, FW_TLS_TOKEN="t" * 24))
    return r.returncode, r.stderr


def test_a_non_loopback_listener_needs_tls_or_a_proxy_that_terminates_it():
    # 192.0.2.1 (TEST-NET-1) is not on this machine: a start that passes the checks fails at bind.
    token = "server: {token_env: FW_TLS_TOKEN%s}\n"
    code, err = serve_status(token % "" + POLICIES, "192.0.2.1:8700")
    assert code == 2 and "without TLS" in err, (code, err)
    code, err = serve_status(token % ", tls_terminated_by_proxy: true" + POLICIES, "192.0.2.1:8700")
    assert code == 1 and "without TLS" not in err and "listen on 192.0.2.1" in err, (code, err)
    d = temp_dir()
    pki = make_pki(d)
    code, err = serve_status(token % (", tls_cert_file: '%s', tls_key_file: '%s'" % (pki["server.pem"], pki["server.key"]))
                             + POLICIES, "192.0.2.1:8700")
    assert code == 1 and "listen on 192.0.2.1" in err, (code, err)
    code, err = serve_status(token % (", tls_cert_file: '%s', tls_key_file: '%s'" % (pki["server.pem"], pki["rogue.key"]))
                             + POLICIES, "127.0.0.1:0")
    assert code == 2 and "tls_key_file" in err and "the key must be the PEM key of" in err, (code, err)


class TlsReceiver:
    """An https webhook receiver on loopback with the given certificate."""

    def __init__(self, cert, key):
        self.bodies = []
        self.cond = threading.Condition()
        outer = self

        class Handler(http.server.BaseHTTPRequestHandler):
            def do_POST(self):
                body = self.rfile.read(int(self.headers.get("Content-Length", "0")))
                with outer.cond:
                    outer.bodies.append(json.loads(body))
                    outer.cond.notify_all()
                self.send_response(200)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args):
                pass

        self.server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        ctx = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
        ctx.load_cert_chain(cert, key)
        self.server.socket = ctx.wrap_socket(self.server.socket, server_side=True)
        self.port = self.server.server_address[1]
        threading.Thread(target=self.server.serve_forever, daemon=True).start()

    def close(self):
        self.server.shutdown()


def test_webhooks_over_tls_verify_the_receiver():
    d = temp_dir()
    pki = make_pki(d)
    good = TlsReceiver(pki["server.pem"], pki["server.key"])
    rogue = TlsReceiver(pki["rogue.pem"], pki["rogue.key"])
    alerts = """alerts:
  initial_backoff_seconds: 0.05
  max_backoff_seconds: 0.1
  max_attempts: 2
  sinks:
    - {name: trusted, type: webhook, url: 'https://127.0.0.1:%d/hook', ca_file: '%s'}
    - {name: untrusted, type: webhook, url: 'https://127.0.0.1:%d/hook', ca_file: '%s'}
""" % (good.port, pki["ca.pem"], rogue.port, pki["ca.pem"])
    s = Server(POLICIES + alerts)
    try:
        rows = "".join("north/up,2026-W%02d,%d\n" % (w, 100 if w < 8 else 180) for w in range(1, 14))
        assert s.post_csv("series,period,value\n" + rows)[0] == 200
        with good.cond:
            good.cond.wait_for(lambda: any(b["kind"] == "opened" for b in good.bodies), harness.DEADLINE)
        assert any(b["kind"] == "opened" for b in good.bodies), good.bodies

        def dead():
            status, body, _ = s.request("GET", "/v1/deliveries?state=dead&sink=untrusted")
            return body["deliveries"] if status == 200 else None

        end = time.monotonic() + harness.DEADLINE
        while not dead() and time.monotonic() < end:
            time.sleep(0.02)  # a polling interval; the condition decides
        got = dead()
        assert got and "certificate verify failed" in got[0]["last_error"], got
        assert not rogue.bodies, rogue.bodies  # nothing was sent to a receiver we cannot verify
    finally:
        s.stop()
        good.close()
        rogue.close()


if __name__ == "__main__":
    sys.exit(run([
        test_listener_over_tls_reloads_its_certificate_without_dropping_connections,
        test_a_non_loopback_listener_needs_tls_or_a_proxy_that_terminates_it,
        test_webhooks_over_tls_verify_the_receiver,
    ]))
