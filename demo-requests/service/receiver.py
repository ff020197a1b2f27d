#!/usr/bin/env python3
"""A stand-in for an asset-management system's webhook endpoint, for the service demo.

  receiver.py OUT_DIR

Listens on a free loopback port and writes its URL to OUT_DIR/receiver.url. Every POST is
checked as the README's "Verifying a request" says: the HMAC-SHA256 of
"{Kinema-Timestamp}.{raw body}" under the subscription's secret (read from
OUT_DIR/hook-secret, written by post.sh when it subscribes) must equal Kinema-Signature,
and the timestamp must be within 5 minutes. Verified events are appended to
OUT_DIR/webhook-events.jsonl (one JSON object per line, duplicates by event ID dropped)
and answered 204; anything else is answered 401. Python standard library only.
"""

import hashlib
import hmac
import http.server
import json
import os
import sys
import time

OUT = sys.argv[1]
TOLERANCE = 300
seen = set()


def verified(headers, body):
    try:
        secret = open(os.path.join(OUT, "hook-secret"), encoding="utf-8").read().strip().encode()
    except OSError:
        return False
    ts = headers.get("Kinema-Timestamp", "")
    if not (ts.isascii() and ts.isdigit()) or abs(time.time() - int(ts)) > TOLERANCE:
        return False
    mac = hmac.new(secret, ts.encode() + b"." + body, hashlib.sha256).hexdigest()
    got = headers.get("Kinema-Signature", "").encode("latin-1", "replace")
    return hmac.compare_digest(("sha256=" + mac).encode(), got)


class Receiver(http.server.BaseHTTPRequestHandler):
    def do_POST(self):
        body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
        if not verified(self.headers, body):
            self.send_response(401)
            self.end_headers()
            return
        event_id = self.headers["Kinema-Event-Id"]
        if event_id not in seen:
            seen.add(event_id)
            event = json.loads(body)
            line = {"id": event_id, "type": event["type"], "structure_id": event["structure_id"],
                    "attempt": self.headers["Kinema-Delivery-Attempt"], "data": event["data"]}
            with open(os.path.join(OUT, "webhook-events.jsonl"), "a", encoding="utf-8") as f:
                f.write(json.dumps(line) + "\n")
        self.send_response(204)
        self.end_headers()

    def log_message(self, *args):
        pass


server = http.server.HTTPServer(("127.0.0.1", 0), Receiver)
with open(os.path.join(OUT, "receiver.url"), "w", encoding="utf-8") as f:
    f.write(f"http://127.0.0.1:{server.server_port}/kinema-events\n")
server.serve_forever()
