"""A real HTTP receiver on 127.0.0.1 that checks Standard Webhooks signatures.

The verification is written here from the specification (HMAC-SHA256 over
"{webhook-id}.{webhook-timestamp}.{body}" with the base64-decoded part of the
"whsec_" secret, sent as "v1,<base64>"), not taken from the project's signer.
"""
from __future__ import annotations

import base64
import hashlib
import hmac
import json
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer


def verify(secret: str, msg_id: str, timestamp: str, body: bytes, signature_header: str) -> bool:
    key = base64.b64decode(secret.split("_", 1)[1])
    signed = msg_id.encode() + b"." + timestamp.encode() + b"." + body
    expected = base64.b64encode(hmac.new(key, signed, hashlib.sha256).digest()).decode()
    # the header may carry several space-separated signatures
    for part in signature_header.split(" "):
        version, _, value = part.partition(",")
        if version == "v1" and hmac.compare_digest(value, expected):
            return True
    return False


class Receiver:
    def __init__(self, secret: str | None = None, port: int = 0):
        self.secret = secret
        self.received: list[dict] = []
        self.script: list[int] = []      # status codes to answer first, then 200
        self.lock = threading.Lock()
        self._port = port
        self.server = None

    def start(self) -> "Receiver":
        outer = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self):
                body = self.rfile.read(int(self.headers.get("content-length", 0)))
                msg_id = self.headers.get("webhook-id", "")
                stamp = self.headers.get("webhook-timestamp", "")
                sig = self.headers.get("webhook-signature", "")
                with outer.lock:
                    code = outer.script.pop(0) if outer.script else 200
                    outer.received.append({
                        "id": msg_id, "timestamp": stamp, "body": body, "answered": code,
                        "valid": outer.secret is not None and verify(outer.secret, msg_id, stamp,
                                                                     body, sig),
                        "json": json.loads(body)})
                self.send_response(code)
                self.send_header("content-length", "0")
                self.end_headers()

            def log_message(self, *args):
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", self._port), Handler)
        self._port = self.server.server_address[1]
        threading.Thread(target=self.server.serve_forever, daemon=True).start()
        return self

    @property
    def port(self) -> int:
        return self._port

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self._port}/hook"

    def stop(self) -> None:
        if self.server is not None:
            self.server.shutdown()
            self.server.server_close()
            self.server = None
