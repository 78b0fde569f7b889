# docs/examples/callback-receiver.py: receive a job's completion callback and check its signature
# (run from docs/examples/ with the service's DRAWYARD_CALLBACK_SECRET in the environment, and
# http://127.0.0.1:18765/ in its DRAWYARD_CALLBACK_ALLOW)
import base64
import hashlib
import hmac
import json
import os
import threading
import time
from http.server import BaseHTTPRequestHandler, HTTPServer

from service.client import DrawyardClient


def genuine(key: bytes, headers, body: bytes, max_age: int = 300) -> bool:
    stamp = headers["webhook-timestamp"]
    content = f"{headers['webhook-id']}.{stamp}.".encode() + body
    expected = "v1," + base64.b64encode(hmac.new(key, content, hashlib.sha256).digest()).decode()
    signatures = headers["webhook-signature"].split(" ")
    return any(hmac.compare_digest(expected, s) for s in signatures) and \
        abs(time.time() - int(stamp)) <= max_age


secret = os.environ["DRAWYARD_CALLBACK_SECRET"]
key = (base64.b64decode(secret.removeprefix("whsec_")) if secret.startswith("whsec_")
       else secret.encode())
received = []


class Receiver(BaseHTTPRequestHandler):
    def do_POST(self) -> None:
        body = self.rfile.read(int(self.headers["Content-Length"]))
        received.append((self.headers, body))
        self.send_response(204)
        self.end_headers()

    def log_message(self, *args) -> None:
        pass


server = HTTPServer(("127.0.0.1", 18765), Receiver)
threading.Thread(target=server.serve_forever, daemon=True).start()
with open("job.json") as file:
    body = {**json.load(file), "notify": {"url": "http://127.0.0.1:18765/drawyard/done"}}
with DrawyardClient(os.environ.get("DRAWYARD_URL", "http://127.0.0.1:8000")) as api:
    job = api.submit(body)
for _ in range(120):
    if received:
        break
    time.sleep(1)
server.shutdown()
headers, sent = received[0]
print("callback for the job:", headers["webhook-id"] == f"msg_{job.id}", "attempt",
      headers["drawyard-attempt"])
print("state:", json.loads(sent)["state"])
print("genuine:", genuine(key, headers, sent))
print("altered body genuine:", genuine(key, headers, sent.replace(b"succeeded", b"failed")))
