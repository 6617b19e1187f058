#!/usr/bin/python3
"""A webhook receiver that verifies forewarden's signatures: HTTP Message Signatures
(RFC 9421, alg hmac-sha256) over the method, the target URI, Content-Digest (RFC 9530) and
Content-Type. Use it as it is to try a sink, or copy `verify` into your own receiver.

  receiver.py --listen 127.0.0.1:9000 --url http://127.0.0.1:9000/hook --key forewarden=FILE
              [--key old-key=FILE ...] [--max-age 300]

--url is the sink's `url` exactly as configured in forewarden (the signed @target-uri). Give
one --key per key id accepted: during a rotation both the new and the old one. Each request is
answered 204 when a signature verifies and 401 otherwise; one line per request goes to
standard output: `verified EVENT_ID KIND by KEY_ID` or `refused: WHY`. Drop repeats by the
body's "event_id" (deliveries are at least once)."""
import argparse
import base64
import hashlib
import hmac
import http.server
import json
import re
import sys
import time

INPUT = re.compile(r'([a-z][a-z0-9-]*)=(\(([^)]*)\)[^,]*)')
SIGNATURE = re.compile(r'([a-z][a-z0-9-]*)=:([A-Za-z0-9+/=]*):')


class Refused(Exception):
    pass


def verify(method, target_uri, headers, body, keys, max_age=300, now=None):
    """Checks one request. `headers`: a mapping whose get() ignores the case of names (as
    http.server's headers do); `keys`: {key id: secret bytes}. Returns the key id that
    verified; raises Refused."""
    get = headers.get
    digest = get("Content-Digest")
    want = "sha-256=:" + base64.b64encode(hashlib.sha256(body).digest()).decode() + ":"
    if digest != want:
        raise Refused("Content-Digest does not match the body")
    inputs = {m.group(1): (m.group(2), m.group(3)) for m in INPUT.finditer(get("Signature-Input") or "")}
    sigs = {m.group(1): m.group(2) for m in SIGNATURE.finditer(get("Signature") or "")}
    if not inputs:
        raise Refused("no Signature-Input")
    now = time.time() if now is None else now
    reasons = []
    for label, (params, components) in inputs.items():
        fields = dict(re.findall(r';([a-z]+)=("[^"]*"|[0-9]+)', params))
        keyid = fields.get("keyid", '""').strip('"')
        if fields.get("alg", '""').strip('"') != "hmac-sha256":
            reasons.append(label + ": not hmac-sha256")
            continue
        if keyid not in keys:
            reasons.append(label + ": unknown key id " + keyid)
            continue
        created = int(fields.get("created", "0"))
        if abs(now - created) > max_age:
            reasons.append(label + ": created %d s ago" % (now - created))
            continue
        lines = []
        for c in re.findall(r'"([^"]+)"', components):
            if c == "@method":
                value = method
            elif c == "@target-uri":
                value = target_uri
            else:
                value = get(c) or ""
            lines.append('"%s": %s' % (c, value))
        lines.append('"@signature-params": ' + params)
        mac = hmac.new(keys[keyid], "\n".join(lines).encode(), hashlib.sha256).digest()
        if label in sigs and hmac.compare_digest(base64.b64encode(mac).decode(), sigs[label]):
            return keyid
        reasons.append(label + ": signature does not match")
    raise Refused("; ".join(reasons))


def main():
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--listen", required=True, help="HOST:PORT")
    ap.add_argument("--url", required=True, help="the sink's url as configured in forewarden")
    ap.add_argument("--key", action="append", required=True, help="KEY_ID=FILE (the secret)")
    ap.add_argument("--max-age", type=int, default=300, help="seconds a signature stays valid")
    args = ap.parse_args()
    keys = {}
    for k in args.key:
        kid, _, path = k.partition("=")
        with open(path, "rb") as f:
            keys[kid] = f.read().rstrip(b"\r\n")

    class Handler(http.server.BaseHTTPRequestHandler):
        def do_POST(self):
            body = self.rfile.read(int(self.headers.get("Content-Length", "0")))
            try:
                kid = verify("POST", args.url, self.headers, body, keys, args.max_age)
                event = json.loads(body)
                print("verified %s %s by %s" % (event.get("event_id"), event.get("kind"), kid), flush=True)
                self.send_response(204)
            except (Refused, ValueError) as e:
                print("refused: %s" % e, flush=True)
                self.send_response(401)
            self.send_header("Content-Length", "0")
            self.end_headers()

        def log_message(self, *a):
            pass

    host, _, port = args.listen.rpartition(":")
    server = http.server.HTTPServer((host, int(port)), Handler)
    print("listening on %s:%d" % server.server_address, flush=True)
    server.serve_forever()


if __name__ == "__main__":
    sys.exit(main())
