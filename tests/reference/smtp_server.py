"""A real SMTP server for the alert tests, on loopback, that keeps every mail.

Run with the venv that tests/reference/setup-smtp.sh makes (aiosmtpd 1.4.6):

    tests/reference/data/smtp-venv/bin/python tests/reference/smtp_server.py \
        MAILDIR [PORT]

PORT 0 or none: the kernel picks a free one. Once it accepts connections the
server prints one line, `READY <port>`, on standard output. It runs until it
is killed or its standard input closes (so a test that dies without cleaning
up does not leave it behind).

Each message is kept whole, exactly the bytes after DATA (dot-unstuffed, as
aiosmtpd's Envelope.original_content gives them), as MAILDIR/new/NAME.eml,
with the envelope beside it as MAILDIR/new/NAME.json:
{"mail_from", "rcpt_tos", "mail_options", "rcpt_options", "peer",
"received_unix_ns"}. Both are written under MAILDIR/tmp/ and renamed in,
the JSON first, so a reader that sees NAME.eml sees a complete message and
its envelope. NAME starts with the arrival time in nanoseconds, zero-padded,
so names sort by arrival, also across restarts on the same MAILDIR.

The listening socket is bound here with SO_REUSEADDR, so the server can be
started again on the port it had (the tests stop it to make an outage)
while the old connections linger in TIME_WAIT.
"""

import asyncio
import itertools
import json
import os
import socket
import sys
import threading
import time

from aiosmtpd.controller import Controller


class KeepEverything:
    def __init__(self, maildir):
        self.tmp = os.path.join(maildir, "tmp")
        self.new = os.path.join(maildir, "new")
        os.makedirs(self.tmp, exist_ok=True)
        os.makedirs(self.new, exist_ok=True)
        self.sequence = itertools.count()
        # The handler runs on the controller's one event-loop thread; the lock
        # keeps the names unique should that ever change.
        self.lock = threading.Lock()

    def _put(self, name, data):
        part = os.path.join(self.tmp, name)
        with open(part, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.rename(part, os.path.join(self.new, name))

    async def handle_DATA(self, server, session, envelope):
        now = time.time_ns()
        with self.lock:
            name = f"{now:020d}.{os.getpid()}.{next(self.sequence):06d}"
        sidecar = {
            "mail_from": envelope.mail_from,
            "rcpt_tos": list(envelope.rcpt_tos),
            "mail_options": list(envelope.mail_options),
            "rcpt_options": list(envelope.rcpt_options),
            "peer": list(session.peer) if session.peer else None,
            "received_unix_ns": now,
        }
        self._put(name + ".json", json.dumps(sidecar).encode("utf-8"))
        self._put(name + ".eml", envelope.original_content)
        return "250 Message accepted for delivery"


class BoundController(Controller):
    """aiosmtpd's Controller on a socket bound beforehand.

    The stock Controller connects to its configured port to check that it is
    up, which fails for port 0; binding first gives the real port to both
    that check and the READY line, and lets SO_REUSEADDR be set explicitly.
    """

    def __init__(self, handler, sock, **kwargs):
        host, port = sock.getsockname()[:2]
        super().__init__(handler, hostname=host, port=port, **kwargs)
        self.sock = sock

    def _create_server(self):
        return self.loop.create_server(
            self._factory_invoker, sock=self.sock, ssl=self.ssl_context
        )


def main():
    if len(sys.argv) not in (2, 3):
        sys.exit(f"usage: {sys.argv[0]} MAILDIR [PORT]")
    maildir = sys.argv[1]
    port = int(sys.argv[2]) if len(sys.argv) == 3 else 0

    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind(("127.0.0.1", port))
    sock.listen(64)
    sock.setblocking(False)

    controller = BoundController(
        KeepEverything(maildir),
        sock,
        server_hostname="smtp.perihelix.test",
        ready_timeout=10.0,
    )
    controller.start()
    print(f"READY {controller.port}", flush=True)

    try:
        # Blocks until the harness closes the pipe or goes away.
        sys.stdin.read()
    except KeyboardInterrupt:
        pass
    controller.stop()


if __name__ == "__main__":
    main()
