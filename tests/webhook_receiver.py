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

    def __enter__(self) -> "Receiver":
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()


class TricklingReceiver:
    """A receiver that reads a request, then answers one byte every ``every_s`` seconds and
    never finishes (until the client hangs up or ``stop``): a slow or hostile endpoint."""

    def __init__(self, every_s: float = 0.3):
        import socket
        self.every_s = every_s
        self.sock = socket.socket()
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(16)
        self.port = self.sock.getsockname()[1]
        self.url = f"http://127.0.0.1:{self.port}/hook"
        self.requests = 0
        self._stop = threading.Event()

    def start(self) -> "TricklingReceiver":
        threading.Thread(target=self._accept, daemon=True).start()
        return self

    def _accept(self) -> None:
        self.sock.settimeout(0.2)
        while not self._stop.is_set():
            try:
                conn, _ = self.sock.accept()
            except OSError:
                continue
            self.requests += 1
            threading.Thread(target=self._trickle, args=(conn,), daemon=True).start()

    def _trickle(self, conn) -> None:
        import time
        answer = b"HTTP/1.1 200 OK\r\ncontent-length: 100000\r\n\r\n" + b"x" * 100_000
        try:
            conn.settimeout(5)
            conn.recv(65536)                     # the request (headers and a small body)
            for byte in answer:
                if self._stop.is_set():
                    break
                conn.sendall(bytes([byte]))
                time.sleep(self.every_s)
        except OSError:
            pass                                 # the client gave up: what we want
        finally:
            conn.close()

    def stop(self) -> None:
        self._stop.set()
        self.sock.close()
