"""How the review server holds connections: a lobby where they wait, holding no thread,
for their first bytes and then for a handler; reads bounded by one deadline per request;
and the limits of both.
"""

from __future__ import annotations

import collections
import io
import json
import selectors
import socket
import threading
import time
from typing import TYPE_CHECKING

if TYPE_CHECKING:   # for annotations only: the server imports this module
    from rxlog.review.server import ReviewServer

# Connection limits. A person's browser sends a request within milliseconds of opening a
# connection and a few requests a second at most; these bounds only ever bite on clients
# that stall, trickle or flood.
REQUEST_TIMEOUT_S = 5.0   # first byte, then request line + headers + body, each within this
MAX_HANDLERS = 16         # requests handled at once (one thread each)
SLOT_WAIT_S = 2.0         # a request waits this long for a free handler, then gets 503
MAX_WAITING = 256         # connections that have sent nothing yet; beyond, the oldest is closed
WRITE_TIMEOUT_S = 10.0    # to send one WRITE_CHUNK: a client must read at least ~6.5 kB/s
WRITE_CHUNK = 64 * 1024

BUSY_BODY = json.dumps({"error": "the review server is busy; try again in a moment"}).encode()
BUSY_RESPONSE = (b"HTTP/1.1 503 Service Unavailable\r\nContent-Type: application/json\r\n"
                 b"Content-Length: " + str(len(BUSY_BODY)).encode() + b"\r\nRetry-After: 1\r\n"
                 b"Connection: close\r\n\r\n" + BUSY_BODY)


class Lobby:
    """Where accepted connections wait, holding no thread, for their first bytes and then
    for one of the server's ``max_handlers`` handler threads.

    One thread watches every waiting socket with a selector. A connection that sends
    nothing within ``request_timeout_s`` is closed, and so is the oldest silent one when
    more than ``max_waiting`` are silent; one whose request has begun to arrive but finds
    every handler busy for ``slot_wait_s`` is answered 503. Connections are served in
    the order their first bytes arrived.
    """

    def __init__(self, server: ReviewServer):
        self.server = server
        self.slots = threading.BoundedSemaphore(server.max_handlers)
        self.sel = selectors.DefaultSelector()
        self.inbox: collections.deque = collections.deque()   # (sock, addr) from the accept loop
        self.silent: dict = {}                                # sock -> (addr, deadline), insertion order
        self.ready: collections.deque = collections.deque()   # (sock, addr, since): waiting for a handler
        self.wake_r, self.wake_w = socket.socketpair()
        self.wake_r.setblocking(False)
        self.wake_w.setblocking(False)
        self.sel.register(self.wake_r, selectors.EVENT_READ)
        self.closed = False
        self.thread = threading.Thread(target=self._run, name="rxlog-review-lobby", daemon=True)
        self.thread.start()

    def admit(self, sock, addr):
        self.inbox.append((sock, addr))
        self._wake()

    def close(self):
        self.closed = True
        self._wake()
        self.thread.join(timeout=5.0)

    def _wake(self):
        try:
            self.wake_w.send(b"\0")
        except OSError:        # buffer full (already woken) or closed
            pass

    def _run(self):
        try:
            while not self.closed:
                self._step()
        finally:
            for sock in list(self.silent) + [r[0] for r in self.ready] + [i[0] for i in self.inbox]:
                self.server.shutdown_request(sock)
            self.sel.close()
            self.wake_r.close()
            self.wake_w.close()

    def _step(self):
        now = time.monotonic()
        due = [now + 1.0]
        if self.silent:
            due.append(next(iter(self.silent.values()))[1])
        if self.ready:
            due.append(self.ready[0][2] + self.server.slot_wait_s)
        for key, _ in self.sel.select(max(0.0, min(due) - now)):
            if key.fileobj is self.wake_r:
                try:
                    while self.wake_r.recv(4096):
                        pass
                except OSError:
                    pass
                continue
            sock = key.fileobj
            self.sel.unregister(sock)
            addr, _ = self.silent.pop(sock)
            self.ready.append((sock, addr, time.monotonic()))
        now = time.monotonic()
        while self.inbox:
            sock, addr = self.inbox.popleft()
            self.silent[sock] = (addr, now + self.server.request_timeout_s)
            self.sel.register(sock, selectors.EVENT_READ)
            if len(self.silent) > self.server.max_waiting:
                self._drop(next(iter(self.silent)))
        while self.silent:
            sock, (_, deadline) = next(iter(self.silent.items()))
            if deadline > now:
                break
            self._drop(sock)
        while self.ready and self.slots.acquire(blocking=False):
            sock, addr, _ = self.ready.popleft()
            threading.Thread(target=self._handle, args=(sock, addr), name="rxlog-review-handler",
                             daemon=True).start()
        while self.ready and self.ready[0][2] + self.server.slot_wait_s <= now:
            self._busy(self.ready.popleft()[0])

    def _handle(self, sock, addr):
        try:
            self.server.process_request_thread(sock, addr)
        finally:
            self.slots.release()
            self._wake()

    def _drop(self, sock):
        self.sel.unregister(sock)
        del self.silent[sock]
        self.server.shutdown_request(sock)

    def _busy(self, sock):
        """Answer 503 without a thread: a short answer fits an empty send buffer at once."""
        try:
            sock.setblocking(False)
            sock.send(BUSY_RESPONSE)
            for _ in range(16):     # read what was sent, so closing sends FIN rather than RST
                if not sock.recv(65536):
                    break
        except OSError:
            pass
        self.server.shutdown_request(sock)


class DeadlineReader(io.RawIOBase):
    """A socket's reads, each allowed only what is left of one deadline: a client that
    trickles a byte at a time cannot stretch its request past it."""

    def __init__(self, sock, deadline: float):
        self.sock, self.deadline, self.expired = sock, deadline, False

    def readable(self) -> bool:
        return True

    def readinto(self, buf) -> int:
        left = self.deadline - time.monotonic()
        if left <= 0:
            self.expired = True
            raise TimeoutError("request not received in time")
        self.sock.settimeout(left)
        try:
            return self.sock.recv_into(buf)
        except TimeoutError:
            self.expired = True
            raise
