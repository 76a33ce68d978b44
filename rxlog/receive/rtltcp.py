"""The rtl_tcp client: a dongle served over TCP, on our own implementation of the wire protocol."""

from __future__ import annotations

import logging
import socket
import struct
import time

import numpy as np

from rxlog.errors import RxlogError
from rxlog.receive.blocks import ReceiverLost, to_complex64
from rxlog.receive.devices import DIRECT_SAMPLING, LiveSource
from rxlog.retry import DoublingWait

log = logging.getLogger("rxlog.receiver")

# rtl_tcp commands: 1-byte id, big-endian u32 argument (rtl_tcp.c in the osmocom rtl-sdr
# sources; the set is also mirrored by other servers of the protocol).
TCP_SET_FREQ, TCP_SET_SAMPLE_RATE, TCP_SET_GAIN_MODE, TCP_SET_GAIN = 0x01, 0x02, 0x03, 0x04
TCP_SET_FREQ_CORRECTION, TCP_SET_AGC_MODE, TCP_SET_DIRECT_SAMPLING = 0x05, 0x08, 0x09
TCP_SET_BIAS_TEE = 0x0E


class RtlTcpSource(LiveSource):
    """A dongle served by rtl_tcp over TCP, on our own implementation of its wire protocol.

    The server opens with a 12-byte header (b"RTL0", tuner type and gain count as
    big-endian u32) and then streams cu8 samples; the client sends 5-byte commands
    (1-byte id, big-endian u32). A lost connection is retried with a doubling wait for
    up to ``reconnect_max_s``; the settings are sent again and the clock discipline sees
    the missing time as a gap in the count.
    """

    kind = "rtltcp"
    lookahead = 64     # the server and TCP queue samples: a late read is usually a stall (up to ~0.4 s), not a loss

    def __init__(self, *, host: str = "127.0.0.1", port: int = 1234, reconnect_max_s: float = 60.0,
                 timeout_s: float = 5.0, sleep=time.sleep, **settings):
        super().__init__(**settings)
        self.host, self.port = host, int(port)
        self.reconnect_max_s = float(reconnect_max_s)
        self.timeout_s = float(timeout_s)
        self.sleep = sleep
        self.sock: socket.socket | None = None
        self.tuner_type = None
        self.gain_count = None
        self.reconnects = 0

    @classmethod
    def from_config(cls, cfg, **kwargs):
        rx = cfg["receiver"]
        return cls(host=rx["host"], port=rx["port"], reconnect_max_s=rx["reconnect_max_s"],
                   **cls._settings(rx), **kwargs)

    def _connect(self) -> None:
        where = f"rtl_tcp at {self.host}:{self.port}"
        try:
            sock = socket.create_connection((self.host, self.port), timeout=self.timeout_s)
        except OSError as e:
            raise RxlogError(f"receiver: cannot connect to {where} ({e.strerror or e}); is rtl_tcp "
                             "running there and listening on that address (rtl_tcp -a ADDRESS)?") from None
        try:
            header = self._recv_exact(sock, 12)
        except OSError as e:
            sock.close()
            raise RxlogError(f"receiver: {where} sent no header ({e})") from None
        if header[:4] != b"RTL0":
            sock.close()
            raise RxlogError(f"receiver: {where} is not an rtl_tcp server (header {header[:4]!r}, expected b'RTL0')")
        self.tuner_type, self.gain_count = struct.unpack(">II", header[4:12])
        self.sock = sock
        self._send(TCP_SET_SAMPLE_RATE, int(self.rate_hz))
        self._send(TCP_SET_DIRECT_SAMPLING, DIRECT_SAMPLING[self.direct_sampling])
        self._send(TCP_SET_FREQ_CORRECTION, self.ppm)
        self._send(TCP_SET_AGC_MODE, 0)
        self._send(TCP_SET_GAIN_MODE, 1)                       # manual
        self._send(TCP_SET_GAIN, int(round(self.requested_gain_db * 10)))   # tenths of dB
        if self.bias_tee:
            self._send(TCP_SET_BIAS_TEE, 1)
        self._send(TCP_SET_FREQ, int(round(self._tuned_hz(self.center_hz))))

    def _disconnect(self) -> None:
        if self.sock is not None:
            try:
                self.sock.close()
            finally:
                self.sock = None

    def _send(self, cmd: int, value: int) -> None:
        self.sock.sendall(struct.pack(">BI", cmd, int(value) & 0xFFFFFFFF))

    def _set_center(self, sky_hz: float) -> None:
        try:
            self._send(TCP_SET_FREQ, int(round(self._tuned_hz(sky_hz))))
        except OSError:
            self._reconnect()      # settings (with the new centre) go out again on reconnect

    @staticmethod
    def _recv_exact(sock: socket.socket, nbytes: int) -> bytearray:
        buf = bytearray(nbytes)
        view = memoryview(buf)
        got = 0
        while got < nbytes:
            k = sock.recv_into(view[got:])
            if k == 0:
                raise ConnectionError("connection closed by the server")
            got += k
        return buf

    def _read_raw(self, n: int) -> np.ndarray:
        while True:
            try:
                if self.sock is None:
                    raise ConnectionError("not connected")
                buf = self._recv_exact(self.sock, 2 * n)
                return to_complex64(np.frombuffer(buf, dtype=np.uint8), "cu8")
            except OSError as e:
                log.warning("rtl_tcp %s:%d: connection lost (%s)", self.host, self.port, e)
                self._reconnect()

    def _reconnect(self) -> None:
        """Reconnect with a doubling wait; the missing time becomes a gap in the count.

        After ``reconnect_max_s`` of failed attempts it gives up with ``ReceiverLost``
        (the logger then closes the source and reopens it on its own schedule).
        """
        self._disconnect()
        lost_at = self.monotonic()
        wait = DoublingWait(0.5)
        while True:
            self.sleep(wait.s)
            try:
                self._connect()
            except RxlogError as e:
                after = wait.double()
                if self.monotonic() - lost_at + after > self.reconnect_max_s:
                    raise ReceiverLost(f"{e} (gave up reconnecting after "
                                       f"{self.monotonic() - lost_at:.0f} s)") from None
                log.warning("rtl_tcp: %s; next try in %.1f s", e, after)
                continue
            self.reconnects += 1
            log.warning("rtl_tcp %s:%d: reconnected after %.1f s; the samples in between are a gap",
                        self.host, self.port, self.monotonic() - lost_at)
            return

